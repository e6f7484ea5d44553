"""Snakemake script of the card rule: render the model card from the run's folder."""

from oddsmith.runner import stage
from oddsmith.stages.card import run_card

sm = snakemake  # noqa: F821 (provided by Snakemake)
stage(sm, run_card, manifest_path=sm.input.manifest, out_html=sm.output.html, out_pdf=sm.output.pdf,
      out_sha256=sm.output.sha256)
