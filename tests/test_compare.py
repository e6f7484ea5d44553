"""Candidate selection: the one-standard-error rule, parameter counting, ties broken by the
stated preference order, and reasons that carry the deciding numbers, on hand-made fold
records and models (no fitting needed)."""

import math

import pytest

from oddsmith.errors import FitError
from oddsmith.fitting.selection import DEFAULT_PREFERENCE, choose, comparison_row, count_parameters

PREFERENCE = list(DEFAULT_PREFERENCE)


def _cv(name, losses, n_parameters, kind="logit", status="ok"):
    folds = [{"repeat": 1, "fold": k, "n": 100, "n_train": 400, "log_loss": v, "brier": v / 3, "auc": 0.7,
              "gini": 0.4, "ks": 0.3, "calibration_intercept": 0.0, "calibration_slope": 1.0, "notes": []}
             for k, v in enumerate(losses)]
    if status != "ok":
        return {"candidate": name, "kind": kind, "status": status, "n_parameters": n_parameters,
                "reason": "complete separation by 'x'", "folds": [], "pooled": None}
    return {"candidate": name, "kind": kind, "status": "ok", "n_parameters": n_parameters,
            "folds": folds, "pooled": {"log_loss": sum(losses) / len(losses), "calibration_slope": 0.97}}


def _model(n_coefficients, zeros=0):
    values = [0.0] * zeros + [0.1 * (k + 1) for k in range(n_coefficients - zeros)]
    return {"status": "ok", "coefficients": {f"x{k}": v for k, v in enumerate(values)}}


def _table(specs):
    """specs: (name, kind, fold losses, design columns, exact zeros) → rows and cvs."""
    cvs = {name: _cv(name, losses, cols + 1, kind=kind) for name, kind, losses, cols, _ in specs}
    rows = [comparison_row(cvs[name], _model(cols, zeros)) for name, _, _, cols, zeros in specs]
    return rows, cvs


def test_fewer_parameters_within_one_standard_error_wins_and_outside_does_not():
    rows, cvs = _table([("big", "logit", [0.400, 0.410, 0.420, 0.430, 0.440], 19, 0),  # mean 0.420, SE 0.00707
                        ("small", "logit", [0.425] * 5, 4, 0),                          # within 0.42707
                        ("tiny", "logit", [0.45] * 5, 0, 0)])                           # outside
    chosen, decision = choose(rows, cvs, metric="log_loss", rule="one_standard_error", preference=PREFERENCE)
    assert chosen["candidate"] == "small" and decision["decided_by"] == "parameters"
    assert decision["within"] == ["big", "small"]
    # SE by hand: SD of 0.40..0.44 step 0.01 is sqrt(0.00025) = 0.0158114; / sqrt(5) = 0.0070711
    assert decision["standard_error"] == pytest.approx(math.sqrt(0.00025) / math.sqrt(5))
    assert "one standard error 0.00707" in decision["reason"]
    assert "fewest non-zero parameters: small 5; the others within have 20" in decision["reason"]
    chosen, _ = choose(rows, cvs, metric="log_loss", rule="best", preference=PREFERENCE)
    assert chosen["candidate"] == "big"


def test_tie_on_parameter_count_is_resolved_by_the_preference_order_not_a_tiny_metric_edge():
    # cloglog is best by 0.00005, well within one SE; all three have 18 parameters.
    noise = [0.010, -0.010, 0.005, -0.005, 0.0]
    rows, cvs = _table([("cloglog_main", "cloglog", [0.41668 + e for e in noise], 17, 0),
                        ("logit_main", "logit", [0.41673 + e + d for e, d in zip(noise, [4e-4, -4e-4, 2e-4, -2e-4, 0])], 17, 0),
                        ("probit_main", "probit", [0.41690 + e for e in noise], 17, 0)])
    chosen, decision = choose(rows, cvs, metric="log_loss", rule="one_standard_error", preference=PREFERENCE)
    assert chosen["candidate"] == "logit_main" and decision["decided_by"] == "preference"
    assert decision["tied"] == ["cloglog_main", "logit_main", "probit_main"]
    reason = decision["reason"]
    assert "cloglog_main, logit_main and probit_main tie at the fewest non-zero parameters (18)" in reason
    assert "decides the tie: logit ranks 1 of 6, ahead of cloglog, probit" in reason
    # the deciding numbers: difference to the best, its SE, the paired test and its p-value
    paired = decision["difference_to_best"]
    assert paired["mean"] == pytest.approx(0.00005)
    assert f"by +0.00005, standard error {paired['standard_error']:.5f}" in reason
    assert f"t = {paired['t']:.2f}, df = 4, p = {paired['p_value']:.3f}" in reason
    # a stated order that prefers cloglog picks it instead
    chosen, _ = choose(rows, cvs, metric="log_loss", rule="one_standard_error",
                       preference=["cloglog", "logit", "probit"])
    assert chosen["candidate"] == "cloglog_main"


def test_lasso_with_an_exact_zero_counts_one_parameter_fewer():
    assert count_parameters(_model(17, zeros=1)) == {"n_parameters": 17, "zero_coefficients": ["x0"]}
    assert count_parameters({"coefficients": {}}) == {"n_parameters": 1, "zero_coefficients": []}
    rows, cvs = _table([("logit_main", "logit", [0.40, 0.42, 0.41, 0.43, 0.44], 17, 0),
                        ("lasso", "l1", [0.401, 0.421, 0.411, 0.431, 0.441], 17, 1),
                        ("ridge", "l2", [0.400, 0.420, 0.410, 0.430, 0.440], 17, 0)])
    lasso = next(r for r in rows if r["candidate"] == "lasso")
    assert lasso["n_parameters"] == 17 and lasso["n_parameters_designed"] == 18
    chosen, decision = choose(rows, cvs, metric="log_loss", rule="one_standard_error", preference=PREFERENCE)
    assert chosen["candidate"] == "lasso" and decision["decided_by"] == "parameters"
    assert "fewest non-zero parameters: lasso 17 (1 coefficient(s) set to exactly zero by the penalty: x0); " \
           "the others within have 18" in decision["reason"]


def test_a_real_difference_decides_when_only_the_best_is_within_one_standard_error():
    rows, cvs = _table([("logit_main", "logit", [0.400, 0.402, 0.401, 0.403, 0.404], 17, 0),
                        ("logit_compact", "logit", [0.430, 0.432, 0.431, 0.433, 0.434], 5, 0)])
    chosen, decision = choose(rows, cvs, metric="log_loss", rule="one_standard_error", preference=PREFERENCE)
    assert chosen["candidate"] == "logit_main" and decision["decided_by"] == "log_loss"
    assert decision["within"] == ["logit_main"]
    assert "logit_main has the best mean log loss itself" in decision["reason"]
    # under "best", the next best is reported with its difference and test
    chosen, decision = choose(rows, cvs, metric="log_loss", rule="best", preference=PREFERENCE)
    assert chosen["candidate"] == "logit_main"
    assert decision["next_best"]["mean"] == pytest.approx(0.030)
    assert "next best logit_compact's mean log loss 0.43200 differs from the best (logit_main) by +0.03000" \
           in decision["reason"]


def test_auc_is_maximised():
    rows, cvs = _table([("a", "logit", [0.4] * 5, 2, 0), ("b", "probit", [0.4] * 5, 2, 0)])
    rows[0]["auc_mean"], rows[0]["auc_sd"] = 0.7, 0.0
    rows[1]["auc_mean"], rows[1]["auc_sd"] = 0.8, 0.0
    assert choose(rows, cvs, metric="auc", rule="best", preference=PREFERENCE)[0]["candidate"] == "b"


def test_calibration_of_a_constant_prediction_is_not_applicable():
    cv = _cv("baseline", [0.46] * 5, 1, kind="baseline")
    for fold in cv["folds"]:
        fold["calibration_slope"] = fold["calibration_intercept"] = None
        fold["notes"] = ["calibration: calibration slope is undefined: every prediction equals 0.1734"]
    cv["pooled"]["calibration_slope"] = -4.001  # between-fold noise, as the demo's baseline had
    row = comparison_row(cv, {"status": "ok", "coefficients": {}})
    assert row["calibration_slope_pooled"] is None and row["calibration_intercept_pooled"] is None
    assert "constant within every fold" in row["not_applicable"]["calibration_slope"]
    fitted = comparison_row(_cv("logit", [0.4] * 5, 3), _model(2))
    assert fitted["calibration_slope_pooled"] == 0.97 and fitted["not_applicable"] == {}


def test_failed_candidates_are_skipped_and_all_failed_is_an_error():
    ok = _cv("ok", [0.5, 0.51, 0.49, 0.5, 0.5], 3)
    bad = _cv("bad", [], 3, status="failed")
    rows = [comparison_row(ok, _model(2)), comparison_row(bad, {"status": "failed"})]
    cvs = {"ok": ok, "bad": bad}
    assert choose(rows, cvs, metric="log_loss", rule="one_standard_error", preference=PREFERENCE)[0]["candidate"] == "ok"
    with pytest.raises(FitError, match="every candidate failed.*complete separation by 'x'"):
        choose(rows[1:], cvs, metric="log_loss", rule="one_standard_error", preference=PREFERENCE)
