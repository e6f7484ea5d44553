"""The evaluate stage: the only stage that reads the test part. It scores the test part once
with the selected candidate and measures what does not depend on the cut-off: discrimination
with intervals, calibration, stability per period and per-group discrimination and
calibration. The adopted cut-off is applied afterwards by the apply_cutoff stage, from the
scores written here, so a change of costs does not score the test part again.

With the split method ``cross_validation_only`` there is no test part: the same measures are
taken on all rows from the selected candidate's out-of-fold predictions."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith import artifacts
from oddsmith.assessment import metrics
from oddsmith.assessment.fairness import GROUP_COLUMN_PREFIX, attribute_groups, group_summaries
from oddsmith.data.recipe import load_recipe
from oddsmith.errors import ArtifactError
from oddsmith.fitting.predict import predict_frame
from oddsmith.io import read_json, read_parquet, write_json, write_parquet
from oddsmith.settings import CV_ONLY

log = logging.getLogger("oddsmith.evaluate")
PERIOD_CODES = {"quarter": "Q", "month": "M", "year": "Y"}


def _periods(labels: np.ndarray, y, p) -> list[dict]:
    out = []
    for label in sorted(set(labels.tolist())):
        m = labels == label
        row = {"period": label, "n": int(m.sum()), "events": int(y[m].sum()),
               "mean_predicted": float(p[m].mean()), "observed_rate": float(y[m].mean()),
               "log_loss": metrics.log_loss(y[m], p[m]), "brier": metrics.brier(y[m], p[m]), "auc": None}
        if 0 < y[m].sum() < m.sum():
            row["auc"] = metrics.auc(y[m], p[m])
        out.append(row)
    return out


def outcome_maturity(dates, parts, *, window_months, extraction_date) -> dict | None:
    """Whether every row's outcome window had closed by the data's extraction date.

    An application dated ``d`` has a matured outcome when ``d + window_months`` falls on or
    before the extraction date, i.e. ``d`` is on or before ``matured_through`` (extraction
    date minus the window, calendar months). The extraction date is ``extraction_date``
    when given, else the last date in the data file.

    Returns
    -------
    dict or None
        None without a window; else ``window_months``, ``extraction_date``,
        ``extraction_date_source``, ``matured_through``, ``test_last_date`` and, per part
        (``train``, ``test``), ``{"rows", "immature_rows", "first_immature_date"}``, and
        ``test_matured`` (True when no test row is immature).
    """
    if not window_months:
        return None
    dates = pd.to_datetime(pd.Series(dates)).reset_index(drop=True)
    parts = pd.Series(parts).reset_index(drop=True)
    source = "config data.extraction_date" if extraction_date else "the last date in the data file"
    extracted = pd.Timestamp(extraction_date) if extraction_date else dates.max()
    matured_through = extracted - pd.DateOffset(months=int(window_months))
    result = {"window_months": int(window_months), "extraction_date": extracted.date().isoformat(),
              "extraction_date_source": source, "matured_through": matured_through.date().isoformat(),
              "test_last_date": dates[parts == "test"].max().date().isoformat(), "parts": {}}
    for part in ("train", "test"):
        inside = dates[parts == part]
        late = inside[inside > matured_through]
        result["parts"][part] = {"rows": int(inside.shape[0]), "immature_rows": int(late.shape[0]),
                                 "first_immature_date": late.min().date().isoformat() if len(late) else None}
    result["test_matured"] = result["parts"]["test"]["immature_rows"] == 0
    return result


def _intervals(y, p, overall: dict, evaluation: dict, workers: int) -> dict | None:
    """Bootstrap intervals of the headline measures (None when evaluation.bootstrap is 0);
    ``workers`` threads share the replicates (same values for any number)."""
    if not evaluation.get("bootstrap"):
        return None
    return metrics.bootstrap_performance(y, p, replicates=evaluation["bootstrap"], seed=evaluation["seed"],
                                         level=evaluation["interval_level"],
                                         max_draws=evaluation["bootstrap_max_draws"], estimates=overall,
                                         workers=workers)


def _out_of_fold_predictions(frame: pd.DataFrame, oof_path: str, data: dict, selected: str):
    """The selected candidate's out-of-fold predictions, checked to be the frame's rows in order."""
    oof = read_parquet(oof_path)
    ids = frame[data["id_column"]].astype(str).to_numpy()
    y = frame[data["target"]].to_numpy().astype(int)
    if len(oof) != len(frame) or not np.array_equal(oof["id"].astype(str).to_numpy(), ids) \
            or not np.array_equal(oof["y"].to_numpy().astype(int), y):
        raise ArtifactError(f"{oof_path}: the out-of-fold predictions of {selected!r} are not the data's rows "
                            f"in order ({len(oof)} predictions, {len(frame)} rows); rebuild the fit stage")
    if oof["p"].isna().any():
        raise ArtifactError(f"{oof_path}: {selected!r} has no out-of-fold predictions (its fit failed)")
    return oof


def _out_of_fold_block(y, oof: pd.DataFrame, cross_validation: dict) -> dict:
    """What the card says about out-of-fold figures: no test part, which repeat the tables use."""
    return {"folds": cross_validation["folds"], "repeats": cross_validation["repeats"],
            "seed": cross_validation["seed"], "repeat_used": 1,
            "statement": ("No held-out test part: every figure is computed from out-of-fold predictions on all "
                          "rows (each row predicted by the model of the fold that left it out), from repeat 1 "
                          "of the cross-validation."),
            "by_repeat": metrics.repeat_summary(y, oof)}


def run_evaluate(*, data_path: str, assignment_path: str, recipe_path: str, selected_path: str, model_paths: dict,
                 data: dict, fairness: dict, feature_names: list, evaluation: dict, split_method: str,
                 out_scores: str, out_probability_metrics: str, oof_paths: dict | None = None,
                 cross_validation: dict | None = None, workers: int = 1) -> dict:
    """Score the test part with the selected model; write the scores (with each row's period
    and subgroup labels) and the metrics that do not depend on the cut-off.

    With ``split_method`` ``cross_validation_only`` there is no test part: the evaluated rows
    are all rows and their predictions the selected candidate's out-of-fold ones (repeat 1,
    from ``oof_paths``); the result then carries an ``out_of_fold`` block, with the spread
    of the headline measures over the repeats (``cross_validation`` the config section).
    ``workers`` threads share the bootstrap's replicates; the values do not depend on it."""
    cv_only = split_method == CV_ONLY
    # Only the evaluated rows and the columns used here are read (at 1M rows the whole
    # frame would be most of this job's memory).
    part = read_parquet(assignment_path, columns=["part"])["part"]
    is_test = (part == ("train" if cv_only else "test")).to_numpy()
    wanted = [data["id_column"], data["target"], data["date_column"], *feature_names,
              *fairness["sensitive"], *fairness["segments"]]
    test = read_parquet(data_path, columns=list(dict.fromkeys(c for c in wanted if c)), rows=is_test)
    selected = read_json(selected_path)["candidate"]
    y = test[data["target"]].to_numpy().astype(int)
    if cv_only:
        oof = _out_of_fold_predictions(test, oof_paths[selected], data, selected)
        p = oof["p"].to_numpy()
    else:
        p = predict_frame(load_recipe(recipe_path), read_json(model_paths[selected]), test)
    overall = metrics.summarise(y, p)
    level = evaluation["interval_level"]
    result = {"candidate": selected, "n": int(len(y)), "events": int(y.sum()), "overall": overall,
              # The AUC itself is overall["auc"]; its DeLong interval is kept without a copy, named
              # for what was measured (the test part, or out-of-fold predictions without one).
              artifacts.auc_interval_key(cv_only): {
                  k: v for k, v in metrics.auc_confidence_interval(y, p, level=level).items() if k != "auc"},
              "bootstrap": _intervals(y, p, overall, evaluation, workers), "outcome_maturity": None,
              "calibration_intercept_ci": metrics.calibration_intercept_interval(y, p, level=level),
              "hosmer_lemeshow": metrics.hosmer_lemeshow(y, p),
              "reliability": metrics.reliability_bins(y, p, bins=evaluation["calibration_bins"]), "periods": None}
    if cv_only:
        result["out_of_fold"] = _out_of_fold_block(y, oof, cross_validation)
    scores = {"id": test[data["id_column"]].to_numpy(), "y": y, "p": p}
    if data["date_column"]:
        periods = test[data["date_column"]].dt.to_period(PERIOD_CODES[evaluation["period"]]).astype(str).to_numpy()
        result["periods"] = _periods(periods, y, p)
        result["period_unit"] = evaluation["period"]
        scores["period"] = periods
        if data.get("outcome_window_months"):
            dates = read_parquet(data_path, columns=[data["date_column"]])[data["date_column"]]
            # Without a test part the evaluated rows are all rows: they take the test part's place.
            result["outcome_maturity"] = outcome_maturity(
                dates, part.replace("train", "test") if cv_only else part,
                window_months=data["outcome_window_months"], extraction_date=data.get("extraction_date"))
    groups = {}
    for kind in ("sensitive", "segments"):
        for name in fairness[kind]:
            labels = attribute_groups(test[name], bands=fairness.get("bands", {}).get(name),
                                      blanks=fairness.get("blank_groups", {}).get(name))
            groups[name] = {"kind": kind, "used_as_feature": name in feature_names, "rows": group_summaries(
                y, p, labels, min_group_size=fairness["min_group_size"], attribute=name)}
            scores[GROUP_COLUMN_PREFIX + name] = labels
    result["subgroups"] = {"min_group_size": fairness["min_group_size"], "attributes": groups}
    log.info("%s AUC %s (n=%d); bootstrap %s", "out-of-fold" if cv_only else "test", result["overall"]["auc"], len(y),
             "off" if result["bootstrap"] is None else f"{result['bootstrap']['replicates']} replicates")
    write_parquet(out_scores, pd.DataFrame(scores))
    write_json(out_probability_metrics, result)
    return result
