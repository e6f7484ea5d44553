"""The manifest stage: join every job's stamp with the files of the run folder and write
``results/<run>/manifest.json``."""

from __future__ import annotations

import logging

from oddsmith.evidence.filehash import CACHE_PATH
from oddsmith.evidence.manifest import build_manifest
from oddsmith.io import write_json

log = logging.getLogger("oddsmith.manifest")


def run_manifest(*, run: str, run_dir: str, stamps: list[str], raw_inputs: dict[str, str], config: dict,
                 build: dict, card_rule: dict | None, out_manifest: str, env: dict | None = None) -> dict:
    """Build the manifest of ``run_dir`` from its stamps and write it (canonical JSON).

    ``env`` is the environment the rule's params recorded (see :func:`~oddsmith.evidence.manifest.environment`).
    """
    manifest = build_manifest(run=run, run_dir=run_dir, stamps=stamps, raw_inputs=raw_inputs, config=config,
                              build=build, card_rule=card_rule, hash_cache=CACHE_PATH, env=env)
    log.info("manifest of %s: %d files, %d raw inputs, git %s, SOURCE_DATE_EPOCH %s", run, len(manifest["files"]),
             len(manifest["raw_inputs"]), manifest["git"], manifest["source_date_epoch"])
    write_json(out_manifest, manifest)
    return manifest
