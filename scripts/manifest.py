"""Snakemake script of the manifest rule: hashes and provenance of every artifact of the run."""

import os

from oddsmith.runner import stage
from oddsmith.stages.manifest import run_manifest

sm = snakemake  # noqa: F821 (provided by Snakemake)
raw_inputs = {sm.input.data: "data", sm.input.contract: "contract"} | {p: "config" for p in sm.input.configs} \
    | {p: "scoring batch" for p in sm.input.batches}
stage(sm, run_manifest, run=sm.wildcards.run, run_dir=os.path.dirname(sm.output.manifest), stamps=list(sm.input.stamps),
      raw_inputs=raw_inputs, config=sm.params.config,
      build=sm.params.build, card_rule=sm.params.card_rule, env=sm.params.environment,
      out_manifest=sm.output.manifest)
