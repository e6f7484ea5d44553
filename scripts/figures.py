"""Snakemake script of the figures rule: the figures that show the adopted cut-off (SVG)."""

from oddsmith.runner import stage
from oddsmith.stages.figures import run_figures

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_figures, scores_path=sm.input.scores, probability_metrics_path=sm.input.probability_metrics,
      choice_path=sm.input.choice, curve_path=sm.input.curve,
      out={name: getattr(sm.output, name) for name in sm.params.figures}, currency=sm.params.currency)
