"""The features stage: learn the feature recipe on the training part only, write the design
diagnostics (parameters, events per parameter, correlations, VIF, leakage screen) and the
training design matrix every fit job reads (so the recipe is applied once, not per job)."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith.data.diagnostics import design_diagnostics, leakage_screen
from oddsmith.data.recipe import CLUSTER_LABELS, apply_recipe, dump_recipe, learn_recipe
from oddsmith.errors import ArtifactError
from oddsmith.io import read_parquet, read_parquet_pieces, release_arrow_memory, write_json, write_parquet_chunks

log = logging.getLogger("oddsmith.features")


# Rows per piece when the design is built and written: memory stays at one design matrix
# plus one piece, whatever the number of rows.
CHUNK_ROWS = 131_072
# Smaller pieces while building: applying the recipe makes a few temporary copies of a piece.
BUILD_ROWS = 32_768


def _design(recipe: dict, pieces, n_rows: int) -> pd.DataFrame:
    """The unstandardised design of the training rows, built piece by piece into one array
    from pieces of the raw training rows (in order, index = training row number)."""
    columns = recipe["columns"]
    values = np.empty((n_rows, len(columns)), order="F")
    done = 0
    for raw in pieces:
        piece, _ = apply_recipe(recipe, raw, standardise=False)
        values[done:done + len(piece)] = piece.to_numpy()
        done += len(piece)
    if done != n_rows:
        raise ArtifactError(f"the design has {done} rows, expected {n_rows}")
    return pd.DataFrame(values, columns=columns, copy=False)


def run_features(*, data_path: str, assignment_path: str, features: list, interactions: list, target: str,
                 id_column: str, diagnostics: dict, out_recipe: str, out_diagnostics: str, out_design: str,
                 cluster_column: str | None = None, workers: int = 1) -> dict:
    """Learn the recipe from training rows; diagnose and write the training design matrix.

    The design file holds the id and target columns, then every design column (not
    standardised), one row per training row in data order; with a ``cluster_column``
    (standard errors clustered by it) its labels follow as a last column ``CLUSTER_LABELS``.
    ``workers`` threads share the leakage screen's features; the results do not depend on it.
    """
    names = [f["name"] for f in features]
    is_train = (read_parquet(assignment_path, columns=["part"])["part"] == "train").to_numpy()
    train = read_parquet(data_path, columns=list(dict.fromkeys([target, *names])), rows=is_train)
    recipe = learn_recipe(train, features=features, interactions=interactions, target=target)
    y = train[target].to_numpy().astype(int)
    # The leakage screen needs the raw columns, the rest of the diagnostics the design: the
    # screen runs first, and the raw columns go before the design is built (from the file
    # again, a piece at a time), so that raw columns and design are never held together.
    leakage = leakage_screen(train[names], y, features, diagnostics.get("leak_auc", 0.95), workers=workers)
    del train
    release_arrow_memory()
    X = _design(recipe, read_parquet_pieces(data_path, names, rows=is_train, piece_rows=BUILD_ROWS), len(y))
    report = design_diagnostics(X, y, features=features, leakage=leakage, **diagnostics)
    for warning in report.get("warnings", []):
        log.warning(warning)
    dump_recipe(recipe, out_recipe)
    write_json(out_diagnostics, report)
    ids = read_parquet(data_path, columns=[id_column], rows=is_train)[id_column]
    clusters = None if not cluster_column else \
        read_parquet(data_path, columns=[cluster_column], rows=is_train)[cluster_column].to_numpy()
    write_parquet_chunks(out_design, (
        pd.concat([pd.DataFrame({id_column: ids.iloc[s:s + CHUNK_ROWS].to_numpy(), target: y[s:s + CHUNK_ROWS]}),
                   X.iloc[s:s + CHUNK_ROWS].reset_index(drop=True)]
                  + ([] if clusters is None else [pd.DataFrame({CLUSTER_LABELS: clusters[s:s + CHUNK_ROWS]})]),
                  axis=1)
        for s in range(0, max(len(X), 1), CHUNK_ROWS)))
    return report
