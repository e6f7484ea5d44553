# Shared helpers: the checked configuration, the run name, code fingerprints, resources.
import os
import sys

from snakemake.io import get_wildcard_names, strip_wildcard_constraints
from snakemake.resources import Resources

from oddsmith import artifacts
from oddsmith.config import check_config, read_config_file
from oddsmith.errors import ConfigError
from oddsmith.evidence.filehash import CACHE_PATH, sha256_remembered
from oddsmith.evidence.manifest import build_info, environment, source_date_epoch
from oddsmith.evidence.publish import current_result_note
from oddsmith.runner import (
    RULE_MIN_THREADS,
    cancel_idle_timers,
    params_hash,
    script_fingerprint,
)

CHOOSE_CONFIG = """a build reads exactly one configuration file, complete on its own (the schema's
defaults fill in the keys it leaves out). Name it:
  oddsmith build config/demo.yaml                       the demo
  oddsmith build config/<yours>.yaml                    your own (`oddsmith init DATA.csv` drafts one)
or, with Snakemake directly: snakemake --cores 2 --configfile config/demo.yaml"""


def config_files():
    """The configuration files this build read, relative to the project (in load order)."""
    rel = [os.path.relpath(os.path.abspath(p)) for p in workflow.configfiles]
    return list(dict.fromkeys(rel))


if len(config_files()) != 1:
    given = ", ".join(config_files())
    found = (
        f"several configuration files given ({given})"
        if given
        else "no configuration file given"
    )
    sys.exit(f"oddsmith: {found}; {CHOOSE_CONFIG}")

try:
    # Snakemake has parsed the files already; reading them again with oddsmith's reader
    # refuses YAML aliases before anything walks the configuration (a few lines of nested
    # aliases stand for billions of values) and names the file, line and column.
    for _path in workflow.configfiles:
        read_config_file(os.path.relpath(_path))
    CONFIG = check_config(config, project_dir=".")
except ConfigError as exc:
    sys.exit(f"oddsmith: {exc}\n{current_result_note(config)}")

RUN = CONFIG["run"]
CANDIDATES = [c["name"] for c in CONFIG["candidates"]]
RES = CONFIG["resources"]


wildcard_constraints:
    run=RUN,
    candidate="|".join(CANDIDATES),


def candidate_settings(name):
    """Settings of one candidate (its config slice)."""
    return next(c for c in CONFIG["candidates"] if c["name"] == name)


# Slowest kinds first, so two cores are not left with one long fit running alone at the end
# (measured in bench/README.md).
FIT_PRIORITY = {"l1": 3, "elastic_net": 3, "l2": 2, "cloglog": 1}


def fit_priority(name):
    """Scheduling priority of a candidate's fit job (by kind; order only, no effect on results)."""
    return FIT_PRIORITY.get(candidate_settings(name)["kind"], 0)


def apply_job_resources():
    """Give every rule the threads, mem_mb and runtime of the config's `resources` section.

    Snakemake 9 has the threads and resources directives of each rule and per-invocation
    defaults (--default-resources, a profile's default-resources), but no per-workflow
    default that a config file can set; repeating the directives in every rule was the
    alternative. Called once after the includes. Precedence, as with the directives before
    (highest first): --set-threads / --set-resources (command line or profile) > the config's `resources`
    > --default-resources (which still supplies what the config does not name, e.g. a
    SLURM account). A job's threads also cap its BLAS/OpenMP threads (oddsmith.runner.stage).
    Rules in oddsmith.runner.RULE_MIN_THREADS ask for at least that many threads.
    """
    settings = workflow.resource_settings
    for rule_ in workflow.rules:
        given = Resources.from_mapping(settings.overwrite_resources.get(rule_.name, {}))
        rule_.resources.update(
            {k: RES[k] for k in ("mem_mb", "runtime") if k not in given.keys()}
        )
        if rule_.name not in settings.overwrite_threads:
            rule_.resources["_cores"] = max(
                RES["threads"], RULE_MIN_THREADS.get(rule_.name, 1)
            )


def code(*, script):
    """Code fingerprint (principle 1) of the job that runs `script`: the script, the package modules the script
    imports (transitively, read with ast) and the resource files those modules name in
    RESOURCE_FILES. Each file is read once per invocation."""
    return script_fingerprint(script)


# Build facts for the manifest, computed once per invocation.
_EPOCH, _EPOCH_SOURCE = source_date_epoch(workflow.basedir)
if _EPOCH_SOURCE.startswith("fallback"):
    print(
        f"oddsmith: SOURCE_DATE_EPOCH not set and no git history; dates use {_EPOCH_SOURCE}",
        file=sys.stderr,
    )
# Every job inherits the same reference time (fontTools and the card read it).
os.environ.setdefault("SOURCE_DATE_EPOCH", str(_EPOCH))
BUILD = build_info(workflow.basedir)
ENVIRONMENT = environment()


def stamps(run):
    """Stamp paths of every job of the run: one per rule with a ``stamp`` output, one per
    candidate for per-candidate rules (rules defined in any included file are found)."""
    paths = []
    for rule_ in sorted(workflow.rules, key=lambda r: r.name):
        pattern = rule_.output.get("stamp")
        if pattern is None:
            continue
        pattern = strip_wildcard_constraints(pattern)
        names = get_wildcard_names(pattern)
        if names == {"run"}:
            paths += expand(pattern, run=run)
        elif names == {"run", "candidate"}:
            paths += expand(pattern, run=run, candidate=CANDIDATES)
    return sorted(set(paths))


# Raw inputs (data file, contract) enter their rules by content: as ancient() inputs, so that
# a newer modification time alone reruns nothing, and with their SHA-256 in params, so that
# changed bytes rerun the rule whatever the clock says. Hashed once per change of a file's
# size or times (oddsmith.evidence.filehash); the manifest reads the same remembered hashes.
RAW_FILES = [CONFIG["data"]["path"], CONFIG["data"]["contract"]]
RAW_SHA256 = sha256_remembered(
    [p for p in RAW_FILES if os.path.isfile(p)], cache=CACHE_PATH
)


def raw_content():
    """Path → SHA-256 (None while missing) of the raw inputs, for the params of the rules that read them."""
    return {p: RAW_SHA256.get(p) for p in RAW_FILES}


def scoring_batches():
    """The later batch the score rule reads, when the config names one (a raw input)."""
    batch = (CONFIG.get("scoring") or {}).get("data")
    return [batch] if batch else []


def rule_fingerprint(name):
    """Params hash and code fingerprint of the named rule, or None when it is not defined.

    Lets the manifest record what will render the card, which writes no stamp of its own.
    """
    found = [r for r in workflow.rules if r.name == name]
    if not found:
        return None
    params = dict(found[0].params.items())
    return {"params_sha256": params_hash(params), "code_sha256": params.get("code")}


def artifact(name):
    """``work/{run}/<name>`` for a file registered in oddsmith.artifacts (raises otherwise)."""
    return f"work/{{run}}/{artifacts.template(name)}"


def per_candidate(name):
    """One path per candidate of a ``{candidate}`` artifact, keeping the ``{run}`` wildcard."""
    return expand(artifact(name), candidate=CANDIDATES, allow_missing=True)
