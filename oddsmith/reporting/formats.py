"""Number and text formats of the rendered pages: one place, used by the card's template as
filters (:data:`FILTERS`), by the card's sentences and by the tests. The conventions are listed
on the card itself (:data:`NUMBER_FORMATS`)."""

from __future__ import annotations

import math

from markupsafe import Markup, escape

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
#: Names (columns, groups, candidates, terms) longer than this are shortened.
NAME_LIMIT = 80


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
