# Shared helpers: the checked configuration, the run name, code fingerprints, resources.
import sys

from oddsmith.config import check_config
from oddsmith.errors import ConfigError
from oddsmith.runner import code_fingerprint

try:
    CONFIG = check_config(config, project_dir=".")
except ConfigError as exc:
    sys.exit(f"oddsmith: {exc}")

RUN = CONFIG["run"]
CANDIDATES = [c["name"] for c in CONFIG["candidates"]]
RES = CONFIG["resources"]


wildcard_constraints:
    run=RUN,
    candidate="|".join(CANDIDATES),


def candidate_settings(name):
    """Settings of one candidate (its config slice)."""
    return next(c for c in CONFIG["candidates"] if c["name"] == name)


def code(*modules, script):
    """Fingerprint of the package modules a rule runs plus its script (principle 1)."""
    base = ("runner", "io", "errors")
    return code_fingerprint(base + modules, extra_files=[script])
