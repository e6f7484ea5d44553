"""Cost-based choice of the cut-off that turns a predicted probability into a decision.

A case is *flagged* (predicted to have the adverse outcome, ``y = 1``) when ``p >= cutoff``.
Costs are per case: ``false_positive`` for flagging a case that turns out fine, ``false_negative`` for
missing an adverse case, ``true_positive`` and ``true_negative`` for the two correct decisions (default 0).
A cut-off of ``None`` in a returned dictionary (``inf`` in a cost curve) means "flag none".
"""

from __future__ import annotations

import math
from numbers import Real

import numpy as np
import pandas as pd

from oddsmith.assessment.metrics import outcomes_and_probabilities
from oddsmith.errors import CostError, OddsmithError
from oddsmith.settings import COST_KEYS, constrained_problem

_ADOPT = ("empirical", "bayes", "constrained")
_BOOTSTRAP_LEVEL = 0.95
# Relative tolerance for treating two total costs as tied (floating-point noise only).
_TIE_RTOL = 1e-12


# ---------------------------------------------------------------------------------------------
# costs


def _check_cost(name: str, value, *, strictly_positive: bool) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise CostError(f"{name} must be a number, got {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise CostError(f"{name} must be finite, got {value!r}")
    if strictly_positive and value <= 0.0:
        raise CostError(f"{name} must be > 0, got {value!r}")
    if value < 0.0:
        raise CostError(f"{name} must be >= 0, got {value!r}")
    return value


def _validated_costs(false_positive, false_negative, true_positive, true_negative) -> dict:
    costs = {
        "false_positive": _check_cost("false_positive", false_positive, strictly_positive=False),
        "false_negative": _check_cost("false_negative", false_negative, strictly_positive=False),
        "true_positive": _check_cost("true_positive", true_positive, strictly_positive=False),
        "true_negative": _check_cost("true_negative", true_negative, strictly_positive=False),
    }
    if costs["false_positive"] <= costs["true_negative"]:
        raise CostError(
            f"false_positive must exceed true_negative (a false alarm must cost more than a correct pass), "
            f"got false_positive={costs['false_positive']!r}, true_negative={costs['true_negative']!r}"
        )
    if costs["false_negative"] <= costs["true_positive"]:
        raise CostError(
            f"false_negative must exceed true_positive (a miss must cost more than a correct flag), "
            f"got false_negative={costs['false_negative']!r}, true_positive={costs['true_positive']!r}"
        )
    return costs


def bayes_cutoff(*, false_positive, false_negative, true_positive=0, true_negative=0) -> float:
    """Cut-off that minimises expected cost when ``p`` is a calibrated probability.

    Flag when ``p >= (false_positive − true_negative) / (false_positive − true_negative + false_negative − true_positive)``
    (Elkan 2001). With no cost on correct decisions this is ``false_positive / (false_positive + false_negative)``.

    Examples
    --------
    >>> bayes_cutoff(false_positive=1, false_negative=4)
    0.2
    """
    costs = _validated_costs(false_positive, false_negative, true_positive, true_negative)
    fp_regret = costs["false_positive"] - costs["true_negative"]
    fn_regret = costs["false_negative"] - costs["true_positive"]
    return fp_regret / (fp_regret + fn_regret)


def _resolve_costs(costs) -> dict:
    if not isinstance(costs, dict):
        raise CostError(f"costs must be a dict with keys {list(COST_KEYS)}, got {costs!r}")
    unknown = sorted(str(k) for k in costs if k not in COST_KEYS)
    if unknown:
        raise CostError(
            f"unknown cost keys {unknown}; expected {list(COST_KEYS)} "
            "(oddsmith.settings.normalised_costs gives this form from a configuration)"
        )
    if "false_positive" not in costs or "false_negative" not in costs:
        raise CostError(f"costs need false_positive and false_negative, got keys {sorted(costs)}")
    return _validated_costs(
        costs["false_positive"], costs["false_negative"], costs.get("true_positive", 0), costs.get("true_negative", 0)
    )


# ---------------------------------------------------------------------------------------------
# cost curve


def _curve_counts(y: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cut-offs (ascending, ``inf`` last), flagged counts and true positives at each.

    One sort, then cumulative sums over ``p`` in decreasing order; the count at a distinct
    value is read at the end of its run of ties, because ``p >= t`` flags the whole run.
    """
    order = np.argsort(-p, kind="stable")
    p_desc = p[order]
    cum_tp = np.cumsum(y[order])
    run_ends = np.flatnonzero(np.append(p_desc[1:] != p_desc[:-1], True))
    cutoffs = np.append(p_desc[run_ends][::-1], np.inf)
    flagged = np.append((run_ends + 1)[::-1], 0)
    tp = np.append(cum_tp[run_ends][::-1], 0)
    return cutoffs, flagged.astype(np.int64), tp.astype(np.int64)


def _total_cost(costs: dict, tp, fp, tn, fn):
    return (
        costs["true_positive"] * tp
        + costs["false_positive"] * fp
        + costs["true_negative"] * tn
        + costs["false_negative"] * fn
    )


def cost_curve(y, p, *, costs) -> pd.DataFrame:
    """Confusion counts and expected cost at every distinct candidate cut-off.

    Candidates are every distinct value of ``p`` plus ``inf`` (flag none); rows are in
    increasing order of cut-off. Exact and O(n log n).

    Parameters
    ----------
    costs : dict
        ``false_positive``, ``false_negative`` and optionally ``true_positive``, ``true_negative`` (the configuration's
        ``costs`` section once checked, see :func:`oddsmith.settings.normalised_costs`).

    Returns
    -------
    pandas.DataFrame
        Columns ``cutoff``, ``flagged``, ``tp``, ``fp``, ``tn``, ``fn``, ``flag_rate``,
        ``sensitivity``, ``specificity``, ``expected_cost_per_case``. Sensitivity
        (specificity) is NaN when there are no positives (negatives).
    """
    costs = _resolve_costs(costs)
    y, p = outcomes_and_probabilities(y, p)
    cutoffs, flagged, tp = _curve_counts(y, p)
    n, events = y.shape[0], int(y.sum())
    fp = flagged - tp
    fn = events - tp
    tn = (n - events) - fp
    with np.errstate(invalid="ignore", divide="ignore"):
        sensitivity = tp / events if events else np.full(tp.shape, np.nan)
        specificity = tn / (n - events) if n > events else np.full(tn.shape, np.nan)
    return pd.DataFrame(
        {
            "cutoff": cutoffs,
            "flagged": flagged,
            "tp": tp,
            "fp": fp,
            "tn": tn,
            "fn": fn,
            "flag_rate": flagged / n,
            "sensitivity": sensitivity,
            "specificity": specificity,
            "expected_cost_per_case": _total_cost(costs, tp, fp, tn, fn) / n,
        }
    )


# ---------------------------------------------------------------------------------------------
# single cut-off


def _flag_mask(p: np.ndarray, cutoff) -> np.ndarray:
    if cutoff is None:
        return np.zeros(p.shape, dtype=bool)
    if isinstance(cutoff, bool) or not isinstance(cutoff, Real) or math.isnan(cutoff):
        raise OddsmithError(f"cutoff must be a number or None (flag none), got {cutoff!r}")
    return p >= cutoff


def _ratio(numerator: int, denominator: int) -> float | None:
    return numerator / denominator if denominator else None


def confusion_at(y, p, cutoff) -> dict:
    """Confusion counts and rates when flagging ``p >= cutoff``.

    ``cutoff`` may be ``None`` or ``inf`` to flag none.

    Returns
    -------
    dict
        ``cutoff``, ``n``, ``tp``, ``fp``, ``tn``, ``fn``, ``sensitivity``, ``specificity``,
        ``ppv``, ``npv``, ``flag_rate``. A rate whose denominator is 0 is None.
    """
    y, p = outcomes_and_probabilities(y, p)
    flag = _flag_mask(p, cutoff)
    tp = int(np.sum(flag & (y == 1)))
    fp = int(np.sum(flag & (y == 0)))
    fn = int(np.sum(~flag & (y == 1)))
    tn = int(np.sum(~flag & (y == 0)))
    return {
        "cutoff": None if cutoff is None or math.isinf(cutoff) else float(cutoff),
        "n": int(y.shape[0]),
        "tp": tp,
        "fp": fp,
        "tn": tn,
        "fn": fn,
        "sensitivity": _ratio(tp, tp + fn),
        "specificity": _ratio(tn, tn + fp),
        "ppv": _ratio(tp, tp + fp),
        "npv": _ratio(tn, tn + fn),
        "flag_rate": (tp + fp) / y.shape[0],
    }


def realised_cost_per_1000(y, p, cutoff, *, costs) -> float:
    """Average cost per 1,000 cases when flagging ``p >= cutoff`` on these rows."""
    costs = _resolve_costs(costs)
    c = confusion_at(y, p, cutoff)
    return 1000.0 * float(_total_cost(costs, c["tp"], c["fp"], c["tn"], c["fn"])) / c["n"]


# ---------------------------------------------------------------------------------------------
# choosing a cut-off


def _lowest_cost_index(total_cost: np.ndarray, allowed: np.ndarray | None = None) -> int:
    """Index of the lowest total cost; ties (within rounding) go to the highest cut-off.

    Rows are in increasing order of cut-off, so the last tied row is the highest.
    """
    cost = total_cost if allowed is None else np.where(allowed, total_cost, np.inf)
    best = cost.min()
    tied = cost <= best + _TIE_RTOL * max(1.0, abs(best))
    return int(np.flatnonzero(tied)[-1])


def _cutoff_value(cutoff: float) -> float | None:
    return None if math.isinf(cutoff) else float(cutoff)


def _pct(x: float) -> str:
    return f"{100.0 * x:.4g}%"


def _check_constraints(max_flag_rate, min_sensitivity) -> None:
    for name, value, low_open in (
        ("max_flag_rate", max_flag_rate, True),
        ("min_sensitivity", min_sensitivity, False),
    ):
        if value is None:
            continue
        ok = isinstance(value, Real) and not isinstance(value, bool) and math.isfinite(value)
        if not ok or value > 1.0 or value < 0.0 or (low_open and value == 0.0):
            bounds = "(0, 1]" if low_open else "[0, 1]"
            raise CostError(f"{name} must be a number in {bounds}, got {value!r}")


def _feasible(curve: dict, n: int, events: int, max_flag_rate, min_sensitivity) -> np.ndarray:
    ok = np.ones(curve["cutoff"].shape, dtype=bool)
    # a small allowance keeps e.g. 5 flagged of 100 inside a 0.05 limit despite rounding
    if max_flag_rate is not None:
        ok &= curve["flagged"] <= max_flag_rate * n + 1e-9
    if min_sensitivity is not None:
        ok &= curve["tp"] >= min_sensitivity * events - 1e-9
    return ok


def _infeasible_error(curve: dict, n: int, events: int, max_flag_rate, min_sensitivity):
    within_rate = _feasible(curve, n, events, max_flag_rate, None)
    within_sens = _feasible(curve, n, events, None, min_sensitivity)
    best_sens_row = int(np.flatnonzero(within_rate)[0])  # lowest cut-off within the rate
    least_rate_row = int(np.flatnonzero(within_sens)[-1])  # highest cut-off reaching it
    best_sens = curve["tp"][best_sens_row] / events
    least_rate = curve["flagged"][least_rate_row] / n
    return CostError(
        f"no cut-off flags <= {_pct(max_flag_rate)} while reaching sensitivity >= "
        f"{_pct(min_sensitivity)}: at flag rate <= {_pct(max_flag_rate)} the best sensitivity "
        f"is {_pct(best_sens)} (cut-off {curve['cutoff'][best_sens_row]:.4g}); sensitivity >= "
        f"{_pct(min_sensitivity)} needs a flag rate of {_pct(least_rate)} "
        f"(cut-off {curve['cutoff'][least_rate_row]:.4g})"
    )


def _curve_dict(y: np.ndarray, p: np.ndarray, costs: dict) -> dict:
    cutoffs, flagged, tp = _curve_counts(y, p)
    events, negatives = int(y.sum()), int(y.shape[0] - y.sum())
    fp = flagged - tp
    total = _total_cost(costs, tp, fp, negatives - fp, events - tp)
    return {"cutoff": cutoffs, "flagged": flagged, "tp": tp, "total_cost": total}


class _BinnedRows:
    """Rows grouped for the bootstrap: distinct values of ``p`` in decreasing order, their
    counts of events and non-events, and consecutive bins of distinct values.

    Distinct value ``d`` (0 = highest) as a cut-off flags every row of values ``0 .. d``. Bin
    ``k`` holds values ``starts[k] .. starts[k + 1] - 1``; cutting at its lowest value (its
    *edge*) flags bins ``0 .. k`` whole. Bins hold about equal numbers of rows, and the value
    ``forced`` (when given) is the edge of its bin.
    """

    def __init__(self, y: np.ndarray, p: np.ndarray, bins: int, forced: float | None):
        order = np.argsort(-p, kind="stable")
        p_desc, y_desc = p[order], y[order]
        run_starts = np.flatnonzero(np.append(True, p_desc[1:] != p_desc[:-1]))
        self.values = p_desc[run_starts]
        value_of_row = np.cumsum(np.append(False, p_desc[1:] != p_desc[:-1]))
        n_values = self.values.size
        rows = np.diff(np.append(run_starts, p.size))
        self.pos = np.bincount(value_of_row, weights=y_desc, minlength=n_values).astype(np.int64)
        self.neg = rows - self.pos
        # distinct value of each event / non-event, in decreasing order of p
        self.pos_value = value_of_row[y_desc == 1]
        self.neg_value = value_of_row[y_desc == 0]
        # bin k ends at the first value where the running row count reaches k+1 bins' worth
        targets = p.size * np.arange(1, bins) / bins
        ends = set(np.searchsorted(np.cumsum(rows), targets, side="left").tolist()) | {n_values - 1}
        forced_value = None
        if forced is not None and math.isfinite(forced):
            forced_value = int(np.flatnonzero(self.values == forced)[0])
            ends.add(forced_value)
        ends = np.array(sorted(ends), dtype=np.int64)
        self.starts = np.append(0, ends + 1)  # bin k: values starts[k] .. starts[k+1] - 1
        cum_pos = np.append(0, np.cumsum(self.pos))
        cum_neg = np.append(0, np.cumsum(self.neg))
        # events (non-events) of bin k are pos_value[pos_from[k]:pos_from[k + 1]]
        self.pos_from, self.neg_from = cum_pos[self.starts], cum_neg[self.starts]
        self.bin_pos, self.bin_neg = np.diff(self.pos_from), np.diff(self.neg_from)
        # the bin whose edge is the forced value (None: no value forced, e.g. flag none)
        self.forced_bin = None if forced_value is None else int(np.flatnonzero(ends == forced_value)[0])

    def counts_in(self, bins: np.ndarray, events: np.ndarray, non_events: np.ndarray, rng):
        """Resampled counts per distinct value inside ``bins``, given each bin's resampled
        events and non-events: each draw picks one of the bin's rows of that outcome with
        equal probability, which is what resampling the whole outcome class does once the
        bin's total is known.

        Returns ``(events, non_events, lengths, base)``: counts per value, bin after bin in
        decreasing order of ``p``; the number of values of each bin; and, per position, the
        number to add to the position to get the distinct value's index.
        """
        lengths = self.starts[bins + 1] - self.starts[bins]
        shift = self.starts[bins] - (np.cumsum(lengths) - lengths)
        size = int(lengths.sum())
        out = []
        for value_of, first, drawn in ((self.pos_value, self.pos_from, events),
                                       (self.neg_value, self.neg_from, non_events)):
            low, high = np.repeat(first[bins], drawn), np.repeat(first[bins + 1], drawn)
            picked = value_of[rng.integers(low, high)] if low.size else np.empty(0, dtype=np.int64)
            out.append(np.bincount(picked - np.repeat(shift, drawn), minlength=size).astype(np.int64))
        return out[0], out[1], lengths, np.repeat(shift, lengths)


def _pruned_choice(rows: _BinnedRows, costs: dict, events: int, non_events: int, bin_pos: np.ndarray,
                   bin_neg: np.ndarray, counts_in) -> tuple[int, float]:
    """The empirical choice of one resample from its counts per bin: ``(distinct value, total
    cost)``, value ``-1`` meaning flag none; the same choice as the full cost curve.

    Every bin edge is costed. Inside bin ``k`` the total cost cannot fall below
    ``max(C_before - a·(false_negative - true_positive), C_after - b·(false_positive - true_negative))`` (``a`` events,
    ``b`` non-events in the bin, ``C_before``/``C_after`` the costs at the edges around it),
    so only bins whose bound reaches the best edge (plus the tie tolerance, generously) can
    hold the minimum or a tie with it; ``counts_in(bins)`` supplies the counts per distinct
    value of those bins, and their values are costed one by one.
    """
    tp = np.append(0, np.cumsum(bin_pos))  # after flagging bins 0 .. k-1
    fp = np.append(0, np.cumsum(bin_neg))
    edge_cost = _total_cost(costs, tp, fp, non_events - fp, events - tp)
    best_edge = float(edge_cost.min())
    fn_regret, fp_regret = costs["false_negative"] - costs["true_positive"], costs["false_positive"] - costs["true_negative"]
    bound = np.maximum(edge_cost[:-1] - bin_pos * fn_regret, edge_cost[1:] - bin_neg * fp_regret)
    margin = 1e-9 * max(1.0, abs(best_edge))  # far wider than the tie tolerance and rounding
    multi = np.diff(rows.starts) > 1
    refine = np.flatnonzero(multi & (bound <= best_edge + margin))
    # candidates: flag none (-1), each bin's edge, each value of the refined bins
    value = np.append(-1, rows.starts[1:] - 1)
    cost = edge_cost
    if refine.size:
        pos_counts, neg_counts, lengths, base = counts_in(refine)
        segment = np.repeat(np.arange(refine.size), lengths)
        first = np.cumsum(lengths) - lengths
        cum_pos, cum_neg = np.cumsum(pos_counts), np.cumsum(neg_counts)
        tp_in = tp[refine][segment] + cum_pos - (cum_pos[first] - pos_counts[first])[segment]
        fp_in = fp[refine][segment] + cum_neg - (cum_neg[first] - neg_counts[first])[segment]
        value = np.append(value, base + np.arange(lengths.sum()))
        cost = np.append(cost, _total_cost(costs, tp_in, fp_in, non_events - fp_in, events - tp_in))
    best = cost.min()
    tied = cost <= best + _TIE_RTOL * max(1.0, abs(best))
    # the highest cut-off among ties: the smallest distinct value index (flag none first)
    pick = np.flatnonzero(tied)[np.argmin(value[tied])]
    return int(value[pick]), float(cost[pick])


def _bootstrap_bins(n_rows: int) -> int:
    """Number of bins for the bootstrap, ``2·sqrt(n)``: drawing the bin totals costs O(bins)
    per resample, costing the values of the bins near the minimum about O(n / bins). Any
    number gives the same choices in distribution; only the time changes (measured on
    750,000 rows: 1,000 to 2,000 bins were fastest)."""
    return max(1, min(n_rows, round(2 * math.sqrt(n_rows))))


def _bootstrap_draws(y, p, costs, empirical_cutoff, resamples, seed):
    """Per resample: the cut-off chosen again (``inf`` = flag none), its total cost, and the
    total cost of ``empirical_cutoff``. See :func:`_bootstrap` for the method."""
    rng = np.random.default_rng(seed)
    events = int(y.sum())
    non_events = int(y.shape[0]) - events
    rows = _BinnedRows(y, p, _bootstrap_bins(int(y.shape[0])), empirical_cutoff)
    pos_share, neg_share = rows.bin_pos / events, rows.bin_neg / non_events
    chosen, chosen_cost, fixed_cost = (np.empty(resamples) for _ in range(3))
    for b in range(resamples):
        bin_pos = rng.multinomial(events, pos_share)
        bin_neg = rng.multinomial(non_events, neg_share)
        value, chosen_cost[b] = _pruned_choice(
            rows, costs, events, non_events, bin_pos, bin_neg,
            lambda bins: rows.counts_in(bins, bin_pos[bins], bin_neg[bins], rng))
        chosen[b] = math.inf if value < 0 else rows.values[value]
        if rows.forced_bin is None:  # the cut-off chosen on all rows flags none
            tp_fixed = fp_fixed = 0
        else:
            tp_fixed = int(bin_pos[: rows.forced_bin + 1].sum())
            fp_fixed = int(bin_neg[: rows.forced_bin + 1].sum())
        fixed_cost[b] = _total_cost(costs, tp_fixed, fp_fixed, non_events - fp_fixed, events - tp_fixed)
    return chosen, chosen_cost, fixed_cost


def _bootstrap(y, p, costs, empirical_cutoff, resamples, seed) -> dict | None:
    """Stratified percentile bootstrap of the empirical cut-off and its cost per 1,000.

    Events and non-events are resampled separately, each with replacement and to its own
    count. For each resample the empirical cut-off is chosen again among the distinct values
    of ``p`` (plus flag none), with the same rule as on all rows, and its cost recorded; the
    cost of the cut-off chosen on all rows is recorded too. Percentiles are order statistics
    (numpy ``inverted_cdf``), so "flag none" (``inf``) can be an end point, reported as None.

    A resample is drawn in two exact steps instead of row by row. Rows are grouped into
    about ``2·sqrt(n)`` bins of consecutive distinct values (the cut-off chosen on all rows
    ends a bin). The resampled events per bin are Multinomial(events, bin shares of the
    events), and non-events likewise; given a bin's totals, its draws are uniform over its
    rows of that outcome. The second step is taken only for bins that can hold the
    resample's lowest cost (:func:`_pruned_choice`), so a resample costs far less than
    ``n``; the resampled counts, and hence the choices, have exactly the distribution of
    row-by-row resampling (the random numbers differ, so a seed gives other draws than a
    row-by-row implementation would).
    """
    if resamples == 0:
        return None
    chosen, chosen_cost, fixed_cost = _bootstrap_draws(y, p, costs, empirical_cutoff, resamples, seed)
    q = [(1 - _BOOTSTRAP_LEVEL) / 2, (1 + _BOOTSTRAP_LEVEL) / 2]
    cut_lo, cut_hi = np.quantile(chosen, q, method="inverted_cdf")
    scale = 1000.0 / y.shape[0]
    cost_lo, cost_hi = np.quantile(chosen_cost, q, method="inverted_cdf") * scale
    fixed_lo, fixed_hi = np.quantile(fixed_cost, q, method="inverted_cdf") * scale
    return {
        "resamples": int(resamples),
        "seed": seed,
        "level": _BOOTSTRAP_LEVEL,
        "cutoff_low": _cutoff_value(cut_lo),
        "cutoff_high": _cutoff_value(cut_hi),
        "cost_per_1000_low": float(cost_lo),
        "cost_per_1000_high": float(cost_hi),
        "fixed_cutoff_cost_per_1000_low": float(fixed_lo),
        "fixed_cutoff_cost_per_1000_high": float(fixed_hi),
    }


def _check_choice_options(y, adopt, bootstrap, seed, max_flag_rate, min_sensitivity) -> None:
    if adopt not in _ADOPT:
        raise CostError(f"adopt must be one of {list(_ADOPT)}, got {adopt!r}")
    problem = constrained_problem(adopt, max_flag_rate, min_sensitivity)
    if problem:
        raise CostError(problem)
    if isinstance(bootstrap, bool) or not isinstance(bootstrap, (int, np.integer)) or bootstrap < 0:
        raise CostError(f"bootstrap must be a whole number >= 0, got {bootstrap!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)):
        raise CostError(f"seed must be an integer, got {seed!r}")
    events = int(y.sum())
    if events == 0 or events == y.shape[0]:
        raise OddsmithError(
            f"choosing a cut-off needs both outcomes, got {events} events in {y.shape[0]} rows"
        )
    _check_constraints(max_flag_rate, min_sensitivity)


def _reason(adopt, chosen, constraints, n_candidates, bayes) -> str:
    per_1000 = f"{chosen['cost_per_1000']:.4g} per 1,000 cases"
    if adopt == "empirical":
        return (
            f"empirical: lowest expected cost on these rows ({per_1000}) among {n_candidates} "
            "candidate cut-offs; ties go to the highest cut-off"
        )
    if adopt == "bayes":
        return (
            f"bayes: cut-off (cost_fp - cost_tn)/(cost_fp - cost_tn + cost_fn - cost_tp) = "
            f"{bayes:.4g} from the stated costs, which assumes p is calibrated ({per_1000} "
            "on these rows)"
        )
    limits = []
    if constraints["max_flag_rate"] is not None:
        limits.append(f"flag at most {_pct(constraints['max_flag_rate'])}")
    if constraints["min_sensitivity"] is not None:
        limits.append(f"reach sensitivity of at least {_pct(constraints['min_sensitivity'])}")
    return f"constrained: lowest expected cost ({per_1000}) among cut-offs that " + " and ".join(
        limits
    )


def _operating_point(curve: dict, row: int, n: int) -> dict:
    return {
        "cutoff": _cutoff_value(curve["cutoff"][row]),
        "flags_none": bool(math.isinf(curve["cutoff"][row])),
        "cost_per_case": float(curve["total_cost"][row]) / n,
        "cost_per_1000": 1000.0 * float(curve["total_cost"][row]) / n,
    }


def _bayes_point(y: np.ndarray, p: np.ndarray, costs: dict) -> dict:
    cutoff = bayes_cutoff(**costs)
    per_1000 = realised_cost_per_1000(y, p, cutoff, costs=costs)
    return {
        "cutoff": cutoff,
        "flags_none": False,
        "cost_per_case": per_1000 / 1000.0,
        "cost_per_1000": per_1000,
    }


def _constrained_point(curve: dict, n: int, events: int, max_flag_rate, min_sensitivity):
    """``(constraints, operating point)``, both None when no constraint is given."""
    if max_flag_rate is None and min_sensitivity is None:
        return None, None
    allowed = _feasible(curve, n, events, max_flag_rate, min_sensitivity)
    if not allowed.any():
        raise _infeasible_error(curve, n, events, max_flag_rate, min_sensitivity)
    row = _lowest_cost_index(curve["total_cost"], allowed)
    point = _operating_point(curve, row, n)
    point["flag_rate"] = int(curve["flagged"][row]) / n
    point["sensitivity"] = int(curve["tp"][row]) / events
    constraints = {"max_flag_rate": max_flag_rate, "min_sensitivity": min_sensitivity}
    return constraints, point


def _constraint_note(confusion: dict, constraints: dict, events: int) -> str:
    misses = []
    limit = constraints["max_flag_rate"]
    if limit is not None and confusion["tp"] + confusion["fp"] > limit * confusion["n"] + 1e-9:
        misses.append(f"it flags {_pct(confusion['flag_rate'])} (limit {_pct(limit)})")
    floor = constraints["min_sensitivity"]
    if floor is not None and confusion["tp"] < floor * events - 1e-9:
        misses.append(f"its sensitivity is {_pct(confusion['sensitivity'])} (floor {_pct(floor)})")
    return "; it does not meet the operating constraints: " + ", ".join(misses) if misses else ""


def choose_cutoff(
    y,
    p,
    *,
    costs,
    max_flag_rate=None,
    min_sensitivity=None,
    bootstrap: int = 500,
    seed: int = 0,
    adopt: str = "empirical",
) -> dict:
    """Choose the cut-off that minimises expected cost, with its uncertainty and alternatives.

    Candidates are the distinct values of ``p`` plus "flag none"; the rule is always
    ``p >= cutoff`` (also when evaluating the Bayes cut-off on these rows). The empirical
    cut-off has the lowest expected cost; among equal costs the highest cut-off is taken
    (fewest cases flagged). With constraints, the constrained cut-off is the lowest-cost
    candidate meeting every given constraint.

    Parameters
    ----------
    costs : dict
        ``false_positive``, ``false_negative`` and optionally ``true_positive``, ``true_negative``.
    max_flag_rate, min_sensitivity : float, optional
        Operating constraints: share flagged at most, sensitivity at least.
    bootstrap : int
        Stratified resamples for the 95% percentile intervals; 0 skips them.
    seed : int
        Seed of ``numpy.random.default_rng`` for the bootstrap.
    adopt : {"empirical", "bayes", "constrained"}
        Which cut-off to adopt.

    Returns
    -------
    dict
        ``rule``, ``costs``, ``n``, ``events``, ``candidates``, ``bayes`` and ``empirical``
        (each ``cutoff``, ``flags_none``, ``cost_per_case``, ``cost_per_1000``),
        ``bootstrap`` (None when skipped), ``constraints`` and ``constrained`` (None without
        constraints), ``cost_per_1000`` (``adopted``, ``flag_none``, ``flag_all``, ``bayes``),
        ``adopted``, ``adopted_cutoff``, ``reason``, ``confusion_at_adopted``.

    Raises
    ------
    CostError
        Bad costs or options, or constraints no cut-off can meet (with the closest values).
    """
    costs = _resolve_costs(costs)
    y, p = outcomes_and_probabilities(y, p)
    _check_choice_options(y, adopt, bootstrap, seed, max_flag_rate, min_sensitivity)
    n, events = int(y.shape[0]), int(y.sum())
    curve = _curve_dict(y, p, costs)
    empirical = _operating_point(curve, _lowest_cost_index(curve["total_cost"]), n)
    bayes = _bayes_point(y, p, costs)
    constraints, constrained = _constrained_point(curve, n, events, max_flag_rate, min_sensitivity)
    chosen = {"empirical": empirical, "bayes": bayes, "constrained": constrained}[adopt]
    confusion = confusion_at(y, p, chosen["cutoff"])
    reason = _reason(adopt, chosen, constraints, int(curve["cutoff"].size), bayes["cutoff"])
    if constraints is not None and adopt != "constrained":
        reason += _constraint_note(confusion, constraints, events)
    empirical_threshold = math.inf if empirical["flags_none"] else empirical["cutoff"]
    return {
        "rule": "flag when p >= cutoff",
        "costs": costs,
        "n": n,
        "events": events,
        "candidates": int(curve["cutoff"].size),
        "bayes": bayes,
        "empirical": empirical,
        "bootstrap": _bootstrap(y, p, costs, empirical_threshold, int(bootstrap), int(seed)),
        "constraints": constraints,
        "constrained": constrained,
        "cost_per_1000": {
            "adopted": chosen["cost_per_1000"],
            "flag_none": 1000.0 * float(curve["total_cost"][-1]) / n,
            "flag_all": 1000.0 * float(curve["total_cost"][0]) / n,
            "bayes": bayes["cost_per_1000"],
        },
        "adopted": adopt,
        "adopted_cutoff": chosen["cutoff"],
        "reason": reason,
        "confusion_at_adopted": confusion,
    }
