"""The model card's renderer: a run's artifacts, formatted into one HTML document and its PDF.

The card computes nothing statistical. :mod:`oddsmith.reporting.card_loader` reads the run's
artifacts and ``manifest.json``, :mod:`oddsmith.reporting.card_findings` checks stored values
against stated rules of thumb, and :mod:`oddsmith.reporting.formats` formats the numbers by the
fixed conventions of :data:`~oddsmith.reporting.formats.NUMBER_FORMATS`; this module gathers
what the template shows and renders it. Sections follow Mitchell et al., "Model Cards for Model
Reporting" (FAT* 2019).

Rendering is closed and deterministic: Jinja2 autoescapes every value; figures and the
stylesheet are inlined (figures as ``data:`` URLs); WeasyPrint fetches through
:class:`~oddsmith.reporting.fetcher.RunFolderFetcher`, which refuses anything but ``data:`` URLs
and files inside the run folder and stops the render on a refusal; the PDF's dates come from
the recorded ``SOURCE_DATE_EPOCH`` and its identifier from its content.
"""

from __future__ import annotations

import base64
import contextlib
import datetime as dt
import logging
import os
from pathlib import Path, PurePosixPath

from jinja2 import Environment, FileSystemLoader, StrictUndefined
from markupsafe import Markup

from oddsmith import artifacts
from oddsmith.errors import OddsmithError
from oddsmith.io import sha256_bytes, write_bytes_atomic
from oddsmith.reporting.card_findings import (CALIBRATION_SLOPE_BAND, CHALLENGER_CHECK, HL_ALPHA,
                                              MIN_EVENTS_PER_PARAMETER, challenger_sentences, code_state, findings)
from oddsmith.reporting.card_loader import deliverable_statement, folder_inputs, load_run
from oddsmith.reporting.fetcher import RefusedFetch, RunFolderFetcher
from oddsmith.reporting.formats import FILTERS, NAME_LIMIT, NUMBER_FORMATS
from oddsmith.reporting.plots import cost_unit, equal_count
from oddsmith.resources import template_dir

log = logging.getLogger("oddsmith.card")

TEMPLATE_DIR = template_dir()
TEMPLATE = "model_card.html.j2"
STYLESHEET = "model_card.css"

#: What the card rule writes (HTML, PDF, hashes), in that order.
CARD_FILES = tuple(a.path for a in artifacts.written_by("card"))

#: Libraries named in the model details (the appendix lists every installed one).
KEY_LIBRARIES = ("numpy", "scipy", "pandas", "statsmodels", "scikit-learn", "pyarrow", "matplotlib", "jinja2",
                 "weasyprint", "snakemake")
#: Free text longer than this is shortened on the card (the artifact keeps it whole).
TEXT_LIMIT = 1200

SECTIONS = (
    ("model-details", "1. Model details"),
    ("intended-use", "2. Intended use and out-of-scope uses"),
    ("factors", "3. Factors"),
    ("metrics", "4. Metrics"),
    ("data", "5. Training and evaluation data"),
    ("analyses", "6. Quantitative analyses"),
    ("ethics", "7. Ethical considerations and cautions"),
    ("caveats", "8. Caveats and recommendations"),
    ("method", "9. Method notes"),
    ("appendix", "Appendix. Artifacts and their hashes"),
    ("sign-off", "Sign-off"),
)
#: Sign-off roles and PSI limits of a run whose configuration predates those keys.
DEFAULT_SIGN_OFF_ROLES = ("model owner", "developer", "independent validator", "approver")
DEFAULT_MONITORING = {"psi_warning": 0.10, "psi_action": 0.25}


class CardError(OddsmithError):
    """The model card cannot be rendered (missing input, refused fetch, bad option)."""


# ---------------------------------------------------------------------------------------------
# what the template shows


def card_dates(run: dict, release: dict | None) -> dict:
    """The card's printed date and the PDF's creation timestamp, with their source.

    The timestamp is the manifest's ``source_date_epoch``, else the ``SOURCE_DATE_EPOCH``
    environment variable; the printed date is the release date, else ``card.date`` from the
    configuration, else the day of that timestamp.
    """
    epoch, source = run["manifest"].get("source_date_epoch"), "the manifest's source_date_epoch"
    if epoch is None and os.environ.get("SOURCE_DATE_EPOCH"):
        epoch, source = os.environ["SOURCE_DATE_EPOCH"], "the SOURCE_DATE_EPOCH environment variable"
    card_date = run["config"]["card"].get("date")
    if epoch is None and card_date is None:
        raise CardError("the card has no date: the manifest records no source_date_epoch, SOURCE_DATE_EPOCH is "
                        "unset and config card.date is empty")
    try:
        stamp = (dt.datetime.fromtimestamp(int(epoch), dt.timezone.utc) if epoch is not None
                 else dt.datetime.fromisoformat(str(card_date)).replace(tzinfo=dt.timezone.utc))
    except ValueError:
        raise CardError(f"card date cannot be read: source_date_epoch {epoch!r}, card.date {card_date!r}") from None
    printed, printed_source = stamp.date().isoformat(), f"the day of {source}"
    if card_date:
        printed, printed_source = str(card_date), "config card.date"
    if epoch is None:
        source = "config card.date at 00:00 UTC"
    if release:
        printed, printed_source = str(release["released_at"]), "the release date"
    return {"printed": printed, "printed_source": printed_source, "timestamp": stamp.strftime("%Y-%m-%dT%H:%M:%SZ"),
            "timestamp_source": source, "epoch": int(stamp.timestamp())}


def _check_release(release):
    if release is None:
        return None
    if not isinstance(release, dict) or not release.get("version") or not release.get("released_at"):
        raise CardError(f"release must be None or a dict with 'version' and 'released_at', got {release!r}")
    try:
        dt.date.fromisoformat(str(release["released_at"])[:10])
    except ValueError:
        raise CardError(f"release released_at must be an ISO date, got {release['released_at']!r}") from None
    return {"version": str(release["version"]), "released_at": str(release["released_at"])}


def _contract_rows(run: dict) -> list[dict]:
    cfg, profile = run["config"], run["report"].get("column_profile", {})
    roles = {cfg["data"]["id_column"]: "id", cfg["data"]["target"]: "target"}
    if cfg["data"].get("date_column"):
        roles[cfg["data"]["date_column"]] = "date"
    fairness = cfg.get("fairness", {})
    for f in cfg["features"]:
        roles[f["name"]] = "input"
    for name in fairness.get("segments", []):
        roles[name] = roles.get(name, "") + (", " if name in roles else "") + "segment"
    for name in fairness.get("sensitive", []):
        roles[name] = roles.get(name, "") + (", " if name in roles else "") + "sensitive"
    rows = []
    for name, spec in ((run["contract"] or {}).get("columns") or {}).items():
        spec = spec or {}
        rules = []
        if spec.get("min") is not None or spec.get("max") is not None:
            rules.append(f"{spec.get('min', '')} to {spec.get('max', '')}")
        if spec.get("levels"):
            rules.append("levels: " + ", ".join(map(str, spec["levels"])))
        rules += [word for key, word in (("unique", "unique"), ("nullable", "may be empty")) if spec.get(key)]
        rows.append({"name": name, "type": spec.get("type", ""), "rules": "; ".join(rules),
                     "role": roles.get(name, "not used"), "description": spec.get("description", ""),
                     "missing": (profile.get(name) or {}).get("missing_share")})
    return rows


def trivial_costs_on_test(metrics: dict, costs: dict) -> dict:
    """Cost per 1,000 test cases of flagging none and of flagging all, from the test counts.

    The threshold stage prices the two trivial rules on out-of-fold training predictions;
    the realised cost of the adopted cut-off is on the test part. These are the trivial
    rules on the same test cases: flag none costs c_FN per event and c_TN per non-event,
    flag all c_TP per event and c_FP per non-event (exact arithmetic on stored counts).

    Examples
    --------
    >>> trivial_costs_on_test({"n": 10, "events": 2}, {"false_positive": 1.0, "false_negative": 5.0, "true_positive": 0.0, "true_negative": 0.0})
    {'flag_none': 1000.0, 'flag_all': 800.0}
    """
    n, events = metrics["n"], metrics["events"]
    non_events = n - events
    none = events * costs["false_negative"] + non_events * costs["true_negative"]
    every = events * costs["true_positive"] + non_events * costs["false_positive"]
    return {"flag_none": 1000.0 * none / n, "flag_all": 1000.0 * every / n}


def build_context(run: dict, *, release: dict | None) -> dict:
    """Everything the template shows, taken from the artifacts without computation."""
    config, manifest = run["config"], run["manifest"]
    table, model = run["table"], run["model"]
    pooled = next((r for r in table["rows"] if r["candidate"] == run["selected"]["candidate"]), {})
    marks = findings(run)
    environment = manifest.get("environment") or {}
    libraries = environment.get("libraries") or {}
    return {
        "sections": dict(SECTIONS), "section_list": SECTIONS, "config": config, "card": config["card"],
        "release": release, "dates": card_dates(run, release), "fingerprint": run["manifest_sha256"],
        "git": manifest.get("git") or {}, "code_state": code_state(manifest.get("git") or {}),
        "environment": environment, "key_libraries": [(n, libraries[n]) for n in KEY_LIBRARIES if n in libraries],
        "files": sorted((manifest.get("files") or {}).items()),
        "raw_inputs": sorted((manifest.get("raw_inputs") or {}).items()),
        "report": run["report"], "contract_rows": _contract_rows(run), "split": run["split"],
        "recipe": run["recipe"], "diagnostics": run["diagnostics"], "table": table, "selected": run["selected"],
        "selected_row": pooled, "model": model, "choice": run["choice"], "metrics": run["metrics"],
        "subgroups": run["subgroups"], "findings": marks,
        "attention": [f for f in marks if f["status"] == "attention"],
        "figures": {name: "data:image/svg+xml;base64," + base64.b64encode(svg).decode("ascii")
                    for name, svg in run["figures"].items()},
        "slope_band": CALIBRATION_SLOPE_BAND, "min_epv": MIN_EVENTS_PER_PARAMETER, "hl_alpha": HL_ALPHA,
        "number_formats": NUMBER_FORMATS, "text_limit": TEXT_LIMIT, "name_limit": NAME_LIMIT,
        "is_logit": bool(model.get("coef_table")) and model["coef_table"][0].get("odds_ratio") is not None,
        "cost_unit": cost_unit((config.get("costs") or {}).get("currency")),
        "test_costs": trivial_costs_on_test(run["metrics"], run["choice"]["costs"]),
        "equal_count_bins": equal_count(run["metrics"]["reliability"]),
        "challenger": run.get("challenger"), "challenger_sentences": challenger_sentences(run.get("challenger")),
        "challenger_finding": next(f for f in marks if f["check"] == CHALLENGER_CHECK),
        "deliverable": deliverable_statement(run),
        "boot": run["metrics"].get("bootstrap"), "maturity": run["metrics"].get("outcome_maturity"),
        "exclusions": (config.get("data") or {}).get("exclusions") or [],
        "monitoring": DEFAULT_MONITORING | (config.get("monitoring") or {}),
        "sign_off_roles": config["card"].get("sign_off_roles") or list(DEFAULT_SIGN_OFF_ROLES),
    }


# ---------------------------------------------------------------------------------------------
# rendering


def render_html(context: dict, *, template_dir=TEMPLATE_DIR) -> str:
    """The card's HTML: the Jinja2 template with autoescape on and the stylesheet inlined."""
    env = Environment(loader=FileSystemLoader(str(template_dir)), autoescape=True, undefined=StrictUndefined,
                      trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)
    env.filters.update(FILTERS)
    stylesheet = Markup((Path(template_dir) / STYLESHEET).read_text(encoding="utf-8"))
    return env.get_template(TEMPLATE).render(**context, stylesheet=stylesheet)


class _WeasyLog(logging.Handler):
    """Collect WeasyPrint's messages and pass them to the ``oddsmith.reporting.card`` logger."""

    def __init__(self):
        super().__init__(level=logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record):
        message = record.getMessage()
        self.messages.append(message)
        log.warning("weasyprint: %s", message)


@contextlib.contextmanager
def _weasyprint_logging():
    logger, progress = logging.getLogger("weasyprint"), logging.getLogger("weasyprint.progress")
    handler, propagate, progress_level = _WeasyLog(), logger.propagate, progress.level
    logger.addHandler(handler)
    logger.propagate = False
    progress.setLevel(logging.WARNING)  # per-step progress lines would drown the rule log
    try:
        yield handler
    finally:
        logger.removeHandler(handler)
        logger.propagate = propagate
        progress.setLevel(progress_level)


@contextlib.contextmanager
def _source_date_epoch(epoch: int):
    # fontTools stamps subset fonts with SOURCE_DATE_EPOCH when it is set.
    previous = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = str(epoch)
    try:
        yield
    finally:
        if previous is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = previous


def render_pdf(html: str, *, run_dir, epoch: int, fetcher: RunFolderFetcher | None = None) -> bytes:
    """PDF bytes of ``html``; fetches are limited to ``run_dir``; a refused fetch raises CardError."""
    fetcher = fetcher or RunFolderFetcher(run_dir)
    base_url = Path(run_dir).resolve().as_uri() + "/"
    with _weasyprint_logging() as messages, _source_date_epoch(epoch):
        from weasyprint import HTML

        try:
            pdf = HTML(string=html, base_url=base_url, url_fetcher=fetcher).write_pdf(pdf_identifier=True)
        except RefusedFetch as exc:
            raise CardError(f"model card render stopped: {exc}") from None
    if fetcher.refused:
        raise CardError("model card render stopped: refused fetches", [f"refused: {u}" for u in fetcher.refused])
    log.info("PDF rendered: %d bytes, %d WeasyPrint message(s)", len(pdf), len(messages.messages))
    return pdf


def render_card(run_dir, *, out_dir=None, release=None, inputs: dict | None = None) -> dict:
    """Render the model card of the run in ``run_dir`` and write it with its hashes.

    Reads the artifacts, figures and ``manifest.json`` named by ``inputs`` (the configuration
    comes from the manifest), writes ``model_card.html``, ``model_card.pdf`` and
    ``card.sha256`` into ``out_dir`` (default ``run_dir/card``).

    Parameters
    ----------
    run_dir : path
        The folder of one run, ``work/<run>`` or ``results/<run>``: the only place the PDF
        renderer may read from, and what the paths in ``card.sha256`` are relative to.
    out_dir : path, optional
        Where the three files go.
    inputs : dict, optional
        The paths :func:`load_run` reads (the card rule's declared inputs); default: the
        files of ``run_dir`` (:func:`folder_inputs`).
    release : dict, optional
        ``{"version": ..., "released_at": ISO date}`` for a release copy; None (default) for a
        working draft. When None, a ``release`` record in the manifest is used if present.

    Returns
    -------
    dict
        ``{path: sha256}`` for manifest.json, the HTML and the PDF, paths relative to
        ``run_dir`` exactly as written in ``card.sha256``.

    Raises
    ------
    ArtifactError
        Naming every missing artifact.
    CardError
        On a bad ``release``, a missing date, or a refused fetch.
    """
    run_dir = Path(run_dir)
    out_dir = Path(out_dir) if out_dir is not None else run_dir / "card"
    run = load_run(folder_inputs(run_dir) if inputs is None else inputs)
    release = _check_release(release if release is not None else run["manifest"].get("release"))
    context = build_context(run, release=release)
    html = render_html(context)
    pdf = render_pdf(html, run_dir=run_dir, epoch=context["dates"]["epoch"])
    html_bytes = html.encode("utf-8")
    out_html, out_pdf, out_sha256 = (out_dir / PurePosixPath(name).name for name in CARD_FILES)
    write_bytes_atomic(out_html, html_bytes)
    write_bytes_atomic(out_pdf, pdf)
    hashes = {artifacts.MANIFEST: run["manifest_sha256"],
              _relative(out_html, run_dir): sha256_bytes(html_bytes), _relative(out_pdf, run_dir): sha256_bytes(pdf)}
    write_bytes_atomic(out_sha256, "".join(f"{h}  {p}\n" for p, h in hashes.items()).encode("utf-8"))
    log.info("model card written to %s (manifest %s)", out_dir, run["manifest_sha256"][:12])
    return hashes


def _relative(path: Path, start: Path) -> str:
    return Path(os.path.relpath(path.resolve(), start.resolve())).as_posix()