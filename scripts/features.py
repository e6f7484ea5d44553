"""Snakemake script of the features rule: learn the recipe on training rows, diagnose it."""

from oddsmith.runner import stage
from oddsmith.stages.features import run_features

sm = snakemake  # noqa: F821 (provided by Snakemake)
# The job's threads share the leakage screen's features; BLAS keeps the config's threads.
stage(sm, run_features, blas_threads=min(sm.params.blas_threads, sm.threads), workers=sm.threads, data_path=sm.input.data, assignment_path=sm.input.assignment,
      features=sm.params.features, interactions=sm.params.interactions, target=sm.params.target,
      id_column=sm.params.id_column, diagnostics=sm.params.diagnostics, out_recipe=sm.output.recipe,
      out_diagnostics=sm.output.diagnostics, out_design=sm.output.design,
      cluster_column=getattr(sm.params, "cluster_column", None))
