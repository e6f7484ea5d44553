"""The evaluate stage: the only stage that reads the test part, after the candidate and the
cut-off are fixed. Overall metrics with intervals, calibration, the confusion matrix and a
cut-off table at the adopted cut-off, stability per period, and subgroup evidence."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith import metrics
from oddsmith.fairness import subgroup_table
from oddsmith.io import read_json, read_parquet, write_json, write_parquet
from oddsmith.predict import predict_frame
from oddsmith.recipe import load_recipe
from oddsmith.threshold import confusion_at, realised_cost_per_1000

log = logging.getLogger("oddsmith.evaluate")
TABLE_CUTOFFS = (0.05, 0.10, 0.15, 0.20, 0.25, 0.30, 0.40, 0.50, 0.60, 0.70)
PERIOD_CODES = {"quarter": "Q", "month": "M", "year": "Y"}


def flagged(p: np.ndarray, cutoff) -> np.ndarray:
    """Flag when p >= cutoff; a cut-off of None means flag none."""
    return np.zeros(p.shape, dtype=bool) if cutoff is None else p >= cutoff


def _cutoff_table(y, p, choice: dict) -> list[dict]:
    marks = {round(c, 6): "" for c in TABLE_CUTOFFS}
    if choice["adopted_cutoff"] is not None:
        marks[round(choice["adopted_cutoff"], 6)] = "adopted"
    marks.setdefault(round(choice["bayes"]["cutoff"], 6), "Bayes")
    rows = []
    for cutoff in sorted(marks):
        row = {"cutoff": cutoff, "mark": marks[cutoff]} | confusion_at(y, p, cutoff)
        row["cost_per_1000"] = realised_cost_per_1000(y, p, cutoff, costs=choice["costs"])
        rows.append(row)
    return rows


def _periods(dates: pd.Series, y, p, cutoff: float, period: str) -> list[dict]:
    labels = dates.dt.to_period(PERIOD_CODES[period]).astype(str).to_numpy()
    out = []
    for label in sorted(set(labels.tolist())):
        m = labels == label
        row = {"period": label, "n": int(m.sum()), "events": int(y[m].sum()),
               "mean_predicted": float(p[m].mean()), "observed_rate": float(y[m].mean()),
               "flag_rate": float(flagged(p[m], cutoff).mean()), "log_loss": metrics.log_loss(y[m], p[m]),
               "brier": metrics.brier(y[m], p[m]), "auc": None}
        if 0 < y[m].sum() < m.sum():
            row["auc"] = metrics.auc(y[m], p[m])
        out.append(row)
    return out


def run_evaluate(*, data_path: str, assignment_path: str, recipe_path: str, selected_path: str, model_paths: dict,
                 choice_path: str, data: dict, fairness: dict, feature_names: list, evaluation: dict, split_method: str,
                 out_metrics: str, out_subgroups: str, out_predictions: str) -> dict:
    """Score the test part with the selected model; write metrics, subgroups, predictions."""
    df = read_parquet(data_path)
    assignment = read_parquet(assignment_path)
    test = df.loc[(assignment["part"] == "test").to_numpy()].reset_index(drop=True)
    selected = read_json(selected_path)["candidate"]
    model, choice = read_json(model_paths[selected]), read_json(choice_path)
    y = test[data["target"]].to_numpy().astype(int)
    p = predict_frame(load_recipe(recipe_path), model, test)
    cutoff = choice["adopted_cutoff"]
    result = {"candidate": selected, "n": int(len(y)), "events": int(y.sum()), "cutoff": cutoff,
              "adopted": choice["adopted"], "overall": metrics.summarise(y, p),
              "auc_ci": metrics.auc_confidence_interval(y, p),
              "hosmer_lemeshow": metrics.hosmer_lemeshow(y, p),
              "reliability": metrics.reliability_bins(y, p, bins=evaluation["calibration_bins"]),
              "confusion": confusion_at(y, p, cutoff),
              "cost_per_1000": realised_cost_per_1000(y, p, cutoff, costs=choice["costs"]),
              "cutoff_table": _cutoff_table(y, p, choice), "periods": None}
    if data["date_column"]:
        result["periods"] = _periods(test[data["date_column"]], y, p, cutoff, evaluation["period"])
        result["period_unit"] = evaluation["period"]
    groups = {}
    for kind in ("sensitive", "segments"):
        for name in fairness[kind]:
            groups[name] = {"kind": kind, "used_as_feature": name in feature_names, "rows": subgroup_table(
                y, p, test[name].astype(str).to_numpy(), cutoff=cutoff, min_group_size=fairness["min_group_size"],
                attribute=name)}
    log.info("test AUC %s (n=%d), cut-off %s", result["overall"]["auc"], len(y), cutoff)
    predictions = pd.DataFrame({"id": test[data["id_column"]].to_numpy(), "y": y, "p": p,
                                "flagged": flagged(p, cutoff).astype("int8")})
    write_parquet(out_predictions, predictions)
    write_json(out_metrics, result)
    write_json(out_subgroups, {"min_group_size": fairness["min_group_size"], "attributes": groups,
                               "rule": "adverse-impact ratio below 4/5 of the most favoured group's rate is flagged; "
                                       "exactly 4/5 is not (29 CFR 1607.4(D))",
                               "favourable_outcome": "not flagged for review"})
    return result
