"""Snakemake script of the evaluate rule: the single look at the test part (no cut-off)."""

from oddsmith.runner import stage
from oddsmith.stages.evaluate import run_evaluate

sm = snakemake  # noqa: F821 (provided by Snakemake)
# The job's threads share the bootstrap's replicates; BLAS keeps the config's threads.
stage(sm, run_evaluate, blas_threads=min(sm.params.blas_threads, sm.threads), workers=sm.threads,
      data_path=sm.input.data, assignment_path=sm.input.assignment, recipe_path=sm.input.recipe,
      selected_path=sm.input.selected, model_paths=dict(zip(sm.params.candidates, sm.input.models)),
      data=sm.params.data, fairness=sm.params.fairness, feature_names=sm.params.feature_names,
      evaluation=sm.params.evaluation, split_method=sm.params.split_method, out_scores=sm.output.scores,
      out_probability_metrics=sm.output.probability_metrics,
      oof_paths=dict(zip(sm.params.candidates, sm.input.oof)) if sm.input.oof else None,
      cross_validation=sm.params.get("cross_validation"))
