"""The features stage: learn the feature recipe on the training part only, then write the
design diagnostics (parameters, events per parameter, correlations, VIF, leakage screen)."""

from __future__ import annotations

import logging

from oddsmith.diagnostics import design_diagnostics
from oddsmith.io import read_parquet, write_json
from oddsmith.recipe import apply_recipe, dump_recipe, learn_recipe

log = logging.getLogger("oddsmith.features")


def run_features(*, data_path: str, assignment_path: str, features: list, interactions: list, target: str,
                 diagnostics: dict, out_recipe: str, out_diagnostics: str) -> dict:
    """Learn the recipe from training rows; diagnose the full training design matrix."""
    df = read_parquet(data_path)
    assignment = read_parquet(assignment_path)
    train = df.loc[(assignment["part"] == "train").to_numpy()]
    recipe = learn_recipe(train, features=features, interactions=interactions, target=target)
    X, _ = apply_recipe(recipe, train, standardise=False)
    names = [f["name"] for f in features]
    report = design_diagnostics(X, train[target].to_numpy(), raw_train=train[names], features=features, **diagnostics)
    for warning in report.get("warnings", []):
        log.warning(warning)
    dump_recipe(recipe, out_recipe)
    write_json(out_diagnostics, report)
    return report
