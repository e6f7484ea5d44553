"""Tests for oddsmith.data.split: determinism, split properties, folds, summary and bad input."""

from __future__ import annotations

import os
import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from statsmodels.stats.proportion import proportions_ztest

from oddsmith.data.split import assign_split, fold_columns, write_assignment
from oddsmith.errors import EventsPerVariableWarning, SplitError

CV = {"folds": 5, "repeats": 1, "seed": 7}


def _loans(n: int = 800, *, seed: int = 1, base_rate: float = 0.2, days: int = 365) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "loan_id": [f"L{i:05d}" for i in range(n)],
        "default": (rng.random(n) < base_rate).astype(np.int64),
        "application_date": (pd.Timestamp("2025-01-01") + pd.to_timedelta(rng.integers(0, days, n), unit="D"))
        .strftime("%Y-%m-%d"),
        "customer_id": rng.integers(0, n // 3, n),
    })


def _split(method="stratified", **overrides) -> dict:
    base = {"method": method, "test_fraction": 0.25, "seed": 20261202, "date_column": "application_date",
            "cutoff_date": None, "group_column": "customer_id"}
    return base | overrides


def _assign(df, split=None, cv=None, **kwargs):
    return assign_split(df, id_column="loan_id", target="default", split=split or _split(),
                        cross_validation=cv or CV, **kwargs)


# ------------------------------------------------------------------ stratified split and folds


def test_stratified_assignment_shape_order_and_folds():
    df = _loans()
    assignment, summary = _assign(df)
    assert list(assignment.columns) == ["id", "part", "fold"]
    assert assignment["id"].tolist() == df["loan_id"].tolist()
    assert assignment["fold"].dtype == np.int64
    assert set(assignment["part"]) == {"train", "test"}
    test = assignment["part"] == "test"
    assert test.sum() == 200  # ceil(0.25 * 800), as train_test_split rounds
    assert (assignment.loc[test, "fold"] == -1).all()
    assert sorted(assignment.loc[~test, "fold"].unique()) == [0, 1, 2, 3, 4]
    # Stratified: the test part's events differ from the exact share by less than one event.
    events = df["default"].to_numpy()
    assert abs(events[test.to_numpy()].sum() - events.sum() * 0.25) <= 1
    assert summary["parts"]["test"]["events"] == int(events[test.to_numpy()].sum())
    assert summary["parts"]["train"]["n"] + summary["parts"]["test"]["n"] == len(df)
    assert summary["method"] == "stratified" and summary["description"].endswith(".")


def test_fold_summary_matches_the_assignment():
    df = _loans()
    assignment, summary = _assign(df)
    y = df["default"].to_numpy()
    for row in summary["folds"]:
        members = (assignment["fold"] == row["fold"]).to_numpy()
        assert row["n"] == members.sum()
        assert row["events"] == y[members].sum()
        assert row["base_rate"] == pytest.approx(y[members].mean(), abs=1e-15)
    train_events = y[(assignment["part"] == "train").to_numpy()].sum()
    counts = [row["events"] for row in summary["folds"]]
    assert sum(counts) == train_events and max(counts) - min(counts) <= 1  # StratifiedKFold balance


def test_same_seed_gives_identical_bytes(tmp_path):
    df = _loans()
    paths = [tmp_path / "a.parquet", tmp_path / "b.parquet"]
    for path in paths:
        write_assignment(_assign(df)[0], path)
    assert paths[0].read_bytes() == paths[1].read_bytes()


def test_bytes_do_not_depend_on_the_process_or_hash_seed(tmp_path):
    df = _loans(300)
    df.to_csv(tmp_path / "loans.csv", index=False)
    write_assignment(_assign(pd.read_csv(tmp_path / "loans.csv"))[0], tmp_path / "here.parquet")
    code = (
        "import sys, pandas as pd\n"
        "from oddsmith.data.split import assign_split, write_assignment\n"
        "df = pd.read_csv(sys.argv[1])\n"
        "split = {'method': 'stratified', 'test_fraction': 0.25, 'seed': 20261202, 'date_column':"
        " 'application_date', 'cutoff_date': None, 'group_column': 'customer_id'}\n"
        "a, _ = assign_split(df, id_column='loan_id', target='default', split=split,"
        " cross_validation={'folds': 5, 'repeats': 1, 'seed': 7})\n"
        "write_assignment(a, sys.argv[2])\n"
    )
    env = dict(os.environ, PYTHONHASHSEED="12345")
    subprocess.run([sys.executable, "-c", code, str(tmp_path / "loans.csv"), str(tmp_path / "there.parquet")],
                   check=True, env=env, cwd=tmp_path)
    assert (tmp_path / "here.parquet").read_bytes() == (tmp_path / "there.parquet").read_bytes()


def test_different_seed_changes_rows_but_not_stratification():
    df = _loans()
    first, s1 = _assign(df)
    second, s2 = _assign(df, _split(seed=99))
    assert not first["part"].equals(second["part"])
    assert abs(s1["parts"]["test"]["events"] - s2["parts"]["test"]["events"]) <= 1
    assert abs(s1["parts"]["train"]["events"] - s2["parts"]["train"]["events"]) <= 1


def test_repeats_add_columns_and_keep_repeat_one():
    df = _loans()
    one, _ = _assign(df)
    three, summary = _assign(df, cv={"folds": 5, "repeats": 3, "seed": 7})
    assert list(three.columns) == ["id", "part", "fold", "fold_r2", "fold_r3"]
    assert fold_columns(3) == ["fold", "fold_r2", "fold_r3"]
    assert three["fold"].equals(one["fold"])
    assert not three["fold_r2"].equals(three["fold"])
    assert ((three["fold_r3"] == -1) == (three["part"] == "test")).all()
    assert len(summary["folds"]) == 15


def test_id_dtype_is_preserved_and_file_has_no_index(tmp_path):
    df = _loans().assign(loan_id=np.arange(1000, 1800, dtype=np.int64))
    assignment, _ = _assign(df)
    assert assignment["id"].dtype == np.int64
    path = tmp_path / "assignment.parquet"
    write_assignment(assignment, path)
    table = pq.read_table(path)
    assert table.column_names == ["id", "part", "fold"]
    back = table.to_pandas()
    assert back["id"].tolist() == assignment["id"].tolist()
    assert back["part"].tolist() == assignment["part"].tolist()


def test_base_rate_test_matches_statsmodels():
    df = _loans(seed=5)
    assignment, summary = _assign(df, _split("out_of_time", test_fraction=0.3))
    y = df["default"].to_numpy()
    test = (assignment["part"] == "test").to_numpy()
    counts = [y[~test].sum(), y[test].sum()]
    z, p = proportions_ztest(counts, [(~test).sum(), test.sum()])  # statsmodels, pooled variance
    assert summary["base_rate_test"]["statistic"] == pytest.approx(z, rel=1e-10)
    assert summary["base_rate_test"]["p_value"] == pytest.approx(p, rel=1e-10)
    assert "z-test" in summary["base_rate_test"]["test"]


def test_drift_in_out_of_time_split_is_a_warning_not_an_error():
    df = _loans(1200, seed=3)
    late = pd.to_datetime(df["application_date"]) >= "2025-10-01"
    rng = np.random.default_rng(0)
    df.loc[late, "default"] = (rng.random(late.sum()) < 0.5).astype(np.int64)
    _, summary = _assign(df, _split("out_of_time", cutoff_date="2025-10-01"))
    assert summary["base_rate_test"]["p_value"] < 0.01
    drift = [w for w in summary["warnings"] if "differ beyond chance" in w]
    assert drift and "informative rather than an error" in drift[0]


def test_events_per_parameter_warning():
    df = _loans()
    with pytest.warns(EventsPerVariableWarning, match="Peduzzi"):
        _, summary = _assign(df, n_parameters=40)
    train = summary["parts"]["train"]
    assert train["events_per_parameter"] == pytest.approx(min(train["events"], train["non_events"]) / 40)
    assert any("train part" in w and "below 10" in w for w in summary["warnings"])
    with warnings.catch_warnings():
        warnings.simplefilter("error", EventsPerVariableWarning)
        _, quiet = _assign(_loans(4000, base_rate=0.5), n_parameters=2)
    assert not any("per parameter" in w for w in quiet["warnings"])


# ------------------------------------------------------------------ out of time


def test_out_of_time_with_cutoff():
    df = _loans()
    assignment, summary = _assign(df, _split("out_of_time", cutoff_date="2025-10-01"))
    dates = pd.to_datetime(df["application_date"])
    assert ((assignment["part"] == "test") == (dates >= "2025-10-01")).all()
    assert summary["parts"]["test"]["date_range"][0] >= "2025-10-01"
    assert summary["parts"]["train"]["date_range"][1] < "2025-10-01"
    assert summary["cutoff_date"] == "2025-10-01"
    assert "2025-10-01" in summary["description"]


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(40, 150),
    days=st.integers(2, 40),
    fraction=st.floats(0.1, 0.6),
    seed=st.integers(0, 2**16),
)
def test_out_of_time_property_test_dates_follow_training_dates(n, days, fraction, seed):
    df = _loans(n, seed=seed, base_rate=0.4, days=days)
    try:
        assignment, summary = _assign(df, _split("out_of_time", test_fraction=fraction), cv={"folds": 2, "repeats": 1, "seed": 1})
    except SplitError:
        assume(False)
    dates = pd.to_datetime(df["application_date"]).to_numpy()
    test = (assignment["part"] == "test").to_numpy()
    assert dates[test].min() > dates[~test].max()  # so every test date >= every training date
    # The realised test size is the achievable one closest to the fraction (ties: smaller test part).
    unique = np.unique(dates)
    achievable = [(dates >= d).sum() for d in unique[1:]]
    best = min(achievable, key=lambda size: (abs(size - fraction * n), size))
    assert test.sum() == best


@pytest.mark.parametrize("cutoff, empty", [("2024-06-01", "training"), ("2027-01-01", "test")])
def test_cutoff_outside_dates_is_an_error(cutoff, empty):
    with pytest.raises(SplitError, match=f"outside the data's date range.*{empty} part would be empty"):
        _assign(_loans(), _split("out_of_time", cutoff_date=cutoff))


def test_unparseable_and_missing_date_column():
    df = _loans()
    df.loc[[4, 9], "application_date"] = "31/02/2025"
    with pytest.raises(SplitError) as error:
        _assign(df, _split("out_of_time"))
    message = str(error.value)
    assert "2 values that are not ISO dates" in message and "'L00004', 'L00009'" in message
    with pytest.raises(SplitError, match="date column 'opened' is not a column"):
        _assign(df, _split("out_of_time", date_column="opened"))


def test_part_without_events_is_an_error():
    df = _loans()
    df.loc[pd.to_datetime(df["application_date"]) >= "2025-10-01", "default"] = 0
    with pytest.raises(SplitError, match="the test part has no events"):
        _assign(df, _split("out_of_time", cutoff_date="2025-10-01"))


# ------------------------------------------------------------------ grouped


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(n=st.integers(60, 200), groups=st.integers(10, 60), fraction=st.floats(0.15, 0.5), seed=st.integers(0, 2**16))
def test_grouped_property_no_group_in_both_parts(n, groups, fraction, seed):
    df = _loans(n, seed=seed, base_rate=0.4)
    df["customer_id"] = np.random.default_rng(seed + 1).integers(0, groups, n)
    try:
        assignment, summary = _assign(df, _split("grouped", test_fraction=fraction, seed=seed),
                                      cv={"folds": 3, "repeats": 2, "seed": seed})
    except SplitError:
        assume(False)
    test = (assignment["part"] == "test").to_numpy()
    test_groups = set(df.loc[test, "customer_id"])
    assert test_groups.isdisjoint(set(df.loc[~test, "customer_id"]))
    train = df.loc[~test].assign(fold=assignment.loc[~test, "fold"], fold_r2=assignment.loc[~test, "fold_r2"])
    assert (train.groupby("customer_id")["fold"].nunique() == 1).all()
    assert (train.groupby("customer_id")["fold_r2"].nunique() == 1).all()
    assert summary["parts"]["test"]["n_groups"] == len(test_groups)


def test_grouped_split_is_roughly_stratified():
    df = _loans(3000, seed=2)
    assignment, summary = _assign(df, _split("grouped"))
    assert summary["parts"]["test"]["n"] == pytest.approx(750, abs=30)
    assert summary["parts"]["test"]["base_rate"] == pytest.approx(df["default"].mean(), abs=0.02)


def test_group_column_with_missing_values():
    df = _loans().astype({"customer_id": "float64"})
    df.loc[[2, 5, 11], "customer_id"] = np.nan
    with pytest.raises(SplitError, match=r"3 missing values, e.g. ids 'L00002', 'L00005', 'L00011'"):
        _assign(df, _split("grouped"))


# ------------------------------------------------------------------ bad input


@pytest.mark.parametrize("fraction", [0, 1, 1.5, -0.1])
def test_test_fraction_outside_unit_interval(fraction):
    with pytest.raises(SplitError, match=f"test_fraction must be strictly between 0 and 1, got {fraction}"):
        _assign(_loans(), _split(test_fraction=fraction))


def test_every_problem_is_listed_at_once():
    with pytest.raises(SplitError) as error:
        assign_split(_loans(), id_column="loan_id", target="outcome", split=_split(test_fraction=2.0),
                     cross_validation={"folds": 1, "repeats": 1, "seed": 7})
    assert len(error.value.problems) == 3
    assert "'outcome' is not a column" in str(error.value)


def test_too_few_events_for_the_folds():
    df = _loans(60, seed=4)
    df["default"] = 0
    df.loc[[1, 2, 3, 10, 20], "default"] = 1
    # 5 events: the stratified test part takes 1, leaving 4 for 5 folds.
    with pytest.raises(SplitError, match="has 4 events and 41 non-events, fewer than 5 folds.*use at most 4 folds"):
        _assign(df)


def test_fold_with_no_events_names_the_fold():
    # Events sit in three customers: one goes to the test part, the other two cannot fill
    # three group-keeping folds, so one fold has no events.
    df = _loans(200, seed=4)
    df["customer_id"] = np.arange(200) // 10
    df["default"] = 0
    df.loc[df["customer_id"].isin([0, 1, 19]), "default"] = 1
    with pytest.raises(SplitError, match=r"repeat 1 fold \d has no events.*use fewer folds"):
        _assign(df, _split("grouped", seed=3), cv={"folds": 3, "repeats": 1, "seed": 7})


def test_non_binary_target_and_repeated_ids():
    df = _loans()
    df.loc[3, "default"] = 2
    df.loc[8, "loan_id"] = "L00007"
    with pytest.raises(SplitError) as error:
        _assign(df)
    message = str(error.value)
    assert "0/1 values; found '2' at ids 'L00003'" in message
    assert "2 rows with repeated ids, e.g. 'L00007', 'L00007'" in message


# ------------------------------------------------------------------ checks before any draw


def test_fold_advice_never_goes_below_two_folds():
    df = _loans(200, base_rate=0.0)
    df.loc[[3], "default"] = 1  # one event in the training part of an out-of-time split
    df.loc[df["application_date"] >= "2025-10-01", "default"] = 0
    df.loc[df.index[df["application_date"] >= "2025-10-01"][0], "default"] = 1
    df.loc[3, "application_date"] = "2025-01-05"
    with pytest.raises(SplitError) as err:
        _assign(df, _split("out_of_time", cutoff_date="2025-10-01"))
    message = str(err.value)
    assert "has 1 events" in message and "minimum of 2 folds needs at least 2 events" in message
    assert "at most 1 folds" not in message


@pytest.mark.parametrize("method", ["stratified", "out_of_time", "grouped"])
def test_feasibility_finds_no_problem_where_the_split_succeeds(method):
    from oddsmith.data.split import feasibility

    df = _loans()
    split = _split(method, cutoff_date="2025-10-01" if method == "out_of_time" else None)
    _assign(df, split)  # succeeds
    plan = feasibility(df, id_column="loan_id", target="default", split=split, cross_validation=CV)
    assert plan["problems"] == []
    assert (plan["is_test"] is not None) == (method == "out_of_time")
    assert plan["train_rows"] == {"stratified": 600, "grouped": 800,
                                  "out_of_time": int((df["application_date"] < "2025-10-01").sum())}[method]


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5, 6])
def test_feasibility_refuses_only_what_every_seed_refuses(seed):
    """Stratified: fold feasibility is judged on the largest training counts any seed can give,
    so a refusal at validate is a refusal of the split for every seed."""
    from oddsmith.data.split import feasibility

    df = _loans(40, seed=seed, base_rate=0.15)
    refused = 0
    for folds in range(2, 11):
        cv = CV | {"folds": folds}
        plan = feasibility(df, id_column="loan_id", target="default", split=_split(), cross_validation=cv)
        refused += bool(plan["problems"])
        if plan["problems"]:
            for split_seed in range(20):
                with pytest.raises(SplitError):
                    _assign(df, _split(seed=split_seed), cv=cv)
    assert refused > 0


def test_the_stratified_test_size_known_without_a_draw_is_the_draws():
    # validate's feasibility check states the test part's size without drawing (no
    # scikit-learn import) wherever the draw cannot fail; it must be the draw's own size.
    from oddsmith.data.split import _stratified_parts, _stratified_test_rows

    rng = np.random.default_rng(4)
    for n in (4, 5, 7, 10, 33, 101, 1_000, 4_099):
        for fraction in (0.1, 0.2, 0.25, 1 / 3, 0.5, 0.77):
            events = int(rng.integers(0, n + 1))
            y = np.zeros(n, dtype=int)
            y[:events] = 1
            known = _stratified_test_rows(n, events, fraction)
            if known is None:
                continue
            drawn = _stratified_parts(y, {"test_fraction": fraction, "seed": 1})
            assert known == int(drawn.sum()), (n, events, fraction)
    assert _stratified_test_rows(100, 1, 0.25) is None  # one event: the draw refuses, in its words
    assert _stratified_test_rows(5, 2, 0.1) is None
