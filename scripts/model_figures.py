"""Snakemake script of the model_figures rule: the card's plots that do not depend on the cut-off."""

from oddsmith.runner import stage
from oddsmith.stages.figures import run_model_figures

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_model_figures, probability_metrics_path=sm.input.probability_metrics,
      selected_path=sm.input.selected, model_paths=dict(zip(sm.params.candidates, sm.input.models)), recipe_path=sm.input.recipe,
      out={name: getattr(sm.output, name) for name in sm.params.figures})
