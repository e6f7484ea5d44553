"""Snakemake script of the card rule: render the model card from the rule's declared inputs."""

from oddsmith.reporting.card_loader import ARTIFACTS
from oddsmith.runner import stage
from oddsmith.stages.card import run_card

sm = snakemake  # noqa: F821 (provided by Snakemake)
inputs = {key: getattr(sm.input, key) for key in ARTIFACTS} | {
    "models": dict(zip(sm.params.candidates, sm.input.models)),
    "figures": dict(zip(sm.params.figures, sm.input.figures)),
    "challenger": next(iter(sm.input.challenger), None), "final": next(iter(sm.input.final), None)}
stage(sm, run_card, inputs=inputs, out_html=sm.output.html, out_pdf=sm.output.pdf, out_sha256=sm.output.sha256)
