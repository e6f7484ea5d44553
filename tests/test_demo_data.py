"""The committed demo data is exactly what the seeded generator produces."""

import pandas as pd

from oddsmith.demo import TRUE_COEFFICIENTS, write_demo
from oddsmith.io import sha256_file

from conftest import ROOT


def test_committed_demo_files_are_regenerated_byte_for_byte(tmp_path):
    for path in write_demo(tmp_path):
        assert sha256_file(path) == sha256_file(ROOT / "data_demo" / path.name), path.name


def test_demo_scenario_shape():
    df = pd.read_csv(ROOT / "data_demo" / "lease_applications.csv")
    assert len(df) == 12_000 and df["application_id"].is_unique
    assert 0.10 <= df["serious_delinquency"].mean() <= 0.20
    assert 0 < df["guarantor_score"].isna().mean() < 0.1
    dates = pd.to_datetime(df["application_date"])
    assert (dates.max() - dates.min()).days > 2.5 * 365
    assert TRUE_COEFFICIENTS["owner_age_band"] == 0.0  # the sensitive attribute has no true effect


def test_readme_lists_true_coefficients():
    text = (ROOT / "data_demo" / "README.md").read_text()
    assert "invented" in text.lower()
    for term, value in TRUE_COEFFICIENTS.items():
        assert f"`{term}`" in text and f"{value:+.3f}" in text, term
