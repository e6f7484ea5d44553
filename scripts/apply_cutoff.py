"""Snakemake script of the apply_cutoff rule: the adopted cut-off applied to the test scores."""

from oddsmith.runner import stage
from oddsmith.stages.apply_cutoff import run_apply_cutoff

sm = snakemake  # noqa: F821 (provided by Snakemake)
# The job's threads (the config's; see oddsmith.runner.RULE_MIN_THREADS) share the subgroup bootstrap's replicates.
stage(sm, run_apply_cutoff, blas_threads=min(sm.params.blas_threads, sm.threads), workers=sm.threads, scores_path=sm.input.scores, probability_metrics_path=sm.input.probability_metrics,
      choice_path=sm.input.choice, out_cutoff_metrics=sm.output.cutoff_metrics, out_subgroups=sm.output.subgroups,
      out_predictions=sm.output.predictions)
