"""Tests for oddsmith.data.recipe: learned on training rows only, applied identically everywhere."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import patsy
import pytest
from sklearn.preprocessing import StandardScaler

from oddsmith.data.recipe import (
    KNOT_QUANTILES,
    apply_recipe,
    design_columns,
    dump_recipe,
    learn_recipe,
    load_recipe,
    recipe_digest,
)
from oddsmith.errors import RecipeError

FEATURES = [
    {"name": "income", "type": "numeric", "transform": "log"},
    {"name": "age", "type": "numeric", "transform": "spline", "knots": 4},
    {"name": "utilisation", "type": "numeric", "transform": "bins", "bins": 4, "missing": "indicator"},
    {"name": "region", "type": "categorical", "missing": "indicator"},
    {"name": "product", "type": "categorical", "reference": "card"},
]
INTERACTIONS = [["income", "region"], ["age", "utilisation"]]


def _applicants(n: int = 600, *, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "applicant_id": [f"A{i:04d}" for i in range(n)],
        "income": rng.lognormal(10, 0.5, n),
        "age": rng.integers(18, 80, n).astype(float),
        "utilisation": rng.beta(2, 5, n),
        "region": rng.choice(["north", "south", "east", "west", "islands"], n, p=[0.4, 0.3, 0.2, 0.08, 0.02]),
        "product": rng.choice(["card", "loan", "lease"], n, p=[0.5, 0.3, 0.2]),
        "delinquent": (rng.random(n) < 0.2).astype(np.int64),
    })
    frame.loc[[3, 7, 29], "utilisation"] = np.nan
    frame.loc[[5], "region"] = None
    return frame


def _learn(frame, features=FEATURES, interactions=INTERACTIONS):
    return learn_recipe(frame, features=features, interactions=interactions, target="delinquent",
                        id_column="applicant_id")


# ------------------------------------------------------------------ learning and applying


def test_recipe_applied_to_training_reproduces_itself():
    train = _applicants()
    recipe = _learn(train)
    X, flags = apply_recipe(recipe, train)
    assert list(X.columns) == recipe["columns"]
    assert (X.dtypes == np.float64).all()
    assert X.index.equals(train.index)
    for column in recipe["columns"]:
        assert X[column].mean() == pytest.approx(recipe["means"][column], rel=1e-12, abs=1e-12)
        assert X[column].std(ddof=0) == pytest.approx(recipe["sds"][column], rel=1e-12)
    assert recipe == _learn(train)  # learning is deterministic
    assert flags["utilisation:filled"].sum() == 3 and flags["region:filled"].sum() == 1


def test_standardised_design_matches_standard_scaler():
    train = _applicants()
    recipe = _learn(train)
    raw, _ = apply_recipe(recipe, train)
    scaled, _ = apply_recipe(recipe, train, standardise=True)
    reference = StandardScaler().fit_transform(raw.to_numpy())  # scikit-learn, population SD
    np.testing.assert_allclose(scaled.to_numpy(), reference, rtol=1e-10, atol=1e-12)


def test_standardisation_comes_from_training_rows_only():
    frame = _applicants(800)
    train, test = frame.iloc[:600], frame.iloc[600:].copy()
    recipe = _learn(train)
    test["income"] = test["income"] * 1000
    test.loc[test.index[0], "age"] = 500.0
    again = _learn(frame.iloc[:600])
    assert again["digest"] == recipe["digest"]
    X_test, _ = apply_recipe(recipe, test, standardise=True)
    assert X_test["log(income)"].mean() > 10  # test values scaled by training statistics
    X_all, _ = apply_recipe(recipe, pd.concat([train, test]), standardise=True)
    np.testing.assert_allclose(X_all.iloc[:600].to_numpy(), apply_recipe(recipe, train, standardise=True)[0].to_numpy())


def test_categorical_levels_reference_and_merging():
    train = _applicants()
    recipe = _learn(train)
    region = next(r for r in recipe["features"] if r["name"] == "region")
    counts = train["region"].fillna("(missing)").value_counts()
    rare = sorted(level for level, count in counts.items() if count < 20)
    assert region["merged"] == rare and "islands" in rare
    assert region["reference"] == "north"  # most frequent
    # the pool holds fewer than min_count = 20 rows, so it joins the reference level
    assert sum(counts[level] for level in rare) < 20
    assert region["pooled_level"] == "north" and region["levels"] == ["east", "north", "south", "west"]
    assert region["level_counts"]["north"] == counts["north"] + sum(counts[level] for level in rare)
    product = next(r for r in recipe["features"] if r["name"] == "product")
    assert product["reference"] == "card"
    assert design_columns(recipe, ["product"]) == ["product=lease", "product=loan"]


def test_default_reference_ties_go_to_the_first_sorted_label():
    train = pd.DataFrame({"grade": ["b"] * 30 + ["a"] * 30 + ["c"] * 20, "y": [0, 1] * 40})
    recipe = learn_recipe(train, features=[{"name": "grade", "type": "categorical"}], interactions=[], target="y")
    assert recipe["features"][0]["reference"] == "a"
    assert recipe["columns"] == ["grade=b", "grade=c"]


def test_bins_use_training_quantiles_and_open_outer_bins():
    train = _applicants()
    recipe = _learn(train)
    record = next(r for r in recipe["features"] if r["name"] == "utilisation")
    observed = train["utilisation"].dropna().to_numpy()
    expected = np.quantile(observed, [0.25, 0.5, 0.75], method="lower")
    assert record["parameters"]["edges"] == expected.tolist()
    X, _ = apply_recipe(recipe, train)
    dummies = X[[c for c in record["columns"] if not c.endswith("(missing)")]]
    assert (dummies.sum(axis=0) > 0).all()  # no empty bin on training rows
    new = train.iloc[:2].copy()
    new["utilisation"] = [-5.0, 99.0]
    X_new, _ = apply_recipe(recipe, new)
    assert X_new[dummies.columns].iloc[0].sum() == 0  # below every edge: reference bin
    assert X_new[dummies.columns[-1]].iloc[1] == 1  # above every edge: top bin


def test_interaction_columns_are_products():
    train = _applicants()
    recipe = _learn(train)
    X, _ = apply_recipe(recipe, train)
    np.testing.assert_array_equal(X["log(income):region=south"], X["log(income)"] * X["region=south"])
    spline_by_bin = recipe["interactions"][1]["columns"]
    assert len(spline_by_bin) == 3 * 3  # (age, age_rcs1, age_rcs2) x three non-reference bins
    np.testing.assert_array_equal(X[spline_by_bin[4]], X["age_rcs1"] * X[spline_by_bin[4].split(":", 1)[1]])
    assert not any("(missing)" in c for r in recipe["interactions"] for c in r["columns"])
    assert set(design_columns(recipe, ["income", "region"])) >= set(recipe["interactions"][0]["columns"])
    assert not any(":" in c for c in design_columns(recipe, ["income", "age"]))


# ------------------------------------------------------------------ spline


def test_spline_knots_at_harrell_quantiles():
    train = _applicants()
    record = next(r for r in _learn(train)["features"] if r["name"] == "age")
    np.testing.assert_allclose(record["parameters"]["knots"], np.quantile(train["age"], KNOT_QUANTILES[4]))
    assert record["columns"] == ["age", "age_rcs1", "age_rcs2"]


def test_spline_basis_hand_computed():
    # Knots 0, 1, 2, 3; at x = 2.5, with the (t_k - t_1)^2 = 9 scaling:
    # term 1 = (2.5^3 - 0.5^3 * 3/1) / 9 = 15.25 / 9; term 2 = (1.5^3 - 0.5^3 * 2/1) / 9 = 3.125 / 9.
    train = pd.DataFrame({"x": np.linspace(0, 3, 61), "y": 0})
    features = [{"name": "x", "type": "numeric", "transform": "spline", "knots": 4}]
    recipe = learn_recipe(train, features=features, interactions=[], target="y")
    recipe["features"][0]["parameters"]["knots"] = [0.0, 1.0, 2.0, 3.0]
    X, _ = apply_recipe(recipe, pd.DataFrame({"x": [2.5, -1.0]}))
    np.testing.assert_allclose(X.iloc[0].to_numpy(), [2.5, 15.25 / 9, 3.125 / 9], rtol=1e-14)
    np.testing.assert_array_equal(X.iloc[1].to_numpy(), [-1.0, 0.0, 0.0])  # below the first knot: linear


def test_spline_spans_the_natural_cubic_spline_space_and_is_linear_outside():
    train = _applicants()
    features = [{"name": "age", "type": "numeric", "transform": "spline", "knots": 5}]
    recipe = learn_recipe(train, features=features, interactions=[], target="delinquent")
    knots = recipe["features"][0]["parameters"]["knots"]
    x = np.linspace(knots[0] - 10, knots[-1] + 10, 400)
    ours, _ = apply_recipe(recipe, pd.DataFrame({"age": x}))
    ours = np.column_stack([np.ones_like(x), ours.to_numpy()])
    # patsy's natural cubic regression spline (outside reference) with the same knots spans the
    # same function space: intercept + x + k - 2 terms = k columns.
    theirs = patsy.dmatrix("cr(x, knots=inner, lower_bound=lo, upper_bound=hi) - 1",
                           {"x": x, "inner": knots[1:-1], "lo": knots[0], "hi": knots[-1]})
    theirs = np.asarray(theirs)
    coefficients, *_ = np.linalg.lstsq(ours, theirs, rcond=None)
    np.testing.assert_allclose(ours @ coefficients, theirs, atol=1e-9)
    beyond = x > knots[-1]
    second_differences = np.diff(ours[beyond], n=2, axis=0)
    np.testing.assert_allclose(second_differences, 0, atol=1e-9)


# ------------------------------------------------------------------ constant columns


def test_constant_columns_are_dropped_with_a_reason():
    train = _applicants().assign(branch=7.0, channel="web")
    features = FEATURES + [
        {"name": "branch", "type": "numeric"},
        {"name": "income", "type": "numeric", "missing": "indicator"} | {"name": "income2"},
        {"name": "channel", "type": "categorical"},
    ]
    train["income2"] = train["income"]
    recipe = _learn(train, features=features)
    reasons = {d.get("column", d.get("feature")): d["reason"] for d in recipe["dropped"]}
    assert "branch" in reasons and "every value 7" in reasons["branch"]
    assert "income2=(missing)" in reasons  # indicator with no missing training value
    assert "channel" in reasons and "single training level" in reasons["channel"]
    assert not {"branch", "income2=(missing)"} & set(recipe["columns"])
    assert all(sd > 0 for sd in recipe["sds"].values())


# ------------------------------------------------------------------ bad input


def test_unseen_level_is_an_error_under_reject():
    recipe = _learn(_applicants())
    new = _applicants(40, seed=9)
    new.loc[[2, 6], "product"] = "mortgage"
    new.loc[[4], "product"] = "overdraft"
    with pytest.raises(RecipeError) as error:
        apply_recipe(recipe, new, id_column="applicant_id")
    message = str(error.value)
    assert "'product': 2 level(s) unseen in training ('mortgage', 'overdraft') in 3 rows" in message
    assert "'A0002', 'A0004', 'A0006'" in message


def test_unseen_level_maps_to_the_pooled_level_under_indicator():
    recipe = _learn(_applicants())
    new = _applicants(40, seed=9)
    new.loc[[2], "region"] = "atlantis"
    X, flags = apply_recipe(recipe, new)
    assert flags.loc[2, "region:unseen"] and flags["region:unseen"].sum() == 1
    # pooled into the reference level north: every region dummy is 0
    assert X.loc[2, ["region=east", "region=south", "region=west"]].tolist() == [0, 0, 0]
    wide = _learn(_applicants(), features=[{"name": "region", "type": "categorical", "missing": "indicator",
                                            "min_count": 60}], interactions=[])
    X, _ = apply_recipe(wide, new)
    assert X.loc[2, "region=<other>"] == 1


def _levels_frame(counts: dict, *, seed: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    labels = np.concatenate([[level] * n for level, n in counts.items()])
    return pd.DataFrame({"applicant_id": [f"A{i:04d}" for i in range(labels.size)], "colour": rng.permutation(labels),
                         "delinquent": rng.integers(0, 2, labels.size)})


def test_a_data_level_named_other_is_not_merged_with_the_pool():
    train = _levels_frame({"red": 50, "other": 30, "blue": 25, "green": 12, "grey": 9})
    recipe = _learn(train, features=[{"name": "colour", "type": "categorical"}], interactions=[])
    colour = recipe["features"][0]
    assert colour["merged"] == ["green", "grey"] and colour["pooled_level"] == "<other>"
    assert colour["level_counts"] == {"blue": 25, "other": 30, "red": 50, "<other>": 21}
    assert colour["reference"] == "red"
    X, _ = apply_recipe(recipe, train)
    assert X["colour=other"].sum() == 30 and X["colour=<other>"].sum() == 21
    # a data level literally named "<other>" pushes the pool's name aside
    train = _levels_frame({"red": 50, "<other>": 30, "green": 12, "grey": 9})
    colour = _learn(train, features=[{"name": "colour", "type": "categorical"}], interactions=[])["features"][0]
    assert colour["pooled_level"] == "<other 2>" and colour["level_counts"]["<other>"] == 30


def test_a_pool_below_min_count_joins_the_reference_level():
    # one rare level with a single training row: a level of its own would separate
    train = _levels_frame({"red": 50, "blue": 40, "teal": 1})
    recipe = _learn(train, features=[{"name": "colour", "type": "categorical"}], interactions=[])
    colour = recipe["features"][0]
    assert colour["merged"] == ["teal"] and colour["pooled_level"] == "red" and colour["pooled_rows"] == 1
    assert colour["levels"] == ["blue", "red"] and colour["level_counts"] == {"blue": 40, "red": 51}
    assert recipe["columns"] == ["colour=blue"]
    X, _ = apply_recipe(recipe, train)
    assert X["colour=blue"].sum() == 40
    # every level held by training is at least min_count
    assert min(colour["level_counts"].values()) >= 20


def test_log_of_non_positive_values_names_rows():
    recipe = _learn(_applicants())
    new = _applicants(30, seed=3)
    new.loc[[1, 12], "income"] = [0.0, -40.0]
    with pytest.raises(RecipeError, match=r"log needs values > 0; 2 rows have 0, -40, e.g. ids 'A0001', 'A0012'"):
        apply_recipe(recipe, new, id_column="applicant_id")
    train = _applicants()
    train.loc[8, "income"] = -1.0
    with pytest.raises(RecipeError, match="'A0008'"):
        _learn(train)


def test_missing_values_under_reject_and_missing_columns():
    recipe = _learn(_applicants())
    new = _applicants(30, seed=3)
    new.loc[[4], "age"] = np.nan
    with pytest.raises(RecipeError, match=r"'age' has 1 missing values and missing: reject, e.g. ids 'A0004'"):
        apply_recipe(recipe, new, id_column="applicant_id")
    with pytest.raises(RecipeError, match=r"column 'region' is missing.*\n.*column 'product' is missing"):
        apply_recipe(recipe, new.drop(columns=["product", "region"]))


def test_interaction_with_unknown_feature():
    with pytest.raises(RecipeError, match=r"interaction \['income', 'salary'\] names unknown feature\(s\) 'salary'"):
        _learn(_applicants(), interactions=[["income", "salary"]])


def test_reference_level_not_present_or_merged():
    features = [{"name": "product", "type": "categorical", "reference": "mortgage"}]
    with pytest.raises(RecipeError, match="reference level 'mortgage' is not present in the training rows"):
        _learn(_applicants(), features=features, interactions=[])
    features = [{"name": "region", "type": "categorical", "reference": "islands", "missing": "indicator"}]
    with pytest.raises(RecipeError, match="'islands' has 1[0-9] training rows, fewer than min_count 20"):
        _learn(_applicants(), features=features, interactions=[])


def test_target_cannot_be_a_feature_and_problems_are_listed_together():
    features = [{"name": "delinquent", "type": "numeric"}, {"name": "score", "type": "numeric"},
                {"name": "region", "type": "categorical", "transform": "log"}]
    with pytest.raises(RecipeError) as error:
        _learn(_applicants(), features=features, interactions=[])
    assert len(error.value.problems) == 3


# ------------------------------------------------------------------ files


def test_dump_is_canonical_and_load_round_trips(tmp_path):
    recipe = _learn(_applicants())
    path = tmp_path / "recipe.json"
    dump_recipe(recipe, path)
    text = path.read_text(encoding="utf-8")
    assert text == json.dumps(recipe, sort_keys=True, indent=2, ensure_ascii=False) + "\n"
    assert load_recipe(path) == recipe
    assert recipe["digest"] == recipe_digest(recipe)


def test_hand_edited_recipe_is_detected(tmp_path):
    recipe = _learn(_applicants())
    path = tmp_path / "recipe.json"
    dump_recipe(recipe, path)
    edited = json.loads(path.read_text())
    edited["means"]["age"] += 1.0
    path.write_text(json.dumps(edited, sort_keys=True, indent=2) + "\n")
    with pytest.raises(RecipeError, match="digest .* does not match the content"):
        load_recipe(path)


@pytest.mark.parametrize("edit, expected", [
    (lambda r: r["features"][3].update(reference="nowhere"), "reference level 'nowhere' is not among its levels"),
    (lambda r: r["sds"].update({"age": 0.0}), "SD of column 'age' must be a finite number > 0"),
    (lambda r: r["columns"].pop(), "column list"),
    (lambda r: r["features"][1]["parameters"]["knots"].append(99.0), "spline knots|stored columns"),
])
def test_inconsistent_recipe_is_detected_even_with_a_fresh_digest(tmp_path, edit, expected):
    recipe = _learn(_applicants())
    edit(recipe)
    recipe["digest"] = recipe_digest(recipe)
    path = tmp_path / "recipe.json"
    path.write_text(json.dumps(recipe, sort_keys=True, indent=2) + "\n")
    with pytest.raises(RecipeError, match=expected):
        load_recipe(path)
    with pytest.raises(RecipeError):
        dump_recipe(recipe, tmp_path / "refused.json")
    assert not (tmp_path / "refused.json").exists()


def test_standardisation_learned_piece_by_piece_equals_the_whole_column(monkeypatch):
    # The means and SDs are combined from pieces of rows; they must be those of the whole
    # design column (numpy's mean and population SD), and the same dropped columns.
    import oddsmith.data.recipe as recipe_module

    train = _applicants(2000, seed=5)
    whole = _learn(train)
    monkeypatch.setattr(recipe_module, "_STATS_CHUNK_ROWS", 173)
    pieces = _learn(train)
    assert pieces["columns"] == whole["columns"] and pieces["dropped"] == whole["dropped"]
    X, _ = apply_recipe(whole, train, id_column="applicant_id")
    for column in whole["columns"]:
        assert pieces["means"][column] == pytest.approx(float(np.mean(X[column])), rel=1e-12, abs=1e-14)
        assert pieces["sds"][column] == pytest.approx(float(np.std(X[column])), rel=1e-12)
