"""Choosing one candidate from the cross-validated comparison, and saying why in numbers.

Rows of the comparison table come from each candidate's ``cv.json`` (fold metrics) and
``model.json`` (the final fit on the whole training part). Parameters are counted as the
intercept plus the coefficients of the final fit that are not exactly zero: a lasso or
elastic-net fit that sets a coefficient to zero has one parameter fewer. For the lasso the
number of non-zero coefficients is an unbiased estimate of its degrees of freedom (Zou,
Hastie & Tibshirani, "On the degrees of freedom of the lasso", Annals of Statistics 2007);
a ridge fit shrinks but zeroes nothing, so it counts every coefficient.

Rules
-----
``one_standard_error``
    Among candidates whose mean primary metric is within one standard error of the best
    mean, take the one with the fewest (non-zero) parameters. The standard error is the best
    candidate's fold standard deviation over √(folds × repeats). Breiman, Friedman, Olshen &
    Stone (1984); Hastie, Tibshirani & Friedman, *The Elements of Statistical Learning*.
``best``
    The best mean primary metric.

Ties (equal parameter counts, or equal means under ``best``) go to the kind that comes first
in the stated preference order (``selection.preference``; by default the most conventional
and interpretable kinds first), and only then to the better mean and the name. The reason
records the numbers that decided: the difference to the best mean, its standard error and
the corrected resampled t-test of the fold differences, the parameter counts, and the
preference rank when it decided.
"""

from __future__ import annotations

import math

import numpy as np

from oddsmith.assessment import metrics
from oddsmith.errors import FitError

METRICS = ("log_loss", "brier", "auc", "gini", "ks", "calibration_intercept", "calibration_slope")
LOWER_IS_BETTER = {"log_loss": True, "brier": True, "auc": False}
#: Tie-break order of kinds when none is configured: plain likelihood fits with the most
#: familiar link first, penalised fits (no standard errors) last.
DEFAULT_PREFERENCE = ("logit", "probit", "cloglog", "l2", "l1", "elastic_net")
RULE_TEXT = {
    "one_standard_error": "one-standard-error rule (Breiman et al. 1984; Hastie, Tibshirani & Friedman): "
    "the fewest non-zero parameters among candidates within one standard error of the best mean {metric}; "
    "ties go to the first kind in the preference order {preference}",
    "best": "the best mean cross-validated {metric}; ties go to the first kind in the preference order {preference}",
}
#: Measures that mean nothing for predictions that are constant within every fold.
CALIBRATION = ("calibration_intercept", "calibration_slope")
CONSTANT_NOTE = "every prediction equals"
PAIRED_TEST_SOURCES = {
    "corrected_t": "corrected resampled t-test, variance factor (1/k + n_test/n_train) (Nadeau & Bengio 2003)",
    "delong_auc": "DeLong, DeLong & Clarke-Pearson (1988) test of two correlated AUCs on pooled out-of-fold "
                  "predictions"}


def count_parameters(model: dict) -> dict:
    """Parameters of a fitted model: the intercept plus every coefficient not exactly zero.

    Examples
    --------
    >>> count_parameters({"coefficients": {"a": 0.3, "b": 0.0, "c": -1.2}})
    {'n_parameters': 3, 'zero_coefficients': ['b']}
    """
    coefficients = model.get("coefficients") or {}
    zeros = sorted(name for name, value in coefficients.items() if value == 0.0)
    return {"n_parameters": 1 + len(coefficients) - len(zeros), "zero_coefficients": zeros}


def _constant_within_folds(folds: list[dict]) -> bool:
    return bool(folds) and all(f.get("calibration_slope") is None and
                               any(CONSTANT_NOTE in note for note in f.get("notes") or []) for f in folds)


def comparison_row(cv: dict, model: dict | None = None) -> dict:
    """One row of the comparison table from a candidate's cv.json and model.json.

    ``n_parameters`` counts non-zero parameters of the final fit (:func:`count_parameters`);
    ``n_parameters_designed`` is the intercept plus every design column. Calibration
    intercept and slope of a candidate whose predictions are constant within every fold are
    None, with the reason under ``not_applicable``.
    """
    row = {k: cv[k] for k in ("candidate", "kind", "status")}
    row["n_parameters_designed"] = cv["n_parameters"]
    row["n_parameters"], row["zero_coefficients"] = cv["n_parameters"], []
    row["reason"] = cv.get("reason")
    if cv["status"] != "ok":
        return row
    if model is not None and model.get("status") == "ok":
        row.update(count_parameters(model))
    folds = cv["folds"]
    for name in METRICS:
        values = np.array([f[name] for f in folds if f.get(name) is not None], dtype=float)
        row[f"{name}_mean"] = float(values.mean()) if values.size else None
        row[f"{name}_sd"] = float(values.std(ddof=1)) if values.size > 1 else None
        row[f"{name}_pooled"] = cv["pooled"].get(name)
    row["n_folds"] = len(folds)
    row["not_applicable"] = {}
    if _constant_within_folds(folds):
        for name in CALIBRATION:
            row[f"{name}_pooled"] = row[f"{name}_mean"] = row[f"{name}_sd"] = None
            row["not_applicable"][name] = (
                "undefined: the predictions are constant within every fold, so a recalibration fit has nothing "
                "to fit; pooled over folds it would measure only the differences between the folds' training rates")
    return row


def fold_differences(cv_a: dict, cv_b: dict, metric: str) -> tuple[list[float], int, int]:
    """Differences ``a − b`` of ``metric`` over the folds both share, with mean test and training sizes."""
    base = {(f["repeat"], f["fold"]): f for f in cv_b["folds"]}
    pairs = [(f, base[(f["repeat"], f["fold"])]) for f in cv_a["folds"] if (f["repeat"], f["fold"]) in base]
    diffs = [a[metric] - b[metric] for a, b in pairs if a[metric] is not None and b[metric] is not None]
    n_test = round(float(np.mean([a["n"] for a, _ in pairs])))
    n_train = round(float(np.mean([a["n_train"] for a, _ in pairs])))
    return diffs, n_test, n_train


def paired_difference(cv_a: dict, cv_b: dict, metric: str) -> dict:
    """Mean fold difference ``a − b``, its corrected standard error and t-test (Nadeau & Bengio 2003)."""
    diffs, n_test, n_train = fold_differences(cv_a, cv_b, metric)
    test = metrics.corrected_resampled_ttest(diffs, n_train=n_train, n_test=n_test)
    k = len(diffs)
    se = math.sqrt((1.0 / k + n_test / n_train) * float(np.var(diffs, ddof=1)))
    return test | {"standard_error": se}


def _rank(kind: str, preference: list[str]) -> int:
    return preference.index(kind) if kind in preference else len(preference)


def _names(rows: list[dict]) -> str:
    names = [r["candidate"] for r in rows]
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _difference_text(chosen: dict, best: dict, metric: str, paired: dict | None) -> str:
    label = metric.replace("_", " ")
    if chosen["candidate"] == best["candidate"]:
        return f"{chosen['candidate']} has the best mean {label} itself"
    if paired is None:
        return f"{chosen['candidate']}'s mean {label} differs from the best by " \
               f"{chosen[f'{metric}_mean'] - best[f'{metric}_mean']:+.5f}"
    p = "undefined" if paired["p_value"] is None else f"{paired['p_value']:.3f}"
    t = "undefined" if paired["t"] is None else f"{paired['t']:.2f}"
    return (f"{chosen['candidate']}'s mean {label} {chosen[f'{metric}_mean']:.5f} differs from the best "
            f"({best['candidate']}) by {paired['mean']:+.5f}, standard error {paired['standard_error']:.5f}; "
            f"corrected resampled t-test of the fold differences: t = {t}, df = {paired['df']}, p = {p}")


def _count_text(row: dict) -> str:
    zeros = row.get("zero_coefficients") or []
    if not zeros:
        return f"{row['candidate']} {row['n_parameters']}"
    shown = ", ".join(zeros[:5]) + (f" and {len(zeros) - 5} more" if len(zeros) > 5 else "")
    return f"{row['candidate']} {row['n_parameters']} ({len(zeros)} coefficient(s) set to exactly zero by the penalty: {shown})"


def _break_ties(tied: list[dict], *, metric: str, sign: float, preference: list[str]) -> tuple[dict, str | None, str | None]:
    """The first of ``tied`` by preference, better mean, name; the sentence saying what decided and
    which it was (``"preference"`` or ``"metric"``), both None without a tie."""
    ordered = sorted(tied, key=lambda r: (_rank(r["kind"], preference), sign * r[f"{metric}_mean"], r["candidate"]))
    chosen = ordered[0]
    if len(tied) == 1:
        return chosen, None, None
    rank = _rank(chosen["kind"], preference)
    same_kind = [r for r in tied if _rank(r["kind"], preference) == rank]
    order = ", ".join(preference)
    if len(same_kind) == 1:
        # A lone best rank is always a listed kind: every unlisted kind shares the last rank.
        decided, text = "preference", (f"the preference order ({order}) decides the tie: {chosen['kind']} ranks "
                                       f"{rank + 1} of {len(preference)}, "
                                       f"ahead of {', '.join(sorted({r['kind'] for r in tied if r is not chosen}))}")
    else:
        decided, text = metric, (f"the preference order ({order}) leaves {_names(same_kind)} tied as {chosen['kind']}; "
                f"the better mean {metric.replace('_', ' ')} decides")
    return chosen, text, decided


def choose(rows: list[dict], cvs: dict, *, metric: str, rule: str, preference: list[str]) -> tuple[dict, dict]:
    """Pick the selected row; return it with the decision: its numbers and the reason in words.

    Parameters
    ----------
    rows : list of dict
        Comparison rows (:func:`comparison_row`).
    cvs : dict
        Candidate name → cv.json contents (fold records for the paired test against the best).
    metric, rule : str
        Primary metric and rule (see the module docstring).
    preference : list of str
        Kinds in order of preference for ties.

    Raises
    ------
    FitError
        When every candidate failed.
    """
    ok = [r for r in rows if r["status"] == "ok" and r.get(f"{metric}_mean") is not None]
    if not ok:
        reasons = "; ".join(f"{r['candidate']}: {r.get('reason')}" for r in rows)
        raise FitError(f"every candidate failed, nothing to select ({reasons})")
    sign = 1.0 if LOWER_IS_BETTER[metric] else -1.0
    best_mean = min(sign * r[f"{metric}_mean"] for r in ok) * sign
    label = metric.replace("_", " ")
    if rule == "best":
        top = [r for r in ok if r[f"{metric}_mean"] == best_mean]
        chosen, tie_text, tie_decided = _break_ties(top, metric=metric, sign=sign, preference=preference)
        runner_up = sorted((r for r in ok if r is not chosen), key=lambda r: sign * r[f"{metric}_mean"])
        parts = [f"best mean {label} {best_mean:.5f}: {_names(top)}"]
        if tie_text:
            parts.append(tie_text)
        decision = {"decided_by": tie_decided or metric, "best": chosen["candidate"],
                    "best_mean": best_mean, "tied": [r["candidate"] for r in top]}
        if runner_up:
            nxt = runner_up[0]
            paired = paired_difference(cvs[nxt["candidate"]], cvs[chosen["candidate"]], metric)
            parts.append(f"next best {_difference_text(nxt, chosen, metric, paired)}")
            decision["next_best"] = {"candidate": nxt["candidate"], **paired}
        return chosen, decision | {"reason": "; ".join(parts) + "."}
    best = sorted((r for r in ok if r[f"{metric}_mean"] == best_mean),
                  key=lambda r: (r["n_parameters"], _rank(r["kind"], preference), r["candidate"]))[0]
    se = (best[f"{metric}_sd"] or 0.0) / math.sqrt(best["n_folds"])
    limit = best_mean + sign * se
    within = sorted((r for r in ok if sign * r[f"{metric}_mean"] <= sign * limit), key=lambda r: r["candidate"])
    fewest = min(r["n_parameters"] for r in within)
    tied = [r for r in within if r["n_parameters"] == fewest]
    chosen, tie_text, tie_decided = _break_ties(tied, metric=metric, sign=sign, preference=preference)
    others = sorted({r["n_parameters"] for r in within if r["n_parameters"] != fewest})
    parts = [f"best mean {label} {best_mean:.5f} ({best['candidate']}); one standard error {se:.5f} "
             f"(fold SD {best[f'{metric}_sd'] or 0.0:.5f} / √{best['n_folds']}); within {best_mean:.5f} "
             f"{'+' if sign > 0 else '−'} {se:.5f}: {_names(within)}"]
    if len(tied) > 1:
        parts.append(f"{_names(tied)} tie at the fewest non-zero parameters ({fewest})"
                     + (f"; the others have {', '.join(map(str, others))}" if others else ""))
        parts.append(tie_text)
    elif len(within) > 1:
        parts.append(f"fewest non-zero parameters: {_count_text(chosen)}; the others within have "
                     f"{', '.join(map(str, others))}")
    paired = None if chosen is best else paired_difference(cvs[chosen["candidate"]], cvs[best["candidate"]], metric)
    parts.append(_difference_text(chosen, best, metric, paired))
    decided_by = tie_decided or ("parameters" if len(within) > 1 else metric)
    decision = {"decided_by": decided_by, "best": best["candidate"], "best_mean": best_mean, "standard_error": se,
                "limit": limit, "within": [r["candidate"] for r in within],
                "parameter_counts": {r["candidate"]: r["n_parameters"] for r in within},
                "tied": [r["candidate"] for r in tied], "preference": list(preference),
                "difference_to_best": paired}
    return chosen, decision | {"reason": "; ".join(parts) + "."}


def paired_tests(selected: str, cvs: dict, oofs: dict, metric: str) -> list[dict]:
    """Every other fitted candidate against ``selected``: corrected t-test over folds, DeLong on pooled OOF."""
    sel_oof = oofs[selected]
    out = []
    for name, cv in cvs.items():
        if name == selected or cv["status"] != "ok":
            continue
        diffs, n_test, n_train = fold_differences(cv, cvs[selected], metric)
        ttest = metrics.corrected_resampled_ttest(diffs, n_train=n_train, n_test=n_test)
        other = oofs[name]
        if not np.array_equal(other["id"].to_numpy(), sel_oof["id"].to_numpy()):
            raise FitError(f"out-of-fold rows of {name} and {selected} differ; folds are not shared")
        delong = metrics.delong_test(sel_oof["y"].to_numpy(), other["p"].to_numpy(), sel_oof["p"].to_numpy())
        out.append({"candidate": name, "metric": metric, "mean_difference": ttest["mean"], "corrected_t": ttest,
                    "delong_auc": delong})
    return out


def compare_candidates(cvs: dict, oofs: dict, models: dict, *, metric: str, rule: str,
                       preference: list[str] | None = None) -> tuple[dict, dict]:
    """The comparison table and the selected candidate, from every candidate's artifacts.

    Parameters
    ----------
    cvs, oofs, models : dict
        Candidate name → cv.json contents, out-of-fold predictions (``id``, ``y``, ``p``;
        fitted candidates only), model.json contents.
    metric, rule, preference
        As in ``selection`` of the configuration.

    Returns
    -------
    (table, selected) : tuple of dict
    """
    preference = list(DEFAULT_PREFERENCE if preference is None else preference)
    rows = [comparison_row(cvs[name], models.get(name)) for name in sorted(cvs)]
    chosen, decision = choose(rows, cvs, metric=metric, rule=rule, preference=preference)
    for row in rows:
        row["selected"] = row["candidate"] == chosen["candidate"]
    label = metric.replace("_", " ")
    table = {"metric": metric, "rule": rule, "preference": preference,
             "rule_text": RULE_TEXT[rule].format(metric=label, preference="(" + ", ".join(preference) + ")"),
             "parameter_count_basis": "the intercept plus every coefficient of the final fit on the whole training "
                                      "part that is not exactly zero; a penalised fit's exact zeros do not count",
             "lower_is_better": LOWER_IS_BETTER[metric], "rows": rows,
             "paired_tests": paired_tests(chosen["candidate"], cvs, oofs, metric),
             "failed": [{"candidate": r["candidate"], "reason": r["reason"]} for r in rows if r["status"] != "ok"],
             "paired_test_sources": PAIRED_TEST_SOURCES}
    selected = {"candidate": chosen["candidate"], "kind": chosen["kind"], "metric": metric, "rule": rule,
                "reason": decision.pop("reason"), "decision": decision}
    return table, selected
