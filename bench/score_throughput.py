"""Scoring throughput: 1M invented lease applications scored with reason codes.

The model is the demo's shape (nine features, a log transform, a missing indicator, two
categoricals, one interaction; 17 design columns), learned and fitted here on 12,000
invented development rows. The batch is the shifted later batch of the demo generator,
repeated with fresh ids up to the requested size. Timed separately, each on the same rows:

- ``check``: the batch's raw text typed and checked against the data contract;
- ``score``: design matrix, probabilities, decisions and the top-3 reasons (``score_frame``);
- ``write``: Parquet and the neutralised CSV, serialised in memory.

Usage::

    .venv/bin/python bench/score_throughput.py            # 1,000,000 rows
    .venv/bin/python bench/score_throughput.py --rows 200000

Prints one line per step with wall and CPU seconds and rows per second (wall). Nothing is
written to disk. Single-threaded BLAS is not forced; the steps are mostly single-threaded.
"""

from __future__ import annotations

import argparse
import io
import time
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from oddsmith.data.contract import load_contract, validate_frame
from oddsmith.data.recipe import apply_recipe, learn_recipe
from oddsmith.demo import generate_applications
from oddsmith.fitting.models import fit_candidate
from oddsmith.use.score import ScoringModel, check_batch, csv_bytes, reason_reference, score_frame

ROOT = Path(__file__).resolve().parent.parent
CONFIG = yaml.safe_load((ROOT / "config" / "demo.yaml").read_text(encoding="utf-8"))
CONTRACT = load_contract(ROOT / CONFIG["data"]["contract"])
ID, TARGET = CONFIG["data"]["id_column"], CONFIG["data"]["target"]


def development_model() -> ScoringModel:
    """Learn the recipe and fit a logit on 12,000 invented development rows."""
    raw = pd.DataFrame(generate_applications(12_000, seed=20231101)).replace("", None)
    train = validate_frame(raw, CONTRACT, id_column=ID, target=TARGET)
    recipe = learn_recipe(train, features=CONFIG["features"], interactions=CONFIG["interactions"], target=TARGET,
                          id_column=ID)
    X, _ = apply_recipe(recipe, train)
    fitted = fit_candidate(X, train[TARGET].to_numpy(), kind="logit")
    model = fitted.to_dict() | {"status": "ok", "design_columns": list(X.columns), "standardise": False}
    return ScoringModel(recipe=recipe, model=model, contract=CONTRACT, candidate="bench_logit", cutoff=0.17,
                        id_column=ID, target=TARGET, training=train, source="bench")


def batch(rows: int) -> pd.DataFrame:
    """``rows`` raw text rows: the demo's shifted batch repeated, each row with its own id."""
    base = pd.DataFrame(generate_applications(20_000, seed=20260101, shift="debt_service_ratio"))
    base = base.drop(columns=[TARGET]).replace("", None)
    repeated = base.iloc[np.arange(rows) % len(base)].reset_index(drop=True)
    repeated[ID] = [f"LB-{i:07d}" for i in range(rows)]
    return repeated


def timed(label: str, rows: int, function):
    start, cpu = time.perf_counter(), time.process_time()
    result = function()
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    # CPU seconds as well: on a shared machine the wall time also counts other people's work.
    print(f"{label:8} {rows:>10,} rows  {seconds:7.2f} s wall  {cpu:7.2f} s CPU  {rows / seconds:>12,.0f} rows/s",
          flush=True)
    return result


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    args = parser.parse_args(argv)
    sm = development_model()
    reference = reason_reference(sm)
    raw = batch(args.rows)
    typed, _ = timed("check", args.rows, lambda: check_batch(sm, raw, source="bench batch"))
    scored = timed("score", args.rows, lambda: score_frame(sm, typed, top_k=3, reference=reference))
    timed("write", args.rows, lambda: (scored.to_parquet(io.BytesIO(), index=False), csv_bytes(scored)))
    named = scored["reason_1"].notna().mean()
    print(f"flagged {(scored['decision'] == 'flag').mean():.1%}; rows with at least one reason {named:.1%}")


if __name__ == "__main__":
    main()
