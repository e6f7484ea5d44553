"""The model card: every artifact of a run, formatted into one HTML document and its PDF.

The card computes nothing statistical. It reads the JSON, YAML and SVG artifacts of a run
folder and the run's ``manifest.json`` (configuration, file hashes, environment), checks
stored values against stated rules of thumb to list caveats, and formats numbers with the
fixed conventions in :data:`NUMBER_FORMATS`. Sections follow Mitchell et al., "Model Cards
for Model Reporting" (FAT* 2019).

Rendering is closed and deterministic: Jinja2 autoescapes every value; figures and the
stylesheet are inlined (figures as ``data:`` URLs); WeasyPrint fetches through
:class:`RunFolderFetcher`, which refuses anything but ``data:`` URLs and files inside the
run folder and stops the render on a refusal; the PDF's dates come from the recorded
``SOURCE_DATE_EPOCH`` and its identifier from its content.
"""

from __future__ import annotations

import base64
import contextlib
import datetime as dt
import logging
import math
import os
from pathlib import Path, PurePosixPath
from urllib.parse import unquote, urlsplit

import yaml
from jinja2 import Environment, FileSystemLoader, StrictUndefined
from markupsafe import Markup, escape
from weasyprint.urls import FatalURLFetchingError, URLFetcher

from oddsmith import artifacts
from oddsmith.artifacts import evaluation_at_cutoff
from oddsmith.errors import ArtifactError, OddsmithError
from oddsmith.io import read_json, sha256_bytes, sha256_file, write_bytes_atomic
from oddsmith.plots import FIGURE_NAMES, cost_unit, equal_count
from oddsmith.resources import template_dir

log = logging.getLogger("oddsmith.card")

TEMPLATE_DIR = template_dir()
TEMPLATE = "model_card.html.j2"
STYLESHEET = "model_card.css"

#: The card's inputs besides models, figures and the challenger: key → registered artifact.
ARTIFACTS = {
    "manifest": artifacts.MANIFEST,
    "report": "validated/report.json",
    "contract": "validated/contract.yaml",
    "split": "split/summary.json",
    "recipe": "features/recipe.json",
    "diagnostics": "features/diagnostics.json",
    "table": "comparison/table.json",
    "selected": artifacts.SELECTED,
    "choice": "threshold/choice.json",
    "probability_metrics": "evaluation/probability_metrics.json",
    "cutoff_metrics": "evaluation/cutoff_metrics.json",
    "subgroups": "evaluation/subgroups.json",
}
#: What the card rule writes (HTML, PDF, hashes), in that order.
CARD_FILES = tuple(a.path for a in artifacts.written_by("card"))
#: The flexible challenger's results, present when the run's config has challenger.enabled.
CHALLENGER_ARTIFACT = "challenger/cv.json"
#: The selected candidate refitted on all rows (evaluation.refit_all): the deliverable.
REFIT_ARTIFACT = "final/model.json"

#: Libraries named in the model details (the appendix lists every installed one).
KEY_LIBRARIES = ("numpy", "scipy", "pandas", "statsmodels", "scikit-learn", "pyarrow", "matplotlib", "jinja2",
                 "weasyprint", "snakemake")
#: Calibration slope band treated as acceptable: common practice, not a statistical test.
CALIBRATION_SLOPE_BAND = (0.8, 1.2)
#: Events per estimated parameter below this draw a caveat (Peduzzi et al. 1996).
MIN_EVENTS_PER_PARAMETER = 10
#: Significance level for the Hosmer–Lemeshow caveat (common practice).
HL_ALPHA = 0.05
#: Free text longer than this is shortened on the card (the artifact keeps it whole).
TEXT_LIMIT = 1200
#: Names (columns, groups, candidates, terms) longer than this are shortened.
NAME_LIMIT = 80

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

NUMBER_FORMATS = (
    "AUC, Gini, KS, calibration intercept and slope, adverse-impact ratios: 3 decimals",
    "log loss and Brier score: 4 decimals",
    "cut-offs: 4 decimals",
    "coefficients, standard errors, intervals, odds ratios and marginal effects: 4 significant digits",
    "rates and shares: percentages with 1 decimal",
    "counts: whole numbers with thousands separators",
    "costs: whole units of the declared currency with thousands separators",
    "p-values: 3 decimals; below 0.001 shown as “< 0.001”",
    "hashes: the first 12 hexadecimal digits of the SHA-256 (the full value is in the manifest)",
)
MINUS = "\u2212"
MISSING = "—"


class CardError(OddsmithError):
    """The model card cannot be rendered (missing input, refused fetch, bad option)."""


class RefusedFetch(FatalURLFetchingError):
    """A fetch outside the run folder was attempted; WeasyPrint stops the render."""


class RunFolderFetcher(URLFetcher):
    """WeasyPrint URL fetcher that serves only ``data:`` URLs and files inside ``root``.

    Every other URL (http, https, ftp, files elsewhere, symlinks leading out) is recorded
    in ``refused`` and raises :class:`RefusedFetch`, which stops the render.
    """

    def __init__(self, root, **kwargs):
        super().__init__(allowed_protocols=("data", "file"), allow_redirects=False, fail_on_errors=True, **kwargs)
        self.root = Path(root).resolve()
        self.refused: list[str] = []

    def allows(self, url: str) -> bool:
        """Whether ``url`` is a ``data:`` URL or names a file inside the root folder."""
        parts = urlsplit(url)
        scheme = parts.scheme.lower()
        if scheme == "data":
            return True
        if scheme != "file" or parts.netloc not in ("", "localhost"):
            return False
        path = Path(unquote(parts.path)).resolve()
        return path.is_file() and path.is_relative_to(self.root)

    def fetch(self, url, headers=None):
        if not self.allows(url):
            self.refused.append(url)
            raise RefusedFetch(f"refused to fetch {url!r}: only data: URLs and files inside {self.root} are allowed")
        return super().fetch(url, headers)


# ---------------------------------------------------------------------------------------------
# number formats (one place, used by the template as filters and by the tests)


def _minus(text: str) -> str:
    return text.replace("-", MINUS)


def _bad(x) -> bool:
    return x is None or (isinstance(x, float) and not math.isfinite(x))


def fmt_fixed(x, decimals: int = 3) -> str:
    """Fixed decimals with thousands separators and a true minus sign.

    Examples
    --------
    >>> fmt_fixed(1234.5678, 2), fmt_fixed(-0.0242, 3), fmt_fixed(None)
    ('1,234.57', '−0.024', '—')
    """
    if _bad(x):
        return MISSING
    text = f"{x:,.{decimals}f}"
    if text.lstrip("-").strip("0.,") == "":
        text = text.lstrip("-")  # no "−0.000"
    return _minus(text)


def fmt_sig(x, digits: int = 4) -> str:
    """``digits`` significant digits in positional notation (scientific below 1e-6 or from 1e9).

    Examples
    --------
    >>> fmt_sig(-0.007672288), fmt_sig(1.4104893), fmt_sig(1544.1324), fmt_sig(0.0)
    ('−0.007672', '1.410', '1,544', '0')
    """
    if _bad(x):
        return MISSING
    if x == 0:
        return "0"
    exponent = math.floor(math.log10(abs(x)))
    if exponent < -6 or exponent >= 9:
        return _minus(f"{x:.{digits - 1}e}")
    return fmt_fixed(x, max(0, digits - 1 - exponent))


def fmt_pct(x, decimals: int = 1) -> str:
    """A share as a percentage: ``fmt_pct(0.39055) == '39.1%'``."""
    return MISSING if _bad(x) else fmt_fixed(100 * x, decimals) + "%"


def fmt_count(n) -> str:
    """A count with thousands separators: ``fmt_count(12000) == '12,000'``."""
    return MISSING if _bad(n) else _minus(f"{int(n):,}")


def fmt_p(p) -> str:
    """A p-value to 3 decimals, ``< 0.001`` below that."""
    if _bad(p):
        return MISSING
    return "< 0.001" if p < 0.001 else f"{p:.3f}"


def fmt_hash(h, length: int = 12) -> str:
    """The first ``length`` hex digits of a hash."""
    return MISSING if not h else str(h)[:length]


def clip(text, limit: int = NAME_LIMIT) -> str:
    """Shorten ``text`` to ``limit`` characters, saying how long it was.

    Examples
    --------
    >>> clip("abcdefghij", 4)
    'abc… [shortened; 10 characters in full]'
    """
    if text is None:
        return MISSING
    text = str(text)
    if len(text) <= limit:
        return text
    return f"{text[: limit - 1]}… [shortened; {len(text):,} characters in full]"


#: A run of this many characters without a space may be broken anywhere on the card.
LONG_WORD = 24


def clip_html(text, limit: int = NAME_LIMIT) -> Markup:
    """:func:`clip`, escaped; text with a very long word is marked so the layout may break it."""
    text = clip(text, limit)
    if any(len(word) > LONG_WORD for word in text.split()):
        return Markup('<span class="long">%s</span>') % text
    return escape(text)


def fmt_interval(interval, decimals: int = 3, *, percent: bool = False) -> str:
    """An interval record (``lower``, ``upper``) as ``low–high``; ``—`` when absent.

    Examples
    --------
    >>> fmt_interval({"lower": -0.0421, "upper": 0.1}), fmt_interval(None)
    ('−0.042 to 0.100', '—')
    >>> fmt_interval({"lower": 0.25, "upper": 0.3125}, 1, percent=True)
    '25.0–31.2%'
    """
    if not interval or _bad(interval.get("lower")) or _bad(interval.get("upper")):
        return MISSING
    scale = 100.0 if percent else 1.0
    low, high = fmt_fixed(scale * interval["lower"], decimals), fmt_fixed(scale * interval["upper"], decimals)
    # a dash between two numbers reads as a minus when either is negative
    text = f"{low} to {high}" if MINUS in low + high else f"{low}–{high}"
    return text + ("%" if percent else "")


FILTERS = {
    "fixed": fmt_fixed, "sig": fmt_sig, "pct": fmt_pct, "count": fmt_count, "p": fmt_p, "short": fmt_hash,
    "clip": clip_html, "plain": clip, "g": lambda x: MISSING if _bad(x) else _minus(f"{x:g}"), "cutoff": lambda x: fmt_fixed(x, 4) if x is not None else "none (flag no case)",
    "cost": lambda x: fmt_fixed(x, 0), "metric": lambda x: fmt_fixed(x, 3), "loss": lambda x: fmt_fixed(x, 4),
    "ci": fmt_interval, "ci_loss": lambda iv: fmt_interval(iv, 4), "ci_pct": lambda iv: fmt_interval(iv, 1, percent=True),
}


# ---------------------------------------------------------------------------------------------
# reading the run folder


def folder_inputs(run_dir) -> dict:
    """The card's inputs as they lie in a run folder (``work/<run>`` or ``results/<run>``),
    named by :mod:`oddsmith.artifacts`: for rendering a published folder again (a release)
    outside the workflow, whose card rule passes its declared inputs instead. Only the
    selected candidate's model is named (read from the folder's selection)."""
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise ArtifactError(f"run folder not found: {run_dir}")
    inputs = {key: artifacts.in_folder(run_dir, name) for key, name in ARTIFACTS.items()}
    selected_path = inputs["selected"]
    selected = read_json(selected_path)["candidate"] if selected_path.is_file() else None
    inputs["models"] = {} if selected is None else {
        selected: artifacts.in_folder(run_dir, artifacts.MODEL, candidate=str(selected))}
    inputs["figures"] = {name: run_dir / rel for name, rel in artifacts.figures().items()}
    inputs["challenger"] = artifacts.in_folder(run_dir, CHALLENGER_ARTIFACT)
    inputs["final"] = artifacts.in_folder(run_dir, REFIT_ARTIFACT)
    return inputs


def load_run(inputs: dict) -> dict:
    """Read every artifact the card needs from the paths in ``inputs``.

    ``inputs`` maps each key of :data:`ARTIFACTS` to a path, ``models`` to {candidate: path}
    (at least the selected one), ``figures`` to {name: path} for :data:`FIGURE_NAMES` and
    ``challenger`` to the challenger's cv.json (or None when the rule declares none); see
    :func:`folder_inputs`. The run folder is the manifest's.

    Raises
    ------
    ArtifactError
        Naming every missing or unreadable artifact at once.
    """
    wanted = {key: Path(inputs[key]) for key in ARTIFACTS} | {
        f"figure:{name}": Path(inputs["figures"][name]) for name in FIGURE_NAMES if name in inputs["figures"]}
    missing = [f"missing: {path}" for path in wanted.values() if not path.is_file()]
    missing += [f"missing: figure {name}" for name in FIGURE_NAMES if name not in inputs["figures"]]
    if missing:
        raise ArtifactError("the model card needs artifacts that are missing", missing)
    run = {"dir": wanted["manifest"].parent, "manifest_sha256": sha256_file(wanted["manifest"])}
    for key in ARTIFACTS:
        run[key] = _read_yaml(wanted[key]) if wanted[key].suffix == ".yaml" else read_json(wanted[key])
    run["metrics"] = evaluation_at_cutoff(run.pop("probability_metrics"), run.pop("cutoff_metrics"))
    run["figures"] = {name: wanted[f"figure:{name}"].read_bytes() for name in FIGURE_NAMES}
    selected = run["selected"]["candidate"]
    model_path = inputs["models"].get(selected)
    if model_path is None or not Path(model_path).is_file():
        raise ArtifactError(f"the model card needs the selected model {selected!r}, which is missing: "
                            f"{model_path or 'no path given'}")
    run["model"] = read_json(model_path)
    run["config"] = _manifest_config(run["manifest"], wanted["manifest"])
    run["challenger"] = _load_challenger(inputs.get("challenger"), run["config"])
    run["refit"] = _load_refit(inputs.get("final"), run["config"])
    return run


def _load_refit(path, config: dict) -> dict | None:
    """The refitted model when the run's configuration asked for it, else None."""
    return _load_optional(path, (config.get("evaluation") or {}).get("refit_all"), REFIT_ARTIFACT,
                          "the model refitted on all rows (evaluation.refit_all is true)")


def _load_optional(path, enabled, name: str, what: str) -> dict | None:
    """An optional rule's JSON output: None when the configuration did not enable the rule,
    else the file's content; a missing file is an error naming ``what``."""
    if not enabled:
        return None
    if not path or not Path(path).is_file():
        raise ArtifactError(f"the model card needs {what}, which is missing", [f"missing: {path or name}"])
    return read_json(path)


def deliverable_statement(run: dict) -> dict | None:
    """Which model the card's numbers describe and which one is delivered, when they are not
    simply the selected candidate's fit on the training part evaluated on the test part.

    Returns None for a plain test-part build; else ``{"evaluated", "delivered"}`` sentences.
    """
    name, metrics = run["selected"]["candidate"], run["metrics"]
    oof = metrics.get("out_of_fold")
    if oof:
        return {"evaluated": (f"the fold models of {name}: {oof['folds']}-fold cross-validation on all "
                              f"{fmt_count(metrics['n'])} rows, out-of-fold predictions (no held-out test part)"),
                "delivered": (f"{name} fitted on all {fmt_count(metrics['n'])} rows "
                              f"(candidates/{name}/model.json); scoring uses it")}
    refit = run.get("refit")
    if refit:
        return {"evaluated": (f"{name} fitted on the training part ({fmt_count(run['model'].get('n_obs'))} rows, "
                              f"candidates/{name}/model.json), assessed on the test part"),
                "delivered": (f"{name} refitted on all {fmt_count(refit['refit']['rows'])} rows after the evaluation "
                              f"({REFIT_ARTIFACT}; same kind, options and feature recipe); scoring uses it; its "
                              "performance is not measured separately")}
    return None


def _load_challenger(path, config: dict) -> dict | None:
    """The challenger's cv.json when the run's configuration enabled it, else None."""
    return _load_optional(path, (config.get("challenger") or {}).get("enabled"), CHALLENGER_ARTIFACT,
                          "the challenger's results (challenger.enabled is true)")


def _read_yaml(path: Path):
    try:
        return yaml.safe_load(path.read_text(encoding="utf-8"))
    except (yaml.YAMLError, UnicodeDecodeError) as exc:
        raise ArtifactError(f"artifact {path} is not valid YAML: {exc}") from None


def _manifest_config(manifest: dict, path: Path) -> dict:
    problems = [f"key '{k}' is missing" for k in ("config", "files", "environment", "git") if k not in manifest]
    config = manifest.get("config") or {}
    if "card" not in config:
        problems.append("key 'config.card' is missing")
    if problems:
        raise ArtifactError(f"manifest {path} cannot describe the run", problems)
    return config


# ---------------------------------------------------------------------------------------------
# what the card says


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


def code_state(git: dict) -> str:
    """The state of the code in plain words, from the manifest's ``git`` record."""
    commit = (git or {}).get("commit")
    if not commit:
        return "The code was not built from a git checkout: no commit identifies it."
    if git.get("dirty"):
        return (f"The code had uncommitted changes when this run was built (last commit {fmt_hash(commit)}); "
                "that commit alone does not reproduce these results.")
    return f"The code was committed, with no uncommitted changes: commit {fmt_hash(commit)}."


def _finding(status: str, check: str, basis: str, found: str, advice: str = "") -> dict:
    return {"status": status, "check": check, "basis": basis, "found": found, "advice": advice}


def findings(run: dict) -> list[dict]:
    """Checks of stored values against stated rules, in the order printed on the card.

    Each is ``{"status": "attention" | "note" | "ok", "check", "basis", "found", "advice"}``.
    """
    out = [_epv_finding(run), _test_size_finding(run), *_maturity_findings(run), *_calibration_findings(run), _subgroup_finding(run),
           *_group_size_findings(run), *_few_cases_findings(run), _failed_finding(run), _challenger_finding(run), _leak_finding(run), _vif_finding(run),
           _drift_finding(run), *_decision_findings(run)]
    diag = run["diagnostics"]
    if diag["correlations"]["pairs"]:
        pairs = "; ".join(f"{clip(p['a'])} and {clip(p['b'])} (r = {fmt_fixed(p['r'])})"
                          for p in diag["correlations"]["pairs"])
        out.append(_finding("note", "Strongly correlated design columns",
                            f"|r| above {fmt_fixed(diag['correlations']['threshold'], 2)}", pairs,
                            "Expected between a main effect and its interaction; otherwise read the two "
                            "coefficients together, not one by one."))
    warnings = [*run["report"].get("warnings", []), *run["split"].get("warnings", []),
                *run["model"].get("warnings", []), *run["metrics"]["overall"].get("notes", [])]
    if warnings:
        out.append(_finding("note", "Warnings recorded by the stages", "artifact warnings",
                            "; ".join(clip(w, 300) for w in warnings), "Read each warning in its artifact."))
    git = run["manifest"].get("git") or {}
    if git.get("dirty") or not git.get("commit"):
        out.append(_finding("attention", "Code state", "manifest git record", code_state(git),
                            "Commit the code and rebuild before this card is used for a decision."))
    return out


def _where(run) -> str:
    """Where the evaluation's figures come from, for the findings' labels."""
    return "out-of-fold" if run["metrics"].get("out_of_fold") else "test"


def _epv_finding(run):
    diag = run["diagnostics"]
    epv = diag["events_per_parameter"]
    found = f"{fmt_fixed(epv, 1)} ({fmt_count(diag['events'])} events, {fmt_count(diag['n_parameters'])} parameters)"
    if epv is not None and epv < MIN_EVENTS_PER_PARAMETER:
        return _finding("attention", "Events per parameter (training)", f"at least {MIN_EVENTS_PER_PARAMETER}",
                        found, "Too few events for the number of parameters: estimates may be unstable and "
                        "optimistic. Reduce the parameters or collect more events.")
    return _finding("ok", "Events per parameter (training)", f"at least {MIN_EVENTS_PER_PARAMETER}", found)


def _maturity_findings(run):
    maturity = run["metrics"].get("outcome_maturity")
    if not maturity:
        return []
    basis = (f"test applications dated on or before {maturity['matured_through']}: the extraction date "
             f"{maturity['extraction_date']} ({maturity['extraction_date_source']}) minus the "
             f"{maturity['window_months']}-month outcome window")
    test, train, where = maturity["parts"]["test"], maturity["parts"]["train"], _where(run)
    check = f"Outcome window ({where})"
    rows = "test rows" if where == "test" else "rows (all evaluated out-of-fold)"
    if maturity["test_matured"]:
        return [_finding("ok", check, basis, f"all {fmt_count(test['rows'])} {rows} matured")]
    found = (f"outcomes of applications after {maturity['matured_through']} may not have matured: "
             f"{fmt_count(test['immature_rows'])} of {fmt_count(test['rows'])} {rows}"
             + (f" (and {fmt_count(train['immature_rows'])} training rows)" if train["immature_rows"] else ""))
    return [_finding("attention", check, basis, found,
                     "Some outcomes were still open at extraction: the event rate, the measured performance and the "
                     "cut-off may be understated for those rows. Re-evaluate once every window has closed.")]


def _calibration_findings(run):
    overall = run["metrics"]["overall"]
    low, high = CALIBRATION_SLOPE_BAND
    slope = overall["calibration_slope"]
    band = f"within [{fmt_fixed(low, 1)}, {fmt_fixed(high, 1)}]"
    slope_check, hl_check = f"Calibration slope ({_where(run)})", f"Hosmer–Lemeshow goodness of fit ({_where(run)})"
    if slope is None or not low <= slope <= high:
        slope_f = _finding("attention", slope_check, band, fmt_fixed(slope),
                           "Predicted risks are too spread out (slope below the band) or too compressed "
                           "(above it) on new data. Recalibrate on recent data before using the probabilities.")
    else:
        slope_f = _finding("ok", slope_check, band, fmt_fixed(slope))
    hl = run["metrics"]["hosmer_lemeshow"]
    found = f"C = {fmt_fixed(hl['statistic'], 2)}, df = {hl['df']}, p = {fmt_p(hl['p_value'])}"
    sample = hl.get("sample_check")  # absent from runs evaluated before the check existed
    if sample is not None and not sample["adequate"]:
        hl_f = _finding("note", hl_check, sample["rule"],
                        f"no p-value stated: {sample['below_1']} of {sample['cells']} expected counts below 1, "
                        f"{sample['below_5']} below 5",
                        "Too few cases per risk group for the test's p-value to mean anything; read the reliability "
                        "table and the calibration slope instead, or evaluate on more data.")
    elif hl["p_value"] is not None and hl["p_value"] < HL_ALPHA:
        hl_f = _finding("attention", hl_check, f"p at least {HL_ALPHA}", found,
                        "Observed and predicted rates differ across risk deciles; inspect the reliability table.")
    else:
        hl_f = _finding("ok", hl_check, f"p at least {HL_ALPHA}", found)
    return [slope_f, hl_f]


#: Events and non-events in the test part below which its estimates are imprecise: Collins,
#: Ogundimu & Altman, Statistics in Medicine 35 (2016) suggest at least 100 of each for a
#: validation (from memory).
MIN_TEST_EVENTS = 100


def _test_size_finding(run):
    metrics = run["metrics"]
    if metrics.get("out_of_fold"):
        return _out_of_fold_size_finding(metrics)
    events, non_events = metrics["events"], metrics["n"] - metrics["events"]
    basis = (f"at least {MIN_TEST_EVENTS} events and {MIN_TEST_EVENTS} non-events (Collins, Ogundimu & Altman 2016; "
             "from memory)")
    found = f"{fmt_count(events)} events, {fmt_count(non_events)} non-events in {fmt_count(metrics['n'])} test cases"
    if min(events, non_events) < MIN_TEST_EVENTS:
        return _finding("attention", "Size of the test part", basis, found,
                        "Too few test events for precise estimates: the intervals are wide, the calibration measures "
                        "unstable and small differences meaningless. Evaluate on more data, or by repeated "
                        "cross-validation when no more data exist.")
    return _finding("ok", "Size of the test part", basis, found)


def _out_of_fold_size_finding(metrics):
    events, non_events = metrics["events"], metrics["n"] - metrics["events"]
    basis = (f"at least {MIN_TEST_EVENTS} events and {MIN_TEST_EVENTS} non-events (Collins, Ogundimu & Altman 2016; "
             "from memory)")
    found = (f"no held-out test part; {fmt_count(events)} events, {fmt_count(non_events)} non-events, every row "
             f"evaluated out-of-fold")
    return _finding("attention" if min(events, non_events) < MIN_TEST_EVENTS else "note",
                    "Evaluation without a test part", basis, found,
                    "Every figure is out-of-fold on all rows and the cut-off was chosen and assessed on the same "
                    "predictions (optimistic). Confirm on new data before relying on the cut-off.")


#: Fewest events (or non-events) behind a rate or an interval below which the card says it
#: rests on few cases: the same count of 5 as the Hosmer–Lemeshow expected-count rule
#: (common practice).
MIN_CLASS_COUNT = 5


def _few_cases_findings(run):
    """Group TPR/FPR and bootstrap intervals that rest on very few events or non-events."""
    out, metrics = [], run["metrics"]
    thin = [f"{clip(attr)}: {clip(row['group'])} ({fmt_count(row['events'])} events, "
            f"{fmt_count(row['n'] - row['events'])} non-events)"
            for attr, block in run["subgroups"]["attributes"].items() for row in block["rows"]
            if not row["too_small"] and min(row["events"], row["n"] - row["events"]) < MIN_CLASS_COUNT]
    if thin:
        out.append(_finding("note", "Group error rates on few cases",
                            f"at least {MIN_CLASS_COUNT} events and non-events per assessed group (common practice)",
                            "; ".join(thin), "The TPR (per event) or FPR (per non-event) of these groups rests on "
                            "fewer than 5 cases: read their intervals, not the point values."))
    events = metrics["events"]
    if metrics.get("bootstrap") and min(events, metrics["n"] - events) < 2 * MIN_CLASS_COUNT:
        out.append(_finding("note", "Bootstrap intervals on few cases",
                            f"at least {2 * MIN_CLASS_COUNT} events and non-events (a project choice)",
                            f"{fmt_count(events)} events, {fmt_count(metrics['n'] - events)} non-events",
                            "Resampling so few cases gives ragged, too-narrow intervals; treat them as rough."))
    return out


def _subgroup_finding(run):
    flagged = [f"{clip(attr)}: {clip(row['group'])} ({fmt_fixed(row['adverse_impact_ratio'])})"
               for attr, block in run["subgroups"]["attributes"].items() for row in block["rows"]
               if row.get("adverse_impact_flag")]
    basis = "adverse-impact ratio at least 4/5 (a US employment-selection guideline, applied here by analogy)"
    if flagged:
        return _finding("attention", "Groups below the four-fifths screen", basis, "; ".join(flagged),
                        "Investigate why these groups are flagged more often: differences in the inputs, in "
                        "the outcome, or in how the model treats them. Do not adjust the model automatically.")
    return _finding("ok", "Groups below the four-fifths screen", basis, "none")


def _group_size_findings(run):
    out = []
    min_size = run["subgroups"]["min_group_size"]
    small = [f"{clip(attr)}: {clip(row['group'])} (n = {fmt_count(row['n'])})"
             for attr, block in run["subgroups"]["attributes"].items() for row in block["rows"] if row.get("too_small")]
    if small:
        out.append(_finding("attention", "Groups too small to assess", f"at least {fmt_count(min_size)} test cases",
                            "; ".join(small), "These groups were not screened; assess them on more data."))
    used = [clip(attr) for attr, block in run["subgroups"]["attributes"].items()
            if block["kind"] == "sensitive" and block.get("used_as_feature")]
    if used:
        out.append(_finding("attention", "Sensitive attribute used as a model input", "not used", ", ".join(used),
                            "Confirm that using it is lawful and justified, and record who approved it."))
    return out


def _failed_finding(run):
    failed = [r for r in run["table"]["rows"] if r.get("status") != "ok"]
    if failed:
        return _finding("attention", "Candidates that could not be fitted", "none failed",
                        "; ".join(f"{clip(r['candidate'])}: {clip(r.get('reason'), 300)}" for r in failed),
                        "Read the reasons (separation, non-convergence); the comparison excludes these candidates.")
    return _finding("ok", "Candidates that could not be fitted", "none failed", "none")


CHALLENGER_CHECK = "Flexible challenger (gradient-boosted trees, not for adoption)"
#: How each gap is worded and formatted: (label, word when the challenger is better, when worse, format).
_GAP_WORDS = {"log_loss": ("log loss", "lower", "higher", lambda x: fmt_fixed(x, 4)),
              "auc": ("AUC", "higher", "lower", lambda x: fmt_fixed(x, 3))}


def challenger_gap_sentence(gap: dict, *, selected: str) -> str:
    """One metric's gap between the flexible challenger and the selected candidate, in words.

    ``gap`` is an entry of the challenger's ``gap`` record (:func:`oddsmith.challenger.gap_interval`):
    ``advantage`` is how much better the challenger does, with its interval ``lower``–``upper``.

    Examples
    --------
    >>> g = {"metric": "log_loss", "advantage": 0.012, "lower": 0.004, "upper": 0.02, "level": 0.95,
    ...      "relative": 0.03}
    >>> challenger_gap_sentence(g, selected="logit_main")
    "The flexible challenger's cross-validated log loss is 0.0120 lower than that of the selected candidate, logit_main (95% interval 0.0040 to 0.0200; 3.0% of the selected candidate's log loss)."
    """
    label, better, worse, fmt = _GAP_WORDS[gap["metric"]]
    if gap.get("advantage") is None:
        return f"The gap in {label} cannot be stated: {clip(gap.get('note'), 300)}."
    advantage, low, high = gap["advantage"], gap["lower"], gap["upper"]
    word = better if advantage >= 0 else worse
    if advantage < 0:  # state the size of the shortfall, its interval turned the same way
        advantage, low, high = -advantage, -high, -low
    share = "" if gap.get("relative") is None else f"; {fmt_pct(abs(gap['relative']))} of the selected candidate's {label}"
    return (f"The flexible challenger's cross-validated {label} is {fmt(advantage)} {word} than that of the selected "
            f"candidate, {clip(selected)} ({fmt_fixed(100 * gap['level'], 0)}% interval {fmt(low)} to {fmt(high)}{share}).")


def _challenger_sentences(challenger: dict | None) -> list[str]:
    if challenger is None:
        return []
    gap = challenger["gap"]
    return [challenger_gap_sentence(gap[metric], selected=gap["selected"]) for metric in _GAP_WORDS]


def _challenger_finding(run):
    check = CHALLENGER_CHECK
    challenger = run.get("challenger")
    if challenger is None:
        found = ("not run: challenger.enabled is false" if "challenger" in run["config"]
                 else "not run: this run's configuration has no challenger section")
        return _finding("note", check, "cross-validated on the candidates' folds", found,
                        "Nothing shows how much a flexible model would gain over the interpretable candidates; "
                        "enable the challenger to measure it.")
    gap = challenger["gap"]
    basis = (f"log-loss gap not clearly above 0, or at most {fmt_pct(gap['relative_limit'])} of the selected "
             "log loss (a project choice)")
    found = challenger_gap_sentence(gap["log_loss"], selected=gap["selected"])
    if gap["large"]:
        return _finding("attention", check, basis, found,
                        "The interpretable candidates may miss non-linear effects or interactions that the trees "
                        "find: look for them (transforms, bins, splines or interactions in the recipe) and refit.")
    return _finding("ok", check, basis, found)


def _leak_finding(run):
    leak = run["diagnostics"]["leakage"]
    basis = f"single-feature AUC at most {fmt_fixed(leak['threshold'], 2)}"
    if leak["suspected"]:
        names = "; ".join(clip(s["feature"] if isinstance(s, dict) else s) for s in leak["suspected"])
        return _finding("attention", "Suspected leaks", basis, names,
                        "Check that these inputs are known before the outcome; remove them if not.")
    return _finding("ok", "Suspected leaks", basis, "none")


def _vif_finding(run):
    vif = run["diagnostics"]["vif"]
    basis = f"VIF at most {fmt_fixed(vif['threshold'], 0)} (rule of thumb)"
    bad = [*(clip(v["column"] if isinstance(v, dict) else v) for v in vif["flagged"]),
           *(clip(v) + " (perfectly collinear)" for v in vif.get("perfectly_collinear", []))]
    if bad:
        return _finding("attention", "Variance inflation", basis, "; ".join(bad),
                        "Coefficients of these columns are imprecise; do not read them one by one.")
    return _finding("ok", "Variance inflation", basis, "none above the threshold")


def _drift_finding(run):
    parts, test = run["split"]["parts"], run["split"]["base_rate_test"]
    if test is None:
        return _finding("note", "Base-rate drift between training and test", "a test part to compare with",
                        "no test part (split.method cross_validation_only): nothing to compare")
    found = (f"training {fmt_pct(parts['train']['base_rate'])}, test {fmt_pct(parts['test']['base_rate'])}; "
             f"p = {fmt_p(test['p_value'])}")
    basis = f"no difference at level {test['alpha']}"
    if test["p_value"] is not None and test["p_value"] < test["alpha"]:
        return _finding("attention", "Base-rate drift between training and test", basis, found,
                        "The event rate changed between the parts: check the calibration-in-the-large on recent "
                        "data and recalibrate the intercept if needed.")
    return _finding("ok", "Base-rate drift between training and test", basis, found)


def _decision_findings(run):
    out, metrics, choice = [], run["metrics"], run["choice"]
    if metrics["auc_interval"]["lower"] is not None and metrics["auc_interval"]["lower"] <= 0.5:
        out.append(_finding("attention", f"Discrimination above chance ({_where(run)})", "AUC interval above 0.5",
                            f"{fmt_fixed(metrics['auc_interval']['lower'])}–{fmt_fixed(metrics['auc_interval']['upper'])}",
                            "The model does not rank cases better than chance with confidence; do not deploy."))
    if choice["adopted_cutoff"] is None:
        out.append(_finding("attention", "Adopted cut-off", "flags some cases", "flags no case",
                            "At these costs the model never pays for a review; revisit the costs or the model."))
    costs = choice["cost_per_1000"]
    trivial = min(costs["flag_none"], costs["flag_all"])
    if costs["adopted"] is not None and costs["adopted"] >= trivial:
        out.append(_finding("attention", "Cost against trivial rules (training, out-of-fold)",
                            "below flag-none and flag-all, on the same out-of-fold predictions",
                            f"{fmt_fixed(costs['adopted'], 0)} {cost_unit((run['config'].get('costs') or {}).get('currency'))} "
                            f"per 1,000 cases",
                            "The model does not lower the expected cost of decisions; it adds no value at these costs."))
    if run["selected"]["candidate"] == "baseline" or run["model"].get("kind") == "baseline":
        out.append(_finding("attention", "Selected candidate", "a model with inputs", "the intercept-only baseline",
                            "No candidate beat the baseline; the inputs carry no usable signal as specified."))
    return out


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
        "challenger": run.get("challenger"), "challenger_sentences": _challenger_sentences(run.get("challenger")),
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
    """Collect WeasyPrint's messages and pass them to the ``oddsmith.card`` logger."""

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
