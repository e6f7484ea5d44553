"""Population drift between the development training part and a new batch.

Population stability index
    ``PSI = sum_i (a_i - e_i) * ln(a_i / e_i)`` over bins ``i``, with ``e`` the development
    shares and ``a`` the batch shares; it equals ``scipy.stats.entropy(a, e) +
    scipy.stats.entropy(e, a)`` (the symmetrised Kullback-Leibler divergence).
Bins
    Numeric columns and the score: the development deciles (``numpy.quantile`` at 0.1 ...
    0.9, method ``inverted_cdf``, so every edge is an observed development value; repeated
    edges merged, so a column with many ties gets fewer bins), intervals closed on the
    right, ``(-inf, q1], (q1, q2], ..., (q9, inf)``.
    Categorical columns: one bin per level seen in either sample (text form). Missing values
    form their own bin, ``(missing)``, whenever either sample has one.
Empty bins
    A bin empty in one sample would make PSI infinite. Policy: **add 0.5 to the count of every
    bin in both samples** before taking shares (``EMPTY_BIN_POLICY``). With no empty bin the
    effect is small (< 0.5 / n per bin).
Bands
    Below the warning limit little change, from the warning limit to the action limit
    moderate shift, above the action limit significant shift (both limits themselves count
    as moderate). The limits come from the configuration (``monitoring.psi_warning``,
    ``monitoring.psi_action``); the defaults 0.10 and 0.25 are the rule of thumb of Yurdakul
    & Naranjo, *Journal of Risk Model Validation* (2020), for review, not a statistical test.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

from oddsmith.errors import ArgumentError, OddsmithError

EMPTY_BIN_POLICY = "add 0.5 to the count of every bin in both samples before taking shares"
PSEUDO_COUNT = 0.5
DECILES = tuple(round(0.1 * i, 1) for i in range(1, 10))
MISSING_BIN = "(missing)"
BAND_LOW, BAND_HIGH = 0.10, 0.25
BAND_SOURCE = ("Yurdakul & Naranjo, Journal of Risk Model Validation (2020): < 0.10 little change, "
               "0.10-0.25 moderate, > 0.25 significant; a rule of thumb, not a test")


def band_text(warning: float, action: float) -> str:
    """How the bands were set, for the report (the rule of thumb when the limits are its own)."""
    if (warning, action) == (BAND_LOW, BAND_HIGH):
        return BAND_SOURCE
    return (f"limits from the configuration (monitoring.psi_warning, monitoring.psi_action): < {warning:g} little "
            f"change, {warning:g}-{action:g} moderate, > {action:g} significant")
PSI_DEFINITION = "PSI = sum over bins of (a - e) * ln(a / e) = entropy(a, e) + entropy(e, a)"


def psi_from_shares(expected, actual) -> float:
    """PSI of two share vectors (each summing to 1, all shares > 0).

    Examples
    --------
    >>> round(psi_from_shares([0.5, 0.5], [0.25, 0.75]), 6)  # = 0.25 * ln 3
    0.274653
    """
    e, a = np.asarray(expected, dtype=np.float64), np.asarray(actual, dtype=np.float64)
    if e.shape != a.shape or e.ndim != 1 or e.size == 0:
        raise ArgumentError(f"expected and actual must be 1-d of equal length, got {e.shape} and {a.shape}")
    if (e <= 0).any() or (a <= 0).any():
        raise ArgumentError("shares must all be > 0 (apply the empty-bin policy first)")
    return float(np.sum((a - e) * np.log(a / e)))


def shares(counts) -> np.ndarray:
    """Shares after the empty-bin policy: ``(count + 0.5) / (total + 0.5 * bins)``."""
    c = np.asarray(counts, dtype=np.float64) + PSEUDO_COUNT
    return c / c.sum()


def psi(expected_counts, actual_counts) -> float:
    """PSI of two count vectors over the same bins, with the empty-bin policy applied.

    Examples
    --------
    >>> psi([100, 100], [100, 100])
    0.0
    """
    e, a = np.asarray(expected_counts), np.asarray(actual_counts)
    if e.shape != a.shape:
        raise ArgumentError(f"count vectors differ in length: {e.shape} vs {a.shape}")
    if (e < 0).any() or (a < 0).any():
        raise ArgumentError("counts must be >= 0")
    return psi_from_shares(shares(e), shares(a))


def band(value: float, *, warning: float = BAND_LOW, action: float = BAND_HIGH) -> str:
    """The band of a PSI value between the warning and action limits (module docstring).

    Examples
    --------
    >>> [band(v) for v in (0.05, 0.10, 0.25, 0.30)]
    ['little change', 'moderate shift', 'moderate shift', 'significant shift']
    >>> band(0.15, warning=0.05, action=0.12)
    'significant shift'
    """
    if not 0 < warning < action:
        raise OddsmithError(f"PSI limits must satisfy 0 < warning < action, got warning {warning!r}, "
                            f"action {action!r}")
    if value < warning:
        return "little change"
    return "moderate shift" if value <= action else "significant shift"


def decile_edges(values) -> np.ndarray:
    """Inner bin edges: the distinct development deciles of the non-missing values."""
    x = np.asarray(values, dtype=np.float64)
    x = x[~np.isnan(x)]
    if x.size == 0:
        return np.array([])
    return np.unique(np.quantile(x, DECILES, method="inverted_cdf"))


def _numeric_counts(x: np.ndarray, edges: np.ndarray, with_missing: bool) -> np.ndarray:
    missing = np.isnan(x)
    which = np.searchsorted(edges, x[~missing], side="left")  # (edge[i-1], edge[i]] -> i
    counts = np.bincount(which, minlength=len(edges) + 1).astype(np.int64)
    return np.append(counts, int(missing.sum())) if with_missing else counts


def _interval_labels(edges: np.ndarray) -> list[str]:
    bounds = ["-inf"] + [f"{e:.6g}" for e in edges] + ["inf"]
    return [f"({lo}, {hi}]" if hi != "inf" else f"({lo}, inf)" for lo, hi in zip(bounds[:-1], bounds[1:])]


def numeric_drift(development, batch) -> dict:
    """PSI and the per-bin table of a numeric column (bins from development deciles)."""
    dev = np.asarray(development, dtype=np.float64)
    new = np.asarray(batch, dtype=np.float64)
    edges = decile_edges(dev)
    with_missing = bool(np.isnan(dev).any() or np.isnan(new).any())
    e = _numeric_counts(dev, edges, with_missing)
    a = _numeric_counts(new, edges, with_missing)
    labels = _interval_labels(edges) + ([MISSING_BIN] if with_missing else [])
    return _result("numeric", labels, e, a) | {"edges": [float(v) for v in edges],
                                                "development_mean": _mean(dev), "batch_mean": _mean(new)}


def _mean(x: np.ndarray):
    return float(np.nanmean(x)) if (~np.isnan(x)).any() else None


def categorical_drift(development, batch) -> dict:
    """PSI and the per-level table of a categorical column (one bin per level)."""
    dev = pd.Series(development, dtype=object)
    new = pd.Series(batch, dtype=object)
    dev_text = dev.where(dev.isna(), dev.astype(str)).fillna(MISSING_BIN)
    new_text = new.where(new.isna(), new.astype(str)).fillna(MISSING_BIN)
    seen_anywhere = set(dev_text.unique().tolist()) | set(new_text.unique().tolist())
    levels = sorted(seen_anywhere - {MISSING_BIN}) + ([MISSING_BIN] if MISSING_BIN in seen_anywhere else [])
    e = dev_text.value_counts().reindex(levels, fill_value=0).to_numpy()
    a = new_text.value_counts().reindex(levels, fill_value=0).to_numpy()
    result = _result("categorical", levels, e, a)
    seen = set(dev_text.tolist())
    result["new_levels"] = [lv for lv in levels if lv not in seen]
    return result


def _result(kind: str, labels: list[str], e: np.ndarray, a: np.ndarray) -> dict:
    value = psi(e, a)
    n_e, n_a = int(e.sum()), int(a.sum())
    bins = [{"bin": label, "development_count": int(ce), "batch_count": int(ca),
             "development_share": ce / n_e if n_e else None, "batch_share": ca / n_a if n_a else None}
            for label, ce, ca in zip(labels, e.tolist(), a.tolist())]
    missing = next((b for b in bins if b["bin"] == MISSING_BIN), None)
    return {"kind": kind, "psi": value, "band": band(value), "bins": bins,
            "development_rows": n_e, "batch_rows": n_a,
            "development_missing_share": missing["development_share"] if missing else 0.0,
            "batch_missing_share": missing["batch_share"] if missing else 0.0}


def drift_report(*, development: pd.DataFrame, batch: pd.DataFrame, features: list[dict],
                 development_scores, batch_scores, model_features: list[str] | None = None,
                 other_columns: tuple = (), psi_warning: float = BAND_LOW, psi_action: float = BAND_HIGH) -> dict:
    """PSI of the score and of each feature, ranked, plus missing-share shifts.

    Parameters
    ----------
    development, batch : pandas.DataFrame
        The development training part and the new batch (typed).
    features : list of dict
        Recipe feature records (``name``, ``type``).
    development_scores, batch_scores : array_like
        The model's probabilities on each.
    model_features : list of str, optional
        Features the scoring model uses (marked in the report).
    other_columns : sequence of str
        Further columns whose missing share is compared (e.g. every contract column).
    psi_warning, psi_action : float
        Limits of the bands (config ``monitoring``); recorded under ``limits``.
    """
    limits = {"psi_warning": psi_warning, "psi_action": psi_action}
    rows = []
    for record in features:
        name = record["name"]
        if record["type"] == "numeric":
            result = numeric_drift(_numbers(development[name]), _numbers(batch[name]))
        else:
            result = categorical_drift(development[name], batch[name])
        result["feature"] = name
        result["used_by_model"] = model_features is None or name in model_features
        result["missing_share_shift"] = result["batch_missing_share"] - result["development_missing_share"]
        result["band"] = band(result["psi"], warning=psi_warning, action=psi_action)
        rows.append(result)
    rows.sort(key=lambda r: (-r["psi"], r["feature"]))
    score = numeric_drift(development_scores, batch_scores)
    score["band"] = band(score["psi"], warning=psi_warning, action=psi_action)
    return {
        "method": {"psi": PSI_DEFINITION, "bins": "development deciles, intervals closed on the right; "
                   "categorical: one bin per level; missing values in their own bin",
                   "empty_bins": EMPTY_BIN_POLICY, "bands": band_text(psi_warning, psi_action),
                   "development": "the training part of the development data"},
        "limits": limits,
        "rows": {"development": int(len(development)), "batch": int(len(batch))},
        "score": score,
        "features": rows,
        "ranking": [r["feature"] for r in rows],
        "missing_shares": _missing_shares(development, batch, other_columns),
    }


def _numbers(values: pd.Series) -> np.ndarray:
    return values.to_numpy(dtype=np.float64, na_value=np.nan)


def _missing_shares(development: pd.DataFrame, batch: pd.DataFrame, columns) -> list[dict]:
    out = []
    for name in columns:
        if name not in development.columns or name not in batch.columns:
            continue
        dev, new = float(development[name].isna().mean()), float(batch[name].isna().mean())
        out.append({"column": name, "development": dev, "batch": new, "shift": new - dev})
    return out


# ---------------------------------------------------------------------------- the drift page


def render_html(drift: dict, summary: dict, *, template_path, batch_name: str, stylesheet: str | None = None) -> str:
    """The drift page as HTML (Jinja2, autoescape on); ``stylesheet`` is inlined CSS text.

    The page has no external resource: styles are inlined, there are no images.
    """
    import jinja2

    template_path = Path(template_path)
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(template_path.parent)), autoescape=True,
                             undefined=jinja2.StrictUndefined, keep_trailing_newline=True)
    return env.get_template(template_path.name).render(drift=drift, summary=summary, batch_name=batch_name,
                                                       stylesheet=stylesheet)


class RefusedFetch(OddsmithError):
    """The drift page asked for a resource outside its output folder."""


def pdf_bytes(html: str, *, folder) -> bytes:
    """Render the page to PDF bytes; deterministic for the same HTML and library versions.

    The base URL is ``folder``; the model card's fetcher (``oddsmith.reporting.fetcher.RunFolderFetcher``)
    serves only ``data:`` URLs and files inside it, and a refused fetch fails the render
    (``RefusedFetch``). WeasyPrint's warnings go to stderr (the rule's log).
    """
    from oddsmith.reporting.fetcher import RunFolderFetcher  # first: it imports WeasyPrint quickly

    import weasyprint  # noqa: I001
    from weasyprint.urls import FatalURLFetchingError

    fetcher = RunFolderFetcher(folder)
    _route_weasyprint_warnings()
    try:
        document = weasyprint.HTML(string=html, base_url=Path(folder).resolve().as_uri() + "/", url_fetcher=fetcher)
        data = document.write_pdf(pdf_identifier=True)
    except FatalURLFetchingError:
        raise RefusedFetch(f"the drift page asked for {fetcher.refused}; refused") from None
    if fetcher.refused:
        raise RefusedFetch(f"the drift page asked for {fetcher.refused}; refused")
    return data


def _route_weasyprint_warnings() -> None:
    logger = logging.getLogger("weasyprint")
    if not any(getattr(h, "_oddsmith", False) for h in logger.handlers):
        handler = logging.StreamHandler()  # stderr: the rule's log when run by Snakemake
        handler._oddsmith = True
        handler.setLevel(logging.WARNING)
        logger.addHandler(handler)
