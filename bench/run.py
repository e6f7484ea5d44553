"""Measure an oddsmith build against the plain serial script, and write bench/results.md.

For each N (default 100,000 then 1,000,000 rows) in ``bench/work/n<N>/`` (a copy of the
project's workflow files plus generated data and config):

1. full build from scratch (``snakemake --cores 2 --configfile config/bench.yaml``), wall time, the jobs that ran;
2. no-op rebuild (three runs, median reported);
3. cost-only rebuild: ``costs.false_negative`` changed, wall time and the jobs that re-ran;
4. the serial scripts, each once with one BLAS thread and once with the BLAS default (both
   cores), the faster of the two being the yardstick: bench/serial.py (the same solvers as
   the pipeline) and bench/serial_analyst.py (statsmodels and scikit-learn's own solvers);
   skipped, with the reason in results.md, above ``--serial-max-rows`` (default 1,000,000:
   the serial script held 7.8 GB at 1,000,000 rows, so it cannot run at 10,000,000 on 24 GB);
5. peak memory per job (``max_rss`` of Snakemake's ``benchmark:`` files) against the
   in-memory size of the validated data, and the resident size of a process that has only
   imported what a fit job imports.

Builds and serial runs never overlap. Before each size of 1,000,000 rows or more the runner
waits (up to ``--load-wait`` seconds, default 300, checking every 60 s) for the 1-minute load
to fall to 1.5 or below, and records the load either way, and the 1-minute load before and
after every step. Measurements are kept in ``bench/work/n<N>/
measure.json``; ``--report-only`` rewrites results.md from them.

Usage::

    .venv/bin/python bench/run.py                 # 100k then 1M
    .venv/bin/python bench/run.py --rows 100000   # one size
    .venv/bin/python bench/run.py --rows 1000000 10000000   # 10M: about an hour; no serial scripts
    .venv/bin/python bench/run.py --reruns --rows 100000 1000000   # rebuild costs only (results.md, Reruns)
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import platform
import re
import shutil
import subprocess
import sys
import threading
import time
from pathlib import Path

import yaml

BENCH = Path(__file__).resolve().parent
ROOT = BENCH.parent
WORK = BENCH / "work"
BIN = Path(sys.executable).parent
# The package is copied too and put first on PYTHONPATH, so that the rules, scripts and
# package a build runs all come from one moment of a tree others may be editing.
PROJECT_PARTS = ("Snakefile", "rules", "scripts", "schemas", "reports", "oddsmith")
LOAD_LIMIT, LOAD_WAIT_S = 1.5, 60
#: The serial scripts to time, by the key of their record in measure.json.
SERIAL_SCRIPTS = {"serial": "serial.py", "analyst": "serial_analyst.py"}
SERIAL_TITLES = {"serial": "serial script (pipeline's solvers)", "analyst": "analyst's script (statsmodels, scikit-learn solvers)"}
# bench/work/ sits inside the project's git repository; the manifest records the commit, so
# another developer's commit during a measurement would re-run manifest and card. Git must
# not look above the work folder.
ENV = {"SOURCE_DATE_EPOCH": "1767225600", "PYTHONHASHSEED": "0", "GIT_CEILING_DIRECTORIES": str(WORK)}
# What a fit job imports before it reads any data (the per-job fixed cost in memory).
IMPORTS = ("import snakemake.script, pandas, pyarrow.parquet, sklearn.linear_model, "
           "statsmodels.api, oddsmith.stages.fit, oddsmith.runner")

# The runner itself imports nothing heavy and never holds the data: a child's ru_maxrss
# includes the peak of the memory it shared with its parent before exec, so a large runner
# would inflate every peak it measures. Data generation runs in a child process too.


# ---------------------------------------------------------------------------------------
# Running things
# ---------------------------------------------------------------------------------------


#: Seconds between two readings of the 1-minute load while a command runs.
LOAD_SAMPLE_S = 10


def timed(cmd: list[str], *, cwd: Path, env: dict | None = None) -> dict:
    """Run ``cmd``; return wall seconds, CPU seconds and peak RSS of the process tree (MB),
    output, code, and the 1-minute load read every ``LOAD_SAMPLE_S`` s while it ran (mean, max)."""
    full_env = dict(os.environ) | ENV | (env or {})
    full_env["PYTHONPATH"] = str(cwd if (cwd / "oddsmith").is_dir() else ROOT)
    started = time.perf_counter()
    proc = subprocess.Popen(cmd, cwd=cwd, env=full_env, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True)
    readings, done = [load()], threading.Event()

    def sample():
        while not done.wait(LOAD_SAMPLE_S):
            readings.append(load())
    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    output = proc.stdout.read()
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - started
    done.set()
    sampler.join()
    proc.returncode = os.waitstatus_to_exitcode(status)
    return {"seconds": wall, "cpu_seconds": usage.ru_utime + usage.ru_stime,
            "max_rss_mb": usage.ru_maxrss / 1024, "output": output, "returncode": proc.returncode,
            "load_during": [sum(readings) / len(readings), max(readings)]}


#: The configuration bench/generate.py writes into each measured project.
BENCH_CONFIG = "config/bench.yaml"


def snakemake(work: Path, *, check: bool = True) -> dict:
    result = timed([str(BIN / "snakemake"), "--cores", "2", "--nocolor", "--configfile", BENCH_CONFIG], cwd=work)
    if check and result["returncode"] != 0:
        raise SystemExit(f"build failed in {work}:\n{result['output'][-5000:]}")
    result["jobs"] = re.findall(r"Finished jobid: \d+ \(Rule: (\w+)\)", result["output"])
    return result


def load() -> float:
    return os.getloadavg()[0]


def wait_for_quiet_machine(log, *, wait_max_s: int) -> dict:
    waited, first = 0, load()
    while load() > LOAD_LIMIT and waited < wait_max_s:
        log(f"1-minute load {load():.2f} > {LOAD_LIMIT}; waiting {LOAD_WAIT_S} s")
        time.sleep(LOAD_WAIT_S)
        waited += LOAD_WAIT_S
    return {"load_first_check": first, "waited_s": waited, "load_at_start": load()}


# ---------------------------------------------------------------------------------------
# One size
# ---------------------------------------------------------------------------------------


def prepare(work: Path, rows: int) -> dict:
    """A fresh project copy with generated data and config (not timed)."""
    if work.exists():
        shutil.rmtree(work)
    work.mkdir(parents=True)
    for part in PROJECT_PARTS:
        src = ROOT / part
        if src.is_dir():
            shutil.copytree(src, work / part, ignore=shutil.ignore_patterns("__pycache__"))
        elif src.exists():
            shutil.copy2(src, work / part)
    started = time.perf_counter()
    subprocess.run([sys.executable, str(BENCH / "generate.py"), "--rows", str(rows), "--out", str(work)],
                   check=True, capture_output=True)
    return {"generate_seconds": time.perf_counter() - started,
            "csv_mb": (work / "data" / "portfolio.csv").stat().st_size / 2**20}


def _number(text: str) -> float | None:
    return float(text) if text not in ("", "NA", None) else None


def job_records(work: Path, run: str) -> list[dict]:
    """One record per job from Snakemake's benchmark files (wall s, max_rss MB, CPU s)."""
    records = []
    base = work / "benchmarks" / run
    for path in sorted(base.rglob("*.tsv")):
        with path.open() as handle:
            row = next(csv.DictReader(handle, delimiter="\t"))
        records.append({"job": str(path.relative_to(base).with_suffix("")), "seconds": float(row["s"]),
                        "max_rss_mb": _number(row["max_rss"]), "cpu_seconds": _number(row.get("cpu_time"))})
    return records


def data_in_memory_mb(work: Path, run: str) -> float:
    # In a child process: the runner must stay small, because a child's ru_maxrss counts
    # the pages it shares with its parent between fork and exec.
    code = ("import pandas, sys; f = pandas.read_parquet(sys.argv[1]); "
            "print(f.memory_usage(deep=True).sum() / 2**20)")
    path = work / "results" / run / "validated" / "data.parquet"
    return float(subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True, text=True,
                                check=True).stdout)


def import_baseline_mb(work: Path) -> float:
    result = timed([sys.executable, "-c", IMPORTS], cwd=work)
    return result["max_rss_mb"]


def change_cost(work: Path) -> str:
    """Raise costs.false_negative by 10%; return the original config text."""
    path = work / BENCH_CONFIG
    original = path.read_text()
    config = yaml.safe_load(original)
    config["costs"]["false_negative"] *= 1.1
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    return original


#: Rebuilds after a change of costs measured per size (their median is reported).
COST_SAMPLES = 3

#: The jobs a change of costs alone may rerun (their benchmark files give the per-job times).
COST_JOBS = ("threshold", "apply_cutoff", "figures", "subgroup_figure", "score", "manifest", "card", "publish")


def measure_reruns(rows: int, log, *, wait_max_s: int) -> dict:
    """What building again costs after a touch of the data file (same bytes) and after two
    changes of ``costs.false_negative``, against a full build; kept in ``reruns.json``."""
    work = WORK / f"n{rows}"
    run = f"bench_{rows}"
    record = {"rows": rows, "run": run} | prepare(work, rows)
    record["machine_load"] = wait_for_quiet_machine(log, wait_max_s=wait_max_s) if rows >= 1_000_000 else {
        "load_at_start": load(), "waited_s": 0}
    log(f"[{rows}] full build (load {load():.2f})")
    full = snakemake(work)
    record["full"] = {"seconds": full["seconds"], "cpu_seconds": full["cpu_seconds"], "load_after": load()}
    record["noop"] = sorted(snakemake(work)["seconds"] for _ in range(3))
    os.utime(work / "data" / "portfolio.csv")  # touch: a newer modification time, the same bytes
    touched = [snakemake(work) for _ in range(2)]  # the first hashes the file again, the second need not
    record["touched"] = [{"seconds": t["seconds"], "jobs": t["jobs"]} for t in touched]
    record["cost_only"] = []
    for _ in range(2):
        change_cost(work)
        cost = snakemake(work)
        times = {j["job"]: j["seconds"] for j in job_records(work, run) if j["job"] in COST_JOBS}
        record["cost_only"].append({"seconds": cost["seconds"], "cpu_seconds": cost["cpu_seconds"],
                                    "jobs": cost["jobs"], "job_seconds": times, "load_after": load()})
        log(f"[{rows}] cost-only {cost['seconds']:.1f} s: {', '.join(cost['jobs'])}")
    (work / "reruns.json").write_text(json.dumps(record, indent=1))
    return record


def reruns_report(records: list[dict]) -> str:
    """The results.md section of :func:`measure_reruns`."""
    lines = ["| rows | full build s | no-op s | touched data s (jobs) | cost-only s (share of full) | "
             "cost-only jobs, s each | load at start / after |", "|---:|---:|---:|---:|---:|---|---:|"]
    for r in records:
        cost = min(r["cost_only"], key=lambda c: c["seconds"])
        jobs = ", ".join(f"{k} {v:.1f}" for k, v in sorted(cost["job_seconds"].items(), key=lambda kv: -kv[1]))
        lines.append(f"| {r['rows']:,} | {_fmt(r['full']['seconds'])} | {_fmt(r['noop'][1], 2)} | "
                     f"{' / '.join(_fmt(t['seconds'], 2) for t in r['touched'])} "
                     f"({sum(len(t['jobs']) for t in r['touched'])}) | {_fmt(cost['seconds'])} "
                     f"({100 * cost['seconds'] / r['full']['seconds']:.1f}%) | {jobs} | "
                     f"{r['machine_load']['load_at_start']:.2f} / {cost['load_after']:.2f} |")
    return "\n".join(lines) + "\n"


def outcome(work: Path, run: str) -> dict:
    """What the build decided: the selected candidate, the adopted cut-off, the test AUC."""
    base = work / "results" / run
    selected = json.loads((base / "comparison" / "selected.json").read_text())
    choice = json.loads((base / "threshold" / "choice.json").read_text())
    metrics = json.loads((base / "evaluation" / "probability_metrics.json").read_text())
    return {"selected": selected["candidate"], "cutoff": choice["adopted_cutoff"], "auc": metrics["overall"]["auc"]}


def run_serial(work: Path, rows: int, key: str, log, loads: dict) -> dict:
    """One serial script, with one BLAS thread and with the BLAS default."""
    runs = {}
    for label, env in (("blas_1", {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}), ("blas_default", {})):
        before = load()
        log(f"[{rows}] {key} script, {label} (load {before:.2f})")
        out = work / f"{key}_{label}.json"
        result = timed([sys.executable, str(BENCH / SERIAL_SCRIPTS[key]), "--project", str(work),
                        "--out", str(out)], cwd=work, env=env)
        if result["returncode"] != 0:
            raise SystemExit(f"{key} script failed:\n{result['output'][-5000:]}")
        summary = json.loads(out.read_text())
        loads[f"{key}_{label}"] = [before, load()]
        runs[label] = {"seconds": result["seconds"], "cpu_seconds": result["cpu_seconds"],
                       "max_rss_mb": result["max_rss_mb"], "seconds_by_step": summary.get("seconds_by_step"),
                       "selected": summary.get("selected"), "cutoff": summary.get("cutoff"),
                       "auc": summary.get("test", {}).get("auc"), "load_after": load(),
                       "load_during": result["load_during"]}
        log(f"[{rows}] {key} {label}: {result['seconds']:.1f} s")
    return runs


def _commit() -> str | None:
    """The checkout's commit, with ``+changes`` when its tracked files differ from it."""
    try:
        head = subprocess.run(["git", "rev-parse", "--short=12", "HEAD"], cwd=ROOT, capture_output=True, text=True,
                              check=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"], cwd=ROOT,
                               capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return None
    return head + ("+changes" if dirty else "")


def measure(rows: int, log, *, serial_max_rows: int, wait_max_s: int) -> dict:
    work = WORK / f"n{rows}"
    run = f"bench_{rows}"
    record = {"rows": rows, "run": run, "started": time.strftime("%Y-%m-%d %H:%M"), "commit": _commit()}
    log(f"[{rows}] preparing {work}")
    record |= prepare(work, rows)
    record["machine_load"] = wait_for_quiet_machine(log, wait_max_s=wait_max_s) if rows >= 1_000_000 else {
        "load_at_start": load(), "waited_s": 0}
    loads = record["loads"] = {}  # step: [1-minute load before, after]
    log(f"[{rows}] full build (load {load():.2f})")
    before = load()
    full = snakemake(work, check=False)
    loads["full"] = [before, load()]
    record["load_during"] = {"full": full["load_during"]}
    record["full"] = {"seconds": full["seconds"], "cpu_seconds": full["cpu_seconds"], "jobs": full["jobs"],
                      "load_after": load()}
    record["job_records"] = job_records(work, run)
    if full["returncode"] != 0:
        # A failed build is a result too: where it stopped, after how long, with what memory.
        record["full"]["failed"] = full["output"][-4000:]
        record["full"]["max_rss_mb"] = full["max_rss_mb"]
        log(f"[{rows}] full build FAILED after {full['seconds']:.1f} s:\n{full['output'][-2000:]}")
        (work / "measure.json").write_text(json.dumps(record, indent=1))
        return record
    record["outcome"] = outcome(work, run)
    log(f"[{rows}] full build {full['seconds']:.1f} s (CPU {full['cpu_seconds']:.1f} s); no-op rebuilds")
    before = load()
    noop = [snakemake(work) for _ in range(3)]
    loads["noop"] = [before, load()]
    record["noop"] = {"seconds": sorted(r["seconds"] for r in noop), "jobs": [r["jobs"] for r in noop],
                      "cpu_seconds": sorted(r["cpu_seconds"] for r in noop)}
    log(f"[{rows}] no-op {record['noop']['seconds']}; cost-only rebuild")
    original = change_cost(work)
    before = load()
    # Three changes of costs in a row (each raises false_negative by 10% again): one rebuild
    # varies by 1-2 s from run to run, as much as the target's margin; the median is reported.
    costs = []
    for sample in range(COST_SAMPLES):
        if sample:
            change_cost(work)
        costs.append(snakemake(work))
    loads["cost_only"] = [before, load()]
    cost = sorted(costs, key=lambda c: c["seconds"])[len(costs) // 2]
    record["load_during"]["cost_only"] = cost["load_during"]
    record["cost_only"] = {"seconds": cost["seconds"], "cpu_seconds": cost["cpu_seconds"], "jobs": cost["jobs"],
                           "samples": [c["seconds"] for c in costs]}
    (work / BENCH_CONFIG).write_text(original)
    snakemake(work)  # back to the measured configuration (not timed)
    record["data_in_memory_mb"] = data_in_memory_mb(work, run)
    record["import_baseline_mb"] = import_baseline_mb(work)
    # Saved now: a size whose serial scripts fail still has its build measured.
    (work / "measure.json").write_text(json.dumps(record, indent=1))
    if rows > serial_max_rows:
        record["serial_skipped"] = (
            f"serial scripts not run: {rows:,} rows is above --serial-max-rows {serial_max_rows:,} (the serial "
            f"script, holding every fold's data in one process, peaked at 7.8 GB at 1,000,000 rows, so about "
            f"10 × that at {rows:,} rows, more than the machine's memory)")
        log(f"[{rows}] {record['serial_skipped']}")
    else:
        for key in SERIAL_SCRIPTS:
            record[key] = run_serial(work, rows, key, log, loads)
            (work / "measure.json").write_text(json.dumps(record, indent=1))
    (work / "measure.json").write_text(json.dumps(record, indent=1))
    return record


# ---------------------------------------------------------------------------------------
# Report
# ---------------------------------------------------------------------------------------


def machine() -> dict:
    lscpu = subprocess.run(["lscpu"], capture_output=True, text=True).stdout.splitlines()[:10]
    meminfo = Path("/proc/meminfo").read_text().splitlines()[0]
    versions = {}
    for name in ("snakemake", "numpy", "scipy", "pandas", "scikit-learn", "statsmodels", "pyarrow"):
        from importlib.metadata import version

        versions[name] = version(name)
    return {"nproc": os.cpu_count(), "lscpu": lscpu, "memory": meminfo, "python": platform.python_version(),
            "platform": platform.platform(), "versions": versions}


def _fmt(x, digits=1):
    return "—" if x is None else f"{x:,.{digits}f}"


def _status(ok: bool) -> str:
    return "met" if ok else "**not met**"


def _best(r: dict, key: str) -> float | None:
    """The yardstick of one serial script at one size: the faster of its two BLAS settings."""
    runs = r.get(key)
    return min(v["seconds"] for v in runs.values()) if runs else None


def _serial_steps(r: dict) -> str:
    parts = []
    for key in SERIAL_SCRIPTS:
        for label, serial in (r.get(key) or {}).items():
            steps = serial.get("seconds_by_step")
            if steps:
                parts.append(f"{key} {label}: " + ", ".join(f"{k} {v:.1f}" for k, v in steps.items()))
    return ("Serial scripts by step (s; each candidate = 5 folds + refit + fold metrics): "
            + "; ".join(parts) + ".") if parts else ""


def _load_text(r: dict) -> str:
    load_ = r["machine_load"]
    text = f"1-minute load at the start of the build {load_['load_at_start']:.2f}"
    if "load_first_check" in load_:
        text += f" (first check {load_['load_first_check']:.2f}, waited {load_['waited_s']} s)"
    if "loads" in r:
        during = {step: v for step, v in r.get("load_during", {}).items()}
        during |= {f"{key}_{label}": v["load_during"] for key in SERIAL_SCRIPTS
                   for label, v in (r.get(key) or {}).items() if "load_during" in v}
        text += "; before → after each step: " + ", ".join(
            f"{step} {a:.2f} → {b:.2f}" for step, (a, b) in r["loads"].items()) + "."
        if during:
            text += (f" Read every {LOAD_SAMPLE_S} s while each step ran (mean / max): "
                     + ", ".join(f"{step} {m:.2f} / {x:.2f}" for step, (m, x) in during.items()) + ".")
        return text
    serial = ", ".join(f"{k} {v['load_after']:.2f}" for k, v in r.get("serial", {}).items())
    return text + f"; after the build {r['full']['load_after']:.2f}; after the serial runs: {serial}."


def _peak(r: dict) -> dict:
    return max((j for j in r["job_records"] if j["max_rss_mb"]), key=lambda j: j["max_rss_mb"])


def _serial_cell(r: dict, key: str) -> tuple[str, str]:
    """(seconds with one BLAS thread / default, build ÷ the faster) or dashes if not run."""
    runs = r.get(key)
    if not runs:
        return "not run", "—"
    return (f"{_fmt(runs['blas_1']['seconds'])} / {_fmt(runs['blas_default']['seconds'])}",
            f"{r['full']['seconds'] / _best(r, key):.2f}")


def summary_lines(records: list[dict]) -> list[str]:
    lines = ["## Summary", "",
             "| rows | full build s (CPU s) | serial s (1 BLAS thread / default) | build ÷ serial | "
             "analyst's script s (1 / default) | build ÷ analyst's | no-op s | cost-only s (share of full) | "
             "largest job max_rss MB | data in memory MB | max_rss ÷ data | load at start |",
             "|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|"]
    for r in records:
        peak = _peak(r)
        serial, serial_ratio = _serial_cell(r, "serial")
        analyst, analyst_ratio = _serial_cell(r, "analyst")
        lines.append(
            f"| {r['rows']:,} | {_fmt(r['full']['seconds'])} ({_fmt(r['full']['cpu_seconds'])}) | {serial} | "
            f"{serial_ratio} | {analyst} | {analyst_ratio} | "
            f"{_fmt(r['noop']['seconds'][1], 2)} | {_fmt(r['cost_only']['seconds'])} "
            f"({100 * r['cost_only']['seconds'] / r['full']['seconds']:.1f}%) | {_fmt(peak['max_rss_mb'], 0)} "
            f"({peak['job']}) | {_fmt(r['data_in_memory_mb'], 0)} | {peak['max_rss_mb'] / r['data_in_memory_mb']:.2f} | "
            f"{r['machine_load']['load_at_start']:.2f} |")
    skipped = [r for r in records if r.get("serial_skipped")]
    lines += [""] + [f"{r['rows']:,} rows: {r['serial_skipped']}." for r in skipped] + ([""] if skipped else [])
    lines += ["What each run decided (same configuration at every size; the build's selected candidate and "
              "adopted cut-off, test AUC; the serial scripts' with the BLAS default):", "",
              "| rows | build | serial script | analyst's script |", "|---:|---|---|---|"]

    def decided(o):
        return "—" if not o else (f"{o.get('selected')}, cut-off {_fmt(o.get('cutoff'), 4)}, "
                                  f"AUC {_fmt(o.get('auc'), 4)}")
    for r in records:
        lines.append(f"| {r['rows']:,} | {decided(r.get('outcome'))} | "
                     f"{decided((r.get('serial') or {}).get('blas_default'))} | "
                     f"{decided((r.get('analyst') or {}).get('blas_default'))} |")
    return lines


def target_lines(records: list[dict]) -> list[str]:
    lines = ["## Targets", ""]
    by_rows = {r["rows"]: r for r in records}
    big = by_rows.get(1_000_000)
    if big and big.get("serial"):
        ratio = big["full"]["seconds"] / _best(big, "serial")
        lines.append(f"- Full build ≤ 0.5 × serial script (same solvers) at 1M rows: {ratio:.2f} — {_status(ratio <= 0.5)} "
                     f"(≤ 0.8: {_status(ratio <= 0.8)})")
    if big and big.get("analyst"):
        ratio = big["full"]["seconds"] / _best(big, "analyst")
        lines.append(f"- Full build ÷ analyst's script (statsmodels, scikit-learn's solvers) at 1M rows: {ratio:.2f} "
                     f"(≤ 0.5: {_status(ratio <= 0.5)})")
    for r in records:
        noop = r["noop"]["seconds"][1]
        share = r["cost_only"]["seconds"] / r["full"]["seconds"]
        mem = _peak(r)["max_rss_mb"] / r["data_in_memory_mb"]
        above = [f"{j['job']} {j['max_rss_mb'] / r['data_in_memory_mb']:.2f} ×" for j in r["job_records"]
                 if j["max_rss_mb"] and j["max_rss_mb"] > 2.5 * r["data_in_memory_mb"]]
        lines += [f"- {r['rows']:,} rows: no-op ≤ 2 s: {noop:.2f} s — {_status(noop <= 2)}; cost-only ≤ 5% of full: "
                  f"{100 * share:.1f}% — {_status(share <= 0.05)}; every job's peak memory ≤ 2.5 × data: {mem:.2f} × — "
                  f"{_status(mem <= 2.5)}" + (f" (above: {', '.join(above)})" if above else "")]
    sizes = sorted(by_rows)
    for small, large in zip(sizes, sizes[1:]):
        a, b = by_rows[small], by_rows[large]
        scale = b["full"]["seconds"] / a["full"]["seconds"]
        text = (f"- time({large:,}) ÷ time({small:,}) ≤ {large / small:.0f} × 1.1: {scale:.2f} — "
                f"{_status(scale <= 1.1 * large / small)} (CPU seconds: "
                f"{b['full']['cpu_seconds'] / a['full']['cpu_seconds']:.2f}")
        if a.get("serial") and b.get("serial"):
            text += f"; serial script: {_best(b, 'serial') / _best(a, 'serial'):.2f}"
        text += ")"
        if a.get("commit") != b.get("commit") or a.get("commit") is None:
            # Sizes measured in separate runs may measure different code: say so beside the ratio.
            text += (f"; **the two builds were measured apart** ({small:,} rows: {a.get('started')}, commit "
                     f"{a.get('commit') or 'not recorded'}; {large:,} rows: {b.get('started')}, commit "
                     f"{b.get('commit') or 'not recorded'}), so the ratio mixes code versions when those differ")
        lines.append(text)
    return lines


def size_lines(r: dict) -> list[str]:
    cpu = ", ".join(f"{key} {k} {v['cpu_seconds']:.1f} s" for key in SERIAL_SCRIPTS for k, v in (r.get(key) or {}).items())
    lines = ["", f"## {r['rows']:,} rows: every job", "",
             (f"Measured from {r['started']}. " if "started" in r else "")
             + f"CSV {r['csv_mb']:.0f} MB (generated in {r['generate_seconds']:.0f} s); validated data in memory "
             f"(pandas, deep) {r['data_in_memory_mb']:.0f} MB; "
             f"a process that has only imported what a fit job imports: {r['import_baseline_mb']:.0f} MB. "
             + _load_text(r), "",
             f"Full build ran {len(r['full']['jobs'])} jobs: "
             + ", ".join(f"{name} ×{r['full']['jobs'].count(name)}" for name in dict.fromkeys(r["full"]["jobs"])) + ".",
             f"No-op runs: wall {', '.join(f'{s:.2f}' for s in r['noop']['seconds'])} s, CPU "
             f"{', '.join(f'{s:.2f}' for s in r['noop']['cpu_seconds'])} s; jobs run: "
             f"{sum(len(j) for j in r['noop']['jobs'])}.",
             f"CPU time (all processes): full build {r['full']['cpu_seconds']:.1f} s"
             + (f", {cpu}." if cpu else "."),
             _serial_steps(r),
             f"Cost-only rebuild re-ran: {', '.join(r['cost_only']['jobs'])}"
             + (f"; {len(r['cost_only']['samples'])} rebuilds, one after another change of costs: "
                f"{', '.join(f'{s:.1f}' for s in r['cost_only']['samples'])} s (the median is reported)."
                if r["cost_only"].get("samples") else "."), "",
             "| job | wall s | CPU s | max_rss MB | max_rss ÷ data | (max_rss − imports) ÷ data |",
             "|---|---:|---:|---:|---:|---:|"]
    for j in sorted(r["job_records"], key=lambda j: -j["seconds"]):
        rss, data, base = j["max_rss_mb"], r["data_in_memory_mb"], r["import_baseline_mb"]
        share = "—" if rss is None else f"{rss / data:.2f}"
        above = "—" if rss is None else f"{(rss - base) / data:.2f}"
        lines.append(f"| {j['job']} | {j['seconds']:.1f} | {_fmt(j.get('cpu_seconds'))} | {_fmt(rss, 0)} | {share} | "
                     f"{above} |")
    total = sum(j["seconds"] for j in r["job_records"])
    peaks = "; ".join(f"{key} {max(v['max_rss_mb'] for v in r[key].values()):.0f} MB"
                      for key in SERIAL_SCRIPTS if r.get(key))
    lines += ["", f"Sum of job wall times {total:.1f} s (two cores: a lower bound of {total / 2:.1f} s for the build "
              f"if the jobs could be packed perfectly); measured build {r['full']['seconds']:.1f} s."
              + (f" Serial scripts' peak RSS: {peaks}." if peaks else "")]
    return lines


def report(records: list[dict], *, kept: str = "") -> str:
    """results.md: machine, summary, targets, every job per size, then ``kept`` (the hand-pasted
    sections of the previous results.md, from "## Reruns" on)."""
    m = machine()
    lines = ["# Benchmark results", "",
             "Written by `bench/run.py` (see `bench/README.md` for what is measured and how). "
             "All times are wall-clock seconds on the machine below, shared with other users "
             "while measuring; the 1-minute load is recorded beside each size. Where the time and "
             "memory go, and what would meet the targets not met: `bench/README.md`, section Findings.", "",
             "## Machine", "", f"- `nproc`: {m['nproc']}; {m['memory'].split(':')[1].strip()} memory "
             f"({m['memory'].split(':')[0]})", f"- Python {m['python']} on {m['platform']}",
             "- " + ", ".join(f"{k} {v}" for k, v in m["versions"].items()), "", "```", *m["lscpu"], "```", ""]
    failed = [r for r in records if r["full"].get("failed")]
    records = [r for r in records if not r["full"].get("failed")]
    lines += summary_lines(records) + [""] + target_lines(records)
    for r in records:
        lines += size_lines(r)
    for r in failed:
        lines += ["", f"## {r['rows']:,} rows: the full build failed", "",
                  f"After {r['full']['seconds']:.1f} s (CPU {r['full']['cpu_seconds']:.1f} s; largest process "
                  f"of the build {r['full']['max_rss_mb']:.0f} MB); {_load_text(r)} Jobs finished: "
                  f"{', '.join(r['full']['jobs']) or 'none'}.", "",
                  "| job | wall s | max_rss MB |", "|---|---:|---:|",
                  *[f"| {j['job']} | {j['seconds']:.1f} | {_fmt(j['max_rss_mb'], 0)} |" for j in r["job_records"]],
                  "", "End of Snakemake's output:", "", "```", r["full"]["failed"][-2500:], "```"]
    text = "\n".join(lines) + "\n"
    return text + ("\n" + kept if kept else "")


def with_job_cpu(record: dict, work: Path) -> dict:
    """A saved record whose job records lack CPU seconds, completed from the benchmark files
    where those still hold the measured run (same wall seconds; the cost-only rebuild
    rewrites the files of the jobs it reruns, and those stay without)."""
    files = {j["job"]: j for j in job_records(work, record["run"])} if (work / "benchmarks").is_dir() else {}
    for j in record.get("job_records", []):
        found = files.get(j["job"])
        if "cpu_seconds" not in j and found and abs(found["seconds"] - j["seconds"]) < 1e-9:
            j["cpu_seconds"] = found["cpu_seconds"]
    return record


#: Sections of results.md written by hand, kept when the runner rewrites the file.
KEPT_FROM = "## Reruns"


def kept_sections() -> str:
    path = BENCH / "results.md"
    text = path.read_text() if path.exists() else ""
    return text[text.index(KEPT_FROM):] if KEPT_FROM in text else ""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, nargs="+", default=[100_000, 1_000_000])
    parser.add_argument("--report-only", action="store_true")
    parser.add_argument("--serial-max-rows", type=int, default=1_000_000,
                        help="run the serial scripts only at sizes up to this many rows (default 1,000,000)")
    parser.add_argument("--load-wait", type=int, default=300,
                        help="seconds to wait at most for a 1-minute load <= 1.5 before sizes of 1M rows or more")
    parser.add_argument("--reruns", action="store_true",
                        help="measure only full build, touched-data and cost-only rebuilds; print the table")
    args = parser.parse_args()

    def log(message):
        print(time.strftime("%H:%M:%S"), message, flush=True)

    if args.reruns:
        print(reruns_report([measure_reruns(rows, log, wait_max_s=args.load_wait) for rows in args.rows]), end="")
        return

    records, kept = [], kept_sections()
    for rows in args.rows:
        saved = WORK / f"n{rows}" / "measure.json"
        records.append(with_job_cpu(json.loads(saved.read_text()), WORK / f"n{rows}") if args.report_only else
                       measure(rows, log, serial_max_rows=args.serial_max_rows, wait_max_s=args.load_wait))
        # Rewritten after every size, so a later size that fails leaves the earlier ones reported.
        (BENCH / "results.md").write_text(report(records, kept=kept))
    log("wrote bench/results.md")


if __name__ == "__main__":
    main()
