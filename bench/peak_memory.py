"""Peak memory of one stage function, measured in a fresh process.

    python bench/peak_memory.py PROJECT STAGE [--out DIR]

PROJECT is a folder written by ``bench/generate.py`` (``data/``, ``schemas/``, ``config/bench.yaml``).
STAGE is ``validate``, ``split``, ``features`` or ``challenger`` (the trees of the
challenger_fit job); each reads what the stage before it wrote
under ``--out`` (default ``PROJECT/peak``), so run them in that order. Also ``size``: the
in-memory size of the validated data (pandas, deep), the yardstick of the memory target.

The stage runs in a child process (``python -c``) that imports oddsmith and the stage's
modules itself, so the peak includes the imports, as a Snakemake job's does. The child
prints ``resource.getrusage(RUSAGE_SELF).ru_maxrss`` (the kernel's high-water mark of
resident memory, kB on Linux) after the stage returns; Snakemake's ``benchmark:`` files
sample memory instead and can miss a short peak. The package comes from the current
``PYTHONPATH`` (put a worktree first to measure its code).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

CHILD = r"""
import json, resource, sys, time
start = time.perf_counter()
from oddsmith.config import check_config, read_config_file
project, out, stage = sys.argv[1], sys.argv[2], sys.argv[3]
import os
os.chdir(project)
for folder in ("validated", "split", "features", "challenger"):
    os.makedirs(f"{out}/{folder}", exist_ok=True)
cfg = check_config(read_config_file("config/bench.yaml"), project_dir=".")
data = cfg["data"]
if stage == "validate":
    from oddsmith.data.validate import run_validate
    run_validate(config=cfg, data_path=data["path"], contract_path=data["contract"],
                 out_data=f"{out}/validated/data.parquet", out_report=f"{out}/validated/report.json",
                 out_summary=f"{out}/validated/summary.txt")
elif stage == "split":
    from oddsmith.stages.split import run_split
    run_split(data_path=f"{out}/validated/data.parquet", report_path=f"{out}/validated/report.json",
              data={k: data[k] for k in ("id_column", "target", "date_column")}, split=cfg["split"],
              cross_validation=cfg["cross_validation"], out_assignment=f"{out}/split/assignment.parquet",
              out_summary=f"{out}/split/summary.json")
elif stage == "features":
    from oddsmith.stages.features import run_features
    run_features(data_path=f"{out}/validated/data.parquet", assignment_path=f"{out}/split/assignment.parquet",
                 features=cfg["features"], interactions=cfg["interactions"], target=data["target"],
                 id_column=data["id_column"], diagnostics=cfg["diagnostics"], out_recipe=f"{out}/features/recipe.json",
                 out_diagnostics=f"{out}/features/diagnostics.json", out_design=f"{out}/features/train_design.parquet",
                 cluster_column=cfg["inference"]["cluster_column"])
elif stage == "challenger":
    from oddsmith.fitting.challenger import run_challenger_fit
    run_challenger_fit(design_path=f"{out}/features/train_design.parquet", assignment_path=f"{out}/split/assignment.parquet",
                       recipe_path=f"{out}/features/recipe.json", id_column=data["id_column"], target=data["target"],
                       settings=cfg["challenger"], threads=1, out_folds=f"{out}/challenger/folds.json",
                       out_oof=f"{out}/challenger/oof.parquet")
elif stage == "size":
    import pandas as pd
    frame = pd.read_parquet(f"{out}/validated/data.parquet")
    print(json.dumps({"data_mb": frame.memory_usage(deep=True).sum() / 2**20, "rows": len(frame)}))
    sys.exit(0)
else:
    sys.exit(f"unknown stage {stage!r}")
print(json.dumps({"stage": stage, "max_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "seconds": time.perf_counter() - start}))
"""


def measure(project: Path, stage: str, out: Path) -> dict:
    """Run ``stage`` in a fresh interpreter; return its JSON line (peak MB, seconds)."""
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    done = subprocess.run([sys.executable, "-c", CHILD, str(project.resolve()), str(out.resolve()), stage],
                          env=env, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        sys.exit(f"{stage} failed:\n{done.stderr[-4000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("project", type=Path)
    parser.add_argument("stage", choices=["validate", "split", "features", "challenger", "size"])
    parser.add_argument("--out", type=Path, default=None)
    args = parser.parse_args()
    out = args.out or args.project / "peak"
    out.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    result = measure(args.project, args.stage, out)
    result["wall_s"] = round(time.perf_counter() - started, 2)
    print(json.dumps(result))


if __name__ == "__main__":
    main()
