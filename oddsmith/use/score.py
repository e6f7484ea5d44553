"""Score new rows with the frozen model of a results folder: probability, decision, reasons.

Everything is recomputed from the folder's artifacts (the feature recipe, the selected
model's JSON, the adopted cut-off and the data contract) through :mod:`oddsmith.fitting.predict`,
the path the evaluate stage uses, so a row scored here gets the probability the card
describes, bit for bit.

Reason codes
    The model is linear on its link scale: ``eta = intercept + sum_j beta_j * x_j`` over
    its design columns ``j``. Each design column belongs to one feature of the recipe (its
    value columns and its missing indicator); an interaction column ``a:b`` is split half
    to ``a`` and half to ``b`` (a product of two inputs belongs to both equally; one half
    each keeps the reasons per recognisable input and keeps the sum exact). The *partial
    score* of feature ``f`` for a row is ``s_f = sum_j w_jf * beta_j * x_j`` with weights
    ``w_jf`` of 1, 0.5 or 0. A row's contribution of ``f`` is ``s_f - r_f`` for a stated
    reference ``r_f``:

    ``training_mean`` (default)
        ``r_f`` is ``s_f`` at the training mean of every design column (for a model fitted
        on standardised columns that mean is 0). The contributions of a row then add up
        exactly to ``eta - eta_ref``, ``eta_ref`` being the linear predictor at the
        training means.
    ``most_favourable``
        ``r_f`` is the smallest ``s_f`` over the training rows, the most favourable value
        observed in development; every contribution of a training row is then >= 0.

    The reasons of a row are the (at most) ``top_k`` features with the largest positive
    contributions, i.e. those pushing its score most toward the adverse outcome (the event
    ``data.positive_label``; every link is increasing, so a larger ``eta`` is a larger
    probability). Ties keep the recipe's feature order. A feature at or below its
    reference is never a reason, so a row may have fewer than ``top_k``. Contributions are
    on the model's link scale: log-odds for a logit link, the probit (normal quantile)
    scale for probit, ``log(-log(1 - p))`` for complementary log-log.

Policies for missing and unseen values
    Exactly the recipe's: ``missing: reject`` refuses a missing value, ``missing:
    indicator`` fills it and sets the row's ``<feature>:filled`` flag; an unseen level is
    mapped to the pooled level (flag ``<feature>:unseen``) where the recipe allows it, otherwise
    refused. The flags are output columns and their counts are in the summary.

CSV output
    Text cells (and header names) that begin with ``=``, ``+``, ``-``, ``@``, a tab or a
    carriage return are prefixed with an apostrophe, so a spreadsheet shows them as text
    instead of running them as formulas; every text cell is quoted. Numeric columns are
    written as numbers and left alone: a negative contribution such as ``-0.25`` is a
    number the writer produced, never text from the data. The Parquet file holds the
    unaltered values.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv

from oddsmith.data.contract import CONTRACT_FORMAT, read_raw, validate_frame
from oddsmith.data.recipe import FORMAT as RECIPE_FORMAT
from oddsmith.data.recipe import recipe_problems
from oddsmith.errors import ArgumentError, ArtifactError, ContractError
from oddsmith.fitting.models import MODEL_FORMAT, inverse_link, linear_predictor
from oddsmith.fitting.predict import model_design
from oddsmith.io import read_json, read_parquet, read_yaml, sha256_file
from oddsmith.use.options import EXTRA_COLUMN_POLICIES, REFERENCES

DEFAULT_TOP_K = 3
# Cells a spreadsheet would read as the start of a formula (or of a hidden control).
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
NEUTRALISER = "'"
# A column empty in every row of a batch of at least this many rows is refused.
ALL_EMPTY_MIN_ROWS = 2
LINK_SCALES = {
    "logit": "log-odds (logit link)",
    "probit": "probit scale (standard-normal quantile of the probability)",
    "cloglog": "complementary log-log scale, log(-log(1 - p))",
}
_EXAMPLES = 3


@dataclass(frozen=True)
class ScoringModel:
    """The frozen model of a results folder, ready to score.

    Attributes
    ----------
    recipe, model, contract : dict
        Feature recipe, selected model (``oddsmith-model/1``) and data contract.
    candidate : str
        Name of the selected candidate.
    cutoff : float or None
        Adopted cut-off; rows with probability >= cutoff are flagged; None flags none.
    id_column, target : str
        Roles of columns, from the configuration the folder was built with.
    training : pandas.DataFrame
        The development training part (typed), for references and drift.
    source : str
        Where the artifacts came from (for messages and summaries).
    """

    recipe: dict
    model: dict
    contract: dict
    candidate: str
    cutoff: float | None
    id_column: str
    target: str
    training: pd.DataFrame
    source: str

    @property
    def link(self) -> str:
        return self.model["link"]


# ---------------------------------------------------------------------------- loading


def load_artifacts(*, recipe_path, selected_path, model_paths: dict, choice_path, contract_path, data_path,
                   assignment_path, id_column: str, target: str, source: str = "",
                   deliverable_path=None) -> ScoringModel:
    """Build a :class:`ScoringModel` from artifact paths (the score rule's inputs).

    ``model_paths`` maps candidate names to their ``model.json``; the one named in
    ``selected.json`` is used, unless ``deliverable_path`` names the selected candidate
    refitted on all rows (``final/model.json``, ``evaluation.refit_all``), which is then
    used instead. Formats are checked; a missing artifact is named.
    """
    selected = read_json(selected_path).get("candidate")
    if selected not in model_paths and deliverable_path is None:
        raise ArtifactError(f"{source or 'results'}: selected candidate {selected!r} has no model.json "
                            f"(known: {', '.join(sorted(model_paths))})")
    model = read_json(deliverable_path if deliverable_path is not None else model_paths[selected])
    if deliverable_path is not None and model.get("candidate") != selected:
        raise ArtifactError(f"{deliverable_path}: the refitted model is of candidate {model.get('candidate')!r}, "
                            f"the selected candidate is {selected!r}; rebuild the refit stage")
    recipe = read_json(recipe_path)
    contract = _read_contract(contract_path)
    _raise_format_problems(source, model=model, recipe=recipe, contract=contract)
    if model.get("status", "ok") != "ok":
        raise ArtifactError(f"{source or 'results'}: the selected model {selected!r} has no fit "
                            f"({model.get('status')}: {model.get('reason')})")
    problems = recipe_problems(recipe)
    if problems:
        raise ArtifactError(f"{source or 'results'}: the feature recipe is inconsistent", problems)
    choice = read_json(choice_path)
    if "adopted_cutoff" not in choice:
        raise ArtifactError(f"{choice_path}: no 'adopted_cutoff'")
    data = read_parquet(data_path)
    assignment = read_parquet(assignment_path)
    if len(assignment) != len(data):
        raise ArtifactError(f"{assignment_path}: {len(assignment)} rows, but the validated data has {len(data)}")
    training = data.loc[(assignment["part"] == "train").to_numpy()].reset_index(drop=True)
    return ScoringModel(recipe=recipe, model=model, contract=contract, candidate=selected,
                        cutoff=choice["adopted_cutoff"], id_column=id_column, target=target,
                        training=training, source=source)


def _read_contract(path) -> dict:
    contract = read_yaml(path, what="required artifact")
    if not isinstance(contract, dict) or not isinstance(contract.get("columns"), dict):
        raise ArtifactError(f"{path} is not a data contract (no 'columns' mapping)")
    for spec in contract["columns"].values():
        spec.setdefault("nullable", False)
        spec.setdefault("unique", False)
        spec.setdefault("required", True)
    return contract


def _raise_format_problems(source: str, **docs) -> None:
    expected = {"model": MODEL_FORMAT, "recipe": RECIPE_FORMAT, "contract": CONTRACT_FORMAT}
    problems = [
        f"{name}: format {doc.get('format')!r}, this oddsmith reads {expected[name]!r}"
        for name, doc in docs.items() if not isinstance(doc, dict) or doc.get("format") != expected[name]
    ]
    if problems:
        raise ArtifactError(f"{source or 'results'} was written in a format this oddsmith cannot read "
                            "(another version?)", problems)


# ---------------------------------------------------------------------------- the batch


def read_batch(path, *, encoding: str = "utf-8") -> pd.DataFrame:
    """Read a CSV of new rows as text cells (empty cell = missing); 0 rows is an error."""
    return read_raw(path, encoding=encoding)


def check_batch(sm: ScoringModel, raw: pd.DataFrame, *, extra_columns: str = "reject",
                source: str = "new data") -> tuple[pd.DataFrame, list[str]]:
    """Type and check a raw batch against the contract minus the target.

    Returns the typed frame and the list of ignored extra columns. Every problem is
    collected first: extra columns under ``reject``, a missing model feature, 0 rows, a
    column empty in every row, missing or duplicated ids, and everything the contract
    checks (types, ranges, levels, empty cells).

    Raises
    ------
    ContractError
        Listing every problem found.
    """
    if extra_columns not in EXTRA_COLUMN_POLICIES:
        raise ArgumentError(f"extra_columns must be one of {EXTRA_COLUMN_POLICIES}, got {extra_columns!r}")
    if len(raw) == 0:
        raise ContractError(f"{source}: the batch has 0 rows; nothing to score")
    declared = sm.contract["columns"]
    extra = [c for c in raw.columns if c not in declared]
    problems = []
    if extra and extra_columns == "reject":
        problems.append(f"column(s) {extra} are not declared in the data contract (scoring.extra_columns is "
                        "'reject'; remove them, or set it to 'ignore' / pass --extra-columns ignore)")
    raw = raw[[c for c in raw.columns if c in declared]]
    for name in (r["name"] for r in sm.recipe["features"]):
        if name not in raw.columns:
            problems.append(f"column '{name}': a feature of the model, not found in the batch")
    problems += _id_problems(raw, sm.id_column)
    if len(raw) >= ALL_EMPTY_MIN_ROWS:
        problems += [f"column '{c}' is empty in every one of the {len(raw)} rows (a broken extract?)"
                     for c in raw.columns if raw[c].isna().all()]
    contract = dict(sm.contract, _target=sm.target)
    try:
        typed = validate_frame(raw, contract, id_column=sm.id_column, target=None, extra_columns="ignore",
                               source=source)
    except ContractError as exc:
        problems += [p for p in exc.problems if p not in problems] or [str(exc)]
        typed = None
    if problems:
        raise ContractError(f"{source}: {len(problems)} problem(s); nothing was scored", problems)
    return typed, extra


def _id_problems(raw: pd.DataFrame, id_column: str) -> list[str]:
    if id_column not in raw.columns:
        return [f"column '{id_column}' (the id column) not found in the batch"]
    ids = raw[id_column]
    problems = []
    if ids.isna().any():
        rows = np.flatnonzero(ids.isna().to_numpy())[:_EXAMPLES] + 2  # +2: header line, 1-based
        problems.append(f"id column '{id_column}': {int(ids.isna().sum())} row(s) without an id, e.g. lines "
                        f"{', '.join(map(str, rows))}")
    repeated = ids[ids.duplicated(keep=False) & ids.notna()]
    if len(repeated):
        shown = ", ".join(repr(v) for v in pd.unique(repeated)[:_EXAMPLES])
        problems.append(f"id column '{id_column}': {repeated.nunique()} id(s) appear more than once "
                        f"({len(repeated)} rows), e.g. {shown}; each row needs its own id")
    return problems


# ---------------------------------------------------------------------------- reasons


def feature_weights(recipe: dict, design_columns: list[str]) -> tuple[list[str], np.ndarray]:
    """Share of each design column given to each feature.

    Returns the names of the features that own at least one of ``design_columns`` (in
    recipe order) and a matrix ``W`` (columns x features): 1 for a column the feature owns
    (value columns and missing indicator), 0.5 to each feature of an interaction column.

    Examples
    --------
    >>> recipe = {"features": [{"name": "a", "columns": ["a"]}, {"name": "b", "columns": ["b"]}],
    ...           "interactions": [{"features": ["a", "b"], "columns": ["a:b"]}]}
    >>> names, W = feature_weights(recipe, ["a", "a:b"])
    >>> names, W.tolist()
    (['a', 'b'], [[1.0, 0.0], [0.5, 0.5]])
    """
    order = [r["name"] for r in recipe["features"]]
    owner = {c: [r["name"]] for r in recipe["features"] for c in r["columns"]}
    owner.update({c: list(r["features"]) for r in recipe["interactions"] for c in r["columns"]})
    unknown = [c for c in design_columns if c not in owner]
    if unknown:
        raise ArtifactError(f"design column(s) {unknown} belong to no feature of the recipe")
    used = [name for name in order if any(name in owner[c] for c in design_columns)]
    W = np.zeros((len(design_columns), len(used)))
    for j, column in enumerate(design_columns):
        for name in owner[column]:
            W[j, used.index(name)] += 1.0 / len(owner[column])
    return used, W


def _model_design_means(sm: ScoringModel) -> np.ndarray:
    columns = sm.model["design_columns"]
    if sm.model.get("standardise"):
        return np.zeros(len(columns))  # the training mean of a standardised column
    return np.array([sm.recipe["means"][c] for c in columns], dtype=np.float64)


def _coefficients(sm: ScoringModel) -> np.ndarray:
    return np.array([sm.model["coefficients"][c] for c in sm.model["design_columns"]], dtype=np.float64)


def reason_reference(sm: ScoringModel, method: str = "training_mean") -> dict:
    """The reference partial score of every feature, and how it was obtained.

    Returns a dict with ``method``, ``features`` (names), ``partial`` (the reference
    ``r_f`` per feature), ``eta`` (intercept + sum of the references) and ``note``; for
    ``most_favourable`` also ``observed_at``: the training id and raw value where each
    minimum occurs.
    """
    if method not in REFERENCES:
        raise ArgumentError(f"reference must be one of {REFERENCES}, got {method!r}")
    names, W = feature_weights(sm.recipe, sm.model["design_columns"])
    beta = _coefficients(sm)
    out = {"method": method, "features": names}
    if method == "training_mean":
        partial = (_model_design_means(sm) * beta) @ W
        out["note"] = "partial score at the training mean of every design column"
    else:
        X, _ = design_matrix(sm, sm.training)
        scores = (X.to_numpy() * beta) @ W
        at = scores.argmin(axis=0) if len(names) else np.array([], dtype=int)
        partial = scores.min(axis=0) if len(names) else np.zeros(0)
        ids = sm.training[sm.id_column].to_numpy()
        out["observed_at"] = {n: {"id": str(ids[i]), "value": json_value(sm.training[n].iloc[i])}
                              for n, i in zip(names, at.tolist())}
        out["note"] = "smallest partial score of each feature over the development training rows"
    out["partial"] = {n: float(v) for n, v in zip(names, partial)}
    out["eta"] = float(sm.model["intercept"] + partial.sum())
    return out


def json_value(value):
    """A typed cell as a JSON-ready value (None for missing, ISO text for a date)."""
    if value is None or value is pd.NA or (isinstance(value, float) and np.isnan(value)):
        return None
    if isinstance(value, pd.Timestamp):
        return value.date().isoformat()
    return value.item() if hasattr(value, "item") else value


def design_matrix(sm: ScoringModel, df: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The model's design matrix and the recipe's per-row flags (through oddsmith.fitting.predict)."""
    # Index by id so that recipe errors name rows by their id.
    indexed = df.set_axis(pd.Index(df[sm.id_column].astype(str).to_numpy()), axis=0) \
        if sm.id_column in df.columns else df
    X, flags = model_design(sm.recipe, sm.model, indexed)
    return X.set_axis(df.index, axis=0), flags.set_axis(df.index, axis=0)


def contributions(sm: ScoringModel, X: pd.DataFrame, reference: dict) -> np.ndarray:
    """Per-row, per-feature contributions ``s_f - r_f`` on the link scale (rows x features)."""
    names, W = feature_weights(sm.recipe, sm.model["design_columns"])
    ref = np.array([reference["partial"][n] for n in names], dtype=np.float64)
    # sum_j x_j * beta_j * w_jf as one product with the (columns x features) matrix beta * W
    return X[sm.model["design_columns"]].to_numpy() @ (_coefficients(sm)[:, None] * W) - ref


def top_reasons(contrib: np.ndarray, names: list[str], *, top_k: int) -> tuple[np.ndarray, np.ndarray]:
    """The ``top_k`` largest positive contributions of each row: (names, values).

    Slots beyond a row's positive contributions hold None / NaN. Ties keep column order.

    Examples
    --------
    >>> n, v = top_reasons(np.array([[0.2, 0.5, -0.1], [-0.3, 0.0, 0.4]]), ["a", "b", "c"], top_k=2)
    >>> n.tolist(), v.tolist()
    ([['b', 'a'], ['c', None]], [[0.5, 0.2], [0.4, nan]])
    """
    codes, values = _top_reason_codes(contrib, top_k=top_k)
    labels = np.asarray(list(names) + [None], dtype=object)[codes]  # code -1 picks the None
    return labels, values


def _top_reason_codes(contrib: np.ndarray, *, top_k: int) -> tuple[np.ndarray, np.ndarray]:
    """Feature index (-1: no reason) and contribution of each row's top_k reasons."""
    if top_k < 1:
        raise ArgumentError(f"top_k must be >= 1, got {top_k}")
    n_rows, width = contrib.shape
    k = min(top_k, width)
    order = np.argsort(-contrib, axis=1, kind="stable")[:, :k]
    values = np.take_along_axis(contrib, order, axis=1)
    keep = values > 0
    codes = np.where(keep, order, -1)
    values = np.where(keep, values, np.nan)
    if k < top_k:  # fewer features than reasons asked for
        codes = np.hstack([codes, np.full((n_rows, top_k - k), -1)])
        values = np.hstack([values, np.full((n_rows, top_k - k), np.nan)])
    return codes, values


# ---------------------------------------------------------------------------- scoring


def score_frame(sm: ScoringModel, df: pd.DataFrame, *, top_k: int = DEFAULT_TOP_K, reference: dict | None = None,
                carry_columns: tuple = ()) -> pd.DataFrame:
    """Score typed rows: id, probability, decision, link-scale value, reasons and flags.

    Parameters
    ----------
    sm : ScoringModel
    df : pandas.DataFrame
        Typed rows (as :func:`check_batch` returns them).
    top_k : int
        Reasons per row.
    reference : dict, optional
        From :func:`reason_reference` (default: ``training_mean``).
    carry_columns : sequence of str
        Batch columns copied into the output after the id.

    Returns
    -------
    pandas.DataFrame
        Columns ``id``, carried columns, ``probability``, ``decision`` (``flag`` when
        probability >= the adopted cut-off, else ``pass``), ``linear_predictor``,
        ``reason_1`` ... ``reason_k`` and ``reason_1_contribution`` ..., then the recipe's
        per-row flags ``<feature>:filled`` / ``<feature>:unseen``.
    """
    reference = reference or reason_reference(sm)
    X, flags = design_matrix(sm, df)
    eta = linear_predictor(sm.model, X)
    p = inverse_link(sm.link, eta)
    names, _ = feature_weights(sm.recipe, sm.model["design_columns"])
    codes, values = _top_reason_codes(contributions(sm, X, reference), top_k=top_k)
    # Text columns with few distinct values are categoricals (dictionary-encoded in Parquet).
    decision = pd.Categorical.from_codes(flagged(p, sm.cutoff).astype(np.int8), categories=["pass", "flag"])
    out = {"id": df[sm.id_column].astype("str").to_numpy()}
    out |= {c: df[c].to_numpy() for c in carry_columns}
    out |= {"probability": p, "decision": decision, "linear_predictor": eta}
    for i in range(top_k):
        out[f"reason_{i + 1}"] = pd.Categorical.from_codes(codes[:, i], categories=names)
        out[f"reason_{i + 1}_contribution"] = values[:, i]
    frame = pd.DataFrame(out)
    for column in flags.columns:
        frame[column] = flags[column].to_numpy()
    return frame


def probabilities(sm: ScoringModel, df: pd.DataFrame) -> np.ndarray:
    """Probabilities of the event for typed rows (the evaluate stage's path)."""
    X, _ = design_matrix(sm, df)
    return inverse_link(sm.link, linear_predictor(sm.model, X))


def flagged(p: np.ndarray, cutoff) -> np.ndarray:
    """True where p >= cutoff; a cut-off of None flags none (as the evaluate stage)."""
    return np.zeros(np.shape(p), dtype=bool) if cutoff is None else np.asarray(p) >= cutoff


def score_summary(sm: ScoringModel, scored: pd.DataFrame, *, reference: dict, top_k: int, ignored: list,
                  source: dict) -> dict:
    """The summary JSON of a scored batch: counts, cut-off, method notes, flag counts."""
    flag_columns = [c for c in scored.columns if c.endswith((":filled", ":unseen"))]
    p = scored["probability"].to_numpy()
    reasons = pd.concat([scored[f"reason_{i + 1}"] for i in range(top_k)]).dropna()
    return {
        "source": source,
        "model": {"candidate": sm.candidate, "kind": sm.model["kind"], "link": sm.link,
                  "recipe_digest": sm.recipe["digest"], "results": sm.source},
        "rows": int(len(scored)),
        "flagged": int((scored["decision"] == "flag").sum()),
        "flag_rate": float((scored["decision"] == "flag").mean()),
        "cutoff": sm.cutoff,
        "decision_rule": "flag when probability >= cutoff" if sm.cutoff is not None
        else "the adopted cut-off is None: no row is flagged",
        "probability": {"mean": float(p.mean()), "min": float(p.min()), "max": float(p.max()),
                        "quartiles": [float(q) for q in np.quantile(p, [0.25, 0.5, 0.75])]},
        "reasons": {
            "top_k": top_k, "scale": LINK_SCALES[sm.link], "reference": reference,
            "interactions": "an interaction column's contribution is split half to each of its two features",
            "direction": "reasons are features with a positive contribution: they push the probability of the "
                         "adverse outcome up relative to the reference",
            "method": "contribution of feature f = sum over its design columns j of w_jf * beta_j * x_j, minus the "
                      "same at the reference; see oddsmith/use/score.py",
            "times_named": {k: int(v) for k, v in sorted(reasons.value_counts().items())},
        },
        "policy_flags": {c: int(scored[c].sum()) for c in flag_columns},
        "rows_with_any_policy_flag": int(scored[flag_columns].any(axis=1).sum()) if flag_columns else 0,
        "ignored_columns": list(ignored),
        "csv": "text cells beginning with = + - @ tab or carriage return are prefixed with an apostrophe; "
               "numeric cells are written as numbers",
    }


# ---------------------------------------------------------------------------- CSV


def neutralise_text(values: pd.Series) -> pd.Series:
    """Prefix an apostrophe to text cells a spreadsheet would run as a formula.

    Examples
    --------
    >>> neutralise_text(pd.Series(["=1+1", "ok", None, "-x", "@A1"])).tolist()
    ["'=1+1", 'ok', nan, "'-x", "'@A1"]
    """
    text = values.astype("str")
    risky = text.str.startswith(FORMULA_PREFIXES).fillna(False).astype(bool)
    return text.mask(risky, NEUTRALISER + text)


def csv_bytes(frame: pd.DataFrame) -> bytes:
    """The scored frame as UTF-8 CSV (``\\n`` line ends), text cells neutralised.

    Written by Arrow's CSV writer: every text cell is quoted (so a carriage return inside
    one cannot split the row), numbers are not and use the shortest form that reads back
    exactly, booleans are ``true``/``false``, a missing cell is empty.
    """
    out = frame.copy()
    for column in out.columns:
        if out[column].dtype == object or pd.api.types.is_string_dtype(out[column]):
            out[column] = neutralise_text(out[column])
    out.columns = neutralise_text(pd.Series(list(out.columns), dtype=object)).tolist()
    buf = io.BytesIO()
    pa_csv.write_csv(pa.Table.from_pandas(out, preserve_index=False), buf,
                     pa_csv.WriteOptions(quoting_style="needed"))
    return buf.getvalue()


def file_source(path) -> dict:
    """Path, SHA-256 and size of an input file, for summaries."""
    path = Path(path)
    return {"path": str(path), "sha256": sha256_file(path), "bytes": path.stat().st_size}
