"""Profile one fit job of a benchmark build: where does its time go?

Runs the fit stage of one candidate in this process (one BLAS thread, as the job has) on a
project that bench/run.py has built, under cProfile, and prints the functions with the most
cumulative time. Outputs go to a temporary folder; the build is not touched.

    .venv/bin/python bench/profile_fit.py bench/work/n1000000 lasso
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats
import tempfile
import time
from pathlib import Path

import yaml
from threadpoolctl import threadpool_limits

from oddsmith.config import check_config
from oddsmith.stages.fit import run_fit


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("project", type=Path)
    parser.add_argument("candidate")
    parser.add_argument("--top", type=int, default=25)
    args = parser.parse_args()
    config = check_config(yaml.safe_load((args.project / "config/bench.yaml").read_text()),
                          project_dir=str(args.project))
    run = args.project / "results" / config["run"]
    candidate = next(c for c in config["candidates"] if c["name"] == args.candidate)
    with tempfile.TemporaryDirectory() as out, threadpool_limits(limits=1):
        profile = cProfile.Profile()
        started = time.perf_counter()
        profile.runcall(run_fit, design_path=str(run / "features/train_design.parquet"),
                        assignment_path=str(run / "split/assignment.parquet"),
                        recipe_path=str(run / "features/recipe.json"), candidate=candidate,
                        id_column=config["data"]["id_column"], target=config["data"]["target"],
                        seed=config["cross_validation"]["seed"],
                        out_model=f"{out}/model.json", out_cv=f"{out}/cv.json", out_oof=f"{out}/oof.parquet")
        wall = time.perf_counter() - started
    text = io.StringIO()
    pstats.Stats(profile, stream=text).sort_stats("cumulative").print_stats(args.top)
    print(f"fit stage of {args.candidate} on {run}: {wall:.1f} s wall (profiled)")
    print(text.getvalue())


if __name__ == "__main__":
    main()
