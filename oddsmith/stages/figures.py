"""The figures stage: draw the card's plots from the evaluation, threshold and model
artifacts as deterministic SVG files. Reads artifacts only; estimates nothing."""

from __future__ import annotations

import logging

from oddsmith import plots
from oddsmith.io import read_json, read_parquet, write_bytes_atomic

log = logging.getLogger("oddsmith.figures")


def run_figures(*, predictions_path: str, metrics_path: str, subgroups_path: str, choice_path: str,
                curve_path: str, selected_path: str, model_paths: dict, out: dict) -> dict:
    """Write one SVG per name in :data:`oddsmith.plots.FIGURE_NAMES` to ``out[name]``.

    ``model_paths`` maps candidate name → model.json; only the selected one is drawn.
    Returns {name: number of bytes written}.
    """
    missing = [name for name in plots.FIGURE_NAMES if name not in out]
    if missing:
        raise ValueError(f"out must name a path for every figure; missing {missing}")
    predictions = read_parquet(predictions_path, columns=["y", "p"])
    metrics, choice = read_json(metrics_path), read_json(choice_path)
    selected = read_json(selected_path)["candidate"]
    if selected not in model_paths:
        raise ValueError(f"selected candidate {selected!r} has no model path; known: {sorted(model_paths)}")
    y, p = predictions["y"].to_numpy(), predictions["p"].to_numpy()
    cutoff, confusion, auc = metrics["cutoff"], metrics["confusion"], metrics["auc_ci"]
    bootstrap = choice["bootstrap"]
    svgs = {
        "roc": plots.roc_svg(y, p, auc=auc["auc"], auc_low=auc["lower"], auc_high=auc["upper"], cutoff=cutoff,
                             operating_point=(1 - confusion["specificity"], confusion["sensitivity"])),
        "reliability": plots.reliability_svg(metrics["reliability"]),
        "cost_curve": plots.cost_curve_svg(
            read_parquet(curve_path, columns=["cutoff", "expected_cost_per_case"]),
            adopted=choice["adopted_cutoff"], bayes=choice["bayes"]["cutoff"],
            interval=(bootstrap["cutoff_low"], bootstrap["cutoff_high"]),
            flag_none=choice["cost_per_1000"]["flag_none"] / 1000, flag_all=choice["cost_per_1000"]["flag_all"] / 1000),
        "coefficients": plots.coefficients_svg(read_json(model_paths[selected])),
        "score_distribution": plots.score_distribution_svg(y, p, cutoff=cutoff),
        "subgroups": plots.subgroups_svg(read_json(subgroups_path)["attributes"]),
    }
    for name, svg in svgs.items():
        write_bytes_atomic(out[name], svg)
        log.info("figure %s: %d bytes", name, len(svg))
    return {name: len(svg) for name, svg in svgs.items()}
