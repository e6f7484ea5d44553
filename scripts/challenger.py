"""Snakemake script of the challenger rule: gradient-boosted trees on the shared folds."""

from oddsmith.fitting.challenger import run_challenger
from oddsmith.runner import stage

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_challenger, design_path=sm.input.design, assignment_path=sm.input.assignment,
      recipe_path=sm.input.recipe, selected_path=sm.input.selected, cv_paths=dict(zip(sm.params.candidates, sm.input.cv)),
      id_column=sm.params.data["id_column"], target=sm.params.data["target"], settings=sm.params.challenger,
      threads=sm.threads, out_cv=sm.output.cv, out_oof=sm.output.oof)
