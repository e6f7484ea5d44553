"""Snakemake script of the fit rule: cross-validate and refit one candidate."""

from oddsmith.runner import stage
from oddsmith.stages.fit import run_fit

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_fit, design_path=sm.input.design, assignment_path=sm.input.assignment, recipe_path=sm.input.recipe,
      candidate=sm.params.candidate, id_column=sm.params.data["id_column"], target=sm.params.data["target"],
      seed=sm.params.seed, inference=sm.params.inference,
      out_model=sm.output.model, out_cv=sm.output.cv, out_oof=sm.output.oof)
