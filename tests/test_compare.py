"""Candidate selection: the one-standard-error rule and its failure modes, on hand-made
fold records (no fitting needed)."""

import pytest

from oddsmith.errors import FitError
from oddsmith.stages.compare import _row, select


def _cv(name, losses, n_parameters, status="ok"):
    folds = [{"repeat": 1, "fold": k, "n": 100, "n_train": 400, "log_loss": v, "brier": v / 3, "auc": 0.7,
              "gini": 0.4, "ks": 0.3, "calibration_intercept": 0.0, "calibration_slope": 1.0}
             for k, v in enumerate(losses)]
    if status != "ok":
        return {"candidate": name, "kind": "logit", "status": status, "n_parameters": n_parameters,
                "reason": "complete separation by 'x'", "folds": [], "pooled": None}
    return {"candidate": name, "kind": "logit", "status": "ok", "n_parameters": n_parameters,
            "folds": folds, "pooled": {"log_loss": sum(losses) / len(losses)}}


def test_one_standard_error_prefers_fewer_parameters_within_one_se():
    big = _row(_cv("big", [0.400, 0.410, 0.420, 0.430, 0.440], 20))     # mean 0.420, sd 0.0158, se 0.00707
    small = _row(_cv("small", [0.425, 0.425, 0.425, 0.425, 0.425], 5))  # within 0.420 + 0.00707
    tiny = _row(_cv("tiny", [0.45] * 5, 1))                             # outside
    chosen, reason = select([big, small, tiny], metric="log_loss", rule="one_standard_error")
    assert chosen["candidate"] == "small"
    assert "2 candidate(s) within one standard error" in reason
    chosen, _ = select([big, small, tiny], metric="log_loss", rule="best")
    assert chosen["candidate"] == "big"


def test_auc_is_maximised():
    a = _row(_cv("a", [0.4] * 5, 3))
    b = _row(_cv("b", [0.4] * 5, 3))
    b["auc_mean"], b["auc_sd"] = 0.8, 0.0
    a["auc_mean"], a["auc_sd"] = 0.7, 0.0
    assert select([a, b], metric="auc", rule="best")[0]["candidate"] == "b"


def test_failed_candidates_are_skipped_and_all_failed_is_an_error():
    ok = _row(_cv("ok", [0.5] * 5, 3))
    bad = _row(_cv("bad", [], 3, status="failed"))
    assert select([ok, bad], metric="log_loss", rule="one_standard_error")[0]["candidate"] == "ok"
    with pytest.raises(FitError, match="every candidate failed.*complete separation by 'x'"):
        select([bad], metric="log_loss", rule="one_standard_error")
