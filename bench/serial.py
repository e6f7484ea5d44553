"""The plain serial script: the statistical work of an oddsmith build, written by hand.

This is the yardstick of the benchmark: what an analyst would write in one file without a
workflow. Read the CSV with pandas, split 75/25 stratified, assign five stratified folds on
the training part, fit the baseline and the five candidates of the benchmark config on the
same folds (same libraries, solvers, tolerances, grids, inner folds and seeds as oddsmith),
refit each on the whole training part, pick one by the one-standard-error rule on log
loss, fit the flexible challenger (gradient-boosted trees with the config's ``challenger``
settings) on the same folds and state its log-loss gap to the selected candidate, choose the
cost-minimising cut-off on its out-of-fold predictions with a 300-resample stratified
bootstrap, and score the test part once (overall and per segment) with the bootstrap
intervals of the headline measures (the config's ``evaluation`` replicates, cut by the same
draw budget).

Not done here, because a hand-written script usually skips them: data-contract checks beyond
a few asserts, design diagnostics (VIF, leakage screen), DeLong and corrected t-tests,
Hosmer-Lemeshow, per-fold calibration by GLM, provenance stamps, hashing, figures, card.
So the comparison is conservative: the pipeline does more work than this script.

The ML candidates use statsmodels, as an analyst would (oddsmith's own blocked Newton solver
reaches the same estimates, see tests/test_models.py). The only oddsmith import is the
proximal Newton path used for the penalised candidates (inner cross-validation and refit),
exactly as in the pipeline: scikit-learn has no warm-started path of that kind, and timing a
slower solver here would flatter the pipeline (see bench/README.md). For the same reason the
test part's bootstrap intervals call oddsmith's ``bootstrap_performance`` (the function the
build's evaluate stage calls): a replicate loop over scikit-learn's metrics would be slower.

Usage::

    python bench/serial.py --project bench/work/n100000 --out bench/work/n100000/serial.json
"""

from __future__ import annotations

import argparse
import json
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.special
import statsmodels.api as sm
import yaml
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score, roc_curve
from sklearn.model_selection import StratifiedKFold, train_test_split


def design(df: pd.DataFrame, features: list[dict]) -> pd.DataFrame:
    """Numeric columns as they are; categoricals as 0/1 columns without the reference level."""
    parts = []
    for f in features:
        if f["type"] == "numeric":
            parts.append(df[[f["name"]]].astype(float))
        else:
            dummies = pd.get_dummies(df[f["name"]], prefix=f["name"], prefix_sep="=", dtype=float)
            parts.append(dummies.drop(columns=f"{f['name']}={f['reference']}"))
    return pd.concat(parts, axis=1)


def fit_ml(kind: str, X: np.ndarray, y: np.ndarray):
    exog = sm.add_constant(X, has_constant="add")
    if kind == "logit":
        model = sm.Logit(y, exog)
    elif kind == "probit":
        model = sm.Probit(y, exog)
    else:
        model = sm.GLM(y, exog, family=sm.families.Binomial(link=sm.families.links.CLogLog()))
    options = {} if kind == "cloglog" else {"disp": 0}
    result = model.fit(method="newton", maxiter=100, **options)
    _ = result.bse, result.conf_int(), result.pvalues  # the coefficient table
    return lambda Z: result.predict(sm.add_constant(Z, has_constant="add"))


def fit_penalised(X: np.ndarray, y: np.ndarray, *, grid: list[float], inner_folds: int,
                  l1_ratio: float, seed: int):
    """Inner stratified CV over the grid (warm starts), then refit at the chosen C."""
    from oddsmith.fitting.solvers import proximal_newton_path  # the penalised solver (see docstring)

    grid = sorted(grid)
    losses = np.zeros((inner_folds, len(grid)))
    inner = StratifiedKFold(n_splits=inner_folds, shuffle=True, random_state=seed)
    for f, (tr, va) in enumerate(inner.split(X, y)):
        path = proximal_newton_path(X, y, grid, rows=tr, l1_ratio=l1_ratio, max_iter=1000)
        for k, (coef, _) in enumerate(path):
            losses[f, k] = log_loss(y[va], scipy.special.expit(coef[0] + X[va] @ coef[1:]))
    chosen = grid[int(np.argmin(losses.mean(axis=0)))]
    coef, _ = proximal_newton_path(X, y, grid[: grid.index(chosen) + 1], rows=None,
                                   l1_ratio=l1_ratio, max_iter=1000)[-1]

    def predict(Z):
        return scipy.special.expit(coef[0] + Z @ coef[1:])
    predict.C = chosen  # reported beside the results
    return predict


def fit(candidate: dict, X: np.ndarray, y: np.ndarray, seed: int, *, penalised=fit_penalised):
    """Fit one candidate; ``penalised`` fits the l1 and l2 kinds (bench/serial_analyst.py
    passes scikit-learn's own)."""
    kind = candidate["kind"]
    if kind == "baseline":
        rate = y.mean()
        return lambda Z: np.full(len(Z), rate)
    if kind in ("logit", "probit", "cloglog"):
        return fit_ml(kind, X, y)
    return penalised(X, y, grid=candidate["grid"], inner_folds=candidate.get("inner_folds", 3),
                         l1_ratio=1.0 if kind == "l1" else 0.0, seed=seed)


def fold_metrics(y: np.ndarray, p: np.ndarray) -> dict:
    p = np.clip(p, 1e-15, 1 - 1e-15)
    fpr, tpr, _ = roc_curve(y, p)
    slope = None  # undefined for a constant prediction (the baseline)
    if np.ptp(p) > 0:
        slope = float(sm.Logit(y, sm.add_constant(scipy.special.logit(p))).fit(disp=0).params[1])
    return {"log_loss": log_loss(y, p), "brier": brier_score_loss(y, p), "auc": roc_auc_score(y, p),
            "ks": float(np.max(tpr - fpr)), "calibration_slope": slope}


def challenger(X: np.ndarray, y: np.ndarray, folds: np.ndarray, settings: dict) -> tuple[np.ndarray, list[dict]]:
    """Gradient-boosted trees on the given folds: out-of-fold predictions and fold metrics."""
    from sklearn.ensemble import HistGradientBoostingClassifier

    options = {"max_iter": settings["max_iter"], "learning_rate": settings["learning_rate"],
               "max_leaf_nodes": settings["max_leaf_nodes"], "early_stopping": False,
               "random_state": settings["seed"]}
    oof, per_fold = np.empty(y.size), []
    for k in np.unique(folds):
        va = folds == k
        model = HistGradientBoostingClassifier(**options).fit(X[~va], y[~va])
        oof[va] = model.predict_proba(X[va])[:, 1]
        per_fold.append(fold_metrics(y[va], oof[va]))
    return oof, per_fold


def gap(selected: list[dict], trees: list[dict], *, n_test: int, n_train: int) -> dict:
    """Mean fold log-loss advantage of the trees with a corrected resampled t interval."""
    import scipy.stats

    d = np.array([s["log_loss"] - t["log_loss"] for s, t in zip(selected, trees)])
    se = np.sqrt((1 / d.size + n_test / n_train) * d.var(ddof=1))
    half = scipy.stats.t.ppf(0.975, d.size - 1) * se
    return {"advantage": d.mean(), "lower": d.mean() - half, "upper": d.mean() + half}


def cost_cutoff(y: np.ndarray, p: np.ndarray, cost_fp: float, cost_fn: float) -> tuple[float, float]:
    """Cut-off (flag p >= cut-off) with the lowest total cost, and that cost."""
    order = np.argsort(-p, kind="stable")
    ps, ys = p[order], y[order]
    last = np.r_[np.flatnonzero(np.diff(ps) != 0), ps.size - 1]  # end of each tie block
    tp, fp = np.cumsum(ys)[last], np.cumsum(1 - ys)[last]
    cost = np.r_[cost_fn * ys.sum(), cost_fp * fp + cost_fn * (ys.sum() - tp)]
    cutoffs = np.r_[np.inf, ps[last]]
    best = int(np.argmin(cost))
    return float(cutoffs[best]), float(cost[best])


def main(*, penalised=fit_penalised, description: str = __doc__) -> Path:
    """Parse ``--project`` and ``--out``, run the whole analysis (the penalised candidates
    fitted by ``penalised``) and return the path of the summary written."""
    parser = argparse.ArgumentParser(description=description.splitlines()[0])
    parser.add_argument("--project", type=Path, required=True)
    parser.add_argument("--out", type=Path, required=True)
    args = parser.parse_args()
    started = time.perf_counter()
    cfg = yaml.safe_load((args.project / "config/bench.yaml").read_text())
    data, features = cfg["data"], cfg["features"]
    df = pd.read_csv(args.project / data["path"], dtype={data["id_column"]: str, data["target"]: str})
    assert df[data["id_column"]].is_unique and not df.isna().any().any()
    y = (df[data["target"]] == data["positive_label"]).to_numpy().astype(int)
    X_all = design(df, features)
    rows = np.arange(len(df))
    train, test = train_test_split(rows, test_size=cfg["split"]["test_fraction"], stratify=y,
                                   random_state=cfg["split"]["seed"])
    train, test = np.sort(train), np.sort(test)
    X_raw = X_all.to_numpy()
    mean, sd = X_raw[train].mean(axis=0), X_raw[train].std(axis=0)
    X_std = (X_raw - mean) / sd
    y_train = y[train]
    cv = cfg["cross_validation"]
    folds = np.empty(train.size, dtype=int)
    splitter = StratifiedKFold(n_splits=cv["folds"], shuffle=True, random_state=cv["seed"])
    for k, (_, va) in enumerate(splitter.split(train, y_train)):
        folds[va] = k
    candidates = cfg["candidates"] + [{"name": "baseline", "kind": "baseline"}]
    results, finals, seconds = {}, {}, {"read_and_split": time.perf_counter() - started}
    for cand in candidates:
        candidate_started = time.perf_counter()
        X = (X_std if cand["kind"] in ("l1", "l2") else X_raw)[train]
        oof, per_fold, chosen = np.empty(train.size), [], []
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for k in range(cv["folds"]):
                va = folds == k
                predict = fit(cand, X[~va], y_train[~va], seed=cv["seed"] + k, penalised=penalised)
                oof[va] = predict(X[va])
                chosen.append(getattr(predict, "C", None))
                per_fold.append(fold_metrics(y_train[va], oof[va]))
            finals[cand["name"]] = fit(cand, X, y_train, seed=cv["seed"], penalised=penalised)
            chosen.append(getattr(finals[cand["name"]], "C", None))
        losses = np.array([f["log_loss"] for f in per_fold])
        results[cand["name"]] = {"oof": oof, "mean": losses.mean(), "se": losses.std(ddof=1) / np.sqrt(losses.size),
                                 "n_parameters": X.shape[1] + 1 if cand["kind"] != "baseline" else 1,
                                 "folds": per_fold, "C_by_fold_then_refit": chosen}
        seconds[cand["name"]] = time.perf_counter() - candidate_started
    best = min(results, key=lambda n: results[n]["mean"])
    within = [n for n in results if results[n]["mean"] <= results[best]["mean"] + results[best]["se"]]
    selected = min(within, key=lambda n: (results[n]["n_parameters"], results[n]["mean"], n))
    step_started = time.perf_counter()
    tree_oof, tree_folds = challenger(X_raw[train], y_train, folds, cfg["challenger"])
    tree_gap = gap(results[selected]["folds"], tree_folds, n_test=int(np.sum(folds == 0)),
                   n_train=int(np.sum(folds != 0)))
    seconds["challenger"] = time.perf_counter() - step_started
    costs = cfg["costs"]
    oof = results[selected]["oof"]
    cutoff, _ = cost_cutoff(y_train, oof, costs["false_positive"], costs["false_negative"])
    rng = np.random.default_rng(costs["seed"])
    pos, neg = np.flatnonzero(y_train == 1), np.flatnonzero(y_train == 0)
    boot = []
    for _ in range(costs["bootstrap"]):
        b = np.r_[pos[rng.integers(0, pos.size, pos.size)], neg[rng.integers(0, neg.size, neg.size)]]
        boot.append(cost_cutoff(y_train[b], oof[b], costs["false_positive"], costs["false_negative"])[0])
    selected_kind = next(c["kind"] for c in candidates if c["name"] == selected)
    X_test = (X_std if selected_kind in ("l1", "l2") else X_raw)[test]
    p_test = finals[selected](X_test)
    flag = p_test >= cutoff
    y_test = y[test]
    fp, fn = int(np.sum(flag & (y_test == 0))), int(np.sum(~flag & (y_test == 1)))
    step_started = time.perf_counter()
    from oddsmith.assessment.metrics import bootstrap_performance  # the build's bootstrap (see docstring)

    evaluation = cfg["evaluation"]
    intervals = bootstrap_performance(y_test, p_test, replicates=evaluation["bootstrap"], seed=evaluation["seed"],
                                      level=evaluation["interval_level"], max_draws=evaluation["bootstrap_max_draws"])
    seconds["test_bootstrap"] = time.perf_counter() - step_started
    summary = {"selected": selected, "cutoff": cutoff,
               "cutoff_interval": [float(np.quantile(boot, 0.025)), float(np.quantile(boot, 0.975))],
               "test": fold_metrics(y_test, p_test) | {"flag_rate": float(flag.mean()),
                                                       "cost_per_1000": 1000 * (costs["false_positive"] * fp + costs["false_negative"] * fn) / y_test.size},
               "test_bootstrap": {"replicates": intervals["replicates"], "method": intervals["method"],
                                  "intervals": intervals["intervals"]},
               "challenger": {"log_loss_mean": float(np.mean([f["log_loss"] for f in tree_folds])),
                              "pooled_log_loss": log_loss(y_train, np.clip(tree_oof, 1e-15, 1 - 1e-15)),
                              "gap_to_selected": tree_gap},
               "segments": {}, "cv": {n: {"log_loss_mean": r["mean"], "se": r["se"], "C_by_fold_then_refit": r["C_by_fold_then_refit"]}
                      for n, r in results.items()}}
    for name in cfg["fairness"]["segments"]:
        groups = df[name].to_numpy()[test]
        summary["segments"][name] = {str(g): {"n": int(np.sum(groups == g)), "flag_rate": float(flag[groups == g].mean()),
                                              "auc": float(roc_auc_score(y_test[groups == g], p_test[groups == g]))}
                                     for g in sorted(set(groups))}
    summary["seconds"] = time.perf_counter() - started
    summary["seconds_by_step"] = seconds
    args.out.write_text(json.dumps(summary, indent=1, default=float))
    print(f"selected {selected}, cut-off {cutoff:.4f}, test AUC {summary['test']['auc']:.4f}, "
          f"{summary['seconds']:.1f} s")
    return args.out


if __name__ == "__main__":
    main()
