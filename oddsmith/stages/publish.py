"""The publish stage: copy the finished staging build into ``results/<run>`` once it verifies
(see :mod:`oddsmith.evidence.publish`) and record what was published."""

from __future__ import annotations

import logging

from oddsmith.evidence.publish import publish
from oddsmith.io import write_text

log = logging.getLogger("oddsmith.publish")


def run_publish(*, run: str, out_marker: str) -> str:
    """Publish the run and write the message (with the card fingerprint) to ``out_marker``."""
    message = publish(run)
    log.info("%s", message)
    write_text(out_marker, message + "\n")
    return message
