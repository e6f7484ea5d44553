"""The evaluate stage: the only stage that reads the test part. It scores the test part once
with the selected candidate and measures what does not depend on the cut-off: discrimination
with intervals, calibration, stability per period and per-group discrimination and
calibration. The adopted cut-off is applied afterwards by the apply_cutoff stage, from the
scores written here, so a change of costs does not score the test part again."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith import metrics
from oddsmith.fairness import GROUP_COLUMN_PREFIX, attribute_groups, group_summaries
from oddsmith.io import read_json, read_parquet, write_json, write_parquet
from oddsmith.predict import predict_frame
from oddsmith.recipe import load_recipe

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


def run_evaluate(*, data_path: str, assignment_path: str, recipe_path: str, selected_path: str, model_paths: dict,
                 data: dict, fairness: dict, feature_names: list, evaluation: dict, split_method: str,
                 out_scores: str, out_probability_metrics: str) -> dict:
    """Score the test part with the selected model; write the scores (with each row's period
    and subgroup labels) and the metrics that do not depend on the cut-off."""
    # Only the test rows and the columns used here are read (at 1M rows the whole frame
    # would be most of this job's memory).
    is_test = (read_parquet(assignment_path, columns=["part"])["part"] == "test").to_numpy()
    wanted = [data["id_column"], data["target"], data["date_column"], *feature_names,
              *fairness["sensitive"], *fairness["segments"]]
    test = read_parquet(data_path, columns=list(dict.fromkeys(c for c in wanted if c)), rows=is_test)
    selected = read_json(selected_path)["candidate"]
    model = read_json(model_paths[selected])
    y = test[data["target"]].to_numpy().astype(int)
    p = predict_frame(load_recipe(recipe_path), model, test)
    result = {"candidate": selected, "n": int(len(y)), "events": int(y.sum()), "overall": metrics.summarise(y, p),
              "auc_ci": metrics.auc_confidence_interval(y, p),
              "hosmer_lemeshow": metrics.hosmer_lemeshow(y, p),
              "reliability": metrics.reliability_bins(y, p, bins=evaluation["calibration_bins"]), "periods": None}
    scores = {"id": test[data["id_column"]].to_numpy(), "y": y, "p": p}
    if data["date_column"]:
        periods = test[data["date_column"]].dt.to_period(PERIOD_CODES[evaluation["period"]]).astype(str).to_numpy()
        result["periods"] = _periods(periods, y, p)
        result["period_unit"] = evaluation["period"]
        scores["period"] = periods
    groups = {}
    for kind in ("sensitive", "segments"):
        for name in fairness[kind]:
            labels = attribute_groups(test[name], bands=fairness.get("bands", {}).get(name),
                                      blanks=fairness.get("blank_groups", {}).get(name))
            groups[name] = {"kind": kind, "used_as_feature": name in feature_names, "rows": group_summaries(
                y, p, labels, min_group_size=fairness["min_group_size"], attribute=name)}
            scores[GROUP_COLUMN_PREFIX + name] = labels
    result["subgroups"] = {"min_group_size": fairness["min_group_size"], "attributes": groups}
    log.info("test AUC %s (n=%d)", result["overall"]["auc"], len(y))
    write_parquet(out_scores, pd.DataFrame(scores))
    write_json(out_probability_metrics, result)
    return result
