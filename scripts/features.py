"""Snakemake script of the features rule: learn the recipe on training rows, diagnose it."""

from oddsmith.runner import stage
from oddsmith.stages.features import run_features

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_features, data_path=sm.input.data, assignment_path=sm.input.assignment,
      features=sm.params.features, interactions=sm.params.interactions, target=sm.params.target,
      id_column=sm.params.id_column, diagnostics=sm.params.diagnostics, out_recipe=sm.output.recipe,
      out_diagnostics=sm.output.diagnostics, out_design=sm.output.design,
      cluster_column=getattr(sm.params, "cluster_column", None))
