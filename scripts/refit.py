"""Snakemake script of the refit rule: the selected candidate fitted on all rows (the deliverable)."""

from oddsmith.runner import stage
from oddsmith.stages.refit import run_refit

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_refit, data_path=sm.input.data, recipe_path=sm.input.recipe, selected_path=sm.input.selected,
      model_paths=dict(zip(sm.params.candidates, sm.input.models)),
      probability_metrics_path=sm.input.probability_metrics, target=sm.params.target, seed=sm.params.seed,
      inference=sm.params.inference, out_model=sm.output.model)
