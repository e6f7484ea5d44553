"""The ``oddsmith`` command line: draft a project, verify and compare results, score."""

from __future__ import annotations

import argparse
import shlex
import subprocess
import sys
from pathlib import Path

from oddsmith.errors import OddsmithError

DESCRIPTION = """\
oddsmith builds and checks yes/no prediction models reproducibly.

The analysis itself (data checks, candidate models, cut-off, model card) is a Snakemake
workflow run in the project folder: `oddsmith build CONFIG` (`make demo` builds the demo's
config/demo.yaml). It builds in work/<run>/ and publishes a complete, verified result to
results/<run>/. The other commands help around it: draft the inputs for new data (init), check
a results folder (verify), freeze it (release), compare two of them (diff) and use the
selected model on new rows (score, rescore).

Run `oddsmith COMMAND --help` for the details of one command."""


def package_version() -> str:
    """The installed distribution's version and where the package was imported from."""
    from importlib.metadata import PackageNotFoundError, version
    from pathlib import Path

    import oddsmith

    try:
        number = version("oddsmith")
    except PackageNotFoundError:
        number = "(not installed)"
    return f"oddsmith {number} ({Path(oddsmith.__file__).resolve().parent})"


def _cmd_init(args) -> int:
    from oddsmith.init import draft

    result = draft(args.data, contract_out=args.contract, config_out=args.config, run=args.run,
                   target=args.target, positive=args.positive, id_column=args.id)
    print(f"drafted {result.contract} and {result.config}")
    for line in result.summary:
        print(f"  {line}")
    for line in result.checks:
        print(f"CHECK: {line}")
    print(f"review both (marked DRAFT; guesses marked GUESSED, costs PLACEHOLDER), then run:\n"
          f"  oddsmith build {result.config}")
    return 0


def _register_build(sub) -> None:
    p = sub.add_parser("build", help="check a configuration file, then build its analysis with Snakemake",
                       usage="oddsmith build [-h] [--cores N] CONFIG [-- SNAKEMAKE_ARGS ...]",
                       description="Check CONFIG (schema and cross-key rules) and stop with every problem at once, "
                                   "or run `python -m snakemake --cores N --configfile CONFIG` with this interpreter. "
                                   "Arguments after `--` go to Snakemake (targets, --dry-run, --rerun-incomplete, ...).")
    p.add_argument("config", help="the configuration file, e.g. config/demo.yaml")
    p.add_argument("--cores", type=int, default=2, help="cores Snakemake may use (default: %(default)s)")
    p.set_defaults(func=_cmd_build)


def _cmd_build(args) -> int:
    from oddsmith.config import check_config, read_config_file
    from oddsmith.errors import ConfigError

    if not Path("Snakefile").is_file():
        print(f"oddsmith build: no Snakefile in {Path.cwd()}; run it from the project folder", file=sys.stderr)
        return 1
    try:
        missing = _missing_inputs(check_config(read_config_file(args.config), project_dir="."))
        if missing:
            raise ConfigError(f"the configuration names {len(missing)} file(s) that do not exist", missing)
    except ConfigError as exc:
        print(f"oddsmith build: {args.config} is not a usable configuration; nothing was built.\n{exc}",
              file=sys.stderr)
        return 1
    # --configfile takes one or more values: it comes last, so that no target is read as a config file
    cmd = [sys.executable, "-m", "snakemake", "--cores", str(args.cores), *args.snakemake_args,
           "--configfile", args.config]
    print("oddsmith build: " + " ".join(shlex.quote(part) for part in cmd[2:]), file=sys.stderr)
    return subprocess.run(cmd, check=False).returncode


def _missing_inputs(config: dict) -> list[str]:
    """The data and contract files a checked config names but the project folder lacks.

    Checked here so that a wrong path is one line of our own, not Snakemake's missing-input trace.
    """
    return [f"data.{key}: '{config['data'][key]}' is not a file (looked in {Path.cwd()}); "
            "copy the file into the project or correct the path"
            for key in ("path", "contract") if not Path(config["data"][key]).is_file()]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="oddsmith", description=DESCRIPTION,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=package_version(),
                        help="print the installed version and the package's folder, then exit")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    p = sub.add_parser("init", help="draft a data contract and a config for a new CSV file")
    p.add_argument("data", help="the CSV file to describe")
    p.add_argument("--contract", default="schemas/contracts/draft.yaml", help="where to write the draft contract (default: %(default)s)")
    p.add_argument("--config", default="config/draft.yaml", help="where to write the draft config (default: %(default)s)")
    p.add_argument("--run", help="run name (default: the file's stem)")
    p.add_argument("--target", metavar="COLUMN", help="the yes/no outcome column (default: guessed, and said so)")
    p.add_argument("--positive", metavar="LEVEL",
                   help="the target's value that is the event, the adverse outcome (default: guessed by meaning)")
    p.add_argument("--id", metavar="COLUMN", help="the column with one distinct value per row (default: guessed)")
    p.set_defaults(func=_cmd_init)
    _register_build(sub)
    for register in _REGISTRARS:
        register(sub)
    return parser


_REGISTRARS: list = []

from oddsmith.evidence import diff as _diff, release as _release, verify as _verify  # noqa: E402 (registrars below)

_REGISTRARS += [_verify.register, _release.register, _diff.register]


def _register_scoring(sub) -> None:
    from oddsmith.stages.score_commands import register_commands

    register_commands(sub)


_REGISTRARS.append(_register_scoring)


def main(argv=None) -> int:
    parser = build_parser()
    argv = list(sys.argv[1:] if argv is None else argv)
    passthrough = []
    if argv[:1] == ["build"] and "--" in argv:  # what follows `--` goes to Snakemake untouched
        argv, passthrough = argv[:argv.index("--")], argv[argv.index("--") + 1:]
    args = parser.parse_args(argv)
    args.snakemake_args = passthrough
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return args.func(args)
    except OddsmithError as exc:
        print(f"oddsmith {args.command}: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
