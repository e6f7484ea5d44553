"""The refit stage (``evaluation.refit_all``): after the evaluation, the selected candidate is
fitted again, with the same kind, options and design columns, on every row (training and test
parts). The result is the deliverable, ``final/model.json``; the card's numbers still describe
the evaluated model, fitted on the training part only. The feature recipe is not learned again:
levels, transforms, imputation values and standardisation stay those learned on the training
part, so the deliverable reads inputs exactly as the evaluated model does."""

from __future__ import annotations

import logging

import numpy as np

from oddsmith.data.recipe import apply_recipe, load_recipe
from oddsmith.errors import ArtifactError, FitError
from oddsmith.fitting.models import PENALISED_KINDS, fit_design
from oddsmith.io import read_json, read_parquet, sha256_file, write_json
from oddsmith.stages.fit import fit_options, model_document

log = logging.getLogger("oddsmith.refit")


def all_rows_design(data_path: str, recipe: dict, names: list[str], *, kind: str, target: str):
    """The design of every row of the validated data (standardised for penalised kinds) and its outcome."""
    frame = read_parquet(data_path)
    design, _ = apply_recipe(recipe, frame, standardise=False)
    values = np.ascontiguousarray(design[names].to_numpy(dtype=np.float64))
    if kind in PENALISED_KINDS:
        values -= np.array([recipe["means"][c] for c in names], dtype=np.float64)
        values /= np.array([recipe["sds"][c] for c in names], dtype=np.float64)
    return values, frame[target].to_numpy().astype(int), frame


def run_refit(*, data_path: str, recipe_path: str, selected_path: str, model_paths: dict,
              probability_metrics_path: str, target: str, seed: int, inference: dict | None,
              out_model: str) -> dict:
    """Fit the selected candidate on all rows; write the deliverable model JSON.

    Raises
    ------
    ArtifactError
        When the evaluation was made with another candidate, or the selected one has no fit.
    FitError
        When the fit on all rows fails (e.g. separation that the training part did not show).
    """
    selected = read_json(selected_path)["candidate"]
    evaluated = read_json(model_paths[selected])
    scored_with = read_json(probability_metrics_path)["candidate"]
    if scored_with != selected or evaluated.get("status") != "ok":
        raise ArtifactError("the selected model cannot be refitted on all rows",
                            [f"selected {selected!r}, evaluated {scored_with!r}, status {evaluated.get('status')!r}"])
    candidate, names, kind = evaluated["settings"], list(evaluated["design_columns"]), evaluated["kind"]
    recipe = load_recipe(recipe_path)
    values, y, frame = all_rows_design(data_path, recipe, names, kind=kind, target=target)
    clusters = None
    if kind not in PENALISED_KINDS and (inference or {}).get("standard_errors") == "cluster":
        clusters = frame[inference["cluster_column"]].to_numpy()
    try:
        final = fit_design(values, names, y, kind=kind, options=fit_options(candidate), seed=seed,
                           inference=None if kind in PENALISED_KINDS else inference, clusters=clusters)
    except FitError as exc:
        raise FitError(f"the selected candidate {selected!r} cannot be refitted on all {len(y)} rows: {exc}") from exc
    header = {"candidate": selected, "kind": kind, "settings": candidate, "n_parameters": len(names) + 1,
              "recipe_sha256": sha256_file(recipe_path), "design_columns": names}
    model = model_document(final, header, names=names, recipe=recipe) | {"refit": {
        "rows": int(len(y)), "events": int(y.sum()), "fitted_on": "all rows (training and test parts)",
        "evaluated_model": f"candidates/{selected}/model.json",
        "recipe": "learned on the training part (features/recipe.json), not learned again"}}
    log.info("refitted %s on all %d rows (%d events)", selected, len(y), int(y.sum()))
    write_json(out_model, model)
    return model
