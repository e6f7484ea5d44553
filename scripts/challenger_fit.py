"""Snakemake script of the challenger_fit rule: gradient-boosted trees on the shared folds."""

from oddsmith.stages.challenger import run_challenger_fit
from oddsmith.runner import stage

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_challenger_fit, design_path=sm.input.design, assignment_path=sm.input.assignment,
      recipe_path=sm.input.recipe, id_column=sm.params.data["id_column"], target=sm.params.data["target"],
      settings=sm.params.challenger, threads=sm.threads, out_folds=sm.output.folds, out_oof=sm.output.oof)
