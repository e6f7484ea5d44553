"""Snakemake script of the compare rule: comparison table, selection, paired tests."""

from oddsmith.runner import stage
from oddsmith.stages.compare import run_compare

sm = snakemake  # noqa: F821 (provided by Snakemake)
names = sm.params.candidates
stage(sm, run_compare, cv_paths=dict(zip(names, sm.input.cv)), oof_paths=dict(zip(names, sm.input.oof)),
      model_paths=dict(zip(names, sm.input.models)), selection=sm.params.selection, out_table=sm.output.table,
      out_selected=sm.output.selected)
