"""Cluster readiness: the demo built through a real executor plugin that submits every job as
its own process (config/profiles/process-per-job, snakemake-executor-plugin-cluster-generic)
gives the same bytes as a local build; declared resources reach the jobs and their BLAS
pools; the profiles are valid Snakemake profiles."""

from __future__ import annotations

import collections
import json
import re
import types
from pathlib import Path

import pytest
import yaml

from oddsmith.runner import RULE_MIN_THREADS

from conftest import DEMO_CONFIG, ROOT, copy_project, run_snakemake

pytestmark = pytest.mark.e2e
RUN = "results/lease_demo"
QUEUE = ".snakemake/process-per-job"


def _tree(base: Path) -> dict[str, bytes]:
    return {str(p.relative_to(base)): p.read_bytes() for p in sorted(base.rglob("*")) if p.is_file()}


def _submissions(project: Path) -> list[dict]:
    records = []
    for job in sorted((project / QUEUE).glob("*.job")):
        fields = dict(item.split("=", 1) for item in job.read_text().split())
        job_id = job.name[: -len(".job")]
        fields["id"] = job_id
        fields["pid"] = (project / QUEUE / f"{job_id}.pid").read_text().strip()
        fields["exit"] = (project / QUEUE / f"{job_id}.exit").read_text().strip()
        records.append(fields)
    return records


@pytest.fixture(scope="module")
def cluster_build(tmp_path_factory) -> Path:
    project = copy_project(tmp_path_factory.mktemp("cluster") / "project")
    run_snakemake(project, "--profile", "config/profiles/process-per-job")
    return project


def test_every_job_was_submitted_as_its_own_process(cluster_build):
    submissions = _submissions(cluster_build)
    assert submissions, "the submit script was never called"
    assert all(s["exit"] == "0" for s in submissions), submissions
    assert len({s["pid"] for s in submissions}) == len(submissions), "one process per job"
    # Every job that leaves a provenance stamp ran through the executor, once.
    stamped = collections.Counter(
        json.loads(p.read_text())["rule"] for p in (cluster_build / RUN / "provenance").glob("*.json"))
    submitted = collections.Counter(s["rule"] for s in submissions)
    for rule, count in stamped.items():
        assert submitted[rule] == count, (rule, submitted, stamped)
    assert submitted["fit"] >= 2, "one job per candidate"


def test_cluster_build_matches_a_local_build_byte_for_byte(cluster_build, demo_build):
    cluster, local = _tree(cluster_build / "results"), _tree(demo_build / "results")
    assert sorted(cluster) == sorted(local)
    differing = [path for path in local if cluster[path] != local[path]]
    assert not differing, f"bytes differ between the cluster-style and the local build: {differing}"


def test_artifacts_hold_no_absolute_path_of_the_project(cluster_build, demo_build):
    for project in (cluster_build, demo_build):
        marker = str(project.resolve()).encode()
        holding = [path for path, data in _tree(project / "results").items() if marker in data]
        assert not holding, f"artifacts name the project folder {project}: {holding}"


def test_rules_declare_resources_from_the_config(project):
    config = yaml.safe_load((project / DEMO_CONFIG).read_text())
    config["resources"] = {"threads": 2, "mem_mb": 2345, "runtime": 17}
    (project / "config/custom.yaml").write_text(yaml.safe_dump(config, sort_keys=False))
    result = run_snakemake(project, "--dry-run", config="config/custom.yaml")
    jobs = _dry_run_jobs(result.stdout + result.stderr)
    assert jobs, "the dry run listed no jobs"
    for rule, threads, resources in jobs:
        if rule == "all":
            continue
        assert resources.get("mem_mb") == "2345" and resources.get("runtime") == "17", (rule, resources)
        assert threads == 2, (rule, threads)


def test_set_threads_and_set_resources_override_one_rule(project):
    result = run_snakemake(project, "--dry-run", "--set-threads", "fit=2",
                           "--set-resources", "fit:mem_mb=1234")
    jobs = _dry_run_jobs(result.stdout + result.stderr)
    fits = [(t, r) for rule, t, r in jobs if rule == "fit"]
    assert fits and all(t == 2 and r.get("mem_mb") == "1234" for t, r in fits), fits
    others = [(rule, t, r) for rule, t, r in jobs if rule not in ("fit", "all")]
    assert others and all(t == RULE_MIN_THREADS.get(rule, 1) and r.get("mem_mb") != "1234"
                          for rule, t, r in others), others
    assert {rule for rule, t, _ in others if t == 2} == set(RULE_MIN_THREADS), "features and evaluate ask for 2"


def test_a_rule_with_its_own_workers_keeps_blas_at_the_config_threads(tmp_path):
    import numpy  # noqa: F401 (loads the BLAS whose threads are checked, also when this file runs alone)
    from threadpoolctl import threadpool_info

    from oddsmith.runner import stage

    job = types.SimpleNamespace(log=[str(tmp_path / "job.log")], threads=2, rule="evaluate", output=_NoOutputs())
    import sys

    saved = sys.stderr
    try:
        seen = stage(job, lambda: [pool["num_threads"] for pool in threadpool_info()], blas_threads=1)
    finally:
        sys.stderr = saved
    assert seen and all(n == 1 for n in seen), seen


@pytest.mark.parametrize("threads", [1, 2])
def test_blas_threads_follow_the_rule_threads(tmp_path, threads):
    import numpy  # noqa: F401 (loads the BLAS whose threads are checked, also when this file runs alone)
    from threadpoolctl import threadpool_info, threadpool_limits

    from oddsmith.runner import stage

    with threadpool_limits(limits=None):
        available = min(pool["num_threads"] for pool in threadpool_info())
    job = types.SimpleNamespace(log=[str(tmp_path / "job.log")], threads=threads, rule="fit", output=_NoOutputs())
    import sys

    saved = sys.stderr
    try:
        seen = stage(job, lambda: [pool["num_threads"] for pool in threadpool_info()])
    finally:
        sys.stderr = saved
    assert seen and all(n == min(threads, available) for n in seen), (threads, available, seen)


class _NoOutputs(list):
    def keys(self):
        return []


def _dry_run_jobs(text: str) -> list[tuple[str, int, dict]]:
    """(rule, threads, resources) of each job a dry run prints."""
    jobs = []
    for block in re.split(r"\n(?=\[|(?:local)?rule \w+:)", text):
        head = re.search(r"^(?:local)?rule (\w+):", block, flags=re.M)
        if not head:
            continue
        threads = re.search(r"^\s+threads: (\d+)", block, flags=re.M)
        resources = re.search(r"^\s+resources: (.*)$", block, flags=re.M)
        pairs = dict(item.split("=", 1) for item in resources.group(1).split(", ")) if resources else {}
        jobs.append((head.group(1), int(threads.group(1)) if threads else 1, pairs))
    return jobs


def test_profiles_are_valid_snakemake_profiles():
    profiles = ROOT / "config" / "profiles"
    assert yaml.safe_load((profiles / "slurm" / "config.yaml").read_text())["executor"] == "slurm"
    local = yaml.safe_load((profiles / "local" / "config.yaml").read_text())
    assert "executor" not in local
    for script in ("submit.sh", "status.sh", "cancel.sh"):
        assert (profiles / "process-per-job" / script).stat().st_mode & 0o111, f"{script} is not executable"
