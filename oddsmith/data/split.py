"""Divide rows into a training and a test part, and the training part into folds.

Four split methods are offered:

``stratified``
    A random draw of ``test_fraction`` of the rows with the event rate kept equal in both
    parts (``sklearn.model_selection.train_test_split`` with ``stratify``).
``out_of_time``
    The test part is every row dated on or after ``cutoff_date``. Without a cut-off date it
    is the latest ``test_fraction`` of rows by date; rows that share a date always go to the
    same part, so the realised share is the closest one the dates allow.
``grouped``
    Whole groups (rows sharing ``group_column``) are drawn at random into the test part, so
    no group straddles the parts. Stratification is approximate: groups with and without an
    event are drawn separately, each towards ``test_fraction`` of its rows.

``cross_validation_only``
    No test part: every row is a training row and the evaluation uses the out-of-fold
    predictions of the cross-validation on all rows (for samples too small to spare a
    test part). ``test_fraction`` and the split ``seed`` are not used.

Folds are assigned to the training rows only; test rows get fold ``-1``. Folds are
stratified on the target (``StratifiedKFold``); for grouped splits they also keep groups
together (``StratifiedGroupKFold``). Folds are random within the training part for every
method, out-of-time included. With ``repeats > 1`` each repeat uses its own seed, drawn from
``numpy.random.default_rng(cross_validation["seed"])``; the first draw always belongs to
repeat 1, so adding repeats never changes the folds of repeat 1.

The assignment has one row per input row, in input order, with columns

``id``
    The row's identifier, values and dtype as in the id column.
``part``
    ``"train"`` or ``"test"`` (plain ``str`` dtype).
``fold``
    Fold of repeat 1 (``int64``, 0 to folds - 1; ``-1`` for test rows).
``fold_r2``, ``fold_r3``, ...
    Folds of repeats 2, 3, ... when ``repeats > 1``. See :func:`fold_columns`.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
from scipy.special import ndtr

from oddsmith.errors import EventsPerVariableWarning, SplitError, quoted
from oddsmith.io import write_parquet

# Spelled here rather than imported from oddsmith.settings (which reads the schema), so that
# an edit of the schema does not rerun the split; tests/test_out_of_fold.py checks they agree.
CV_ONLY = "cross_validation_only"
METHODS = ("stratified", "out_of_time", "grouped", CV_ONLY)
# Peduzzi et al., J. Clinical Epidemiology 49 (1996): fewer than 10 events per parameter.
MIN_EVENTS_PER_PARAMETER = 10
# Threshold of the train/test base-rate test; a project choice, not a published rule.
BASE_RATE_ALPHA = 0.01
#: The fewest folds cross-validation can have (the config schema's minimum).
MIN_FOLDS = 2
_EXAMPLES = 5


def fold_columns(repeats: int) -> list[str]:
    """Return the fold column names of an assignment with ``repeats`` repeats.

    Examples
    --------
    >>> fold_columns(3)
    ['fold', 'fold_r2', 'fold_r3']
    """
    return ["fold"] + [f"fold_r{r}" for r in range(2, int(repeats) + 1)]


def assign_split(
    df: pd.DataFrame,
    *,
    id_column: str,
    target: str,
    split: dict,
    cross_validation: dict,
    n_parameters: int | None = None,
    positive_label=None,
) -> tuple[pd.DataFrame, dict]:
    """Assign every row to the training or test part and training rows to folds.

    Parameters
    ----------
    df : pandas.DataFrame
        The validated data, one row per case.
    id_column : str
        Column with one unique id per row.
    target : str
        Outcome column: 0/1 (or boolean) values, 1 being the event.
    split : dict
        ``method``, ``test_fraction``, ``seed``, ``date_column``, ``cutoff_date``,
        ``group_column`` (see the module docstring).
    cross_validation : dict
        ``folds``, ``repeats``, ``seed``.
    n_parameters : int, optional
        Parameters of the largest candidate (intercept included); adds events per
        parameter to the summary.
    positive_label : optional
        When given, the event is ``str(value) == str(positive_label)`` instead of a 0/1
        target.

    Returns
    -------
    assignment : pandas.DataFrame
        Columns ``id``, ``part``, ``fold`` (and ``fold_r2``... for repeats), input order.
    summary : dict
        Method, description, sizes, events and base rates per part and fold, date ranges,
        events per parameter, the train/test base-rate test and ``warnings``.

    Raises
    ------
    SplitError
        Listing every problem found: bad fraction, missing or unparseable columns, a cut-off
        outside the dates, a part or fold without events.
    """
    settings = _settings(split, cross_validation)
    _check_request(df, id_column, target, settings, n_parameters, positive_label)
    ids = df[id_column].reset_index(drop=True)
    y = _event_indicator(df[target], positive_label)
    dates = _dates_for_summary(df, settings)
    is_test, detail = _make_parts(df, y, ids, settings, dates)
    _check_parts(y, is_test, settings["method"])
    groups = _group_codes(df, settings) if settings["method"] == "grouped" else None
    folds = _assign_folds(y, is_test, groups, settings)
    _check_folds(y, is_test, folds, settings)
    assignment = _assignment_frame(ids, is_test, folds)
    summary = _summarise(y, is_test, folds, dates, groups, settings, detail, n_parameters)
    return assignment, summary


def write_assignment(assignment: pd.DataFrame, path) -> None:
    """Write the assignment as Parquet with deterministic bytes.

    No pandas index is stored and compression is zstd. The file is written to a temporary
    name in the same folder and renamed, so a failure never leaves a partial file.
    """
    write_parquet(path, assignment)


def feasibility(df: pd.DataFrame, *, id_column: str, target: str, split: dict, cross_validation: dict) -> dict:
    """Check, before any draw, what the configured split and folds will need of the data.

    Runs the split's own checks on the parts of the request that do not depend on the seeds,
    so that a change of seed alone needs no new check: ids, target, dates and the cut-off
    date, groups, the stratified draw's feasibility, and enough events and non-events for the
    folds (out-of-time: in the training part, which the cut-off fixes; stratified: in the
    largest training part any seed can give; grouped: in the whole data).

    Parameters
    ----------
    df : pandas.DataFrame
        The validated data (target as 0/1).
    id_column, target, split, cross_validation
        As for :func:`assign_split`; ``split`` carries ``date_column``.

    Returns
    -------
    dict
        ``problems`` (list of str, empty when nothing is known to fail); ``is_test`` (bool
        array) when the parts do not depend on a seed (out-of-time), else None;
        ``train_rows``: the training part's size (grouped: an upper bound), None on problems.
    """
    settings = _settings(split, cross_validation)
    problems = _request_problems(df, id_column, target, settings, None, None)
    outcome = {"problems": problems, "is_test": None, "train_rows": None}
    if problems:
        return outcome
    y = _event_indicator(df[target], None)
    n, events, n_folds = len(y), int(y.sum()), settings["folds"]
    if settings["method"] == "out_of_time":
        is_test, _ = _out_of_time_parts(_dates_for_summary(df, settings), settings)
        problems += _part_problems(y, is_test)
        train_events = int(y[~is_test].sum())
        if (~is_test).any():
            problems += _fold_feasibility_problems(train_events, int((~is_test).sum()) - train_events, None, n_folds)
        outcome.update(is_test=is_test, train_rows=int((~is_test).sum()))
    elif settings["method"] == CV_ONLY:
        problems += _fold_feasibility_problems(events, n - events, None, n_folds, where="the data")
        outcome.update(is_test=np.zeros(n, dtype=bool), train_rows=n)
    elif settings["method"] == "stratified":
        n_test = _stratified_test_rows(n, events, settings["test_fraction"])
        if n_test is None:  # a draw that may fail: make it, for scikit-learn's own message
            try:
                n_test = int(_stratified_parts(y, settings).sum())
            except SplitError as exc:
                problems += exc.problems
                return outcome
        # Each class gives the test part at least the floor of its share (scikit-learn's
        # stratified draw); only ties between classes depend on the seed.
        most_events = events - (events * n_test) // n
        most_non_events = (n - events) - ((n - events) * n_test) // n
        problems += _fold_feasibility_problems(most_events, most_non_events, None, n_folds, bound="at most ")
        outcome["train_rows"] = n - n_test
    else:
        groups = _group_codes(df, settings)
        problems += _fold_feasibility_problems(events, n - events, int(groups.max()) + 1, n_folds, where="the data")
        outcome["train_rows"] = n
    return outcome


# ---------------------------------------------------------------------------- checks


def _settings(split: dict, cross_validation: dict) -> dict:
    return {
        "method": split.get("method", "stratified"),
        "test_fraction": split.get("test_fraction", 0.25),
        "seed": split.get("seed", 20261202),
        "date_column": split.get("date_column"),
        "cutoff_date": split.get("cutoff_date"),
        "group_column": split.get("group_column"),
        "folds": cross_validation.get("folds", 5),
        "repeats": cross_validation.get("repeats", 1),
        "cv_seed": cross_validation.get("seed", 7),
    }


def _check_request(df, id_column, target, settings, n_parameters, positive_label) -> None:
    problems = _request_problems(df, id_column, target, settings, n_parameters, positive_label)
    if problems:
        raise SplitError("the split cannot be made as configured:", problems)


def _request_problems(df, id_column, target, settings, n_parameters, positive_label) -> list[str]:
    problems = _check_settings(settings, n_parameters)
    for role, column in (("id column", id_column), ("target", target)):
        if column not in df.columns:
            problems.append(f"{role} {column!r} is not a column of the data")
    if not problems:
        ids = df[id_column].reset_index(drop=True)
        problems += _check_ids(ids)
        problems += _check_target(df[target].reset_index(drop=True), ids, positive_label)
        if settings["method"] == "out_of_time":
            problems += _check_dates(df, ids, settings)
        if settings["method"] == "grouped":
            problems += _check_groups(df, ids, settings)
    return problems


def _check_settings(settings: dict, n_parameters) -> list[str]:
    problems = []
    fraction = settings["test_fraction"]
    if isinstance(fraction, bool) or not isinstance(fraction, (int, float)) or not 0 < fraction < 1:
        problems.append(f"test_fraction must be strictly between 0 and 1, got {quoted(fraction)}")
    if settings["method"] not in METHODS:
        problems.append(f"split method must be one of {', '.join(METHODS)}, got {quoted(settings['method'])}")
    if not _is_int(settings["folds"]) or settings["folds"] < 2:
        problems.append(f"cross_validation folds must be an integer >= 2, got {settings['folds']!r}")
    if not _is_int(settings["repeats"]) or settings["repeats"] < 1:
        problems.append(f"cross_validation repeats must be an integer >= 1, got {settings['repeats']!r}")
    for key in ("seed", "cv_seed"):
        if not _is_int(settings[key]) or not 0 <= settings[key] < 2**32:
            problems.append(f"{key.replace('cv_', 'cross_validation ')} must be an integer in [0, 2**32), got {settings[key]!r}")
    if n_parameters is not None and (not _is_int(n_parameters) or n_parameters < 1):
        problems.append(f"n_parameters must be a positive integer, got {n_parameters!r}")
    return problems


def _is_int(value) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


def _check_ids(ids: pd.Series) -> list[str]:
    problems = []
    missing = ids.isna().to_numpy()
    if missing.any():
        problems.append(f"id column has {int(missing.sum())} missing values (rows {_positions(missing)})")
    duplicated = ids.duplicated(keep=False).to_numpy() & ~missing
    if duplicated.any():
        problems.append(
            f"id column has {int(duplicated.sum())} rows with repeated ids, e.g. {_examples(ids, duplicated)}"
        )
    return problems


def _check_target(values: pd.Series, ids: pd.Series, positive_label) -> list[str]:
    missing = values.isna().to_numpy()
    if missing.any():
        return [f"target has {int(missing.sum())} missing values, e.g. ids {_examples(ids, missing)}"]
    if positive_label is not None:
        return []
    numeric = pd.to_numeric(values, errors="coerce")
    bad = ~np.isin(numeric.to_numpy(dtype=float, na_value=np.nan), (0.0, 1.0))
    if bad.any():
        shown = sorted({str(v) for v in values[bad].tolist()})[:_EXAMPLES]
        return [f"target must hold 0/1 values; found {', '.join(map(quoted, shown))} at ids {_examples(ids, bad)}"]
    return []


def _absent_column(df: pd.DataFrame, column, *, role: str, method: str) -> list[str]:
    """The problem when a split's ``<role>_column`` is unset or not in the data, else []."""
    if column is None:
        return [f"{method} split needs a {role}_column, got null"]
    if column not in df.columns:
        return [f"{role} column {column!r} is not a column of the data"]
    return []


def _check_dates(df: pd.DataFrame, ids: pd.Series, settings: dict) -> list[str]:
    column = settings["date_column"]
    absent = _absent_column(df, column, role="date", method="out_of_time")
    if absent:
        return absent
    dates, problems = _parse_dates(df[column].reset_index(drop=True), ids, column)
    if problems:
        return problems
    missing = dates.isna().to_numpy()
    if missing.any():
        problems.append(
            f"date column {column!r} has {int(missing.sum())} missing dates, e.g. ids {_examples(ids, missing)}"
        )
    elif settings["cutoff_date"] is not None:
        problems += _check_cutoff(dates, settings["cutoff_date"])
    elif dates.nunique() < 2:
        problems.append(f"every row of {column!r} has the same date {_iso(dates.iloc[0])}: no later period to test on")
    return problems


def _check_cutoff(dates: pd.Series, cutoff_text) -> list[str]:
    cutoff = _parse_cutoff(cutoff_text, dates)
    if cutoff is None:
        return [f"cutoff_date {quoted(cutoff_text)} is not an ISO date"]
    first, last = dates.min(), dates.max()
    if cutoff <= first or cutoff > last:
        empty = "training" if cutoff <= first else "test"
        return [
            f"cutoff_date {cutoff_text} is outside the data's date range "
            f"{_iso(first)} to {_iso(last)}: the {empty} part would be empty"
        ]
    return []


def _check_groups(df: pd.DataFrame, ids: pd.Series, settings: dict) -> list[str]:
    column = settings["group_column"]
    absent = _absent_column(df, column, role="group", method="grouped")
    if absent:
        return absent
    missing = df[column].isna().to_numpy()
    if missing.any():
        return [f"group column {column!r} has {int(missing.sum())} missing values, e.g. ids {_examples(ids, missing)}"]
    return []


def _check_parts(y: np.ndarray, is_test: np.ndarray, method: str) -> None:
    problems = _part_problems(y, is_test, has_test=method != CV_ONLY)
    if problems:
        raise SplitError("the split leaves a part unusable:", problems)


def _part_problems(y: np.ndarray, is_test: np.ndarray, *, has_test: bool = True) -> list[str]:
    problems = []
    for part, mask in (("training", ~is_test), ("test", is_test))[:2 if has_test else 1]:
        n, events = int(mask.sum()), int(y[mask].sum())
        if n == 0:
            problems.append(f"the {part} part is empty")
        elif events == 0:
            problems.append(f"the {part} part has no events (0 of {n} rows); change the split or get more events")
        elif events == n:
            problems.append(f"the {part} part has only events ({n} of {n} rows); change the split")
    return problems


def _check_folds(y, is_test, folds: list[np.ndarray], settings: dict) -> None:
    problems = []
    train_events = int(y[~is_test].sum())
    for repeat, fold_of_row in enumerate(folds, start=1):
        for fold in range(settings["folds"]):
            members = fold_of_row == fold
            n, events = int(members.sum()), int(y[members].sum())
            if events == 0 or events == n:
                kind = "no events" if events == 0 else "no non-events"
                advice = (f"use fewer folds than {settings['folds']}" if settings["folds"] > MIN_FOLDS
                          else "gather more events or move the split")
                problems.append(
                    f"repeat {repeat} fold {fold} has {kind} ({events} events in {n} rows); "
                    f"the training part has {train_events} events: {advice}"
                )
    if problems:
        raise SplitError("the cross-validation folds cannot be made as configured:", problems)


# ---------------------------------------------------------------------------- parts


def _event_indicator(values: pd.Series, positive_label) -> np.ndarray:
    values = values.reset_index(drop=True)
    if positive_label is not None:
        return np.array([str(v) == str(positive_label) for v in values.tolist()], dtype=np.int64)
    return pd.to_numeric(values).to_numpy(dtype=float).astype(np.int64)


def _make_parts(df, y, ids, settings, dates) -> tuple[np.ndarray, dict]:
    method = settings["method"]
    if method == "stratified":
        return _stratified_parts(y, settings), {}
    if method == "out_of_time":
        return _out_of_time_parts(dates, settings)
    if method == CV_ONLY:
        return np.zeros(len(y), dtype=bool), {}
    return _grouped_parts(y, _group_codes(df, settings), settings), {}


def _stratified_test_rows(n: int, events: int, test_fraction: float) -> int | None:
    """The test part's size of the stratified draw (scikit-learn's: ``ceil(test_fraction · n)``),
    without drawing, when the draw cannot fail: both classes with at least 2 rows and both
    parts with room for one row of each. None otherwise (the draw is then made, so that a
    refusal carries scikit-learn's own reason)."""
    n_test = math.ceil(test_fraction * n)
    if min(events, n - events) < 2 or min(n_test, n - n_test) < 2:
        return None
    return n_test


def _stratified_parts(y: np.ndarray, settings: dict) -> np.ndarray:
    n = len(y)
    try:
        from sklearn.model_selection import train_test_split

        _, test_rows = train_test_split(
            np.arange(n), test_size=settings["test_fraction"], stratify=y, random_state=settings["seed"]
        )
    except ValueError as exc:
        raise SplitError(
            "the stratified split cannot be made:",
            [f"{exc} ({n} rows, {int(y.sum())} events, test_fraction {settings['test_fraction']})"],
        ) from exc
    is_test = np.zeros(n, dtype=bool)
    is_test[test_rows] = True
    return is_test


def _out_of_time_parts(dates: pd.Series, settings: dict) -> tuple[np.ndarray, dict]:
    if settings["cutoff_date"] is not None:
        cutoff = _parse_cutoff(settings["cutoff_date"], dates)
        chosen = "configured"
    else:
        cutoff = latest_fraction_cutoff(dates, settings["test_fraction"])
        chosen = "latest test_fraction of rows"
    is_test = (dates >= cutoff).to_numpy()
    return is_test, {"cutoff_date": _iso(cutoff), "cutoff_chosen": chosen}


def latest_fraction_cutoff(dates: pd.Series, fraction: float) -> pd.Timestamp:
    """Return the date splitting off the share of latest rows closest to ``fraction``.

    Candidate cut-offs are the distinct dates after the first; ties in closeness go to the
    later date (the smaller test part).
    """
    counts = dates.value_counts().sort_index(kind="mergesort")
    rows_on_or_after = counts[::-1].cumsum()[::-1].to_numpy()[1:]
    gap = np.abs(rows_on_or_after - fraction * len(dates))
    best = len(gap) - 1 - int(np.argmin(gap[::-1]))
    return counts.index[best + 1]


def _group_codes(df: pd.DataFrame, settings: dict) -> np.ndarray:
    codes, _ = pd.factorize(df[settings["group_column"]].reset_index(drop=True), sort=True)
    return codes.astype(np.int64)


def _grouped_parts(y: np.ndarray, groups: np.ndarray, settings: dict) -> np.ndarray:
    """Draw whole groups into the test part, separately for groups with and without events.

    Within each stratum the groups are shuffled and the prefix whose row count is closest to
    ``test_fraction`` of the stratum's rows goes to the test part (ties: fewer rows); a
    stratum of two or more groups always leaves at least one group in each part.
    """
    n_groups = int(groups.max()) + 1
    size = np.bincount(groups, minlength=n_groups)
    has_event = np.bincount(groups, weights=y, minlength=n_groups) > 0
    rng = np.random.default_rng(settings["seed"])
    test_group = np.zeros(n_groups, dtype=bool)
    for stratum in (False, True):
        members = np.flatnonzero(has_event == stratum)
        order = rng.permutation(members)
        taken = np.concatenate([[0], np.cumsum(size[order])])
        gap = np.abs(taken - settings["test_fraction"] * size[members].sum())
        if len(members) >= 2:  # give each part at least one group of the stratum
            gap[[0, -1]] = np.inf
        k = int(np.argmin(gap))
        test_group[order[:k]] = True
    return test_group[groups]


# ---------------------------------------------------------------------------- folds


def _repeat_seeds(seed: int, repeats: int) -> list[int]:
    draws = np.random.default_rng(seed).integers(0, 2**31 - 1, size=repeats)
    return [int(s) for s in draws]


def _assign_folds(y, is_test, groups, settings) -> list[np.ndarray]:
    train_rows = np.flatnonzero(~is_test)
    _check_fold_feasible(y[train_rows], None if groups is None else groups[train_rows], settings)
    folds = []
    for seed in _repeat_seeds(settings["cv_seed"], settings["repeats"]):
        fold_of_row = np.full(len(y), -1, dtype=np.int64)
        for fold, (_, held_out) in enumerate(_fold_splits(y, train_rows, groups, settings["folds"], seed)):
            fold_of_row[train_rows[held_out]] = fold
        folds.append(fold_of_row)
    return folds


def _fold_splits(y, train_rows, groups, n_folds: int, seed: int):
    # Imported here so that modules needing only fold_columns stay light to import.
    from sklearn.model_selection import StratifiedGroupKFold, StratifiedKFold

    y_train = y[train_rows]
    placeholder = np.zeros(len(train_rows))
    with warnings.catch_warnings():
        # Too few members per class is reported as a SplitError by _check_folds.
        warnings.simplefilter("ignore", UserWarning)
        if groups is None:
            splitter = StratifiedKFold(n_splits=n_folds, shuffle=True, random_state=seed)
            return list(splitter.split(placeholder, y_train))
        splitter = StratifiedGroupKFold(n_splits=n_folds, shuffle=True, random_state=seed)
        return list(splitter.split(placeholder, y_train, groups[train_rows]))


def _check_fold_feasible(y_train, groups_train, settings) -> None:
    events = int(y_train.sum())
    n_groups = None if groups_train is None else len(np.unique(groups_train))
    problems = _fold_feasibility_problems(events, len(y_train) - events, n_groups, settings["folds"])
    if problems:
        raise SplitError("the cross-validation folds cannot be made as configured:", problems)


def _fold_feasibility_problems(events: int, non_events: int, n_groups: int | None, n_folds: int, *,
                               where: str = "the training part", bound: str = "") -> list[str]:
    """Problems of ``n_folds`` stratified folds on rows with these counts (and groups);
    ``bound`` ("at most ") marks counts that are upper bounds."""
    problems = []
    if events < n_folds or non_events < n_folds:
        fewer = min(events, non_events)
        advice = (
            f"use at most {fewer} folds (cross_validation.folds)" if fewer >= MIN_FOLDS
            else f"the minimum of {MIN_FOLDS} folds needs at least {MIN_FOLDS} events and {MIN_FOLDS} "
            f"non-events in {where}: gather more rows" + (" or move the split" if where == "the training part" else "")
        )
        problems.append(
            f"{where} has {bound}{events} events and {bound}{non_events} non-events, fewer than "
            f"{n_folds} folds (cross_validation.folds): some fold would have no events; {advice}"
        )
    if n_groups is not None and n_groups < n_folds:
        advice = f"use at most {n_groups} folds" if n_groups >= MIN_FOLDS else "gather data from more groups"
        problems.append(f"{where} has {n_groups} groups, fewer than {n_folds} folds (cross_validation.folds); {advice}")
    return problems


def _assignment_frame(ids: pd.Series, is_test: np.ndarray, folds: list[np.ndarray]) -> pd.DataFrame:
    columns = {"id": ids, "part": pd.Series(np.where(is_test, "test", "train"), dtype=str)}
    for name, fold_of_row in zip(fold_columns(len(folds)), folds):
        columns[name] = pd.Series(fold_of_row, dtype=np.int64)
    return pd.DataFrame(columns)


# ---------------------------------------------------------------------------- summary


def _summarise(y, is_test, folds, dates, groups, settings, detail, n_parameters) -> dict:
    cv_only = settings["method"] == CV_ONLY
    parts = {name: _part_summary(y, mask, dates, groups, n_parameters) for name, mask in _part_masks(is_test)
             if not (cv_only and name == "test")}
    warnings_found = _epv_warnings(parts, n_parameters)
    # Without a test part there is no second base rate to compare.
    base_rate_test = None if cv_only else _base_rate_test(y, is_test)
    if base_rate_test is not None:
        warnings_found += _drift_warnings(base_rate_test, settings["method"])
    if dates is None and settings["date_column"] is not None:
        warnings_found.append(
            f"date column {settings['date_column']!r} is absent or not parseable as dates; no date ranges reported"
        )
    summary = {
        "method": settings["method"],
        "description": _description(settings, detail),
        "test_fraction": None if cv_only else settings["test_fraction"],
        "seed": None if cv_only else settings["seed"],
        "cross_validation": {"folds": settings["folds"], "repeats": settings["repeats"], "seed": settings["cv_seed"]},
        "parts": parts,
        "folds": _fold_summary(y, folds),
        "base_rate_test": base_rate_test,
        "warnings": warnings_found,
    }
    summary.update(detail)
    if settings["method"] == "grouped":
        summary["group_column"] = settings["group_column"]
    if dates is not None:
        summary["date_column"] = settings["date_column"]
    return summary


def _part_masks(is_test):
    return (("train", ~is_test), ("test", is_test))


def _part_summary(y, mask, dates, groups, n_parameters) -> dict:
    n, events = int(mask.sum()), int(y[mask].sum())
    result = {"n": n, "events": events, "non_events": n - events, "base_rate": events / n}
    if dates is not None:
        present = dates[mask].dropna()
        result["date_range"] = [_iso(present.min()), _iso(present.max())] if len(present) else None
    if groups is not None:
        result["n_groups"] = int(len(np.unique(groups[mask])))
    if n_parameters is not None:
        # Events are the minority-class count (Peduzzi et al. 1996).
        result["events_per_parameter"] = min(events, n - events) / n_parameters
    return result


def _epv_warnings(parts: dict, n_parameters) -> list[str]:
    found = []
    if n_parameters is None:
        return found
    for name, part in parts.items():
        epv = part["events_per_parameter"]
        if epv < MIN_EVENTS_PER_PARAMETER:
            message = (
                f"{name} part: {epv:.2f} events per parameter ({min(part['events'], part['non_events'])} "
                f"minority-class events, {n_parameters} parameters) is below 10 (Peduzzi et al. 1996)"
            )
            warnings.warn(message, EventsPerVariableWarning, stacklevel=4)
            found.append(message)
    return found


def _fold_summary(y, folds: list[np.ndarray]) -> list[dict]:
    rows = []
    for repeat, fold_of_row in enumerate(folds, start=1):
        for fold in range(int(fold_of_row.max()) + 1):
            members = fold_of_row == fold
            n, events = int(members.sum()), int(y[members].sum())
            rows.append({"repeat": repeat, "fold": fold, "n": n, "events": events, "base_rate": events / n})
    return rows


def _base_rate_test(y: np.ndarray, is_test: np.ndarray) -> dict:
    """Two-sided two-proportion z-test with pooled variance of train vs test base rates."""
    n1, n2 = int((~is_test).sum()), int(is_test.sum())
    e1, e2 = int(y[~is_test].sum()), int(y[is_test].sum())
    pooled = (e1 + e2) / (n1 + n2)
    se = math.sqrt(pooled * (1 - pooled) * (1 / n1 + 1 / n2))
    z = (e1 / n1 - e2 / n2) / se
    return {
        "test": "two-sided two-proportion z-test, pooled variance",
        "difference": e1 / n1 - e2 / n2,
        "statistic": z,
        "p_value": float(2 * ndtr(-abs(z))),  # the normal upper tail, doubled
        "alpha": BASE_RATE_ALPHA,
    }


def _drift_warnings(result: dict, method: str) -> list[str]:
    if result["p_value"] >= BASE_RATE_ALPHA:
        return []
    text = (
        f"training and test base rates differ beyond chance (difference {result['difference']:+.4f}, "
        f"p = {result['p_value']:.2g}, two-proportion z-test)"
    )
    if method == "out_of_time":
        text += "; for an out-of-time split this is drift between periods, informative rather than an error"
    return [text]


def _description(settings: dict, detail: dict) -> str:
    share = f"{settings['test_fraction'] * 100:g}%"
    method = settings["method"]
    if method == CV_ONLY:
        repeats = settings["repeats"]
        return (
            f"Cross-validation only: no test part. Every row is used for fitting, and the evaluation uses "
            f"out-of-fold predictions from {settings['folds']}-fold cross-validation"
            + (f" repeated {repeats} times with a new fold assignment per repeat" if repeats > 1 else "")
            + f" (seed {settings['cv_seed']})."
        )
    if method == "stratified":
        return (
            f"Stratified random: {share} of rows drawn at random (seed {settings['seed']}) into the test part, "
            "with the event rate held equal in both parts."
        )
    if method == "grouped":
        return (
            f"Grouped: whole {settings['group_column']!r} groups drawn at random (seed {settings['seed']}) "
            f"into the test part, about {share} of rows, so no group is in both parts."
        )
    if detail["cutoff_chosen"] == "configured":
        return (
            f"Out-of-time: the test part is every row dated on or after {detail['cutoff_date']} "
            f"in {settings['date_column']!r}, so the model is judged on a later period than it was built on."
        )
    return (
        f"Out-of-time: the test part is the latest {share} of rows by {settings['date_column']!r} "
        f"(dated on or after {detail['cutoff_date']}), rows of one date kept in one part."
    )


# ---------------------------------------------------------------------------- dates and ids


def _parse_dates(values: pd.Series, ids: pd.Series, column: str) -> tuple[pd.Series, list[str]]:
    if pd.api.types.is_datetime64_any_dtype(values):
        return values, []
    try:
        parsed = pd.to_datetime(values, errors="coerce", format="ISO8601")
    except (ValueError, TypeError) as exc:
        return values, [f"date column {column!r} cannot be parsed as dates: {exc}"]
    bad = (values.notna() & parsed.isna()).to_numpy()
    if bad.any():
        shown = ", ".join(quoted(v) for v in values[bad].head(_EXAMPLES).tolist())
        return parsed, [
            f"date column {column!r} has {int(bad.sum())} values that are not ISO dates ({shown}), "
            f"e.g. ids {_examples(ids, bad)}"
        ]
    return parsed, []


def _dates_for_summary(df: pd.DataFrame, settings: dict) -> pd.Series | None:
    column = settings["date_column"]
    if column is None or column not in df.columns:
        return None
    values = df[column].reset_index(drop=True)
    dates, problems = _parse_dates(values, values, column)
    return None if problems else dates


def _parse_cutoff(text, dates: pd.Series) -> pd.Timestamp | None:
    try:
        cutoff = pd.Timestamp(str(text))
    except ValueError:
        return None
    if pd.isna(cutoff):
        return None
    zone = getattr(dates.dt, "tz", None)
    if zone is not None and cutoff.tzinfo is None:
        cutoff = cutoff.tz_localize(zone)
    return cutoff


def _iso(stamp) -> str:
    stamp = pd.Timestamp(stamp)
    if stamp == stamp.normalize() and stamp.tzinfo is None:
        return stamp.date().isoformat()
    return stamp.isoformat()


def _examples(ids: pd.Series, mask) -> str:
    return ", ".join(quoted(v) for v in ids[np.asarray(mask)].head(_EXAMPLES).tolist())


def _positions(mask) -> str:
    return ", ".join(str(i) for i in np.flatnonzero(mask)[:_EXAMPLES])
