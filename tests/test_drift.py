"""Population drift: PSI against scipy and a hand-computed case, bins, bands, ranking, and
the drift page (escaped, deterministic, no fetch outside its folder)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy.stats import entropy

from oddsmith.reporting.drift import (EMPTY_BIN_POLICY, RefusedFetch, band, categorical_drift, decile_edges, drift_report,
                            numeric_drift, pdf_bytes, psi, psi_from_shares, render_html, shares)

from conftest import ROOT
from oddsmith.errors import OddsmithError
from oddsmith.reporting import drift

TEMPLATE = ROOT / "reports" / "drift.html.j2"


def test_psi_hand_computed():
    # e = (1/2, 1/2), a = (1/4, 3/4): (-1/4) ln(1/2) + (1/4) ln(3/2) = (1/4) ln 3, worked by hand.
    assert psi_from_shares([0.5, 0.5], [0.25, 0.75]) == pytest.approx(0.25 * math.log(3), abs=1e-15)
    # Counts with the empty-bin policy (add 0.5): e = (50.5, 50.5)/101, a = (25.5, 75.5)/101.
    expected = (25.5 / 101 - 0.5) * math.log((25.5 / 101) / 0.5) + (75.5 / 101 - 0.5) * math.log((75.5 / 101) / 0.5)
    assert psi([50, 50], [25, 75]) == pytest.approx(expected, abs=1e-15)


@pytest.mark.parametrize("seed", range(5))
def test_psi_equals_symmetrised_kullback_leibler(seed):
    # Reference: PSI = scipy.stats.entropy(A, E) + entropy(E, A) (docs/references.md).
    rng = np.random.default_rng(seed)
    e, a = rng.integers(0, 500, 12), rng.integers(0, 500, 12)
    e[rng.integers(12)] = 0  # an empty bin: the policy keeps PSI finite
    E, A = shares(e), shares(a)
    assert psi(e, a) == pytest.approx(entropy(A, E) + entropy(E, A), rel=1e-12)


def test_empty_bin_policy_is_stated_and_applied():
    assert "0.5" in EMPTY_BIN_POLICY
    assert shares([0, 3]).tolist() == [0.5 / 4, 3.5 / 4]
    assert math.isfinite(psi([10, 0], [0, 10]))
    with pytest.raises(ValueError, match="apply the empty-bin policy"):
        psi_from_shares([1.0, 0.0], [0.5, 0.5])


def test_bands_rule_of_thumb_boundaries():
    # Yurdakul & Naranjo (2020): < 0.10 little, 0.10-0.25 moderate, > 0.25 significant.
    assert [band(v) for v in (0.0, 0.0999, 0.10, 0.25, 0.2501)] == [
        "little change", "little change", "moderate shift", "moderate shift", "significant shift"]


def test_identical_batch_has_zero_psi():
    rng = np.random.default_rng(3)
    dev = pd.DataFrame({"x": rng.normal(size=1000), "g": rng.choice(["p", "q", "r"], 1000)})
    dev.loc[::17, "x"] = np.nan
    report = drift_report(development=dev, batch=dev.copy(), features=[{"name": "x", "type": "numeric"},
                          {"name": "g", "type": "categorical"}], development_scores=dev["x"].fillna(0),
                          batch_scores=dev["x"].fillna(0), other_columns=["x", "g"])
    assert report["score"]["psi"] == 0.0
    assert [f["psi"] for f in report["features"]] == [0.0, 0.0]
    assert all(m["shift"] == 0.0 for m in report["missing_shares"])


def test_decile_bins_hold_a_tenth_of_development_each():
    x = np.arange(1, 1001, dtype=float)
    result = numeric_drift(x, x + 0.0)
    assert len(result["bins"]) == 10
    assert [b["development_count"] for b in result["bins"]] == [100] * 10
    # Ties merge edges: a count with mostly zeros gets fewer bins; right-closed intervals.
    counts = np.array([0] * 600 + [1] * 300 + [2] * 100, dtype=float)
    assert decile_edges(counts).tolist() == [0.0, 1.0]  # every edge an observed value
    tied = numeric_drift(counts, counts)
    assert [b["bin"] for b in tied["bins"]] == ["(-inf, 0]", "(0, 1]", "(1, inf)"]
    assert [b["development_count"] for b in tied["bins"]] == [600, 300, 100]


def test_shifted_feature_ranks_first():
    rng = np.random.default_rng(11)
    n = 4000
    dev = pd.DataFrame({"steady": rng.normal(size=n), "moved": rng.gamma(4, 0.09, n),
                        "kind": rng.choice(["a", "b"], n)})
    new = pd.DataFrame({"steady": rng.normal(size=n), "moved": rng.gamma(4, 0.09, n) + 0.18,
                        "kind": rng.choice(["a", "b"], n)})
    features = [{"name": c, "type": "numeric" if c != "kind" else "categorical"} for c in dev.columns]
    report = drift_report(development=dev, batch=new, features=features, development_scores=dev["steady"],
                          batch_scores=new["steady"])
    assert report["ranking"][0] == "moved"
    assert report["features"][0]["band"] == "significant shift"
    assert all(f["band"] == "little change" for f in report["features"][1:])


def test_categorical_shares_new_levels_and_missing():
    result = categorical_drift(pd.Series(["a"] * 6 + ["b"] * 4), pd.Series(["a"] * 5 + ["c"] * 3 + [None] * 2))
    assert [b["bin"] for b in result["bins"]] == ["a", "b", "c", "(missing)"]
    assert result["new_levels"] == ["c", "(missing)"]
    assert result["batch_missing_share"] == 0.2 and result["development_missing_share"] == 0.0
    expected = psi([6, 4, 0, 0], [5, 0, 3, 2])
    assert result["psi"] == pytest.approx(expected, abs=1e-15)


# ---------------------------------------------------------------------------- the page


def _page_inputs(name="x"):
    dev = pd.DataFrame({name: np.arange(100.0), "lvl": ["<b>bold</b>"] * 50 + ["ok"] * 50})
    new = dev.assign(**{name: dev[name] + 30})
    report = drift_report(development=dev, batch=new, features=[{"name": name, "type": "numeric"},
                          {"name": "lvl", "type": "categorical"}], development_scores=dev[name] / 100,
                          batch_scores=new[name] / 130, other_columns=[name])
    summary = {"model": {"candidate": "toy", "kind": "logit", "link": "logit", "recipe_digest": "0" * 64},
               "source": {"path": "batch.csv", "sha256": "f" * 64}, "flagged": 3, "flag_rate": 0.03, "cutoff": 0.2,
               "policy_flags": {}, "reasons": {"interactions": "half", "scale": "log-odds",
                                               "reference": {"method": "training_mean"}}}
    return report, summary


def test_page_escapes_text_from_data():
    report, summary = _page_inputs(name='<script>alert(1)</script><img src="http://example.com/x.png">')
    html = render_html(report, summary, template_path=TEMPLATE, batch_name="b<i>.csv")
    assert "<script>" not in html and "<img" not in html and "<b>bold" not in html
    assert "&lt;script&gt;" in html and "b&lt;i&gt;.csv" in html


def test_pdf_is_deterministic_and_fetches_nothing_outside(tmp_path):
    report, summary = _page_inputs()
    html = render_html(report, summary, template_path=TEMPLATE, batch_name="batch.csv")
    (tmp_path / "one").mkdir()
    (tmp_path / "two").mkdir()
    first, second = pdf_bytes(html, folder=tmp_path / "one"), pdf_bytes(html, folder=tmp_path / "two")
    assert first.startswith(b"%PDF-") and first == second
    for url in ("http://example.com/x.png", "file:///etc/passwd"):
        with pytest.raises(RefusedFetch, match="refused"):
            pdf_bytes(html.replace("</body>", f'<img src="{url}"></body>'), folder=tmp_path / "one")
    (tmp_path / "one" / "ok.svg").write_text('<svg xmlns="http://www.w3.org/2000/svg" width="4" height="4"/>')
    assert pdf_bytes(html.replace("</body>", '<img src="ok.svg"></body>'), folder=tmp_path / "one")


def test_bands_follow_configured_limits_and_refuse_inverted_ones():
    assert [drift.band(v, warning=0.05, action=0.2) for v in (0.04, 0.05, 0.2, 0.21)] == [
        "little change", "moderate shift", "moderate shift", "significant shift"]
    with pytest.raises(OddsmithError, match="warning < action"):
        drift.band(0.1, warning=0.3, action=0.2)


def test_report_records_and_applies_the_limits():
    rng = np.random.default_rng(0)
    dev = pd.DataFrame({"x": rng.normal(size=2000)})
    new = pd.DataFrame({"x": rng.normal(0.3, 1, size=2000)})
    kwargs = dict(development=dev, batch=new, features=[{"name": "x", "type": "numeric"}],
                  development_scores=rng.random(2000), batch_scores=rng.random(2000))
    default = drift.drift_report(**kwargs)
    strict = drift.drift_report(**kwargs, psi_warning=0.001, psi_action=0.002)
    assert default["limits"] == {"psi_warning": 0.10, "psi_action": 0.25}
    assert strict["features"][0]["band"] == "significant shift" != default["features"][0]["band"]
    assert "monitoring.psi_warning" in strict["method"]["bands"]
