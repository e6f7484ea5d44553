"""Snakemake script of the figures rule: the card's plots that show the cut-off, as deterministic SVG."""

from oddsmith.runner import stage
from oddsmith.stages.figures import run_figures

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_figures, predictions_path=sm.input.predictions, probability_metrics_path=sm.input.probability_metrics,
      cutoff_metrics_path=sm.input.cutoff_metrics, subgroups_path=sm.input.subgroups, choice_path=sm.input.choice,
      curve_path=sm.input.curve, out={name: getattr(sm.output, name) for name in sm.params.figures},
      currency=sm.params.currency)
