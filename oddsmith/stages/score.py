"""The score stage: a new batch scored with the frozen model, with reason codes and a drift
page. Run by the ``score`` rule (inputs from the build itself) and, through
:mod:`oddsmith.stages.score_commands`, by ``oddsmith score`` (a finished results folder,
verified against its manifest first).

Everything is computed in memory first; files are written only when every check passed.
Outputs (same names in both cases): ``scores.parquet``, ``scores.csv``, ``summary.json``,
``drift.json``, ``drift.html``, ``drift.pdf``.
"""

from __future__ import annotations

import logging
from pathlib import Path

from oddsmith.errors import ArgumentError, ConfigError
from oddsmith.io import canonical_json, write_bytes_atomic, write_parquet
from oddsmith.reporting import drift
from oddsmith.resources import template_dir
from oddsmith.use.score import (DEFAULT_TOP_K, EXTRA_COLUMN_POLICIES, REFERENCES, ScoringModel, check_batch,
                            csv_bytes, feature_weights, file_source, load_artifacts, probabilities,
                            read_batch, reason_reference, score_frame, score_summary)

log = logging.getLogger("oddsmith.score")
TEMPLATE = template_dir() / "drift.html.j2"
CARD_STYLESHEET = "model_card.css"  # owned by the model card
#: The drift page's template and the card stylesheet it reuses (in the score rule's code fingerprint).
RESOURCE_FILES = ("reports/drift.html.j2", "reports/model_card.css")
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
    """Write every in-memory output to ``paths[name]``, each atomically (``paths`` names each
    output once: the score rule's declared outputs, or ``oddsmith score``'s folder)."""
    if sorted(paths) != sorted(outputs):
        raise ArgumentError(f"score outputs to write: {sorted(outputs)}; paths given for {sorted(paths)}")
    for name, value in outputs.items():
        path = paths[name]
        if name.endswith(".parquet"):
            write_parquet(path, value)
        elif name.endswith(".json"):
            write_bytes_atomic(path, canonical_json(value))
        else:
            write_bytes_atomic(path, value)


def run_score(*, new_path: str, recipe_path: str, selected_path: str, model_paths: dict, choice_path: str,
              contract_path: str, data_path: str, assignment_path: str, data: dict, scoring: dict,
              outputs: dict, template=TEMPLATE, stylesheets: list | None = None, monitoring: dict | None = None,
              deliverable_path: str | None = None) -> dict:
    """The score rule: score ``new_path`` with this build's selected model, write the outputs.

    ``deliverable_path``, when given, is the selected model refitted on all rows
    (``final/model.json``): scoring then uses it.

    ``new_path`` must resolve inside the project folder (the working directory) unless
    ``data["allow_outside_project"]`` is true, as for the development data.
    """
    _refuse_outside_project(new_path, allow=bool(data.get("allow_outside_project")))
    sm = load_artifacts(recipe_path=recipe_path, selected_path=selected_path, model_paths=model_paths,
                        choice_path=choice_path, contract_path=contract_path, data_path=data_path,
                        assignment_path=assignment_path, id_column=data["id_column"], target=data["target"],
                        source=str(Path(recipe_path).parent.parent), deliverable_path=deliverable_path)
    folder = Path(outputs["drift.pdf"]).parent
    result = score_batch(sm, batch_path=new_path, scoring=scoring, encoding=data.get("encoding", "utf-8"),
                         template=template, monitoring=monitoring,
                         stylesheets=card_stylesheets() if stylesheets is None else stylesheets, folder=folder)
    write_outputs(result, outputs)
    return result["summary.json"]


def _refuse_outside_project(path, *, allow: bool) -> None:
    root, target = Path.cwd().resolve(), Path(path).resolve()
    if not allow and root not in target.parents:
        raise ConfigError(f"scoring.data: '{path}' resolves to {target}, outside the project folder {root}; "
                          "copy the file into the project or set data.allow_outside_project: true")


def card_stylesheets() -> list[Path]:
    """The model card's stylesheet, reused (read, never changed) by the drift page, if present."""
    path = template_dir() / CARD_STYLESHEET
    return [path] if path.is_file() else []
