"""The threshold stage: the decision cut-off from the stated costs, computed on the selected
candidate's out-of-fold training predictions only (the test part is never read here)."""

from __future__ import annotations

import logging

import numpy as np

from oddsmith.assessment.threshold import choose_cutoff, cost_curve
from oddsmith.io import read_json, read_parquet, write_json, write_parquet
from oddsmith.settings import COST_KEYS

log = logging.getLogger("oddsmith.threshold")


def run_threshold(*, selected_path: str, oof_paths: dict, costs: dict, out_choice: str, out_curve: str) -> dict:
    """Choose the cut-off for the selected candidate; write the choice and the cost curve.

    ``costs`` is the checked configuration's ``costs`` section, already normalised
    (:func:`oddsmith.config.check_config`); the choice records the four costs once, as
    ``costs``."""
    selected = read_json(selected_path)["candidate"]
    oof = read_parquet(oof_paths[selected])
    y, p = oof["y"].to_numpy(), oof["p"].to_numpy()
    # Rows in decreasing order of p (ties in the order read): the choice, its bootstrap and the
    # curve each sort by p again (stable sorts, so the same order) and find their input sorted,
    # which costs a pass instead of a sort. Every figure here is a count, so the order changes no bit.
    order = np.argsort(-p, kind="stable")
    y, p = y[order], p[order]
    money = {k: costs[k] for k in COST_KEYS}
    choice = choose_cutoff(y, p, costs=money, max_flag_rate=costs["max_flag_rate"],
                           min_sensitivity=costs["min_sensitivity"], bootstrap=costs["bootstrap"],
                           seed=costs["seed"], adopt=costs["adopt"])
    choice["candidate"] = selected
    choice["source"] = "out-of-fold predictions of the selected candidate on the training part"
    log.info("adopted %s cut-off %s: %s", choice["adopted"], choice["adopted_cutoff"], choice["reason"])
    write_parquet(out_curve, cost_curve(y, p, costs=money))
    write_json(out_choice, choice)
    return choice
