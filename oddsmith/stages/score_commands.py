"""The ``oddsmith score`` and ``oddsmith rescore`` commands: a finished results folder,
verified against its manifest, scores a new batch (or one changed row).

Kept apart from :mod:`oddsmith.stages.score`, which the workflow's score rule runs: the
verification and the what-if code are no part of that rule, so its code fingerprint (the
modules its script imports) does not include them, and an edit of the manifest or verify
module does not rerun the score job.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from oddsmith import artifacts
from oddsmith.errors import ArtifactError, ConfigError, ManifestError
from oddsmith.io import canonical_json, read_json
from oddsmith.use.options import EXTRA_COLUMN_POLICIES, REFERENCES

# The scoring modules (pandas, the models) are imported by the commands that score, not by
# the parser: every `oddsmith` command builds the parser, `oddsmith build` included (0.75 s).
if TYPE_CHECKING:
    from oddsmith.use.score import ScoringModel

#: What ``oddsmith score`` writes into its output folder: the score rule's files, same names.
OUTPUTS = artifacts.outputs_of("score")

MANIFEST_FORMAT_PREFIX = "oddsmith-manifest/"
MANIFEST_MAJOR = 1


def load_results_folder(model_dir, *, check=True) -> tuple[ScoringModel, dict]:
    """Load the frozen model of a finished results folder, refusing a tampered one.

    The folder must hold a selected model and a ``manifest.json`` of a readable format;
    :func:`oddsmith.evidence.verify.verify_results` must find no problem (every hash matches).
    Returns the scoring model and the configuration recorded in the manifest.

    Raises
    ------
    ArtifactError
        No results folder, or no selected model in it.
    ManifestError
        No manifest, a manifest of another format version, or any verification problem.
    """
    folder = Path(model_dir)
    if not folder.is_dir():
        raise ArtifactError(f"results folder not found: {folder}")
    selected_path = artifacts.in_folder(folder, artifacts.SELECTED)
    if not selected_path.is_file():
        raise ArtifactError(f"{folder} holds no model: {artifacts.SELECTED} not found "
                            "(is this a finished results folder? build it with snakemake first)")
    selected = str(read_json(selected_path).get("candidate"))
    model_path = artifacts.in_folder(folder, artifacts.MODEL, candidate=selected)
    if not model_path.is_file():
        raise ArtifactError(f"{folder} holds no model: {artifacts.path(artifacts.MODEL, candidate=selected)} not found")
    manifest = _read_manifest(folder)
    if check:
        _verify(folder)
    config = manifest.get("config")
    if not isinstance(config, dict) or not isinstance(config.get("data"), dict):
        raise ManifestError(f"{folder}/manifest.json records no configuration ('config' with 'data')")
    data = config["data"]
    deliverable = _deliverable(folder, config)
    from oddsmith.use.score import load_artifacts

    sm = load_artifacts(
        recipe_path=artifacts.in_folder(folder, "features/recipe.json"), selected_path=selected_path,
        model_paths={selected: model_path}, choice_path=artifacts.in_folder(folder, "threshold/choice.json"),
        contract_path=artifacts.in_folder(folder, "validated/contract.yaml"),
        data_path=artifacts.in_folder(folder, "validated/data.parquet"),
        assignment_path=artifacts.in_folder(folder, "split/assignment.parquet"),
        id_column=data["id_column"], target=data["target"], source=str(folder), deliverable_path=deliverable)
    return sm, config


def _deliverable(folder: Path, config: dict) -> Path | None:
    """``final/model.json`` when the build refitted the selected model on all rows, else None."""
    if not (config.get("evaluation") or {}).get("refit_all"):
        return None
    path = artifacts.in_folder(folder, "final/model.json")
    if not path.is_file():
        raise ArtifactError(f"{folder} was built with evaluation.refit_all but holds no final/model.json, "
                            "the model to score with")
    return path


def _read_manifest(folder: Path) -> dict:
    path = artifacts.in_folder(folder, artifacts.MANIFEST)
    if not path.is_file():
        raise ManifestError(f"{folder} has no {artifacts.MANIFEST}: it is not a finished build, or was copied "
                            "incompletely; scoring needs a verified folder")
    try:
        manifest = read_json(path)
    except ArtifactError as exc:
        raise ManifestError(str(exc)) from None
    fmt = manifest.get("format") if isinstance(manifest, dict) else None
    if fmt is not None and not _readable_manifest_format(fmt):
        raise ManifestError(f"{path}: format {fmt!r} is not readable by this oddsmith "
                            f"(it reads {MANIFEST_FORMAT_PREFIX}{MANIFEST_MAJOR}); use the oddsmith version "
                            "that built the folder")
    return manifest


def _readable_manifest_format(fmt) -> bool:
    if not isinstance(fmt, str) or not fmt.startswith(MANIFEST_FORMAT_PREFIX):
        return False
    major = fmt[len(MANIFEST_FORMAT_PREFIX):].split(".")[0]
    return major == str(MANIFEST_MAJOR)


def _verify(folder: Path) -> None:
    try:
        from oddsmith.evidence.verify import verify_results
    except ImportError:
        raise ManifestError(f"cannot check {folder}: this oddsmith has no verify module, and scoring "
                            "refuses an unverified folder") from None
    problems = verify_results(folder)
    if problems:
        raise ManifestError(f"{folder} does not match its manifest (tampered or damaged); refusing to score",
                            list(problems))


def score_folder(model_dir, batch_path, out_dir, *, overrides: dict | None = None, check: bool = True,
                 overwrite: bool = False) -> dict:
    """``oddsmith score``: verify ``model_dir``, score ``batch_path``, write into ``out_dir``.

    ``out_dir`` may not lie inside ``model_dir`` (that would alter a verified folder), and
    must be new or empty unless ``overwrite`` is true (the outputs then replace same-named
    files; other files in it are left alone).
    Settings come from the folder's recorded ``scoring`` config, then ``overrides``.
    """
    model_dir, out_dir = Path(model_dir), Path(out_dir)
    if out_dir.resolve() == model_dir.resolve() or model_dir.resolve() in out_dir.resolve().parents:
        raise ArtifactError(f"output folder {out_dir} lies inside the results folder {model_dir}; "
                            "choose another one (the results folder must stay as verified)")
    _refuse_occupied(out_dir, overwrite=overwrite)
    sm, config = load_results_folder(model_dir, check=check)
    scoring = dict(config.get("scoring") or {}) | {k: v for k, v in (overrides or {}).items() if v is not None}
    out_dir.mkdir(parents=True, exist_ok=True)
    from oddsmith.stages.score import card_stylesheets, score_batch, write_outputs

    result = score_batch(sm, batch_path=batch_path, scoring=scoring,
                         encoding=config["data"].get("encoding", "utf-8"),
                         stylesheets=card_stylesheets(), folder=out_dir, monitoring=config.get("monitoring"))
    write_outputs(result, {name: out_dir / name for name in OUTPUTS})
    return result["summary.json"]


def _refuse_occupied(out_dir: Path, *, overwrite: bool) -> None:
    if out_dir.exists() and not out_dir.is_dir():
        raise ArtifactError(f"output folder {out_dir} exists and is not a folder; choose another -o OUT_DIR")
    if not overwrite and out_dir.is_dir() and any(out_dir.iterdir()):
        found = sorted(p.name for p in out_dir.iterdir())
        raise ArtifactError(f"output folder {out_dir} is not empty (holds {', '.join(found[:5])}"
                            f"{', ...' if len(found) > 5 else ''}); choose a new folder or give --overwrite "
                            "to replace the outputs in it")


# ---------------------------------------------------------------------------- command line


SCORE_DESCRIPTION = """\
Score new rows with the model a finished build selected.

MODEL_DIR is a results folder (e.g. results/lease_demo); it is first verified against its
manifest, and a changed or incomplete folder is refused. NEW.csv holds the rows to score, with
the columns of the data contract (the outcome column is not needed). For every row the outputs
give the probability of the adverse outcome, the decision at the adopted cut-off ("flag" or
"pass") and the features that pushed the score most toward the adverse outcome (reason codes).
A drift report compares NEW.csv with the development data (population stability index).

Outputs in OUT_DIR: scores.parquet, scores.csv, summary.json, drift.json, drift.html, drift.pdf.
OUT_DIR must be new or empty unless --overwrite is given; MODEL_DIR is never written to.

example:
  oddsmith score results/lease_demo data_demo/lease_applications_2026q1.csv -o scored_2026q1"""

RESCORE_DESCRIPTION = """\
Score one row before and after changing some of its inputs, to see how the probability, the
decision and each feature's contribution move ("what if this applicant's debt-service ratio
were 0.3?").

The row is taken from a CSV file by its id (--row ID --data FILE) or given as a JSON object
(--record). Each --set FEATURE=VALUE is checked against the data contract like a value in a
scored file: a value the contract does not allow is refused with the contract's reason, and
a value the feature recipe handles by a stated policy (a missing value filled, an unseen level)
is reported. MODEL_DIR is verified against its manifest first; nothing is written.

example:
  oddsmith rescore results/lease_demo --row LB-000002 \\
      --data data_demo/lease_applications_2026q1.csv --set debt_service_ratio=0.3"""


def register_commands(sub) -> None:
    """Add ``score`` and ``rescore`` to the ``oddsmith`` command line."""
    import argparse

    raw = argparse.RawDescriptionHelpFormatter
    p = sub.add_parser("score", help="score a file of new rows with a finished build's model (plus a drift report)",
                       description=SCORE_DESCRIPTION, formatter_class=raw)
    p.add_argument("model_dir", metavar="MODEL_DIR", help="a finished results folder, e.g. results/lease_demo")
    p.add_argument("new", metavar="NEW.csv", help="the rows to score (the outcome column is not needed)")
    p.add_argument("-o", "--out", required=True, metavar="OUT_DIR",
                   help="folder for the outputs: new or empty, and not inside MODEL_DIR")
    p.add_argument("--overwrite", action="store_true",
                   help="write into a non-empty OUT_DIR, replacing earlier outputs of the same names")
    p.add_argument("--top-k", type=int, metavar="K",
                   help="reason codes per row (default: the build's scoring.top_k, else 3)")
    p.add_argument("--reference", choices=REFERENCES,
                   help="what a feature's contribution is measured against: its partial score at the training "
                        "mean of each design column, or its lowest partial score among the training rows "
                        "(default: the build's scoring.reference, else training_mean)")
    p.add_argument("--extra-columns", choices=EXTRA_COLUMN_POLICIES,
                   help="columns of NEW.csv that the data contract does not declare: refuse the file (reject) or "
                        "leave them out (ignore) (default: the build's scoring.extra_columns, else reject)")
    p.set_defaults(func=_cmd_score)
    w = sub.add_parser("rescore", help="one row's probability and decision before and after changing inputs",
                       description=RESCORE_DESCRIPTION, formatter_class=raw)
    w.add_argument("model_dir", metavar="MODEL_DIR", help="a finished results folder, e.g. results/lease_demo")
    source = w.add_mutually_exclusive_group(required=True)
    source.add_argument("--row", metavar="ID", help="id of the row to take from --data")
    source.add_argument("--record", metavar="JSON",
                        help='the row as a JSON object of column: value, inline (\'{"credit_score": 640, ...}\') '
                             "or the path of a JSON file")
    w.add_argument("--data", metavar="FILE", help="the CSV file holding the row named by --row")
    w.add_argument("--set", dest="settings", action="append", default=[], metavar="FEATURE=VALUE",
                   help="a changed input, as a CSV cell would hold it (repeat for several); "
                        "FEATURE= with no value means missing")
    w.add_argument("--reference", choices=REFERENCES,
                   help="what contributions are measured against (default: the build's scoring.reference, "
                        "else training_mean)")
    w.add_argument("--json", action="store_true", help="print the result as JSON instead of a table")
    w.set_defaults(func=_cmd_rescore)


def _cmd_score(args) -> int:
    summary = score_folder(args.model_dir, args.new, args.out, overwrite=args.overwrite, overrides={
        "top_k": args.top_k, "reference": args.reference, "extra_columns": args.extra_columns})
    cutoff = "none" if summary["cutoff"] is None else f"{summary['cutoff']:.4f}"
    print(f"scored {summary['rows']:,} rows of {args.new}: {summary['flagged']:,} flagged "
          f"({summary['flag_rate']:.1%}) at cut-off {cutoff}; outputs in {args.out}")
    return 0


def _cmd_rescore(args) -> int:
    from oddsmith.use.rescore import format_rescore, parse_settings, read_record, rescore_row, row_from_file, row_from_record
    from oddsmith.use.score import reason_reference

    if args.row is not None and not args.data:
        raise ConfigError("--row needs --data FILE (the CSV holding that row)")
    sm, config = load_results_folder(args.model_dir)
    changes = parse_settings(args.settings)
    if args.row is not None:
        row = row_from_file(sm, args.data, args.row, encoding=config["data"].get("encoding", "utf-8"))
    else:
        row = row_from_record(sm, read_record(args.record))
    reference = reason_reference(sm, args.reference or (config.get("scoring") or {}).get("reference") or "training_mean")
    result = rescore_row(sm, row, changes, reference=reference)
    print(canonical_json(result).decode("utf-8") if args.json else format_rescore(result), end="")
    return 0
