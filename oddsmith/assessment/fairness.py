"""Subgroup evidence: adverse-impact ratios, error-rate gaps and per-group discrimination.

The adverse-impact rule follows 29 CFR 1607.4(D): a group whose favourable-outcome rate is
below four-fifths of the highest group's rate is flagged; a ratio of exactly 4/5 is not.
Comparisons are made in exact fractions so that 48/60 is 4/5, not 0.7999….
"""

from __future__ import annotations

import math
from fractions import Fraction
from numbers import Integral, Rational, Real

import numpy as np
import pandas as pd

from oddsmith.assessment import metrics
from oddsmith.assessment.threshold import confusion_at
from oddsmith.errors import OddsmithError

FOUR_FIFTHS = Fraction(4, 5)
#: Prefix of the test scores' columns that hold an attribute's group labels (as text).
GROUP_COLUMN_PREFIX = "group:"
_FAVOURABLE = ("not_flagged", "flagged")


# ---------------------------------------------------------------------------------------------
# adverse-impact ratio


def _exact_rate(group: str, value) -> tuple[Fraction, bool]:
    """``(rate, exact)`` from a ``(favourable, total)`` count pair, a rational or a float.

    A float is read as the decimal it prints as (``Fraction(repr(x))``), so ``0.48`` is
    exactly 12/25; ratios computed from floats are still returned as floats.
    """
    if isinstance(value, tuple):
        if len(value) != 2 or not all(
            isinstance(v, Integral) and not isinstance(v, bool) for v in value
        ):
            raise OddsmithError(
                f"group {group!r}: counts must be (favourable, total) ints, got {value!r}"
            )
        favourable, total = int(value[0]), int(value[1])
        if total <= 0 or not 0 <= favourable <= total:
            raise OddsmithError(
                f"group {group!r}: need 0 <= favourable <= total and total > 0, got {value!r}"
            )
        return Fraction(favourable, total), True
    if isinstance(value, bool) or not isinstance(value, Real):
        raise OddsmithError(
            f"group {group!r}: rate must be a number or a count pair, got {value!r}"
        )
    if isinstance(value, Rational):
        rate, exact = Fraction(value), True
    elif math.isfinite(value):
        rate, exact = Fraction(repr(float(value))), False
    else:
        raise OddsmithError(f"group {group!r}: rate must be finite, got {value!r}")
    if not 0 <= rate <= 1:
        raise OddsmithError(f"group {group!r}: rate must be within [0, 1], got {value!r}")
    return rate, exact


def adverse_impact(rates: dict) -> dict:
    """Ratio of each group's favourable rate to the highest group's rate (four-fifths rule).

    Parameters
    ----------
    rates : dict
        Group label → favourable (selection) rate, as a ``(favourable, total)`` count pair, a
        ``Fraction`` or a float.

    Returns
    -------
    dict
        Group label (sorted as text) → ``{"rate", "ratio", "flagged", "reference_group"}``.
        ``rate`` and ``ratio`` are ``Fraction`` when every input is a count pair or rational,
        otherwise float. ``flagged`` is True iff ``ratio < 4/5``, decided exactly. When every
        rate is 0 the ratios are undefined: ``ratio`` is None and nothing is flagged (all
        groups are treated alike).

    Examples
    --------
    >>> out = adverse_impact({"a": (60, 100), "b": (48, 100)})
    >>> out["b"]["ratio"], out["b"]["flagged"]
    (Fraction(4, 5), False)
    """
    if not isinstance(rates, dict) or len(rates) < 2:
        raise OddsmithError(f"adverse impact needs at least two groups, got {rates!r}")
    parsed = {str(g): _exact_rate(str(g), v) for g, v in rates.items()}
    exact = all(is_exact for _, is_exact in parsed.values())
    labels = sorted(parsed)
    highest = max(labels, key=lambda g: parsed[g][0])  # first label among equal highest
    top = parsed[highest][0]
    result = {}
    for g in labels:
        rate = parsed[g][0]
        ratio = None if top == 0 else rate / top
        result[g] = {
            "rate": rate if exact else float(rate),
            "ratio": ratio if exact or ratio is None else float(ratio),
            "flagged": ratio is not None and ratio < FOUR_FIFTHS,
            "reference_group": highest,
        }
    return result


# ---------------------------------------------------------------------------------------------
# groups of an attribute


def _edge_text(edge) -> str:
    return f"{edge:g}" if isinstance(edge, float) and not float(edge).is_integer() else str(int(edge))


def band_labels(bands) -> list[str]:
    """Labels of the groups a numeric attribute's band edges make, lowest first.

    Examples
    --------
    >>> band_labels([30, 45, 60])
    ['below 30', '30 to <45', '45 to <60', '60 and over']
    """
    edges = [_edge_text(b) for b in bands]
    inner = [f"{low} to <{high}" for low, high in zip(edges, edges[1:])]
    return [f"below {edges[0]}", *inner, f"{edges[-1]} and over"]


def attribute_groups(values, *, bands=None, blanks=None) -> np.ndarray:
    """The group label of every row: the value as text, or its band's label when ``bands``
    (strictly increasing edges) is given. A band holds its lower edge, not its upper one.
    Missing values get the label ``blanks`` when it is given, else stay missing (None).

    Examples
    --------
    >>> attribute_groups(pd.Series([29, 30, 59.5, 60, None]), bands=[30, 45, 60]).tolist()
    ['below 30', '30 to <45', '45 to <60', '60 and over', None]
    """
    series = pd.Series(values).reset_index(drop=True)
    missing = series.isna().to_numpy()
    if bands is None:
        labels = series.astype(str).to_numpy(dtype=object)
    else:
        numbers = pd.to_numeric(series, errors="raise").to_numpy(dtype=float, na_value=np.nan)
        names = np.array(band_labels(bands), dtype=object)
        labels = names[np.searchsorted(np.asarray(bands, dtype=float), np.nan_to_num(numbers), side="right")]
    labels[missing] = blanks
    return labels


# ---------------------------------------------------------------------------------------------
# subgroup table


def _group_labels(groups, n: int, attribute: str) -> np.ndarray:
    series = pd.Series(groups)
    if series.shape[0] != n:
        raise OddsmithError(f"groups for {attribute!r} has {series.shape[0]} rows, y has {n}")
    missing = series.isna().to_numpy()
    if missing.any():
        row = int(np.flatnonzero(missing)[0])
        raise OddsmithError(
            f"sensitive attribute {attribute!r} has {int(missing.sum())} missing values "
            f"(first at row {row}); map them to an explicit group first"
        )
    return series.astype(str).to_numpy()


def _check_cutoff(cutoff) -> None:
    if cutoff is not None and (
        isinstance(cutoff, bool) or not isinstance(cutoff, Real) or math.isnan(cutoff)
    ):
        raise OddsmithError(f"cutoff must be a number or None (flag none), got {cutoff!r}")


def _check_min_group_size(min_group_size) -> None:
    if (
        isinstance(min_group_size, bool)
        or not isinstance(min_group_size, Integral)
        or min_group_size < 1
    ):
        raise OddsmithError(f"min_group_size must be a positive integer, got {min_group_size!r}")


def _check_favourable(favourable) -> None:
    if favourable not in _FAVOURABLE:
        raise OddsmithError(f"favourable must be one of {list(_FAVOURABLE)}, got {favourable!r}")


#: Per-group figures that do not depend on the cut-off.
_PROBABILITY_KEYS = ("base_rate", "mean_predicted", "auc", "calibration_in_the_large")
#: Per-group figures of the decision (flag when p >= cut-off) and the comparisons.
_DECISION_KEYS = (
    "tpr",
    "fpr",
    "flag_rate",
    "favourable_rate",
    "adverse_impact_ratio",
    "adverse_impact_numerator",
    "adverse_impact_denominator",
    "adverse_impact_flag",
    "reference_group",
    "tpr_gap",
    "fpr_gap",
)


def _group_summary(label: str, y: np.ndarray, p: np.ndarray, min_size: int) -> dict:
    """One group's row without the decision figures."""
    n, events = int(y.shape[0]), int(y.sum())
    row = {"group": label, "n": n, "events": events, "too_small": n < min_size}
    row |= dict.fromkeys(_PROBABILITY_KEYS)
    row["notes"] = []
    if row["too_small"]:
        row["notes"].append(f"fewer than {min_size} rows; figures withheld as too noisy")
        return row
    row["base_rate"] = events / n
    row["mean_predicted"] = float(p.mean())
    row["calibration_in_the_large"] = row["mean_predicted"] - row["base_rate"]
    if 0 < events < n:
        row["auc"] = metrics.auc(y, p)
    else:
        row["notes"].append(f"only one outcome class ({events} events in {n}); AUC undefined")
    if events == 0:
        row["notes"].append("no events; true-positive rate undefined")
    if events == n:
        row["notes"].append("no non-events; false-positive rate undefined")
    return row


def _group_decisions(summary: dict, y: np.ndarray, p: np.ndarray, cutoff, favourable: str):
    """The summary row with the decision figures (without the comparisons), plus the
    favourable count used for them (None for a group too small to assess)."""
    row = dict(summary) | dict.fromkeys(_DECISION_KEYS)
    row["notes"] = list(summary["notes"])
    if row["too_small"]:
        return row, None
    confusion = confusion_at(y, p, cutoff)
    flagged = confusion["tp"] + confusion["fp"]
    favourable_count = row["n"] - flagged if favourable == "not_flagged" else flagged
    row["tpr"] = confusion["sensitivity"]
    specificity = confusion["specificity"]
    row["fpr"] = None if specificity is None else 1.0 - specificity
    row["flag_rate"] = confusion["flag_rate"]
    row["favourable_rate"] = favourable_count / row["n"]
    return row, favourable_count


def _gap(value, reference):
    return None if value is None or reference is None else value - reference


def _add_comparisons(rows: list[dict], favourable_counts: dict) -> None:
    """Fill adverse-impact ratios and equalised-odds gaps against the most favoured group."""
    if len(favourable_counts) < 2:
        for row in rows:
            if not row["too_small"]:
                row["notes"].append("fewer than two groups large enough; nothing to compare")
        return
    by_label = {row["group"]: row for row in rows}
    impact = adverse_impact({g: (c, by_label[g]["n"]) for g, c in favourable_counts.items()})
    for label, outcome in impact.items():
        row, reference = by_label[label], by_label[outcome["reference_group"]]
        ratio = outcome["ratio"]
        row["reference_group"] = outcome["reference_group"]
        row["adverse_impact_flag"] = outcome["flagged"]
        if ratio is None:
            row["notes"].append("no group has a favourable outcome; ratio undefined")
        else:
            row["adverse_impact_ratio"] = float(ratio)
            row["adverse_impact_numerator"] = ratio.numerator
            row["adverse_impact_denominator"] = ratio.denominator
        row["tpr_gap"] = _gap(row["tpr"], reference["tpr"])
        row["fpr_gap"] = _gap(row["fpr"], reference["fpr"])


def group_summaries(y, p, groups, *, min_group_size: int = 100, attribute: str | None = None) -> list[dict]:
    """Per-group figures that do not depend on the cut-off: the first half of
    :func:`subgroup_table`.

    Returns
    -------
    list of dict
        One per group, sorted by label as text, with keys ``group``, ``n``, ``events``,
        ``too_small``, ``base_rate``, ``mean_predicted``, ``auc``,
        ``calibration_in_the_large``, ``notes`` (see :func:`subgroup_table`).

    Raises
    ------
    OddsmithError
        If the attribute has a single group, has missing values, or an option is invalid.
    """
    y, p = metrics.outcomes_and_probabilities(y, p)
    _check_min_group_size(min_group_size)
    labels, attribute = _labels_of(groups, y.shape[0], attribute)
    distinct = sorted(set(labels.tolist()))
    if len(distinct) == 1:
        raise OddsmithError(
            f"sensitive attribute '{attribute}' has a single group '{distinct[0]}'; "
            "nothing to compare"
        )
    return [_group_summary(label, y[labels == label], p[labels == label], min_group_size)
            for label in distinct]


def add_decisions(
    summaries: list[dict],
    y,
    p,
    groups,
    *,
    cutoff,
    favourable: str = "not_flagged",
    attribute: str | None = None,
) -> list[dict]:
    """Complete :func:`group_summaries` rows with the decision at ``cutoff`` and the
    comparisons between groups: the second half of :func:`subgroup_table`.

    ``y``, ``p`` and ``groups`` must be the rows the summaries were made from; a group whose
    label or counts differ from its summary raises. The summaries are not modified.

    Raises
    ------
    OddsmithError
        On a bad option or summaries that do not match the rows.
    """
    y, p = metrics.outcomes_and_probabilities(y, p)
    _check_cutoff(cutoff)
    _check_favourable(favourable)
    labels, attribute = _labels_of(groups, y.shape[0], attribute)
    distinct = sorted(set(labels.tolist()))
    found = [(s.get("group"), s.get("n"), s.get("events")) for s in summaries]
    actual = [(g, int(np.sum(labels == g)), int(y[labels == g].sum())) for g in distinct]
    if found != actual:
        raise OddsmithError(
            f"group summaries of '{attribute}' do not match the rows: the summaries have "
            f"(group, n, events) {found[:5]}, the rows {actual[:5]}"
        )
    rows, favourable_counts = [], {}
    for summary in summaries:
        mask = labels == summary["group"]
        row, count = _group_decisions(summary, y[mask], p[mask], cutoff, favourable)
        rows.append(row)
        if count is not None:
            favourable_counts[row["group"]] = count
    _add_comparisons(rows, favourable_counts)
    return rows


def subgroup_table(
    y,
    p,
    groups,
    *,
    cutoff,
    min_group_size: int = 100,
    favourable: str = "not_flagged",
    attribute: str | None = None,
) -> list[dict]:
    """Per-group discrimination, calibration, error rates and adverse-impact evidence.

    A case is flagged when ``p >= cutoff`` (``None`` flags none). With
    ``favourable="not_flagged"`` the favourable outcome is *not* being flagged (e.g. approved);
    with ``"flagged"`` it is being flagged (e.g. offered support).

    Per group: ``calibration_in_the_large`` is mean predicted minus observed rate (above 0 means
    over-prediction); ``tpr``/``fpr`` are the true- and false-positive rates of the flag;
    ``adverse_impact_ratio`` is the favourable rate over that of the most favoured group (the
    highest favourable rate among groups large enough; ties go to the first label), kept
    exactly as ``adverse_impact_numerator``/``adverse_impact_denominator``;
    ``adverse_impact_flag`` is True iff the ratio is below 4/5; ``tpr_gap``/``fpr_gap`` are the
    group's rate minus the most favoured group's (equalised-odds gaps). Groups with fewer than
    ``min_group_size`` rows are ``too_small``: only ``n`` and ``events`` are given, the other
    figures are None, and they take no part in the comparisons.

    The work is done in two halves, :func:`group_summaries` (independent of the cut-off) and
    :func:`add_decisions`, so that a pipeline can keep the first when only the cut-off changes.

    Parameters
    ----------
    attribute : str, optional
        Name of the sensitive attribute for messages; defaults to ``groups.name`` when it is a
        named ``pandas.Series``, else ``"group"``.

    Returns
    -------
    list of dict
        One per group, sorted by label as text, with keys ``group``, ``n``, ``events``,
        ``too_small``, ``base_rate``, ``mean_predicted``, ``auc``,
        ``calibration_in_the_large``, ``tpr``, ``fpr``, ``flag_rate``, ``favourable_rate``,
        ``adverse_impact_ratio``, ``adverse_impact_numerator``, ``adverse_impact_denominator``,
        ``adverse_impact_flag``, ``reference_group``, ``tpr_gap``, ``fpr_gap``, ``notes``.

    Raises
    ------
    OddsmithError
        If the attribute has a single group, has missing values, or an option is invalid.
    """
    _check_cutoff(cutoff)
    _check_min_group_size(min_group_size)
    _check_favourable(favourable)
    summaries = group_summaries(y, p, groups, min_group_size=min_group_size, attribute=attribute)
    return add_decisions(summaries, y, p, groups, cutoff=cutoff, favourable=favourable, attribute=attribute)


def _labels_of(groups, n: int, attribute: str | None) -> tuple[np.ndarray, str]:
    if attribute is None:
        attribute = groups.name if isinstance(groups, pd.Series) and groups.name else "group"
    return _group_labels(groups, n, str(attribute)), str(attribute)


# ---------------------------------------------------------------------------------------------
# intervals of the group figures

#: Rates of each group with a Wilson interval: (key, numerator, denominator) of the counts.
_WILSON_RATES = (("flag_rate", "flagged", "n"), ("favourable_rate", "favourable", "n"), ("tpr", "tp", "events"),
                 ("fpr", "fp", "non_events"))
#: Comparisons with the most favoured group that get a bootstrap interval.
BOOTSTRAP_COMPARISONS = ("adverse_impact_ratio", "tpr_gap", "fpr_gap")


def _group_counts(totals: np.ndarray) -> dict:
    """Counts of one group from (rows, flagged, events, flagged events), any leading shape."""
    n, flagged, events, tp = (totals[..., i] for i in range(4))
    return {"n": n, "flagged": flagged, "favourable": n - flagged, "events": events, "tp": tp,
            "non_events": n - events, "fp": flagged - tp}


def _share(numerator, denominator):
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(denominator > 0, numerator / np.where(denominator > 0, denominator, 1.0), np.nan)


def _comparisons(group: dict, reference: dict) -> dict:
    """Adverse-impact ratio (favourable = not flagged) and TPR/FPR gaps; NaN where undefined."""
    rate, top = _share(group["favourable"], group["n"]), _share(reference["favourable"], reference["n"])
    return {"adverse_impact_ratio": _share(rate, top),
            "tpr_gap": _share(group["tp"], group["events"]) - _share(reference["tp"], reference["events"]),
            "fpr_gap": _share(group["fp"], group["non_events"]) - _share(reference["fp"], reference["non_events"])}


def group_comparison_replicates(y, flagged, labels, assessed: list[str], reference: str, *, replicates: int,
                                seed: int) -> dict:
    """Every bootstrap replicate's adverse-impact ratio and TPR/FPR gaps of each group in
    ``assessed`` against ``reference`` (held fixed), NaN where undefined.

    Replicates resample rows as :func:`oddsmith.assessment.metrics.bootstrap_rows` states (stratified
    by outcome, seeded per replicate), so replicate ``b`` here is the same resample as
    replicate ``b`` of the evaluation's bootstrap.

    Returns
    -------
    dict
        group → comparison → array of ``replicates`` values.
    """
    return comparison_replicates(y, flagged, {"": (labels, assessed, reference)}, replicates=replicates,
                                 seed=seed)[""]


def comparison_replicates(y, flagged, attributes: dict, *, replicates: int, seed: int, workers: int = 1) -> dict:
    """:func:`group_comparison_replicates` of several attributes from one pass over the replicates.

    ``attributes`` maps each attribute to ``(labels, assessed, reference)``. Drawing the
    replicates is most of the work (and, after a change of costs, most of the decision
    stage's), so each replicate is drawn once and counted for every attribute, and
    ``workers`` threads share the replicates (:func:`oddsmith.assessment.metrics.run_blocks`).
    Counts are whole numbers, so every total is exact whichever way it is summed, and the
    same for any ``workers``.

    Returns
    -------
    dict
        attribute → group → comparison → array of ``replicates`` values.
    """
    y, flagged = np.asarray(y), np.asarray(flagged, dtype=bool)
    is_event = y == 1
    events, non_events = np.flatnonzero(is_event), np.flatnonzero(~is_event)
    totals = {name: np.empty((replicates, len(assessed) + 1, 4)) for name, (_, assessed, _) in attributes.items()}
    batches = [_joint_cells(batch, is_event, flagged, events, non_events)
               for batch in _joint_batches({name: _group_of_rows(labels, assessed)
                                            for name, (labels, assessed, _) in attributes.items()})]

    def count(first: int, last: int) -> None:
        for b in range(first, last):
            drawn_events, drawn_non_events = metrics.draw_within_outcomes(events.size, non_events.size,
                                                                          replicate=b, seed=seed)
            for cells_of_events, cells_of_non_events, n_cells, member in batches:
                # counts of (not flagged, flagged) × (non-event, event) in each joint group
                counted = (np.bincount(cells_of_events[drawn_events], minlength=n_cells)
                           + np.bincount(cells_of_non_events[drawn_non_events], minlength=n_cells)).reshape(-1, 4)
                for name, groups in member.items():
                    by_group = np.zeros((totals[name].shape[1], 4), dtype=np.int64)
                    np.add.at(by_group, groups, counted)
                    # (rows, flagged, events, flagged events)
                    totals[name][b] = np.column_stack([by_group.sum(axis=1), by_group[:, 2] + by_group[:, 3],
                                                       by_group[:, 1] + by_group[:, 3], by_group[:, 3]])

    metrics.run_blocks(count, metrics.bootstrap_blocks(y.shape[0], replicates), workers=workers)
    out = {}
    for name, (_, assessed, reference) in attributes.items():
        ref = _group_counts(totals[name][:, assessed.index(reference)])
        out[name] = {group: _comparisons(_group_counts(totals[name][:, i]), ref) for i, group in enumerate(assessed)}
    return out


#: Most joint groups (combinations of the attributes' groups) counted in one pass of a
#: replicate; attributes beyond it are counted in a further pass (the same counts).
MAX_JOINT_GROUPS = 4096


def _group_of_rows(labels, assessed: list) -> tuple[np.ndarray, int]:
    """Each row's group as a number (assessed groups in order; the rest share one last
    number) and how many numbers there are."""
    # factorize hashes the labels (a sort, as np.unique does, takes 0.25 s for 250,000 text labels)
    inverse, found = pd.factorize(np.asarray(labels), use_na_sentinel=False)
    position = {group: i for i, group in enumerate(assessed)}
    return np.array([position.get(g, len(assessed)) for g in found], dtype=np.int64)[inverse], len(assessed) + 1


def _joint_batches(groups: dict) -> list[dict]:
    """The attributes in batches whose groups multiply to at most :data:`MAX_JOINT_GROUPS`
    (an attribute with more groups alone), in the order given."""
    batches, size = [], None
    for name, (group, n_groups) in groups.items():
        if size is None or size * n_groups > MAX_JOINT_GROUPS:
            batches.append({})
            size = 1
        batches[-1][name] = (group, n_groups)
        size *= n_groups
    return batches


def _joint_cells(batch: dict, is_event, flagged, events, non_events):
    """The cells of one batch: each row's joint group (a combination of its groups that
    occurs) × flagged × event, split into the events' and the non-events' cells; the number
    of cells; and, per attribute, the group of each joint group."""
    joint = np.zeros(is_event.shape[0], dtype=np.int64)
    for group, n_groups in batch.values():
        joint = joint * n_groups + group
    joint, _ = pd.factorize(joint)  # numbered in order of first appearance
    first_row = np.unique(joint, return_index=True)[1]
    member = {name: group[first_row] for name, (group, _) in batch.items()}
    cells = joint * 4 + flagged.astype(np.int64) * 2 + is_event.astype(np.int64)
    return cells[events], cells[non_events], first_row.size * 4, member


def add_intervals(rows: list[dict], y, p, groups, *, cutoff, bootstrap: dict | None, level: float = 0.95) -> list[dict]:
    """Rows of :func:`add_decisions` with an ``intervals`` record for each group assessed.

    Flag rate, favourable rate, TPR and FPR get a Wilson score interval; the adverse-impact
    ratio and the TPR/FPR gaps against the most favoured group (held fixed at the observed
    one) a bootstrap interval when ``bootstrap`` (``replicates``, ``seed``, ``method`` of
    the evaluation's bootstrap) is given. The rows are not modified; new ones are returned.
    """
    return add_intervals_of_attributes({"": (rows, groups)}, y, p, cutoff=cutoff, bootstrap=bootstrap, level=level)[""]


def add_intervals_of_attributes(attributes: dict, y, p, *, cutoff, bootstrap: dict | None,
                                level: float = 0.95, workers: int = 1) -> dict:
    """:func:`add_intervals` of several attributes (name → ``(rows, groups)``), drawing the
    bootstrap replicates once for all of them (:func:`comparison_replicates`); returns name → rows."""
    y, p = metrics.outcomes_and_probabilities(y, p)
    flagged = np.zeros(p.shape, dtype=bool) if cutoff is None else p >= cutoff
    plans = {}
    for name, (rows, groups) in attributes.items():
        labels = np.asarray(pd.Series(groups).astype(str))
        assessed = [r["group"] for r in rows if not r["too_small"]]
        reference = next((r["reference_group"] for r in rows if r.get("reference_group") is not None), None)
        plans[name] = (labels, assessed, reference)
    compared = {name: plan for name, plan in plans.items() if plan[2] is not None}
    replicated = {}
    if bootstrap and compared:
        replicated = comparison_replicates(y, flagged, compared, replicates=bootstrap["replicates"],
                                           seed=bootstrap["seed"], workers=workers)
    return {name: _rows_with_intervals(rows, y, flagged, plans[name][0], replicated.get(name),
                                       bootstrap=bootstrap, level=level)
            for name, (rows, _) in attributes.items()}


def _rows_with_intervals(rows, y, flagged, labels, replicated, *, bootstrap, level) -> list[dict]:
    out = []
    for row in rows:
        row = dict(row)
        if not row["too_small"]:
            inside = labels == row["group"]
            counts = _group_counts(np.array([inside.sum(), (inside & flagged).sum(), y[inside].sum(),
                                             (inside & flagged & (y == 1)).sum()], dtype=np.int64))
            row["intervals"] = {key: metrics.wilson_interval(int(counts[num]), int(counts[den]), level=level)
                                for key, num, den in _WILSON_RATES}
            for key in BOOTSTRAP_COMPARISONS:
                row["intervals"][key] = None if replicated is None else metrics.bootstrap_interval(
                    replicated[row["group"]][key], estimate=row[key], level=level, method=bootstrap["method"]) | {
                    "method": bootstrap["method"], "level": level}
        out.append(row)
    return out
