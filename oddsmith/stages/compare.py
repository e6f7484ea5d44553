"""The compare stage: candidates × cross-validated metrics, selection by a stated rule, and
paired tests of every candidate against the selected one.

Selection (``one_standard_error``): among candidates whose mean primary metric is within one
standard error of the best mean, take the one with the fewest parameters (ties: the better
mean). The standard error is the fold standard deviation over √(folds × repeats). This is
the one-standard-error rule of Breiman, Friedman, Olshen & Stone (1984), as popularised by
Hastie, Tibshirani & Friedman, *The Elements of Statistical Learning*. ``best`` takes the
best mean.
"""

from __future__ import annotations

import logging
import math

import numpy as np

from oddsmith import metrics
from oddsmith.errors import FitError
from oddsmith.io import read_json, read_parquet, write_json

log = logging.getLogger("oddsmith.compare")
METRICS = ("log_loss", "brier", "auc", "gini", "ks", "calibration_intercept", "calibration_slope")
LOWER_IS_BETTER = {"log_loss": True, "brier": True, "auc": False}
RULE_TEXT = {
    "one_standard_error": "one-standard-error rule (Breiman et al. 1984; Hastie, Tibshirani & Friedman): "
    "the fewest parameters among candidates within one standard error of the best mean {metric}",
    "best": "the best mean cross-validated {metric}",
}


def _row(cv: dict) -> dict:
    row = {k: cv[k] for k in ("candidate", "kind", "status", "n_parameters")}
    row["reason"] = cv.get("reason")
    if cv["status"] != "ok":
        return row
    folds = cv["folds"]
    for name in METRICS:
        values = np.array([f[name] for f in folds if f.get(name) is not None], dtype=float)
        row[f"{name}_mean"] = float(values.mean()) if values.size else None
        row[f"{name}_sd"] = float(values.std(ddof=1)) if values.size > 1 else None
        row[f"{name}_pooled"] = cv["pooled"].get(name)
    row["n_folds"] = len(folds)
    return row


def select(rows: list[dict], *, metric: str, rule: str) -> tuple[dict, str]:
    """Pick the selected row and say why (see the module docstring)."""
    ok = [r for r in rows if r["status"] == "ok" and r.get(f"{metric}_mean") is not None]
    if not ok:
        reasons = "; ".join(f"{r['candidate']}: {r.get('reason')}" for r in rows)
        raise FitError(f"every candidate failed, nothing to select ({reasons})")
    sign = 1.0 if LOWER_IS_BETTER[metric] else -1.0
    best = min(ok, key=lambda r: (sign * r[f"{metric}_mean"], r["n_parameters"], r["candidate"]))
    if rule == "best":
        return best, f"{best['candidate']} has the best mean {metric} ({best[f'{metric}_mean']:.5f})"
    se = (best[f"{metric}_sd"] or 0.0) / math.sqrt(best["n_folds"])
    limit = best[f"{metric}_mean"] + sign * se
    within = [r for r in ok if sign * r[f"{metric}_mean"] <= sign * limit]
    chosen = min(within, key=lambda r: (r["n_parameters"], sign * r[f"{metric}_mean"], r["candidate"]))
    reason = (
        f"best mean {metric} {best[f'{metric}_mean']:.5f} ({best['candidate']}), standard error {se:.5f}; "
        f"{len(within)} candidate(s) within one standard error; {chosen['candidate']} has the fewest parameters "
        f"({chosen['n_parameters']})"
    )
    return chosen, reason


def _paired(selected: str, cvs: dict, oofs: dict, metric: str) -> list[dict]:
    base_folds = {(f["repeat"], f["fold"]): f for f in cvs[selected]["folds"]}
    sel_oof = oofs[selected]
    out = []
    for name, cv in cvs.items():
        if name == selected or cv["status"] != "ok":
            continue
        pairs = [(f, base_folds[(f["repeat"], f["fold"])]) for f in cv["folds"] if (f["repeat"], f["fold"]) in base_folds]
        diffs = [a[metric] - b[metric] for a, b in pairs if a[metric] is not None and b[metric] is not None]
        n_test = round(float(np.mean([a["n"] for a, _ in pairs])))
        n_train = round(float(np.mean([a["n_train"] for a, _ in pairs])))
        ttest = metrics.corrected_resampled_ttest(diffs, n_train=n_train, n_test=n_test)
        other = oofs[name]
        if not np.array_equal(other["id"].to_numpy(), sel_oof["id"].to_numpy()):
            raise FitError(f"out-of-fold rows of {name} and {selected} differ; folds are not shared")
        delong = metrics.delong_test(sel_oof["y"].to_numpy(), other["p"].to_numpy(), sel_oof["p"].to_numpy())
        out.append({"candidate": name, "metric": metric, "mean_difference": ttest["mean"], "corrected_t": ttest,
                    "delong_auc": delong})
    return out


def run_compare(*, cv_paths: dict, oof_paths: dict, selection: dict, out_table: str, out_selected: str) -> dict:
    """Build the comparison table, select a candidate, test the others against it."""
    cvs = {name: read_json(path) for name, path in cv_paths.items()}
    oofs = {name: read_parquet(path) for name, path in oof_paths.items() if cvs[name]["status"] == "ok"}
    rows = [_row(cvs[name]) for name in sorted(cvs)]
    metric, rule = selection["metric"], selection["rule"]
    chosen, reason = select(rows, metric=metric, rule=rule)
    for row in rows:
        row["selected"] = row["candidate"] == chosen["candidate"]
    paired = _paired(chosen["candidate"], cvs, oofs, metric)
    failed = [{"candidate": r["candidate"], "reason": r["reason"]} for r in rows if r["status"] != "ok"]
    table = {"metric": metric, "rule": rule, "rule_text": RULE_TEXT[rule].format(metric=metric.replace("_", " ")),
             "lower_is_better": LOWER_IS_BETTER[metric], "rows": rows, "paired_tests": paired, "failed": failed,
             "paired_test_sources": {
                 "corrected_t": "corrected resampled t-test, variance factor (1/k + n_test/n_train) (Nadeau & Bengio 2003)",
                 "delong_auc": "DeLong, DeLong & Clarke-Pearson (1988) test of two correlated AUCs on pooled out-of-fold predictions"}}
    selected = {"candidate": chosen["candidate"], "kind": chosen["kind"], "metric": metric, "rule": rule, "reason": reason}
    log.info("selected %s: %s", chosen["candidate"], reason)
    write_json(out_table, table)
    write_json(out_selected, selected)
    return selected
