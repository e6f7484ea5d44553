"""Snakemake script of the split rule: assign each row to train/test and to a fold."""

from oddsmith.runner import stage
from oddsmith.stages.split import run_split

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_split, data_path=sm.input.data, report_path=sm.input.report, data=sm.params.data,
      split=sm.params.split, cross_validation=sm.params.cross_validation,
      out_assignment=sm.output.assignment, out_summary=sm.output.summary)
