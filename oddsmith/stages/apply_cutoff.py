"""The apply_cutoff stage: the adopted cut-off applied to the test scores written by evaluate.
The confusion matrix, a cut-off table, the realised cost and flag rates per period go to
``evaluation/cutoff_metrics.json`` (evaluate's cut-off-free metrics stay in its own file;
:func:`oddsmith.artifacts.evaluation_at_cutoff` joins the two for readers); the subgroup
decision figures (error rates, adverse-impact ratios) join evaluate's group rows in
``evaluation/subgroups.json``. Reads artifacts only; the test part itself
is not read here, and nothing is fitted or scored."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from oddsmith import artifacts
from oddsmith.assessment import metrics
from oddsmith.assessment.fairness import GROUP_COLUMN_PREFIX, add_decisions, add_intervals_of_attributes
from oddsmith.assessment.threshold import confusion_at, realised_cost_per_1000
from oddsmith.errors import ArtifactError
from oddsmith.io import read_json, read_parquet, write_json, write_parquet

log = logging.getLogger("oddsmith.apply_cutoff")
TABLE_CUTOFFS = (0.05, 0.10, 0.15, 0.20, 0.25, 0.30, 0.40, 0.50, 0.60, 0.70)
SUBGROUP_RULE = ("adverse-impact ratio below 4/5 of the most favoured group's rate is flagged; exactly 4/5 is not "
                 "(29 CFR 1607.4(D))")


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


def _period_flag_rates(periods: list[dict], labels: np.ndarray, p: np.ndarray, cutoff) -> list[dict]:
    found = sorted(set(labels.tolist()))
    if [row["period"] for row in periods] != found:
        raise ArtifactError("the scores' periods do not match the evaluation's",
                            [f"evaluation: {[row['period'] for row in periods]}", f"scores: {found}"])
    return [{"period": row["period"], "flag_rate": float(flagged(p[labels == row["period"]], cutoff).mean())}
            for row in periods]


def _check_artifacts(scores: pd.DataFrame, evaluation: dict, choice: dict) -> None:
    problems = []
    if choice.get("candidate") != evaluation["candidate"]:
        problems.append(f"threshold chosen for {choice.get('candidate')!r}, test part scored with "
                        f"{evaluation['candidate']!r}")
    if len(scores) != evaluation["n"]:
        problems.append(f"scores have {len(scores)} rows, the evaluation counts {evaluation['n']}")
    needed = ["id", "y", "p"] + (["period"] if evaluation["periods"] is not None else []) + [
        GROUP_COLUMN_PREFIX + name for name in evaluation["subgroups"]["attributes"]]
    problems += [f"scores lack column {name!r}" for name in needed if name not in scores.columns]
    if problems:
        raise ArtifactError("the test scores, their evaluation and the cut-off choice do not belong together",
                            problems)


def _group_rows(attributes: dict, y, p, scores, *, cutoff, evaluation: dict, workers: int) -> dict:
    """Decision figures of each attribute's groups with their intervals; the bootstrap (if
    any) repeats the evaluation's replicates: same seed, same count, same resampling rule,
    each replicate drawn once for every attribute."""
    labels = {name: scores[GROUP_COLUMN_PREFIX + name].to_numpy() for name in attributes}
    rows = {name: (add_decisions(block["rows"], y, p, labels[name], cutoff=cutoff, attribute=name), labels[name])
            for name, block in attributes.items()}
    boot = evaluation.get("bootstrap")
    with_intervals = add_intervals_of_attributes(rows, y, p, cutoff=cutoff, level=_level(evaluation), workers=workers,
                                                 bootstrap=boot and {"replicates": boot["replicates"], "seed": boot["seed"],
                                                                     "method": boot["method"]})
    return {name: block | {"rows": with_intervals[name]} for name, block in attributes.items()}


def _level(evaluation: dict) -> float:
    """The evaluation's interval level (its bootstrap's, else its AUC interval's, else 95%)."""
    return (evaluation.get("bootstrap") or evaluation.get(artifacts.auc_interval_key("out_of_fold" in evaluation)) or {}).get("level", 0.95)


def _interval_note(evaluation: dict) -> dict:
    """How the group intervals were made (stated once in subgroups.json)."""
    boot = evaluation.get("bootstrap")
    return {"rates": f"{metrics.WILSON_METHOD} for the flag rate, favourable rate, TPR and FPR",
            "comparisons": None if boot is None else (
                f"{boot['method']} for the adverse-impact ratio and the TPR/FPR gaps; {boot['resampling']}; the "
                "most favoured group is held fixed at the observed one"),
            "level": _level(evaluation),
            "replicates": None if boot is None else boot["replicates"], "seed": None if boot is None else boot["seed"]}


def run_apply_cutoff(*, scores_path: str, probability_metrics_path: str, choice_path: str, out_cutoff_metrics: str,
                     out_subgroups: str, out_predictions: str, workers: int = 1) -> dict:
    """Apply the adopted cut-off to the test scores; write the cut-off metrics, subgroups and
    predictions (evaluate's cut-off-free metrics stay in its own file). ``workers`` threads
    share the subgroup bootstrap's replicates (the same bits for any number)."""
    scores = read_parquet(scores_path)
    evaluation, choice = read_json(probability_metrics_path), read_json(choice_path)
    _check_artifacts(scores, evaluation, choice)
    y, p = scores["y"].to_numpy().astype(int), scores["p"].to_numpy()
    cutoff = choice["adopted_cutoff"]
    subgroups = evaluation["subgroups"]
    result = {"candidate": evaluation["candidate"], "n": evaluation["n"], "cutoff": cutoff,
              "adopted": choice["adopted"], "confusion": confusion_at(y, p, cutoff),
              "cost_per_1000": realised_cost_per_1000(y, p, cutoff, costs=choice["costs"]),
              "cutoff_table": _cutoff_table(y, p, choice), "period_flag_rates": None}
    if evaluation["periods"] is not None:
        result["period_flag_rates"] = _period_flag_rates(evaluation["periods"], scores["period"].to_numpy(), p, cutoff)
    groups = _group_rows(subgroups["attributes"], y, p, scores, cutoff=cutoff, evaluation=evaluation, workers=workers)
    log.info("cut-off %s on %d test rows: %d flagged", cutoff, len(y), int(flagged(p, cutoff).sum()))
    predictions = pd.DataFrame({"id": scores["id"].to_numpy(), "y": y, "p": p,
                                "flagged": flagged(p, cutoff).astype("int8")})
    write_parquet(out_predictions, predictions)
    write_json(out_cutoff_metrics, result)
    write_json(out_subgroups, {"min_group_size": subgroups["min_group_size"], "attributes": groups,
                               "rule": SUBGROUP_RULE, "favourable_outcome": "not flagged for review",
                               "intervals": _interval_note(evaluation)})
    return result
