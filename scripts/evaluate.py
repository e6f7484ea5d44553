"""Snakemake script of the evaluate rule: the single look at the test part."""

from oddsmith.runner import stage
from oddsmith.stages.evaluate import run_evaluate

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_evaluate, data_path=sm.input.data, assignment_path=sm.input.assignment, recipe_path=sm.input.recipe,
      selected_path=sm.input.selected, model_paths=dict(zip(sm.params.candidates, sm.input.models)),
      choice_path=sm.input.choice, data=sm.params.data, fairness=sm.params.fairness,
      feature_names=sm.params.feature_names, evaluation=sm.params.evaluation, split_method=sm.params.split_method,
      out_metrics=sm.output.metrics, out_subgroups=sm.output.subgroups, out_predictions=sm.output.predictions)
