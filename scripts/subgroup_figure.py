"""Snakemake script of the subgroup_figure rule: the subgroup ratios at the adopted cut-off (SVG)."""

from oddsmith.runner import stage
from oddsmith.stages.figures import run_subgroup_figure

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_subgroup_figure, subgroups_path=sm.input.subgroups,
      out={name: getattr(sm.output, name) for name in sm.params.figures})
