"""Snakemake script of the publish rule: replace results/<run> with the verified staging build."""

from oddsmith.runner import stage
from oddsmith.stages.publish import run_publish

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_publish, run=sm.wildcards.run, out_marker=sm.output.marker)
