"""Figures of the model card as deterministic SVG (matplotlib, no pyplot state).

Every function takes artifact contents (arrays, dicts) and returns SVG bytes. Nothing here
estimates anything reported on the card: the curves are drawn from stored predictions and
the annotated values (AUC, cut-offs, costs) are passed in from the artifacts.

Bytes are stable: a fixed ``svg.hashsalt`` for element ids, no date in the metadata, text
kept as SVG text in DejaVu Sans (the card's own font, which the install provides; the PDF
carries it as selectable text, and WeasyPrint lays out the six figures in a third of the
time that glyphs drawn as paths took), mathtext parsing off so a ``$`` in a
column name or group label is printed, not interpreted. Series differ by line style,
marker and hatch as well as by colour, so the figures survive greyscale printing.
"""

from __future__ import annotations

import io
import math

from typing import TYPE_CHECKING

import numpy as np

from oddsmith.errors import ArgumentError

# matplotlib is imported where a figure is drawn: the card imports this module for figure
# names and labels only, and importing matplotlib would cost it more than half a second.
if TYPE_CHECKING:
    from matplotlib.figure import Figure

#: The card's own palette: slate ink, deep teal, ochre, plum, moss, and two greys.
PALETTE = {
    "ink": "#23313D",
    "teal": "#1E6A72",
    "ochre": "#B8742A",
    "plum": "#6A4A7A",
    "moss": "#6E7F45",
    "grey": "#8C949C",
    "mist": "#DCE1E5",
}
FIGURE_NAMES = ("roc", "reliability", "cost_curve", "coefficients", "score_distribution", "subgroups")
LABEL_LIMIT = 38
#: Terms the coefficient chart draws at most: the largest effects, so the chart fits one page
#: (the card's table lists every term).
MAX_TERMS = 40
#: Figure widths in inches: half and full width of the card's A4 text column (about 1:1 on the page).
HALF, WIDE = 3.4, 6.9

STYLE = {
    "svg.hashsalt": "oddsmith-figures",
    "svg.fonttype": "none",
    "text.parse_math": False,
    "font.family": "DejaVu Sans",
    "font.size": 7.5,
    "axes.titlesize": 8.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 7.5,
    "axes.edgecolor": PALETTE["ink"],
    "axes.labelcolor": PALETTE["ink"],
    "axes.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": PALETTE["mist"],
    "grid.linewidth": 0.5,
    "xtick.color": PALETTE["ink"],
    "ytick.color": PALETTE["ink"],
    "xtick.labelsize": 7,
    "ytick.labelsize": 7,
    "legend.fontsize": 6.8,
    "legend.frameon": False,
    "hatch.linewidth": 0.5,
    "path.simplify": True,
}


def short_label(text, *, limit: int = LABEL_LIMIT) -> str:
    """Shorten a label for a figure axis, marking the cut with an ellipsis.

    Examples
    --------
    >>> short_label("x" * 50, limit=10)
    'xxxxxxxxx…'
    """
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _figure(width: float, height: float) -> Figure:
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), dpi=100, layout="constrained")


def _style():
    """The figures' matplotlib settings, for a ``with`` block."""
    from matplotlib import rc_context

    return rc_context(STYLE)


def _svg(fig: Figure) -> bytes:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()


#: Columns of :func:`envelope`: a half-width figure is 3.4 in, 2,040 dots at 600 dpi.
ENVELOPE_COLUMNS = 2048


def envelope(x, y, *, columns: int = ENVELOPE_COLUMNS) -> tuple[np.ndarray, np.ndarray]:
    """The points of a line sorted by ``x`` that a drawing ``columns`` wide can show.

    ``x`` is cut into ``columns`` equal-width columns; in each, the first and the last point
    and the points of the lowest and the highest ``y`` are kept, in their order. Every step,
    spike and extreme of the line survives at the drawing's resolution, while a cost curve of
    750,000 cut-offs (1,000,000 rows) is drawn from at most 8,192 points. A line of no more
    than ``4 · columns`` points is returned whole. Only the drawing is thinned: the artifact
    keeps every point.

    Examples
    --------
    >>> x = np.linspace(0, 1, 9)
    >>> envelope(x, x ** 2, columns=2)[0].tolist()  # 9 points, two columns: ends and extremes of each
    [0.0, 0.375, 0.5, 1.0]
    >>> envelope(x, x ** 2, columns=3)[0].size  # 9 ≤ 4 · 3: whole
    9
    >>> xs, ys = envelope(np.linspace(0, 1, 1001), np.r_[np.zeros(500), 5.0, np.zeros(500)], columns=4)
    >>> xs.size <= 16, float(ys.max())
    (True, 5.0)
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if x.size <= 4 * columns:
        return x, y
    finite = np.flatnonzero(np.isfinite(x))  # a cost curve ends at cut-off inf (flag none)
    xf, yf = x[finite], y[finite]
    if np.any(np.diff(xf) < 0):
        raise ArgumentError("envelope() needs the line's points sorted by x")
    keep = ~np.isfinite(x)  # kept as they are; matplotlib leaves them out of the line
    if xf.size:
        span = xf[-1] - xf[0]
        column = (np.minimum(((xf - xf[0]) / span * columns).astype(np.int64), columns - 1) if span > 0
                  else np.zeros(xf.size, np.int64))
        starts = np.flatnonzero(np.r_[True, np.diff(column) != 0])
        ends = np.r_[starts[1:], xf.size]
        chosen = np.r_[starts, ends - 1,
                       starts + np.array([np.argmin(yf[a:b]) for a, b in zip(starts, ends)], dtype=np.int64),
                       starts + np.array([np.argmax(yf[a:b]) for a, b in zip(starts, ends)], dtype=np.int64)]
        keep[finite[chosen]] = True
    return x[keep], y[keep]


def roc_points(y, p) -> tuple[np.ndarray, np.ndarray]:
    """False- and true-positive rates at every distinct score, for drawing an ROC curve.

    Examples
    --------
    >>> fpr, tpr = roc_points([0, 0, 1, 1], [0.1, 0.4, 0.35, 0.8])
    >>> fpr.tolist(), tpr.tolist()
    ([0.0, 0.0, 0.5, 0.5, 1.0], [0.0, 0.5, 0.5, 1.0, 1.0])
    """
    y, p = np.asarray(y, dtype=float), np.asarray(p, dtype=float)
    order = np.argsort(-p, kind="mergesort")
    ys, ps = y[order], p[order]
    ends = np.r_[np.flatnonzero(np.diff(ps)), ys.size - 1]
    tps = np.cumsum(ys)[ends]
    fps = ends + 1 - tps
    return np.r_[0.0, fps / fps[-1]], np.r_[0.0, tps / tps[-1]]


def roc_svg(y, p, *, auc: float, auc_low: float, auc_high: float, cutoff=None, operating_point=None,
            where: str = "the test part") -> bytes:
    """ROC curve of the test predictions with the chance diagonal and the operating point.

    ``where`` names the predictions in the title (out-of-fold ones when there is no test part).

    ``operating_point`` is (1 − specificity, sensitivity) at the adopted cut-off, as stored
    by the apply_cutoff stage; it is drawn only when ``cutoff`` is not None.
    """
    with _style():
        fig = _figure(HALF, 3.5)
        ax = fig.add_subplot()
        fpr, tpr = envelope(*roc_points(y, p))
        ax.plot([0, 1], [0, 1], color=PALETTE["grey"], linestyle=(0, (4, 3)), linewidth=0.8, label="chance")
        ax.plot(fpr, tpr, color=PALETTE["teal"], linewidth=1.4,
                label=f"selected model, AUC {auc:.3f} ({auc_low:.3f}–{auc_high:.3f})")
        if cutoff is not None and operating_point is not None:
            ax.plot(*operating_point, marker="D", markersize=5, color=PALETTE["ochre"], markeredgecolor=PALETTE["ink"],
                    linestyle="none", label=f"adopted cut-off {cutoff:.4f}")
        ax.set(xlim=(0, 1), ylim=(0, 1.01), xlabel="false-positive rate (1 − specificity)",
               ylabel="true-positive rate (sensitivity)", title=f"Discrimination on {where}")
        ax.set_aspect("equal")
        # Below the axes: in the lower right it would cover the curve of a weak model.
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=1)
        return _svg(fig)


def interval_arrays(bins: list[dict]) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper interval ends of the bins' observed rates, clipped to [0, 1].

    A bin without a stored interval gets its observed rate as both ends (no bar).
    """
    low = np.array([b.get("ci_low", b["observed_rate"]) for b in bins], dtype=float)
    high = np.array([b.get("ci_high", b["observed_rate"]) for b in bins], dtype=float)
    return np.clip(low, 0.0, 1.0), np.clip(high, 0.0, 1.0)


def error_bar_lengths(centre, low, high) -> np.ndarray:
    """Lengths below and above ``centre`` of the bars from ``low`` to ``high``, never negative.

    An end that rounding left a hair on the wrong side of the centre gives a bar of length
    0 on that side.

    Examples
    --------
    >>> error_bar_lengths([0.0, 1.0], [8.7e-19, 0.8], [0.2, 1.0 - 1e-16]).tolist()
    [[0.0, 0.19999999999999996], [0.2, 0.0]]
    """
    centre, low, high = (np.asarray(v, dtype=float) for v in (centre, low, high))
    return np.vstack([np.maximum(centre - low, 0.0), np.maximum(high - centre, 0.0)])


def equal_count(bins: list[dict]) -> bool:
    """Whether the bins hold the same number of cases, give or take one (quantile bins).

    Examples
    --------
    >>> equal_count([{"n": 201}, {"n": 200}]), equal_count([{"n": 50}, {"n": 300}])
    (True, False)
    """
    counts = [b["n"] for b in bins]
    return not counts or max(counts) - min(counts) <= 1


def reliability_svg(bins: list[dict], *, where: str = "the test part") -> bytes:
    """Observed event rate against mean predicted probability per bin (``where``: as for :func:`roc_svg`).

    A panel of bin counts is drawn below only when the bins differ in size; equal-count bins
    would give a row of identical bars, and their count is stated in the card's caption.
    """
    with _style():
        fig = _figure(HALF, 2.9)
        with_counts = not equal_count(bins)
        if with_counts:
            top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=[3, 1])
        else:
            top, bottom = fig.add_subplot(), None
        x = np.array([b["mean_predicted"] for b in bins], dtype=float)
        obs = np.array([b["observed_rate"] for b in bins], dtype=float)
        low, high = interval_arrays(bins)
        upper = float(max(np.max(high, initial=0), np.max(x, initial=0))) * 1.08 or 1.0
        top.plot([0, upper], [0, upper], color=PALETTE["grey"], linestyle=(0, (4, 3)), linewidth=0.8,
                 label="perfect calibration")
        top.errorbar(x, obs, yerr=error_bar_lengths(obs, low, high), color=PALETTE["teal"], marker="o", markersize=3.5,
                     linewidth=1.0, capsize=2, label="observed rate, 95% interval")
        top.set(xlim=(0, upper), ylim=(0, upper), ylabel="observed event rate", title=f"Calibration on {where}")
        top.legend(loc="upper left")
        if bottom is None:
            top.set_xlabel("mean predicted probability in bin")
            return _svg(fig)
        width = upper / max(len(bins), 1) * 0.55
        bottom.bar(x, [b["n"] for b in bins], width=width, color=PALETTE["mist"], edgecolor=PALETTE["ink"],
                   linewidth=0.5, hatch="////")
        bottom.set(xlabel="mean predicted probability in bin", ylabel="cases")
        bottom.grid(axis="x", visible=False)
        return _svg(fig)


def cost_unit(currency: str | None) -> str:
    """The printed unit of costs: the configured currency, or "cost units" for ``unit``.

    Examples
    --------
    >>> cost_unit("EUR"), cost_unit("unit"), cost_unit(None)
    ('EUR', 'cost units', 'cost units')
    """
    return "cost units" if currency in (None, "", "unit") else str(currency)


def cost_curve_svg(curve, *, adopted, bayes: float, interval: tuple[float, float] | None, flag_none: float,
                   flag_all: float, currency: str | None = None) -> bytes:
    """Expected cost per 1,000 cases against the cut-off, with the chosen cut-offs marked.

    ``curve`` has columns ``cutoff`` and ``expected_cost_per_case``; it is drawn per 1,000
    cases, the unit of the card's cost tables. ``adopted`` may be None (flag none).
    ``interval`` is the bootstrap interval of the cut-off, None when there is none.
    ``flag_none`` and ``flag_all`` are costs per 1,000 cases of the two trivial rules;
    ``currency`` as in :func:`cost_unit`.
    """
    unit = cost_unit(currency)
    with _style():
        fig = _figure(HALF, 3.4)
        ax = fig.add_subplot()
        x, cost = envelope(curve["cutoff"], np.asarray(curve["expected_cost_per_case"], dtype=float) * 1000.0)
        if interval is not None:
            ax.axvspan(interval[0], interval[1], facecolor=PALETTE["mist"], hatch="\\\\\\", edgecolor=PALETTE["grey"],
                       linewidth=0, label="bootstrap interval")
        ax.plot(x, cost, color=PALETTE["teal"], linewidth=1.2, label="expected cost")
        ax.axhline(flag_none, color=PALETTE["plum"], linestyle=(0, (1, 1.5)), linewidth=0.9, label="flag none")
        ax.axhline(flag_all, color=PALETTE["moss"], linestyle=(0, (5, 1.5, 1, 1.5)), linewidth=0.9,
                   label="flag all")
        ax.axvline(bayes, color=PALETTE["ink"], linestyle=(0, (4, 2)), linewidth=0.9, label=f"Bayes cut-off {bayes:.4f}")
        if adopted is not None:
            ax.axvline(adopted, color=PALETTE["ochre"], linewidth=1.4, label=f"adopted cut-off {adopted:.4f}")
        ax.yaxis.set_major_formatter(lambda value, _: f"{value:,.0f}")
        ax.set(xlim=(0, 1), xlabel="cut-off (flag when p ≥ cut-off)", ylabel=f"expected cost per 1,000 cases ({unit})",
               title="Cost of decisions (out-of-fold)")
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=2)
        return _svg(fig)


def per_sd_values(rows: list[dict], sds: dict) -> list[tuple]:
    """(term, estimate, interval low, interval high) per training SD of each design column.

    A coefficient b per unit of a column with training SD s is b·s per SD; a Wald interval
    scales the same way (s > 0). Odds ratios per SD are exp(b·s) with the interval ends
    exp(low·s), exp(high·s).

    Examples
    --------
    >>> per_sd_values([{"term": "x", "estimate": 0.5, "ci_low": 0.1, "ci_high": 0.9, "odds_ratio": 1.6}], {"x": 2.0})
    [('x', 2.718281828459045, 1.2214027581601699, 6.0496474644129465)]
    """
    out = []
    for r in rows:
        sd = float(sds[r["term"]])
        values = [r["estimate"] * sd, r["ci_low"] * sd, r["ci_high"] * sd]
        if r.get("odds_ratio") is not None:
            values = [math.exp(v) for v in values]
        out.append((r["term"], *values))
    return out


def largest_effects(values: list[tuple], *, reference: float, log: bool, keep: int) -> list[tuple]:
    """The ``keep`` terms farthest from ``reference`` (on the log scale for odds ratios), in
    their original order; ties keep the earlier term.

    Examples
    --------
    >>> largest_effects([("a", 0.1, None, None), ("b", -2.0, None, None), ("c", 0.0, None, None),
    ...                  ("d", 1.0, None, None)], reference=0.0, log=False, keep=2)
    [('b', -2.0, None, None), ('d', 1.0, None, None)]
    """
    size = [abs(math.log(v[1]) - math.log(reference)) if log else abs(v[1] - reference) for v in values]
    chosen = sorted(sorted(range(len(values)), key=lambda i: -size[i])[:keep])
    return [values[i] for i in chosen]


def coefficients_svg(model: dict, *, sds: dict | None = None) -> bytes:
    """Interval chart of the selected model's terms (intercept left out), per SD of each input.

    With ``sds`` (design column → training SD, from the recipe) every term is drawn per
    standard deviation of its design column, so terms on different units compare: logit as
    odds ratios per SD with 95% intervals on a log axis, probit and complementary log-log as
    coefficients per SD with 95% intervals. Without ``sds``, per unit of the design column.
    Penalised fits: their standardised coefficients (already per SD) as points (no Wald
    intervals exist for them). A model without terms gets a labelled empty panel.
    """
    rows = [r for r in model.get("coef_table") or [] if r["term"] != "intercept"]
    per = "per SD of the design column" if sds is not None else "per unit of the design column"
    logit = bool(rows) and rows[0].get("odds_ratio") is not None
    if rows and sds is not None:
        values = per_sd_values(rows, sds)
    elif logit:
        values = [(r["term"], r["odds_ratio"], r["or_ci_low"], r["or_ci_high"]) for r in rows]
    else:
        values = [(r["term"], r["estimate"], r["ci_low"], r["ci_high"]) for r in rows]
    if logit:
        reference, xlabel, log = 1.0, f"odds ratio {per} (95% interval, log scale)", True
    elif rows:
        reference, xlabel, log = 0.0, f"coefficient on the {model.get('link', '')} scale {per} (95% interval)", False
    else:
        values = [(t, c, None, None) for t, c in sorted((model.get("coefficients") or {}).items())]
        reference, xlabel, log = 0.0, "standardised coefficient: per SD of the design column (penalised, no interval)", False
    title = f"Terms of the selected model ({model.get('candidate', '')}, {model.get('kind', '')})"
    if len(values) > MAX_TERMS:
        title += f": the {MAX_TERMS} largest of {len(values)} (all in the table)"
        values = largest_effects(values, reference=reference, log=log, keep=MAX_TERMS)
    with _style():
        fig = _figure(WIDE, max(1.4, 0.7 + 0.165 * len(values)))
        ax = fig.add_subplot()
        ax.set_title(title)
        if not values:
            ax.text(0.5, 0.5, "intercept only: no terms to show", ha="center", va="center", transform=ax.transAxes)
            ax.set_axis_off()
            return _svg(fig)
        pos = np.arange(len(values))[::-1]
        ax.axvline(reference, color=PALETTE["grey"], linestyle=(0, (4, 3)), linewidth=0.8)
        for y_pos, (_, centre, low, high) in zip(pos, values):
            clear = low is not None and (low > reference or high < reference)
            if low is not None:
                ax.plot([low, high], [y_pos, y_pos], color=PALETTE["teal"], linewidth=1.3)
            ax.plot(centre, y_pos, marker="o" if clear else "s", markersize=4,
                    color=PALETTE["teal"] if clear else "white", markeredgecolor=PALETTE["ink"], linestyle="none")
        ax.set_yticks(pos, [short_label(v[0]) for v in values])
        ax.set_ylim(-0.7, len(values) - 0.3)
        ax.grid(axis="y", visible=False)
        if log:
            ax.set_xscale("log")
            # Plain numbers: with mathtext off, the default log labels would print their TeX source.
            from matplotlib.ticker import LogLocator, NullFormatter

            ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 1.5, 2.0, 3.0, 5.0, 7.0)))
            ax.xaxis.set_major_formatter(lambda value, _: f"{value:g}")
            ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_xlabel(xlabel)
        return _svg(fig)


def score_distribution_svg(y, p, *, cutoff=None) -> bytes:
    """Distributions of predicted probability for events and non-events on the test part."""
    y, p = np.asarray(y), np.asarray(p, dtype=float)
    edges = np.linspace(0.0, 1.0, 41)
    with _style():
        fig = _figure(HALF, 3.5)
        ax = fig.add_subplot()
        styles = ((0, "no event", PALETTE["teal"], "-", "////"), (1, "event", PALETTE["ochre"], (0, (3, 1.5)), None))
        for value, label, colour, line, hatch in styles:
            part = p[y == value]
            if part.size:
                ax.hist(part, bins=edges, density=True, histtype="stepfilled" if hatch else "step",
                        facecolor="none", edgecolor=colour, hatch=hatch, linestyle=line, linewidth=1.2,
                        label=f"{label} (n = {part.size:,})")
        if cutoff is not None:
            ax.axvline(cutoff, color=PALETTE["ink"], linewidth=1.0, label=f"adopted cut-off {cutoff:.4f}")
        upper = min(1.0, float(np.quantile(p, 0.999)) * 1.1) if p.size else 1.0
        ax.set(xlim=(0, max(upper, (cutoff or 0) * 1.1, 0.05)), xlabel="predicted probability",
               ylabel="density", title="Predicted probabilities by outcome")
        # Below the axes: the event distribution's long right tail runs under the upper right.
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=1)
        return _svg(fig)


def subgroups_svg(attributes: dict) -> bytes:
    """Adverse-impact ratio of each group against the 4/5 line, one panel per attribute.

    Bars below 4/5 are flagged by the apply_cutoff stage (``adverse_impact_flag``) and drawn
    hatched and dark; groups too small to assess are listed but not drawn.
    """
    names = list(attributes)
    heights = [max(1, len(attributes[n]["rows"])) for n in names] or [1]
    with _style():
        fig = _figure(WIDE, 0.75 + 0.2 * sum(heights) + 0.3 * len(heights))
        if not names:
            ax = fig.add_subplot()
            ax.text(0.5, 0.5, "no attributes assessed", ha="center", va="center", transform=ax.transAxes)
            ax.set_axis_off()
            return _svg(fig)
        axes = fig.subplots(len(names), 1, squeeze=False, height_ratios=heights)[:, 0]
        for ax, name in zip(axes, names):
            _subgroup_panel(ax, name, attributes[name])
        axes[-1].set_xlabel("adverse-impact ratio: group's rate of not being flagged ÷ most favoured group's rate")
        return _svg(fig)


def _subgroup_panel(ax, name: str, attribute: dict) -> None:
    rows = attribute["rows"]
    pos = np.arange(len(rows))[::-1]
    ratios = [r.get("adverse_impact_ratio") for r in rows if not r.get("too_small")]
    label_x = max([1.0, *(r for r in ratios if r is not None)]) + 0.04
    labels = []
    for y_pos, row in zip(pos, rows):
        ratio = row.get("adverse_impact_ratio")
        small = row.get("too_small") or ratio is None
        labels.append(short_label(row["group"], limit=28) + (" (too small)" if small else ""))
        if small:
            continue
        flagged = bool(row.get("adverse_impact_flag"))
        ax.barh(y_pos, ratio, height=0.62, color=PALETTE["ochre"] if flagged else PALETTE["mist"],
                edgecolor=PALETTE["ink"], linewidth=0.5, hatch="xxx" if flagged else None)
        ax.text(label_x, y_pos, f"{ratio:.3f}{'  below 4/5' if flagged else ''}  (flag rate {row['flag_rate'] * 100:.1f}%)",
                va="center", fontsize=6.5, color=PALETTE["ink"])
    ax.axvline(0.8, color=PALETTE["plum"], linestyle=(0, (4, 2)), linewidth=1.0)
    ax.text(0.8, pos[0] + 0.5 if len(pos) else 0.5, " 4/5", color=PALETTE["plum"], fontsize=6.5, va="bottom")
    ax.set_yticks(pos, labels)
    ax.set_xlim(0, math.ceil(label_x * 10) / 10 + 0.55)
    ax.set_ylim(-0.6, len(rows) - 0.2)
    ax.grid(axis="y", visible=False)
    ax.set_title(f"{short_label(name)} ({attribute.get('kind', '')})", fontsize=7.5)
