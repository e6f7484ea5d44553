"""The score stage: a new batch scored with the frozen model, with reason codes and a drift
page. Run by the ``score`` rule (inputs from the build itself) and by ``oddsmith score``
(a finished results folder, verified against its manifest first).

Everything is computed in memory first; files are written only when every check passed.
Outputs (same names in both cases): ``scores.parquet``, ``scores.csv``, ``summary.json``,
``drift.json``, ``drift.html``, ``drift.pdf``.
"""

from __future__ import annotations

import logging
from pathlib import Path

from oddsmith import drift
from oddsmith.errors import ArtifactError, ConfigError
from oddsmith.io import canonical_json, write_bytes_atomic, write_parquet
from oddsmith.resources import template_dir
from oddsmith.score import (DEFAULT_TOP_K, EXTRA_COLUMN_POLICIES, REFERENCES, ScoringModel, check_batch,
                            csv_bytes, feature_weights, file_source, load_artifacts, load_results_folder, probabilities,
                            read_batch, reason_reference, score_frame, score_summary)

log = logging.getLogger("oddsmith.score")
OUTPUTS = ("scores.parquet", "scores.csv", "summary.json", "drift.json", "drift.html", "drift.pdf")
TEMPLATE = template_dir() / "drift.html.j2"
CARD_STYLESHEET = "model_card.css"  # owned by the model card
DEFAULTS = {"top_k": DEFAULT_TOP_K, "reference": "training_mean", "extra_columns": "reject", "carry_columns": []}


def score_batch(sm: ScoringModel, *, batch_path, scoring: dict, encoding: str = "utf-8", template=TEMPLATE,
                stylesheets=(), folder=".", monitoring: dict | None = None) -> dict:
    """Score one batch; return every output in memory (name -> DataFrame, dict or bytes).

    ``scoring`` holds ``top_k``, ``reference``, ``extra_columns`` and ``carry_columns``
    (the config section ``scoring``). ``folder`` is where the PDF renderer may read files.
    ``monitoring`` (the config section) gives the PSI limits; missing keys take the defaults.
    """
    limits = {"psi_warning": drift.BAND_LOW, "psi_action": drift.BAND_HIGH} | {
        k: v for k, v in (monitoring or {}).items() if k in ("psi_warning", "psi_action")}
    settings = _settings(sm, scoring)
    raw = read_batch(batch_path, encoding=encoding)
    batch, ignored = check_batch(sm, raw, extra_columns=settings["extra_columns"], source=str(batch_path))
    reference = reason_reference(sm, settings["reference"])
    scored = score_frame(sm, batch, top_k=settings["top_k"], reference=reference,
                         carry_columns=settings["carry_columns"])
    summary = score_summary(sm, scored, reference=reference, top_k=settings["top_k"], ignored=ignored,
                            source=file_source(batch_path))
    report = drift.drift_report(
        development=sm.training, batch=batch, features=sm.recipe["features"],
        development_scores=probabilities(sm, sm.training), batch_scores=scored["probability"].to_numpy(),
        model_features=_model_features(sm),
        other_columns=[c for c in sm.contract["columns"] if c not in (sm.id_column, sm.target)], **limits)
    log.info("scored %d rows: %d flagged; score PSI %.4f; largest feature PSI %s", len(scored), summary["flagged"],
             report["score"]["psi"], report["ranking"][:1])
    html = drift.render_html(report, summary, template_path=template, batch_name=Path(batch_path).name,
                             stylesheet="\n".join(Path(p).read_text(encoding="utf-8") for p in stylesheets) or None)
    return {"scores.parquet": scored, "scores.csv": csv_bytes(scored), "summary.json": summary,
            "drift.json": report, "drift.html": html.encode("utf-8"), "drift.pdf": drift.pdf_bytes(html, folder=folder)}


def _settings(sm: ScoringModel, scoring: dict) -> dict:
    settings = DEFAULTS | {k: v for k, v in (scoring or {}).items() if k in DEFAULTS and v is not None}
    problems = []
    if not isinstance(settings["top_k"], int) or settings["top_k"] < 1:
        problems.append(f"scoring.top_k must be an integer >= 1, got {settings['top_k']!r}")
    if settings["reference"] not in REFERENCES:
        problems.append(f"scoring.reference must be one of {REFERENCES}, got {settings['reference']!r}")
    if settings["extra_columns"] not in EXTRA_COLUMN_POLICIES:
        problems.append(f"scoring.extra_columns must be one of {EXTRA_COLUMN_POLICIES}, got {settings['extra_columns']!r}")
    for name in settings["carry_columns"]:
        if name not in sm.contract["columns"] or name in (sm.id_column, sm.target):
            problems.append(f"scoring.carry_columns: '{name}' is not a contract column other than the id and target")
    if problems:
        raise ConfigError("the scoring settings are invalid", problems)
    settings["carry_columns"] = list(settings["carry_columns"])
    return settings


def _model_features(sm: ScoringModel) -> list[str]:
    return feature_weights(sm.recipe, sm.model["design_columns"])[0]


def write_outputs(outputs: dict, paths: dict) -> None:
    """Write in-memory outputs to ``paths`` (name -> path), each atomically."""
    for name in OUTPUTS:
        value, path = outputs[name], paths[name]
        if name.endswith(".parquet"):
            write_parquet(path, value)
        elif name.endswith(".json"):
            write_bytes_atomic(path, canonical_json(value))
        else:
            write_bytes_atomic(path, value)


def run_score(*, new_path: str, recipe_path: str, selected_path: str, model_paths: dict, choice_path: str,
              contract_path: str, data_path: str, assignment_path: str, data: dict, scoring: dict, template: str,
              stylesheets: list, outputs: dict, monitoring: dict | None = None) -> dict:
    """The score rule: score ``new_path`` with this build's selected model, write the outputs.

    ``new_path`` must resolve inside the project folder (the working directory) unless
    ``data["allow_outside_project"]`` is true, as for the development data.
    """
    _refuse_outside_project(new_path, allow=bool(data.get("allow_outside_project")))
    sm = load_artifacts(recipe_path=recipe_path, selected_path=selected_path, model_paths=model_paths,
                        choice_path=choice_path, contract_path=contract_path, data_path=data_path,
                        assignment_path=assignment_path, id_column=data["id_column"], target=data["target"],
                        source=str(Path(recipe_path).parent.parent))
    folder = Path(outputs["drift.pdf"]).parent
    result = score_batch(sm, batch_path=new_path, scoring=scoring, encoding=data.get("encoding", "utf-8"),
                         template=template, stylesheets=stylesheets, folder=folder, monitoring=monitoring)
    write_outputs(result, outputs)
    return result["summary.json"]


def _refuse_outside_project(path, *, allow: bool) -> None:
    root, target = Path.cwd().resolve(), Path(path).resolve()
    if not allow and root not in target.parents:
        raise ConfigError(f"scoring.data: '{path}' resolves to {target}, outside the project folder {root}; "
                          "copy the file into the project or set data.allow_outside_project: true")


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


def card_stylesheets() -> list[Path]:
    """The model card's stylesheet, reused (read, never changed) by the drift page, if present."""
    path = template_dir() / CARD_STYLESHEET
    return [path] if path.is_file() else []


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
    from oddsmith.rescore import format_rescore, parse_settings, read_record, rescore_row, row_from_file, row_from_record

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
