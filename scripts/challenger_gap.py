"""Snakemake script of the challenger_gap rule: the challenger's gap to the selected candidate."""

from oddsmith.stages.challenger import run_challenger_gap
from oddsmith.runner import stage

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_challenger_gap, folds_path=sm.input.folds, selected_path=sm.input.selected,
      cv_paths=dict(zip(sm.params.candidates, sm.input.cv)), out_cv=sm.output.cv)
