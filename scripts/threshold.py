"""Snakemake script of the threshold rule: the cut-off from stated costs (training folds only)."""

from oddsmith.runner import stage
from oddsmith.stages.threshold import run_threshold

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_threshold, selected_path=sm.input.selected, oof_paths=dict(zip(sm.params.candidates, sm.input.oof)),
      costs=sm.params.costs, out_choice=sm.output.choice, out_curve=sm.output.curve)
