"""The demo built on a real one-node SLURM (cluster/slurm-local, Debian's slurm-wlm and munge)
through the sbatch profile (config/profiles/slurm-sbatch): every job is an ``sbatch``
submission with its rule's CPUs, memory and time limit, the results have the same bytes as a
local build and ``oddsmith verify`` accepts them; requests no node can hold fail with a message
instead of pending forever.

Needs root (slurmd starts jobs as their user) and the Debian packages; when they are missing
and apt-get can install them, the fixture installs them, otherwise every test here is skipped
with the reason (shown by ``-ra``). The daemons run on free local ports from a private folder
and are stopped by process id when the module ends, passed or failed.
"""

from __future__ import annotations

import collections
import os
import shutil
import socket
import subprocess
import time
from pathlib import Path

import pytest
import yaml

from oddsmith.runner import RULE_MIN_THREADS

from conftest import BIN, ROOT, copy_project, run_snakemake
from test_cluster import _tree

pytestmark = [pytest.mark.e2e, pytest.mark.slurm]
START = ROOT / "cluster" / "slurm-local" / "start.sh"
STOP = ROOT / "cluster" / "slurm-local" / "stop.sh"
PROFILE = "config/profiles/slurm-sbatch"
RECORDS = ".snakemake/slurm"
CONFIG = "config/demo.yaml"
# The folder whose files are compared with a local build's (the published results).
PUBLISHED = "results"
TOOLS = ("munged", "slurmctld", "slurmd", "sbatch", "scontrol", "squeue", "scancel")


def _missing_tools() -> list[str]:
    return [tool for tool in TOOLS if shutil.which(tool) is None]


def _install_packages() -> str:
    """Install slurm-wlm and munge with apt-get; return why that failed, or '' on success."""
    if shutil.which("apt-get") is None:
        return "apt-get is not available to install slurm-wlm and munge"
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    install = ["apt-get", "install", "-y", "-qq", "--no-install-recommends", "slurm-wlm", "munge"]
    result = subprocess.run(install, env=env, capture_output=True, text=True, timeout=600)
    if result.returncode != 0:  # the package lists may be missing or old
        subprocess.run(["apt-get", "update", "-qq"], env=env, capture_output=True, timeout=600)
        result = subprocess.run(install, env=env, capture_output=True, text=True, timeout=600)
    if _missing_tools():
        return f"apt-get install slurm-wlm munge failed: {result.stderr.strip()[-300:]}"
    return ""


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _daemon_pids(state: Path) -> dict[str, int]:
    return {p.stem: int(p.read_text()) for p in state.glob("*.pid") if p.stem in ("munged", "slurmctld", "slurmd")}


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


@pytest.fixture(scope="module")
def slurm(tmp_path_factory) -> dict:
    """Environment of a running one-node SLURM (SLURM_CONF and the folder of its state)."""
    if os.geteuid() != 0:
        pytest.skip("SLURM test skipped: starting slurmd needs root (this session runs as "
                    f"uid {os.geteuid()}); run as root with Debian's slurm-wlm and munge installed")
    if _missing_tools():
        reason = _install_packages()
        if reason:
            pytest.skip(f"SLURM test skipped: {', '.join(_missing_tools())} not found and {reason}")
    state = tmp_path_factory.mktemp("slurm") / "state"
    env = dict(os.environ, ODDSMITH_SLURM_DIR=str(state),
               ODDSMITH_SLURMCTLD_PORT=str(_free_port()), ODDSMITH_SLURMD_PORT=str(_free_port()))
    started = subprocess.run([str(START)], env=env, capture_output=True, text=True, timeout=120)
    try:
        assert started.returncode == 0, f"start.sh failed:\n{started.stdout}\n{started.stderr}"
        yield {"SLURM_CONF": str(state / "slurm.conf"), "ODDSMITH_SLURM_DIR": str(state)}
    finally:
        pids = _daemon_pids(state)
        stopped = subprocess.run([str(STOP)], env=env, capture_output=True, text=True, timeout=120)
        left = {name: pid for name, pid in pids.items() if _alive(pid)}
        for pid in left.values():  # stop.sh failed: end them here, still by process id
            os.kill(pid, 9)
        assert stopped.returncode == 0 and not left, f"daemons left running {left}:\n{stopped.stderr}"


def _scontrol_job(slurm: dict, job_id: str) -> dict[str, str]:
    text = subprocess.run(["scontrol", "show", "job", "-o", job_id], env=dict(os.environ, **slurm),
                          capture_output=True, text=True, check=True).stdout
    return dict(item.split("=", 1) for item in text.split() if "=" in item)


def _records(project: Path) -> list[dict]:
    records = []
    for job in sorted((project / RECORDS).glob("*.job")):
        fields = dict(item.split("=", 1) for item in job.read_text().split())
        fields["id"] = job.stem
        fields["exit"] = (project / RECORDS / f"{job.stem}.exit").read_text()
        records.append(fields)
    return records


def _expected_request(project: Path, rule: str) -> dict[str, int]:
    """What the rule asks for: the config's resources (defaults filled in; threads at least
    RULE_MIN_THREADS), then the profile's per-rule overrides."""
    from oddsmith.config import check_config

    res = check_config(yaml.safe_load((project / CONFIG).read_text()), project_dir=project)["resources"]
    profile = yaml.safe_load((project / PROFILE / "config.yaml").read_text())
    override = (profile.get("set-resources") or {}).get(rule, {})
    threads = (profile.get("set-threads") or {}).get(rule, max(res["threads"], RULE_MIN_THREADS.get(rule, 1)))
    return {"threads": threads, "mem_mb": override.get("mem_mb", res["mem_mb"]),
            "runtime": override.get("runtime", res["runtime"])}


def _planned_jobs(project: Path) -> collections.Counter:
    """Jobs per rule of a full build, from the job stats of a dry run (which writes nothing)."""
    text = run_snakemake(project, "--dry-run", "--forceall", "--quiet", "rules").stdout
    table = text.split("Job stats:", 1)[1].split("\n")[3:]
    counts = collections.Counter()
    for line in table:
        fields = line.split()
        if len(fields) != 2 or fields[0] == "total":
            break
        counts[fields[0]] = int(fields[1])
    return counts


@pytest.fixture(scope="module")
def slurm_build(slurm, tmp_path_factory) -> Path:
    project = copy_project(tmp_path_factory.mktemp("slurm-build") / "project")
    run_snakemake(project, "--profile", PROFILE, "--seconds-between-status-checks", "2", env=slurm)
    return project


def test_every_job_was_an_sbatch_submission_with_its_rule_request(slurm_build, slurm):
    records = _records(slurm_build)
    assert records, "submit.sh was never called"
    planned = _planned_jobs(slurm_build)
    planned.pop("all")  # the target rule runs no code and is never submitted
    planned.pop("publish")  # a localrule: it runs on the submitting machine
    submitted = collections.Counter(r["rule"] for r in records)
    assert submitted == planned, f"submitted {submitted}, planned {planned}"
    assert submitted["fit"] >= 2, "one job per candidate"
    for record in records:
        job = _scontrol_job(slurm, record["id"])
        want = _expected_request(slurm_build, record["rule"])
        assert job["JobName"] == f"oddsmith-{record['rule']}"
        assert (job["JobState"], job["ExitCode"]) == ("COMPLETED", "0:0"), (record, job["JobState"])
        assert record["exit"].split()[-1] == "exit=0", record
        # What SLURM granted is what the rule asked for (TimeLimit is H:MM:SS).
        assert job["NumCPUs"] == str(want["threads"]), (record, job["NumCPUs"])
        assert job["MinMemoryNode"] == f"{want['mem_mb']}M", (record, job["MinMemoryNode"])
        hours, minutes, _ = (int(part) for part in job["TimeLimit"].split(":"))
        assert hours * 60 + minutes == want["runtime"], (record, job["TimeLimit"])
        assert (slurm_build / RECORDS / f"{record['id']}.log").is_file()
    fit = _expected_request(slurm_build, "fit")
    other = _expected_request(slurm_build, "validate")
    assert fit["mem_mb"] != other["mem_mb"], "the profile's fit override is what shows requests are per rule"


def test_slurm_build_matches_a_local_build_byte_for_byte(slurm_build, demo_build):
    built, local = _tree(slurm_build / PUBLISHED), _tree(demo_build / PUBLISHED)
    assert sorted(built) == sorted(local)
    differing = [path for path in local if built[path] != local[path]]
    assert not differing, f"bytes differ between the SLURM and the local build: {differing}"


def test_oddsmith_verify_accepts_the_slurm_build(slurm_build):
    run = yaml.safe_load((slurm_build / CONFIG).read_text())["run"]
    result = subprocess.run([str(BIN / "oddsmith"), "verify", f"{PUBLISHED}/{run}"], cwd=slurm_build,
                            capture_output=True, text=True)
    assert result.returncode == 0, result.stdout + result.stderr


def _largest_node(slurm: dict) -> tuple[int, int]:
    text = subprocess.run(["scontrol", "show", "node", "-o"], env=dict(os.environ, **slurm),
                          capture_output=True, text=True, check=True).stdout
    node = dict(item.split("=", 1) for item in text.split() if "=" in item)
    return int(node["CPUTot"]), int(node["RealMemory"])


def test_a_request_larger_than_the_node_fails_before_submission(slurm, project):
    _, memory = _largest_node(slurm)
    result = run_snakemake(project, "--profile", PROFILE, "--set-resources", f"validate:mem_mb={memory + 1}",
                           env=slurm, check=False)
    assert result.returncode != 0
    said = result.stdout + result.stderr
    assert f"rule validate asks for 1 CPUs and {memory + 1} MB" in said, said[-3000:]
    assert f"{memory} MB (RealMemory)" in said and "pending forever" in said, said[-3000:]
    assert not list((project / RECORDS).glob("*.job")), "nothing may reach sbatch"
    assert not (project / PUBLISHED).exists(), "nothing may be written"


def _status(project: Path, slurm: dict, job_id: str) -> subprocess.CompletedProcess:
    return subprocess.run([str(ROOT / PROFILE / "status.sh"), job_id], cwd=project,
                          env=dict(os.environ, **slurm), capture_output=True, text=True, timeout=60)


def test_a_job_pending_on_more_cpus_than_any_node_is_cancelled_and_failed(slurm, tmp_path):
    # sbatch accepts a CPU request above every node (the job pends, reason PartitionConfig);
    # status.sh must end it rather than report it running forever.
    cpus, _ = _largest_node(slurm)
    job_id = subprocess.run(["sbatch", "--parsable", f"--cpus-per-task={cpus + 1}", "--mem=100",
                             "--job-name=oddsmith-too-wide", f"--output={tmp_path}/%j.log", "--wrap", "true"],
                            cwd=tmp_path, env=dict(os.environ, **slurm), capture_output=True, text=True,
                            check=True).stdout.strip()
    status = _status(tmp_path, slurm, job_id)
    assert status.stdout.strip() == "failed", (status.stdout, status.stderr)
    assert f"job {job_id} (oddsmith-too-wide) asks for {cpus + 1} CPUs" in status.stderr, status.stderr
    assert "(job cancelled)" in status.stderr
    assert _scontrol_job(slurm, job_id)["JobState"] == "CANCELLED"


def test_status_of_a_forgotten_job_comes_from_its_exit_record(slurm, tmp_path):
    records = tmp_path / RECORDS
    records.mkdir(parents=True)
    forgotten = "4000000"  # never submitted: SLURM answers "Invalid job id"
    (records / f"{forgotten}.job").write_text("rule=fit threads=1 mem_mb=10 runtime=1 jobscript=/a/job.sh\n")
    (records / f"{forgotten}.exit").write_text("jobscript=/a/job.sh exit=0\n")
    assert _status(tmp_path, slurm, forgotten).stdout.strip() == "success"
    (records / f"{forgotten}.exit").write_text("jobscript=/a/job.sh exit=1\n")
    assert _status(tmp_path, slurm, forgotten).stdout.strip() == "failed"
    # An exit record left by an earlier cluster's job of the same id does not count.
    (records / f"{forgotten}.exit").write_text("jobscript=/old/job.sh exit=0\n")
    stale = _status(tmp_path, slurm, forgotten)
    assert stale.stdout.strip() == "failed"
    assert f"job {forgotten} is no longer known to SLURM and left no exit record" in stale.stderr


def test_cancel_ends_a_running_job(slurm, tmp_path):
    script = tmp_path / "sleep.sh"
    script.write_text("#!/bin/sh\nsleep 300\n")
    env = dict(os.environ, **slurm)
    job_id = subprocess.run([str(ROOT / PROFILE / "submit.sh"), "sleeper", "1", "100", "5", str(script)],
                            cwd=tmp_path, env=env, capture_output=True, text=True, check=True).stdout.strip()
    assert _status(tmp_path, slurm, job_id).stdout.strip() == "running"
    subprocess.run([str(ROOT / PROFILE / "cancel.sh"), job_id], env=env, check=True)
    for _ in range(40):
        if _scontrol_job(slurm, job_id)["JobState"] == "CANCELLED":
            break
        time.sleep(0.25)
    status = _status(tmp_path, slurm, job_id)
    assert status.stdout.strip() == "failed" and "ended CANCELLED" in status.stderr, status.stderr
