"""Draft a data contract and a configuration for a new data file (``oddsmith init``).

The drafts are starting points for a person to review, and they say where they guessed:

- the target is chosen by name and content among the two-valued columns (or given with
  ``--target``), and the adverse level by meaning (or given with ``--positive``); a guess is
  marked at its key and printed;
- identifiers, dates, free text, other outcomes and near-perfect predictors of the target
  are left out of the features, each with its reason in a comment;
- columns that look like protected characteristics are drafted under ``fairness.sensitive``
  (numeric ones with round-numbered bands), never as features;
- contract ranges are plausible bounds (non-negative, a share, a human age), not the observed
  extremes, so that next month's file is not refused for a new maximum;
- the config is complete on its own: it passes ``oddsmith.config.check_config`` unmerged.

Nothing is written unless every check passes, and existing files are never overwritten.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from oddsmith.data.contract import read_raw
from oddsmith.errors import InitError
from oddsmith.io import write_text
from oddsmith.settings import feature_default
from oddsmith.data.split import latest_fraction_cutoff

MAX_LEVELS = 30
LEAK_AUC = 0.98  # univariate AUC at or above this (or at or below 1 - this) is near-perfect
SCREEN_ROWS = 200_000  # the content screens look at a fixed sample of a larger file
BLANK_GROUP = "not stated"  # label of the group a sensitive attribute's blank cells form
BAND_SHARE = 0.10  # each drafted band of a numeric sensitive attribute holds at least this share
#: The share of rows the draft holds out for the test part.
DRAFT_TEST_FRACTION = 0.25
GRID = [0.003, 0.01, 0.03, 0.1, 0.3, 1.0]

# Outcome words, matched against the tokens of a column name (``serious_delinquency`` ->
# serious, delinquency). Stems match the start of a token; words match a whole token.
OUTCOME_STEMS = ("default", "delinquen", "churn", "fraud", "claim", "readmi", "approv", "decease",
                 "mortalit", "foreclos", "bankrupt", "chargeoff")
OUTCOME_WORDS = {"outcome", "target", "label", "y", "bad", "died", "death", "dead", "deny", "denied",
                 "denial", "grade", "pass", "passed", "fail", "failed", "failure", "event", "response",
                 "survived", "survival"}
WEAK_OUTCOME_WORDS = {"status", "result", "class", "flag"}
# A name with one of these tokens counts something that happened before (prior_claims).
HISTORY_WORDS = {"prior", "previous", "past", "last", "history", "hist", "num", "number", "n", "count",
                 "total", "times", "nb", "ever"}
# Targets whose "yes" is the favourable outcome: the adverse level is then the "no".
FAVOURABLE_TARGETS = ("approv", "accept", "pass", "surviv", "repaid", "paid", "grant")

ADVERSE_LEVELS = {"yes", "y", "1", "true", "t", "bad", "default", "defaulted", "denied", "deny",
                  "declined", "rejected", "reject", "died", "dead", "death", "deceased", "fraud",
                  "fraudulent", "churn", "churned", "positive", "pos", "event", "fail", "failed",
                  "failure", "delinquent", "late", "charged", "claim", "claimed", "readmitted", "poor",
                  "bankrupt", "lapsed", "cancelled", "canceled", "left", "lost"}
FAVOURABLE_LEVELS = {"no", "n", "0", "false", "f", "good", "paid", "repaid", "current", "alive",
                     "survived", "approved", "accepted", "granted", "negative", "neg", "pass", "passed",
                     "none", "normal", "ok", "performing", "retained", "stayed", "active"}
GENERIC_LEVELS = {"yes", "y", "1", "true", "t", "no", "n", "0", "false", "f"}

# Protected characteristics: the words of a column name that suggest one. Whole tokens; "age"
# only of a person (not vehicle_age); the ambiguous words only as the whole column name.
CHARACTERISTICS = {
    "age": ("dob",), "sex or gender": ("sex", "gender"),
    "race or ethnicity": ("race", "racial", "ethnic", "ethnicity", "afam", "hispanic", "latino"),
    "religion": ("religion", "religious"), "marital status": ("marital",),
    "nationality": ("nationality", "citizenship"), "disability": ("disability", "disabled"),
    "pregnancy": ("pregnant", "pregnancy"),
}
WHOLE_NAMES = {
    "marital status": ("single", "married", "divorced", "widowed"),
    "race or ethnicity": ("white", "black", "asian", "minority", "caste"),
    "sex or gender": ("male", "female"), "nationality": ("foreign", "foreigner", "foreignworker", "citizen"),
}
AGE_QUALIFIERS = {"age", "ages", "applicant", "borrower", "customer", "client", "owner", "mother",
                  "father", "patient", "person", "member", "driver", "holder", "insured", "band", "group",
                  "years", "yrs", "at", "application", "current", "in", "cat", "bucket", "range", "main",
                  "primary", "head", "of"}
ID_NAMES = {"id", "ids", "rownames", "rowname", "row", "index", "idx", "key", "uuid", "guid", "rowid"}
ID_LAST_TOKENS = {"id", "ids", "uuid", "guid", "key", "number", "nr", "no"}


@dataclass
class Draft:
    """What ``draft`` wrote and what the person must check (printed by the command line)."""

    contract: Path
    config: Path
    checks: list[str] = field(default_factory=list)
    summary: list[str] = field(default_factory=list)


# --------------------------------------------------------------------------------------------
# names and column types


def _tokens(name: str) -> list[str]:
    """Lower-case words of a column name: ``serious_delinquency``, ``ownerAgeBand``, ``GRADE``."""
    return [t.lower() for t in re.findall(r"[A-Z]+(?![a-z])|[A-Z]?[a-z]+|\d+", str(name))]


def _outcome_strength(name: str) -> int:
    """2: the name reads like an outcome; 1: a weak hint (status); 0: neither."""
    tokens = _tokens(name)
    if set(tokens) & HISTORY_WORDS:
        return 0
    if any(t in OUTCOME_WORDS or t.startswith(OUTCOME_STEMS) for t in tokens):
        return 2
    return 1 if set(tokens) & WEAK_OUTCOME_WORDS else 0


def _protected_kind(name: str) -> str | None:
    """The protected characteristic a column name suggests (``"marital status"``), or None."""
    tokens = _tokens(name)
    whole = "".join(tokens)
    for kind, names in WHOLE_NAMES.items():
        if whole in names:
            return kind
    if "age" in tokens and set(tokens) <= AGE_QUALIFIERS:
        return "age"
    return next((kind for kind, words in CHARACTERISTICS.items() if set(words) & set(tokens)), None)


def _looks_like_id_name(name: str) -> bool:
    tokens = _tokens(name)
    return bool(tokens) and ("".join(tokens) in ID_NAMES or (len(tokens) > 1 and tokens[-1] in ID_LAST_TOKENS))


#: Spellings of a point in time other than YYYY-MM-DD that init recognises (to say so; the
#: contract reads dates only as YYYY-MM-DD). Day-first before month-first: where both read
#: every value (no day above 12), the note says the order is ambiguous.
OTHER_DATE_SPELLINGS = (("ISO8601", "a date with a time of day"), ("%d/%m/%Y", "DD/MM/YYYY"),
                        ("%m/%d/%Y", "MM/DD/YYYY"), ("%Y/%m/%d", "YYYY/MM/DD"), ("%d.%m.%Y", "DD.MM.YYYY"),
                        ("%d-%m-%Y", "DD-MM-YYYY"))


def _other_date_spelling(values: pd.Series) -> str | None:
    """How a column of points in time not written YYYY-MM-DD is spelled, or None.

    >>> _other_date_spelling(pd.Series(["2012-01-01T06:16:41Z", "2012-01-02T07:00:00Z"]))
    'a date with a time of day'
    >>> _other_date_spelling(pd.Series(["31/12/2024", "01/02/2025"]))
    'DD/MM/YYYY'
    >>> _other_date_spelling(pd.Series(["03/04/2024"]))
    'DD/MM/YYYY or MM/DD/YYYY (no day above 12 tells which)'
    >>> _other_date_spelling(pd.Series(["north", "south"])) is None
    True
    """
    found = [label for fmt, label in OTHER_DATE_SPELLINGS
             if len(values) and pd.to_datetime(values.head(50), format=fmt, errors="coerce").notna().all()
             and pd.to_datetime(values, format=fmt, errors="coerce").notna().all()]
    if not found:
        return None
    if found[:2] == ["DD/MM/YYYY", "MM/DD/YYYY"]:
        return "DD/MM/YYYY or MM/DD/YYYY (no day above 12 tells which)"
    return found[0]


def _infer_column(text: pd.Series) -> dict:
    """Contract type of a column of text cells, with its observed facts under ``_``-keys."""
    values = text.dropna()
    spec: dict = {}
    numbers = pd.to_numeric(values, errors="coerce")
    dates = pd.to_datetime(values, format="%Y-%m-%d", errors="coerce")
    if len(values) and numbers.notna().all():
        spec["type"] = "integer" if bool((numbers == numbers.round()).all()) else "float"
        spec["_min"], spec["_max"] = _plain(numbers.min()), _plain(numbers.max())
    elif len(values) and dates.notna().all():
        spec["type"] = "date"
        spec["_min"], spec["_max"] = dates.min().date(), dates.max().date()
    elif values.nunique() <= MAX_LEVELS:
        spec["type"] = "category"
        spec["levels"] = sorted(values.unique().tolist())
    else:
        spec["type"] = "string"
    if spec["type"] in ("category", "string"):
        spec["_date_spelling"] = _other_date_spelling(values)
    if text.isna().any():
        spec["nullable"] = True
    spec["_distinct"] = int(values.nunique())
    if spec["_distinct"] == 2:
        spec["_levels"] = sorted(values.unique().tolist())
    spec["_blanks"] = int(text.isna().sum())
    return spec


def _plain(x):
    x = float(x)
    return int(x) if x.is_integer() else x


def _is_numeric(spec: dict) -> bool:
    return spec["type"] in ("integer", "float")


# --------------------------------------------------------------------------------------------
# univariate discrimination


def _auc(score, event) -> float | None:
    """Area under the ROC curve of ``score`` for the 0/1 ``event`` (ties count one half).

    Mann-Whitney form with average ranks; None when one class is absent.

    >>> _auc([1, 2, 3, 4], [0, 0, 1, 1])
    1.0
    >>> _auc([1, 2, 2, 4], [0, 1, 0, 1])
    0.875
    """
    score, event = np.asarray(score, dtype=float), np.asarray(event, dtype=bool)
    n1, n0 = int(event.sum()), int((~event).sum())
    if n1 == 0 or n0 == 0:
        return None
    ranks = pd.Series(score).rank(method="average").to_numpy()
    return float((ranks[event].sum() - n1 * (n1 + 1) / 2) / (n1 * n0))


def _column_auc(text: pd.Series, spec: dict, event: pd.Series) -> float | None:
    """Univariate AUC of a column for ``event``: its values, or a level's event rate."""
    present = text.notna() & event.notna()
    if present.sum() < 10:
        return None
    values, outcome = text[present], event[present].astype(bool)
    if _is_numeric(spec):
        return _auc(pd.to_numeric(values).to_numpy(), outcome.to_numpy())
    rate = outcome.groupby(values).mean()
    return _auc(values.map(rate).to_numpy(), outcome.to_numpy())


def _near_perfect(auc: float | None) -> bool:
    return auc is not None and (auc >= LEAK_AUC or auc <= 1 - LEAK_AUC)


# --------------------------------------------------------------------------------------------
# roles: id, target, adverse level


def _choose_id(raw: pd.DataFrame, columns: dict, given: str | None) -> tuple[str, str]:
    """The id column and why; raises InitError when none has one value per row."""
    n = len(raw)
    if given is not None:
        _require_column(raw, given, "--id")
        blanks, distinct = int(raw[given].isna().sum()), int(raw[given].nunique())
        if blanks or distinct != n:
            raise InitError(f"--id {given}: expected one distinct, non-blank value per row ({n} rows), "
                            f"found {distinct} distinct values and {blanks} blank cell(s)")
        return given, "given with --id"
    unique = [c for c in raw.columns if columns[c]["_blanks"] == 0 and columns[c]["_distinct"] == n
              and columns[c]["type"] != "float"]
    named = [c for c in unique if _looks_like_id_name(c)]
    if named:
        return named[0], "its name reads like an identifier and every value is distinct"
    if unique:
        return unique[0], "the first column with one distinct value per row"
    raise InitError(
        f"no column can be the id: expected a column with one distinct, non-blank value on each of the "
        f"{n} rows (data.id_column), found none; add a row-id column to a copy of the file "
        "(e.g. 1, 2, 3, ...) or name one with --id COLUMN")


def _require_column(raw: pd.DataFrame, name: str, option: str) -> None:
    if name not in raw.columns:
        raise InitError(f"{option} {name}: no such column in the file; expected one of: "
                        + ", ".join(map(str, raw.columns)))


def _two_levels(raw: pd.DataFrame, name: str, option: str) -> list[str]:
    levels = sorted(raw[name].dropna().unique().tolist())
    if len(levels) != 2:
        shown = ", ".join(repr(v) for v in levels[:10]) + (", ..." if len(levels) > 10 else "")
        raise InitError(f"{option} {name}: the target must have exactly two values (a yes/no outcome), "
                        f"found {len(levels)}: {shown}")
    return levels


def _binarised_from(raw: pd.DataFrame, columns: dict, name: str, *, id_column: str) -> str | None:
    """A many-valued numeric column that separates ``name`` almost perfectly (its raw outcome).

    The id column and row numbers are skipped: a file sorted by its outcome separates it too.
    """
    event = (raw[name] == columns[name]["_levels"][1]).where(raw[name].notna())
    many_valued = [c for c, spec in columns.items() if c not in (name, id_column) and _is_numeric(spec)
                   and 10 < spec["_distinct"] < len(raw) - spec["_blanks"]]
    return next((c for c in many_valued if _near_perfect(_column_auc(raw[c], columns[c], event))), None)


def _choose_target(raw: pd.DataFrame, columns: dict, *, id_column: str, given: str | None) -> tuple[str, str | None]:
    """The target and, when guessed, why it was chosen (None when given with ``--target``)."""
    if given is not None:
        _require_column(raw, given, "--target")
        if given == id_column:
            raise InitError(f"--target {given}: this column is the id column (one value per row), not an outcome")
        _two_levels(raw, given, "--target")
        return given, None
    candidates = [c for c in raw.columns if c != id_column and columns[c]["_distinct"] == 2
                  and columns[c]["type"] != "date"]
    if not candidates:
        raise InitError("no column can be the target: expected a column with exactly two values (a yes/no "
                        "outcome), found none; make a two-valued outcome column in a copy of the file and "
                        "rerun with --target COLUMN")
    others = [c for c in raw.columns if c != id_column]
    edges, sample = {others[0], others[-1]}, _screen_sample(raw)
    scored = []
    for name in candidates:
        score, reasons = _target_evidence(sample, columns, name, edge=name in edges, id_column=id_column)
        scored.append((score, -others.index(name), name, reasons))
    score, _, name, reasons = max(scored)
    if not reasons:
        reasons = ["no name or content pointed to an outcome; it is the first two-valued column at either end"
                   if name in edges else "no name or content pointed to an outcome"]
    return name, "; ".join(reasons)


def _target_evidence(raw: pd.DataFrame, columns: dict, name: str, *, edge: bool, id_column: str) -> tuple[float, list[str]]:
    levels = columns[name]["_levels"]
    score, reasons = 0.5 if edge else 0.0, []
    strength = _outcome_strength(name)
    if strength == 2:
        score, reasons = score + 3, reasons + [f"its name '{name}' reads like an outcome"]
    elif strength == 1:
        score, reasons = score + 1, reasons + [f"its name '{name}' may hold an outcome"]
    meaning = [v for v in levels if _level_class(v) and _normal(v) not in GENERIC_LEVELS]
    if meaning:
        score, reasons = score + 2, reasons + [f"its values {levels} read like outcomes"]
    raw_outcome = _binarised_from(raw, columns, name, id_column=id_column)
    if raw_outcome:
        score, reasons = score + 2, reasons + [f"it is a cut of '{raw_outcome}' (a binarised outcome)"]
    if _protected_kind(name):
        score -= 3
    if columns[name]["_blanks"]:
        score -= 1
    return score, reasons


def _normal(level: str) -> str:
    text = str(level).strip().lower()
    try:
        number = float(text)
    except ValueError:
        return text
    return str(_plain(number)) if math.isfinite(number) else text


def _level_class(level: str) -> str | None:
    """'adverse', 'favourable' or None, from the meaning of a target level."""
    text = _normal(level)
    words = [text] + _tokens(text)
    adverse = any(w in ADVERSE_LEVELS for w in words)
    favourable = any(w in FAVOURABLE_LEVELS for w in words)
    if adverse == favourable:
        return None
    return "adverse" if adverse else "favourable"


def _choose_positive(raw: pd.DataFrame, target: str, *, given: str | None) -> tuple[str, str | None, bool]:
    """The adverse level, why it was chosen, and whether its meaning was clear.

    Raises InitError when ``given`` is not one of the target's values.
    """
    levels = _two_levels(raw, target, "--target" if given is None else "target")
    if given is not None:
        if given not in levels:
            raise InitError(f"--positive {given}: not a value of target '{target}'; "
                            f"its values are: {', '.join(repr(v) for v in levels)}")
        return given, None, True
    kinds = {v: _level_class(v) for v in levels}
    adverse = [v for v in levels if kinds[v] == "adverse"]
    favourable = [v for v in levels if kinds[v] == "favourable"]
    if len(adverse) == 1 and len(favourable) <= 1:
        chosen = adverse[0]
    elif len(favourable) == 1 and not adverse:
        chosen = next(v for v in levels if v != favourable[0])
    else:
        counts = raw[target].value_counts()
        chosen = min(levels, key=lambda v: (counts[v], v))
        share = counts[chosen] / counts.sum()
        return chosen, (f"COULD NOT TELL which of {levels} is the adverse outcome; took the rarer one "
                        f"'{chosen}' ({share:.1%} of rows)"), False
    why = f"'{chosen}' reads as the adverse outcome of {levels}"
    generic = all(_normal(v) in GENERIC_LEVELS for v in levels)
    if generic and any(t.startswith(FAVOURABLE_TARGETS) for t in _tokens(target)):
        chosen = next(v for v in levels if v != chosen)
        why = (f"the name '{target}' says its 'yes' is the favourable outcome, so '{chosen}' is taken as the "
               f"adverse one")
    return chosen, why, True


# --------------------------------------------------------------------------------------------
# which columns become features, which are left out and why


def _leave_out_reason(raw: pd.DataFrame, name: str, spec: dict, event: pd.Series, *, date_column) -> str | None:
    n = len(raw)
    if name == date_column:
        return "the date column (data.date_column): used for the split and per-period checks"
    if spec["type"] == "date":
        return "a date: a point in time is not a model input"
    if spec.get("_date_spelling"):
        return (f"a point in time written as {spec['_date_spelling']}, not YYYY-MM-DD, which is how oddsmith reads "
                "dates: to split by time or report periods, add the date as YYYY-MM-DD in a column of its own and "
                "name it in data.date_column")
    if _looks_like_id_name(name) or (spec["type"] == "string" and spec["_distinct"] == n - spec["_blanks"]):
        why = "looks like an identifier (a key, not a measurement)"
        if spec["_distinct"] < n - spec["_blanks"]:
            why += "; rows share it, so consider split.method: grouped with split.group_column"
        return why
    if spec["type"] == "integer" and spec["_distinct"] == n and spec["_max"] - spec["_min"] == n - 1:
        return "looks like a row number (the values 1..n in some order)"
    if spec["type"] == "string":
        return f"free text or a code with {spec['_distinct']} distinct values (more than {MAX_LEVELS})"
    if spec["_distinct"] <= 1:
        return "the same value on every row"
    if _outcome_strength(name) == 2 and not (spec["type"] == "category" and spec["_distinct"] > 2):
        # a many-level category (a loan grade A-G) is an assessment, not an outcome
        return "its name reads like another outcome, which is not known when a prediction is made"
    auc = _column_auc(raw[name], spec, event)
    if _near_perfect(auc):
        return (f"a near-perfect predictor of the target (univariate AUC {auc:.3f}): likely the outcome itself, "
                "a function of it, or recorded after it")
    return None


def _numeric_bands(values: pd.Series) -> list:
    """Round cut points of a numeric sensitive attribute: at most 4 cuts, each group >= 10% of rows.

    Cuts start at the quartiles rounded to a round step (1, 2 or 5 times a power of ten, near
    half the interquartile range); a cut leaving a group under ``BAND_SHARE`` is dropped.
    A value equal to a cut belongs to the group above it.
    """
    v = pd.to_numeric(values.dropna()).to_numpy(dtype=float)
    q1, q2, q3 = np.quantile(v, [0.25, 0.5, 0.75])
    step = _round_step((q3 - q1) / 2 or abs(q2) / 10 or 1.0)
    cuts = sorted({_plain(round(q / step) * step) for q in (q1, q2, q3)})
    cuts = [c for c in cuts if v.min() < c <= v.max()]
    while cuts:
        sizes = np.bincount(np.searchsorted(cuts, v, side="right"), minlength=len(cuts) + 1)
        small = int(np.argmin(sizes))
        if sizes[small] >= BAND_SHARE * len(v):
            break
        if small == 0 or (small < len(cuts) and sizes[small + 1] < sizes[small - 1]):
            cuts.pop(small)  # merge with the group above
        else:
            cuts.pop(small - 1)  # merge with the group below
    return cuts


def _round_step(width: float) -> float:
    """1, 2 or 5 times a power of ten nearest ``width`` on a log scale."""
    power = 10 ** math.floor(math.log10(width))
    return min((m * power for m in (1, 2, 5, 10)), key=lambda s: abs(math.log(s / width)))


def _sensitive_entry(raw: pd.DataFrame, name: str, spec: dict) -> tuple[object, str]:
    kind = _protected_kind(name)
    blanks = spec["_blanks"]
    warn = (f"; {blanks} blank cell(s) form their own group '{BLANK_GROUP}' (review: a blank can hide a "
            "group that needs assessing)" if blanks else "")
    extra = {"blanks": BLANK_GROUP} if blanks else {}
    if _is_numeric(spec) and spec["_distinct"] <= 10:
        # A few numeric codes (race coded 1/2/3): each code is a group, so the contract
        # declares them as category levels rather than numbers that would need bands.
        for key in ("min", "max", "_min", "_max"):
            spec.pop(key, None)
        spec["type"] = "category"
        spec["levels"] = sorted(raw[name].dropna().astype(str).unique().tolist())
        return ({"name": name} | extra if extra else name), f"DRAFT {kind}: {spec['_distinct']} numeric codes, declared as category levels; each code is a group{warn}"
    if _is_numeric(spec):
        cuts = _numeric_bands(raw[name])
        groups = [f"below {cuts[0]}"] + [f"{a} to <{b}" for a, b in zip(cuts, cuts[1:])] + [f"{cuts[-1]} and over"]
        return {"name": name, "bands": cuts} | extra, f"DRAFT {kind}, numeric: groups {', '.join(groups)}{warn}"
    return ({"name": name} | extra if extra else name), f"DRAFT {kind}: each value is a group{warn}"


# --------------------------------------------------------------------------------------------
# contract


def _contract_entry(name: str, spec: dict, *, id_column: str, target: str) -> tuple[dict, str | None]:
    """The contract declaration of a column and its DRAFT comment."""
    entry = {k: v for k, v in spec.items() if not k.startswith("_")}
    if name == id_column:
        return entry | {"unique": True}, "the id column: one distinct value per row"
    if name == target:
        return {"type": "category", "levels": spec["_levels"]}, "the target: exactly these two levels"
    if _is_numeric(spec):
        bounds, why = _plausible_range(name, spec)
        entry.update(bounds)
        return entry, f"DRAFT range: {why}; observed {spec['_min']} to {spec['_max']}"
    if spec["type"] == "date":
        entry["min"] = f"{spec['_min'].year}-01-01"
        return entry, (f"DRAFT range: from the first observed year, no upper limit so later dates pass; "
                       f"observed {spec['_min']} to {spec['_max']}")
    if spec["type"] == "category":
        return entry, "DRAFT: the observed levels; a row with any other level will be refused"
    return entry, None


def _plausible_range(name: str, spec: dict) -> tuple[dict, str]:
    low, high, tokens = spec["_min"], spec["_max"], set(_tokens(name))
    if _protected_kind(name) == "age" and 0 <= low and high <= 120:
        return {"min": 0, "max": 120}, "a human age"
    if low >= 0 and high <= 1 and tokens & {"share", "rate", "prob", "probability", "proportion", "fraction"}:
        return {"min": 0, "max": 1}, "a share"
    if low >= 0 and high <= 100 and tokens & {"pct", "percent", "percentage"}:
        return {"min": 0, "max": 100}, "a percentage"
    if spec["type"] == "integer" and spec["_distinct"] == 2 and (low, high) == (0, 1):
        return {"min": 0, "max": 1}, "a 0/1 indicator"
    if low >= 0:
        return {"min": 0}, "non-negative (every observed value is >= 0), no upper limit"
    return {}, "no limits drafted (negative values occur)"


# --------------------------------------------------------------------------------------------
# YAML with comments


@dataclass
class _Notes:
    at: dict = field(default_factory=dict)  # path -> comment at the end of that line
    before: dict = field(default_factory=dict)  # path -> comment lines above that key
    after: dict = field(default_factory=dict)  # path -> comment lines below that key's content


def _flow(value) -> str:
    """One YAML value on one line (flow style)."""
    text = yaml.safe_dump([value], default_flow_style=True, width=1 << 30, allow_unicode=True, sort_keys=False)
    return text.strip()[1:-1]


def _yaml(doc: dict, notes: _Notes, *, path: tuple = (), depth: int = 0) -> list[str]:
    """Block YAML for the top two levels, flow style below, with the comments of ``notes``."""
    pad, lines = "  " * depth, []

    def noted(line: str, where: tuple) -> str:
        return f"{line}  # {notes.at[where]}" if where in notes.at else line

    for key, value in doc.items():
        where = path + (key,)
        lines += [f"{pad}# {t}" for t in notes.before.get(where, [])]
        head = f"{pad}{_flow(key)}:"
        if isinstance(value, dict) and value and depth == 0:
            lines.append(noted(head, where))
            lines += _yaml(value, notes, path=where, depth=depth + 1)
        elif isinstance(value, list) and value:
            lines.append(noted(head, where))
            lines += [noted(f"{pad}  - {_flow(item)}", where + (i,)) for i, item in enumerate(value)]
        else:
            lines.append(noted(f"{head} {_flow(value)}", where))
        lines += [f"{pad}# {t}" for t in notes.after.get(where, [])]
    return lines


def _render(doc: dict, notes: _Notes, header: list[str]) -> str:
    text = "\n".join([f"# {t}" for t in header] + _yaml(doc, notes)) + "\n"
    if yaml.safe_load(text) != doc:  # the comments must never change what the file says
        raise RuntimeError("internal error: the drafted YAML does not read back as drafted")
    return text


# --------------------------------------------------------------------------------------------
# the draft


@dataclass
class _Roles:
    id_column: str
    id_why: str | None
    target: str
    positive: str
    date_column: str | None
    target_why: str | None
    positive_why: str | None
    positive_clear: bool
    out_of_time: bool
    #: Why a stratified split was drafted although the data are dated (None otherwise).
    split_why: str | None = None


def _choose_date_column(raw: pd.DataFrame, columns: dict) -> tuple[str | None, bool]:
    """The date column, and whether an out-of-time split is the obvious choice (one date, >= 6 months)."""
    dates = [c for c, s in columns.items() if s["type"] == "date"]
    if not dates:
        return None, False
    months = pd.to_datetime(raw[dates[0]], format="%Y-%m-%d").dt.to_period("M").nunique()
    return dates[0], len(dates) == 1 and months >= 6


def _levels_after_the_cutoff(raw: pd.DataFrame, roles: _Roles, features: list) -> tuple[_Roles, dict]:
    """Make an out-of-time draft buildable when a categorical has levels that first occur in
    the test part (the latest quarter): the model cannot score a level it never saw.

    Where rare training levels will be pooled (fewer than ``min_count`` rows), the feature
    gets ``missing: indicator`` so the new levels join the pool (``features`` is edited in
    place); where nothing is pooled, the draft falls back to a stratified split and says why.
    Returns the roles (``split_why`` set on a fall-back) and {feature index: note}.
    """
    if not roles.out_of_time:
        return roles, {}
    dates = pd.to_datetime(raw[roles.date_column], format="%Y-%m-%d")
    is_test = (dates >= latest_fraction_cutoff(dates.dropna(), DRAFT_TEST_FRACTION)).to_numpy()
    notes, unpooled = {}, []
    for i, feature in enumerate(features):
        if feature["type"] != "categorical":
            continue
        text = raw[feature["name"]].astype("string")
        train_counts = text[~is_test].value_counts()
        new = sorted(set(text[is_test].dropna()) - set(train_counts.index))
        if not new:
            continue
        shown = ", ".join(repr(v) for v in new[:3]) + (f" and {len(new) - 3} more" if len(new) > 3 else "")
        if (train_counts < feature_default("min_count")).any():
            feature["missing"] = "indicator"
            notes[i] = (f"level(s) {shown} first occur in the test part: with missing: indicator they join the "
                        "pooled rare levels")
        else:
            unpooled.append(f"{feature['name']} ({shown})")
    if unpooled:
        why = ("stratified although the data are dated: an out-of-time split would leave levels of "
               + "; ".join(unpooled) + " only in the test part, which the model could not score")
        return replace(roles, out_of_time=False, split_why=why), notes
    return roles, notes


def _screen_sample(raw: pd.DataFrame) -> pd.DataFrame:
    return raw if len(raw) <= SCREEN_ROWS else raw.sample(n=SCREEN_ROWS, random_state=0)


def draft(data_path: str | Path, *, contract_out: str | Path, config_out: str | Path, run: str | None = None,
          target: str | None = None, positive: str | None = None, id_column: str | None = None,
          project_dir: str | Path = ".") -> Draft:
    """Write a draft contract and config for ``data_path``; never overwrite, never touch the input.

    Parameters
    ----------
    data_path : path
        The CSV file (read only).
    contract_out, config_out : path
        Where to write the drafts; existing files are refused.
    run : str, optional
        Run name (default: the file's stem).
    target, positive, id_column : str, optional
        The outcome column, its adverse level, and the id column; guessed (and said so) when absent.
    project_dir : path
        Folder the config's paths are written relative to (where the build runs).

    Returns
    -------
    Draft
        The two paths, the guesses to check, and a summary of where each column went.

    Raises
    ------
    InitError
        An existing output, an unknown column, a target without exactly two values, an unknown level.
    """
    contract_out, config_out = Path(contract_out), Path(config_out)
    existing = [str(p) for p in (contract_out, config_out) if p.exists()]
    if existing:
        raise InitError("refusing to overwrite existing file(s): " + ", ".join(existing) + "; choose other paths")
    raw = read_raw(data_path)
    columns = {c: _infer_column(raw[c]) for c in raw.columns}
    roles = _choose_roles(raw, columns, target=target, positive=positive, id_column=id_column)
    features, left_out, sensitive = _assign_columns(raw, columns, roles)
    roles, feature_notes = _levels_after_the_cutoff(raw, roles, features)
    project_dir = Path(project_dir)
    contract_text = _contract_text(data_path, columns, roles)
    config_text, checks = _config_text(raw, data_path, contract_out, roles, features=features,
                                       left_out=left_out, sensitive=sensitive, run=run, project_dir=project_dir,
                                       feature_notes=feature_notes)
    write_text(contract_out, contract_text)
    try:
        write_text(config_out, config_text)
    except OSError as exc:  # never leave one draft without the other
        contract_out.unlink()
        raise InitError(f"could not write {config_out}: {exc}; nothing was written") from exc
    summary = [f"id column: {roles.id_column}; target: {roles.target}, adverse outcome '{roles.positive}'",
               f"features ({len(features)}): " + ", ".join(f["name"] for f in features),
               "fairness.sensitive: " + (", ".join(_flow(e) for e, _ in sensitive) or "none found")]
    summary += [f"left out: {c} — {r}" for c, r in left_out.items()]
    return Draft(contract_out, config_out, checks, summary)


def _assign_columns(raw: pd.DataFrame, columns: dict, roles: _Roles) -> tuple[list, dict, list]:
    """Features; left-out columns with their reasons; sensitive entries with their comments."""
    sample = _screen_sample(raw)
    event = (sample[roles.target] == roles.positive).where(sample[roles.target].notna())
    features, left_out, sensitive = [], {}, []
    for name, spec in columns.items():
        if name in (roles.id_column, roles.target):
            continue
        kind = _protected_kind(name)
        if kind and spec["type"] in ("integer", "float", "category"):
            sensitive.append(_sensitive_entry(raw, name, spec))
            left_out[name] = f"looks like a protected characteristic ({kind}): drafted under fairness.sensitive"
            continue
        reason = _leave_out_reason(sample, name, spec, event, date_column=roles.date_column)
        if reason:
            left_out[name] = reason
        else:
            features.append({"name": name, "type": "numeric" if _is_numeric(spec) else "categorical"}
                            | ({"missing": "indicator"} if spec["_blanks"] else {}))
    if not features:
        raise InitError("no column is left to be a model input after leaving out "
                        + "; ".join(f"{c} ({r})" for c, r in left_out.items()))
    return features, left_out, sensitive


def _choose_roles(raw: pd.DataFrame, columns: dict, *, target, positive, id_column) -> _Roles:
    id_name, id_why = _choose_id(raw, columns, id_column)
    target_name, target_why = _choose_target(raw, columns, id_column=id_name, given=target)
    if positive is not None and target is None and positive not in columns[target_name]["_levels"]:
        # a level only means something for a known column: say which one was guessed
        raise InitError(f"--positive {positive}: not a value of the guessed target '{target_name}'; its values "
                        f"are: {', '.join(map(repr, columns[target_name]['_levels']))}; name the target with "
                        "--target COLUMN")
    level, positive_why, clear = _choose_positive(raw, target_name, given=positive)
    date_column, out_of_time = _choose_date_column(raw, columns)
    return _Roles(id_name, None if id_column else id_why, target_name, level, date_column, target_why,
                  positive_why, clear, out_of_time)


def _contract_text(data_path, columns: dict, roles: _Roles) -> str:
    declared, notes = {}, _Notes()
    for name, spec in columns.items():
        declared[name], note = _contract_entry(name, spec, id_column=roles.id_column, target=roles.target)
        if note:
            notes.at[("columns", name)] = note
    doc = {"format": "oddsmith-contract/1",
           "description": f"DRAFT drafted by `oddsmith init` from {Path(data_path).name}: review every line.",
           "columns": declared}
    header = ["DRAFT written by `oddsmith init`: review every line before use.",
              "Ranges are plausible bounds, not the observed extremes: tighten or widen them to what your",
              "data may hold. A blank cell is refused unless the column says nullable: true."]
    return _render(doc, notes, header)


def _inside(path, project_dir: Path) -> str | None:
    """``path`` relative to the project folder (POSIX form), or None when it lies outside."""
    try:
        return Path(path).resolve().relative_to(project_dir.resolve()).as_posix()
    except ValueError:
        return None


def _config_text(raw, data_path, contract_out, roles: _Roles, *, features, left_out, sensitive, run,
                 project_dir: Path, feature_notes: dict) -> tuple[str, list[str]]:
    """The commented draft config, and the lines the person must check."""
    events = int((raw[roles.target] == roles.positive).sum())
    sizes = {"rows": len(raw), "events": events, "test_rows": round(DRAFT_TEST_FRACTION * len(raw)),
             "train_events": round((1 - DRAFT_TEST_FRACTION) * events)}
    notes = _Notes()
    checks = _role_checks(raw, roles, notes)
    data_rel = _inside(data_path, project_dir)
    if data_rel is None:
        checks.append(f"the data file {data_path} is outside the project folder {project_dir.resolve()}: "
                      "copy it in (or set data.allow_outside_project: true)")
    contract_rel = _inside(contract_out, project_dir) or str(contract_out)
    data = {"path": data_rel or str(data_path), "contract": contract_rel, "id_column": roles.id_column,
            "target": roles.target, "positive_label": str(roles.positive), "date_column": roles.date_column,
            "extra_columns": "reject"}
    config = _config_doc(data, roles, features=features, sensitive=[e for e, _ in sensitive], sizes=sizes,
                         run=run or _run_name(data_path))
    _section_notes(notes, roles, left_out, sizes, folds=config["cross_validation"]["folds"])
    for i, note in feature_notes.items():
        notes.at[("features", i)] = note
    if roles.split_why:
        notes.at[("split", "method")] = roles.split_why
        checks.append(f"split: {roles.split_why}; set split.cutoff_date to a date after which every level "
                      "has occurred, or keep the random split")
    for i, (entry, note) in enumerate(sensitive):
        notes.at[("fairness", "sensitive", i)] = note
        if isinstance(entry, dict) and "blanks" in entry:
            checks.append(f"sensitive attribute '{entry['name']}' has blank cells: drafted as a group of their own "
                          f"('{BLANK_GROUP}'); review whether that is right")
    header = ["DRAFT written by `oddsmith init`: review every line before use.",
              f"{sizes['rows']} rows, {events} with {roles.target} = {roles.positive} "
              f"({events / sizes['rows']:.1%}). Keys: config/README.md."]
    return _render(config, notes, header), checks


def _role_checks(raw: pd.DataFrame, roles: _Roles, notes: _Notes) -> list[str]:
    """Mark each guessed role at its key; return the same warnings for the terminal."""
    checks = []
    if roles.id_why:
        notes.at[("data", "id_column")] = f"GUESSED: {roles.id_why}"
        checks.append(f"GUESSED id column '{roles.id_column}': {roles.id_why}. Rerun with --id COLUMN if wrong.")
    if roles.target_why:
        notes.at[("data", "target")] = f"GUESSED: {roles.target_why}. Check it (or rerun with --target COLUMN)"
        checks.append(f"GUESSED target '{roles.target}': {roles.target_why}. Rerun with --target COLUMN if wrong.")
    if roles.positive_why and roles.positive_clear:
        notes.at[("data", "positive_label")] = f"GUESSED adverse outcome: {roles.positive_why}; check it"
        checks.append(f"GUESSED adverse outcome '{roles.positive}': {roles.positive_why}. "
                      "Rerun with --positive LEVEL if wrong.")
    elif roles.positive_why:
        notes.at[("data", "positive_label")] = f"{roles.positive_why}; SET IT (or rerun with --positive LEVEL)"
        checks.append(f"{roles.positive_why}. Rerun with --positive LEVEL naming the adverse outcome.")
    blanks = int(raw[roles.target].isna().sum())
    if blanks:
        checks.append(f"target '{roles.target}' has {blanks} blank cell(s): the build refuses them; "
                      "drop those rows in a copy of the file")
    return checks


def _config_doc(data: dict, roles: _Roles, *, features, sensitive, sizes: dict, run: str) -> dict:
    """Every section a build needs, sized for the data (folds, bins, group size); no scoring section."""
    return {
        "run": run,
        "data": data,
        "features": features,
        "interactions": [],
        "fairness": {"sensitive": sensitive, "segments": [], "use_sensitive_as_features": False,
                     "min_group_size": min(100, max(20, sizes["test_rows"] // 10))},
        "split": {"method": "out_of_time" if roles.out_of_time else "stratified", "test_fraction": DRAFT_TEST_FRACTION,
                  "seed": 20261202},
        "cross_validation": {"folds": 5 if sizes["train_events"] >= 50 else 3, "repeats": 1, "seed": 7},
        "candidates": [{"name": "logit_all", "kind": "logit"}, {"name": "probit_all", "kind": "probit"},
                       {"name": "cloglog_all", "kind": "cloglog"}, {"name": "lasso", "kind": "l1", "grid": GRID},
                       {"name": "ridge", "kind": "l2", "grid": GRID}],
        "selection": {"metric": "log_loss", "rule": "one_standard_error"},
        "costs": {"false_positive": 1, "false_negative": 5, "adopt": "empirical", "bootstrap": 300, "seed": 11},
        "evaluation": {"calibration_bins": 10 if sizes["test_rows"] >= 500 else 5},
        "card": {"title": f"DRAFT {roles.target} model", "version": "0.1.0",
                 "owner": "DRAFT: name the accountable team",
                 "intended_use": "DRAFT: say which decisions the model supports, for whom, and who reviews its flags.",
                 "out_of_scope": ["DRAFT: list uses the model is not for."]},
    }


def _section_notes(notes: _Notes, roles: _Roles, left_out: dict, sizes: dict, *, folds: int) -> None:
    notes.before[("data",)] = ["The data file, its contract, and the roles of its columns."]
    notes.before[("features",)] = ["Model inputs (DRAFT: numeric as they are; consider transform: log for skewed "
                                   "amounts). Missing values get an indicator where blanks occur."]
    notes.after[("features",)] = (["Left out of the features (add one back only if it is known when a "
                                   "prediction is made):"] + [f"  {c} — {r}" for c, r in left_out.items()])
    notes.before[("fairness",)] = ["Attributes the model must not use, whose groups the card assesses (DRAFT: "
                                   "drafted from column names; check the list)."]
    notes.before[("split",)] = [f"Out-of-time split: the test part is the latest quarter of the rows by "
                                f"{roles.date_column}." if roles.out_of_time else
                                "Random split, stratified by the target: a quarter of the rows for the test."]
    notes.before[("cross_validation",)] = [f"Shared folds on the training part ({folds} folds for about "
                                           f"{sizes['train_events']} training events)."]
    notes.before[("candidates",)] = ["Candidate models fitted on the same folds; a baseline is always added."]
    notes.before[("costs",)] = ["PLACEHOLDER costs: set what a false alarm (flagging a case that turns out fine) "
                                f"and a miss (an unflagged '{roles.positive}') cost in your setting;",
                                "the adopted cut-off follows from their ratio."]
    notes.at[("costs", "false_positive")] = "PLACEHOLDER"
    notes.at[("costs", "false_negative")] = "PLACEHOLDER"
    notes.before[("card",)] = ["The model card: DRAFT placeholders, write your own."]


def _run_name(data_path) -> str:
    name = re.sub(r"[^A-Za-z0-9_.-]+", "_", Path(data_path).stem).strip("_.-")[:60]
    return name if name and name[0].isalnum() else "analysis"
