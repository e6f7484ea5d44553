"""The figure stages: draw the card's plots from the evaluation, threshold and model artifacts
as deterministic SVG files. They read artifacts only and estimate nothing.

Three rules share this module so that a change of costs redraws only what the cut-off changes:
``model_figures`` draws the figures that do not depend on the cut-off (calibration and the
model's terms); ``figures`` those that show it (ROC with the operating point, cost curve, score
distributions with the cut-off), from the test scores and the threshold's choice, side by side
with apply_cutoff; ``subgroup_figure`` the subgroup ratios, from apply_cutoff's subgroups."""

from __future__ import annotations

import logging

import numpy as np

from oddsmith import artifacts
from oddsmith.errors import ArgumentError, ArtifactError
from oddsmith.io import read_json, read_parquet, write_bytes_atomic
from oddsmith.reporting import plots

log = logging.getLogger("oddsmith.figures")
#: Figures drawn by the ``model_figures`` rule: independent of the cut-off.
MODEL_FIGURES = ("reliability", "coefficients")
#: Figures drawn by the ``figures`` rule: they show the adopted cut-off.
CUTOFF_FIGURES = ("roc", "cost_curve", "score_distribution")
#: Figures drawn by the ``subgroup_figure`` rule: the cut-off's consequences per group.
SUBGROUP_FIGURES = ("subgroups",)
#: Every figure that depends on the cut-off.
DECISION_FIGURES = CUTOFF_FIGURES + SUBGROUP_FIGURES


def _check_out(out: dict, names: tuple[str, ...]) -> None:
    missing = [name for name in names if name not in out]
    unknown = sorted(name for name in out if name not in names)
    if missing or unknown:
        raise ArgumentError(f"out must name a path for each of {list(names)}; missing {missing}, unknown {unknown}")


def _write(out: dict, svgs: dict) -> dict:
    for name, svg in svgs.items():
        write_bytes_atomic(out[name], svg)
        log.info("figure %s: %d bytes", name, len(svg))
    return {name: len(svg) for name, svg in svgs.items()}


def _cutoff_interval(bootstrap: dict | None) -> tuple[float, float] | None:
    """The bootstrap interval of the cut-off on the figure's axis: None without a bootstrap;
    an end of None ("flag none", above every probability) is drawn at the right edge, 1."""
    if bootstrap is None:
        return None
    return tuple(1.0 if end is None else end for end in (bootstrap["cutoff_low"], bootstrap["cutoff_high"]))


def _where(evaluation: dict) -> str:
    """What the evaluation's predictions are, for figure titles."""
    return "out-of-fold predictions" if evaluation.get("out_of_fold") else "the test part"


def run_model_figures(*, probability_metrics_path: str, selected_path: str, model_paths: dict, recipe_path: str,
                      out: dict) -> dict:
    """Write the figures of :data:`MODEL_FIGURES` to ``out[name]``.

    ``model_paths`` maps candidate name → model.json; only the selected one is drawn, its
    terms per training SD of each design column (``sds`` of the recipe).
    Returns {name: number of bytes written}.
    """
    _check_out(out, MODEL_FIGURES)
    selected = read_json(selected_path)["candidate"]
    if selected not in model_paths:
        raise ArgumentError(f"selected candidate {selected!r} has no model path; known: {sorted(model_paths)}")
    evaluation = read_json(probability_metrics_path)
    sds = read_json(recipe_path)["sds"]
    return _write(out, {"reliability": plots.reliability_svg(evaluation["reliability"], where=_where(evaluation)),
                        "coefficients": plots.coefficients_svg(read_json(model_paths[selected]), sds=sds)})


def operating_point(y, p, cutoff) -> tuple[float, float]:
    """``(1 − specificity, sensitivity)`` of flagging ``p >= cutoff`` (None: flag none), in
    the arithmetic of :func:`oddsmith.assessment.threshold.confusion_at` (same bits; that
    module is not imported, so the figure rules' code stays apart from the estimation's)."""
    flag = np.zeros(p.shape, dtype=bool) if cutoff is None else p >= cutoff
    events = y == 1
    tp, fn = int(np.sum(flag & events)), int(np.sum(~flag & events))
    tn, fp = int(np.sum(~flag & ~events)), int(np.sum(flag & ~events))
    return 1 - tn / (tn + fp), tp / (tp + fn)


def run_figures(*, scores_path: str, probability_metrics_path: str, choice_path: str, curve_path: str, out: dict,
                currency: str | None = None) -> dict:
    """Write the figures of :data:`CUTOFF_FIGURES` to ``out[name]``.

    They need the test scores (evaluate) and the adopted cut-off (threshold), not
    apply_cutoff's outputs, so the two jobs run side by side after a change of costs; the
    operating point is counted here as apply_cutoff counts it (:func:`operating_point`).
    ``currency`` is printed with the costs (``costs.currency``; None or ``unit``: cost units).
    Returns {name: number of bytes written}.
    """
    _check_out(out, CUTOFF_FIGURES)
    scores = read_parquet(scores_path, columns=["y", "p"])
    evaluation, choice = read_json(probability_metrics_path), read_json(choice_path)
    if choice.get("candidate") != evaluation["candidate"] or len(scores) != evaluation["n"]:
        raise ArtifactError("the test scores, their evaluation and the cut-off choice do not belong together",
                            [f"threshold chosen for {choice.get('candidate')!r}, test part scored with "
                             f"{evaluation['candidate']!r}; {len(scores)} scores, the evaluation counts {evaluation['n']}"])
    y, p = scores["y"].to_numpy().astype(int), scores["p"].to_numpy()
    cutoff = choice["adopted_cutoff"]
    auc = artifacts.auc_interval(evaluation) | {"auc": evaluation["overall"]["auc"]}
    svgs = {
        "roc": plots.roc_svg(y, p, auc=auc["auc"], auc_low=auc["lower"], auc_high=auc["upper"], cutoff=cutoff,
                             operating_point=operating_point(y, p, cutoff),
                             where=_where(evaluation)),
        "cost_curve": plots.cost_curve_svg(
            read_parquet(curve_path, columns=["cutoff", "expected_cost_per_case"]),
            adopted=choice["adopted_cutoff"], bayes=choice["bayes"]["cutoff"],
            interval=_cutoff_interval(choice["bootstrap"]), flag_none=choice["cost_per_1000"]["flag_none"],
            flag_all=choice["cost_per_1000"]["flag_all"], currency=currency),
        "score_distribution": plots.score_distribution_svg(y, p, cutoff=cutoff),
    }
    return _write(out, svgs)


def run_subgroup_figure(*, subgroups_path: str, out: dict) -> dict:
    """Write the figures of :data:`SUBGROUP_FIGURES` (the subgroup ratios at the adopted
    cut-off, from apply_cutoff's ``subgroups.json``) to ``out[name]``.
    Returns {name: number of bytes written}."""
    _check_out(out, SUBGROUP_FIGURES)
    return _write(out, {"subgroups": plots.subgroups_svg(read_json(subgroups_path)["attributes"])})
