"""Invented benchmark data: N loan applications drawn from a known logistic model.

Writes three files into a project folder:

- ``data/portfolio.csv``: ``loan_id``, 30 numeric features ``f01`` … ``f30``, two
  categoricals (``region``, 5 levels; ``channel``, 3 levels) and the outcome ``default_12m``;
- ``schemas/contracts/portfolio.yaml``: its data contract;
- ``config/bench.yaml``: the benchmark configuration (five candidates: logit, probit,
  cloglog, l1, l2; 5-fold cross-validation; stratified 75/25 split; the evaluation
  bootstrap and the challenger written out with the schema's defaults, which
  ``bench/serial.py`` reads too).

Nothing here is real. The numeric features are standard normal with a few correlated pairs;
ten of the thirty have no effect (so the lasso has something to drop). The true coefficients
are in ``true_coefficients()``. The generator is seeded: the same ``n`` and ``seed`` give the
same bytes, written
``CHUNK_ROWS`` rows at a time (10,000,000 rows need about 0.5 GB).

Usage::

    python bench/generate.py --rows 100000 --out bench/work/n100000
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

N_NUMERIC = 30
REGIONS = ("north", "south", "east", "west", "central")
REGION_SHARES = (0.25, 0.20, 0.20, 0.15, 0.20)
REGION_EFFECTS = (0.0, 0.15, -0.10, 0.25, 0.05)
CHANNELS = ("branch", "broker", "online")
CHANNEL_SHARES = (0.45, 0.25, 0.30)
CHANNEL_EFFECTS = (0.0, 0.30, 0.10)
INTERCEPT = -2.1
GRID = [0.001, 0.003, 0.01, 0.03, 0.1, 0.3, 1.0]


def numeric_names() -> list[str]:
    return [f"f{j:02d}" for j in range(1, N_NUMERIC + 1)]


def true_coefficients() -> dict[str, float]:
    """Log-odds coefficients of the generating model (standard-normal features)."""
    rng = np.random.default_rng(12345)
    effects = rng.normal(0.0, 0.35, size=N_NUMERIC)
    effects[20:] = 0.0  # f21 … f30 have no effect
    coefficients = {"intercept": INTERCEPT} | dict(zip(numeric_names(), effects.round(3).tolist()))
    coefficients |= {f"region={r}": e for r, e in zip(REGIONS, REGION_EFFECTS)}
    coefficients |= {f"channel={c}": e for c, e in zip(CHANNELS, CHANNEL_EFFECTS)}
    return coefficients


#: Rows drawn and written at a time: memory stays near 0.5 GB whatever ``n`` is.
CHUNK_ROWS = 500_000


def _stream_starts(n: int, seed: int) -> list[np.random.Generator]:
    """Four generators, each where one draw of :func:`draw`'s single-pass order begins.

    The generating order is: every row's 30 normals, then every row's region, then every
    channel, then every outcome's uniform. Each of those draws consumes the bit stream one
    value after another (no buffering), so drawing a stream in pieces gives the same values
    as drawing it at once; to write in pieces, the states where the streams begin are found
    by drawing (and discarding) each stream once.
    """
    rng = np.random.default_rng(seed)
    starts = []
    for draw_one in (lambda g, m: g.standard_normal((m, N_NUMERIC)),
                     lambda g, m: g.random(m), lambda g, m: g.random(m), lambda g, m: g.random(m)):
        starts.append(np.random.Generator(type(rng.bit_generator)()))
        starts[-1].bit_generator.state = rng.bit_generator.state
        for first in range(0, n, CHUNK_ROWS):
            draw_one(rng, min(CHUNK_ROWS, n - first))
    return starts


def _choice(g: np.random.Generator, m: int, shares) -> np.ndarray:
    # What Generator.choice(k, size=m, p=shares) does: one uniform per row, cumulative shares.
    cdf = np.cumsum(shares)
    cdf /= cdf[-1]
    return cdf.searchsorted(g.random(m), side="right")


def draw_pieces(n: int, *, seed: int = 20261202):
    """Yield the ``n`` invented applications of :func:`draw` as frames of ``CHUNK_ROWS`` rows."""
    normals, regions, channels, uniforms = _stream_starts(n, seed)
    truth = true_coefficients()
    beta = np.array([truth[name] for name in numeric_names()])
    for first in range(0, n, CHUNK_ROWS):
        m = min(CHUNK_ROWS, n - first)
        x = normals.standard_normal((m, N_NUMERIC))
        # A few correlated pairs, as real bureau attributes are.
        for a, b, rho in ((0, 1, 0.6), (2, 3, 0.4), (20, 21, 0.7), (5, 25, 0.5)):
            x[:, b] = rho * x[:, a] + np.sqrt(1.0 - rho**2) * x[:, b]
        region = _choice(regions, m, REGION_SHARES)
        channel = _choice(channels, m, CHANNEL_SHARES)
        eta = INTERCEPT + x @ beta + np.take(REGION_EFFECTS, region) + np.take(CHANNEL_EFFECTS, channel)
        outcome = (uniforms.random(m) < 1.0 / (1.0 + np.exp(-eta))).astype(int)
        frame = pd.DataFrame(np.round(x, 5), columns=numeric_names())
        frame.insert(0, "loan_id", [f"L{i:08d}" for i in range(first + 1, first + m + 1)])
        frame["region"] = np.take(REGIONS, region)
        frame["channel"] = np.take(CHANNELS, channel)
        frame["default_12m"] = outcome.astype(str)
        yield frame


def draw(n: int, *, seed: int = 20261202) -> pd.DataFrame:
    """Draw ``n`` invented applications from the known model (all rows in one frame)."""
    return pd.concat(draw_pieces(n, seed=seed), ignore_index=True)


def contract() -> dict:
    columns = {"loan_id": {"type": "string", "unique": True, "description": "Loan reference."}}
    for name in numeric_names():
        columns[name] = {"type": "float", "min": -20, "max": 20, "description": "Standardised attribute."}
    columns["region"] = {"type": "category", "levels": list(REGIONS)}
    columns["channel"] = {"type": "category", "levels": list(CHANNELS)}
    columns["default_12m"] = {"type": "category", "levels": ["0", "1"], "description": "1 = default within 12 months."}
    return {"format": "oddsmith-contract/1", "description": "Invented benchmark portfolio.", "columns": columns}


def config(n: int) -> dict:
    features = [{"name": name, "type": "numeric"} for name in numeric_names()]
    features += [{"name": "region", "type": "categorical", "reference": "north"},
                 {"name": "channel", "type": "categorical", "reference": "branch"}]
    return {
        "run": f"bench_{n}",
        "data": {"path": "data/portfolio.csv", "contract": "schemas/contracts/portfolio.yaml",
                 "id_column": "loan_id", "target": "default_12m", "positive_label": "1"},
        "features": features,
        "fairness": {"segments": ["region", "channel"], "min_group_size": 100},
        "split": {"method": "stratified", "test_fraction": 0.25, "seed": 20261202},
        "cross_validation": {"folds": 5, "repeats": 1, "seed": 7},
        "candidates": [
            {"name": "logit", "kind": "logit"},
            {"name": "probit", "kind": "probit"},
            {"name": "cloglog", "kind": "cloglog"},
            {"name": "lasso", "kind": "l1", "grid": list(GRID), "inner_folds": 3},
            {"name": "ridge", "kind": "l2", "grid": list(GRID), "inner_folds": 3},
        ],
        "selection": {"metric": "log_loss", "rule": "one_standard_error"},
        "costs": {"false_positive": 1000, "false_negative": 5000, "adopt": "empirical",
                  "bootstrap": 300, "seed": 11},
        # Written out (the schema's defaults) so that bench/serial.py reads the same settings.
        "evaluation": {"bootstrap": 1000, "seed": 20261203, "interval_level": 0.95,
                       "bootstrap_max_draws": 100_000_000},
        "challenger": {"enabled": True, "max_iter": 200, "learning_rate": 0.1, "max_leaf_nodes": 31, "seed": 1},
        "card": {"title": "Benchmark portfolio default model (invented)", "version": "0.0.1",
                 "owner": "oddsmith benchmark", "intended_use": "Measuring the pipeline's speed."},
    }


def write(out: Path, n: int, *, seed: int = 20261202) -> dict:
    """Write data, contract and config under ``out``; return the paths written."""
    paths = {"data": out / "data/portfolio.csv", "contract": out / "schemas/contracts/portfolio.yaml",
             "config": out / "config/bench.yaml"}
    for path in paths.values():
        path.parent.mkdir(parents=True, exist_ok=True)
    with paths["data"].open("w", newline="") as handle:
        for k, piece in enumerate(draw_pieces(n, seed=seed)):
            piece.to_csv(handle, index=False, header=k == 0, lineterminator="\n")
    header = "# Invented benchmark data, written by bench/generate.py. Do not edit.\n"
    paths["contract"].write_text(header + yaml.safe_dump(contract(), sort_keys=False))
    paths["config"].write_text(header + yaml.safe_dump(config(n), sort_keys=False))
    return paths


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, required=True)
    parser.add_argument("--out", type=Path, required=True)
    parser.add_argument("--seed", type=int, default=20261202)
    args = parser.parse_args()
    for name, path in write(args.out, args.rows, seed=args.seed).items():
        print(f"{name}: {path}")


if __name__ == "__main__":
    main()
