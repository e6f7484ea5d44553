"""Configuration checks: schema violations and cross-key rules are all reported at once."""

import pytest

from oddsmith.config import check_config, read_config_file
from oddsmith.errors import ConfigError
from oddsmith.settings import normalised_costs


def _problems(cfg, tmp_path=None, **kw):
    with pytest.raises(ConfigError) as err:
        check_config(cfg, project_dir=kw.get("project_dir", "."))
    return str(err.value)


def test_demo_config_is_valid_and_defaults_are_filled(demo_config, root):
    cfg = check_config(demo_config, project_dir=root)
    assert cfg["cross_validation"]["folds"] == 5
    assert cfg["fairness"]["min_group_size"] == 100
    assert cfg["candidates"][-1]["kind"] == "baseline"
    assert demo_config != cfg  # the input is not modified in place


def test_unknown_key_is_rejected_with_allowed_keys(demo_config, root):
    demo_config["split"]["shuffle"] = True
    msg = _problems(demo_config, project_dir=root)
    assert "'shuffle' was unexpected" in msg and "allowed keys here" in msg and "split" in msg


def test_wrong_type_names_key_and_value(demo_config, root):
    demo_config["cross_validation"]["folds"] = "five"
    msg = _problems(demo_config, project_dir=root)
    assert "cross_validation.folds" in msg and "'five'" in msg


def test_missing_required_key(demo_config, root):
    del demo_config["data"]["target"]
    assert "'target' is a required property" in _problems(demo_config, project_dir=root)


def test_several_problems_reported_together(demo_config, root):
    demo_config["features"].append({"name": "credit_score", "type": "numeric"})
    demo_config["features"].append({"name": "serious_delinquency", "type": "numeric"})
    demo_config["features"].append({"name": "owner_age_band", "type": "categorical"})
    msg = _problems(demo_config, project_dir=root)
    assert "'credit_score' is listed 2 times" in msg
    assert "'serious_delinquency' is the target" in msg
    assert "'owner_age_band' is a sensitive attribute" in msg and "use_sensitive_as_features" in msg


def test_sensitive_feature_allowed_with_explicit_opt_in(demo_config, root):
    demo_config["features"].append({"name": "owner_age_band", "type": "categorical"})
    demo_config["fairness"]["use_sensitive_as_features"] = True
    check_config(demo_config, project_dir=root)


def test_data_path_outside_project_refused_unless_allowed(demo_config, root):
    demo_config["data"]["path"] = "../../elsewhere/data.csv"
    msg = _problems(demo_config, project_dir=root)
    assert "outside the project folder" in msg and "allow_outside_project" in msg
    demo_config["data"]["allow_outside_project"] = True
    check_config(demo_config, project_dir=root)


@pytest.mark.parametrize("costs, fragment", [
    ({"false_positive": 0, "false_negative": 5}, "costs.false_positive"),
    ({"false_positive": 1, "false_negative": -3}, "costs.false_negative"),
    ({"ratio_fn_to_fp": 0}, "costs.ratio_fn_to_fp"),
    ({"ratio_fn_to_fp": float("inf")}, "costs.ratio_fn_to_fp"),
    ({"false_positive": 1}, "give both"),
])
def test_bad_costs(demo_config, root, costs, fragment):
    demo_config["costs"] = costs
    assert fragment in _problems(demo_config, project_dir=root)


@pytest.mark.parametrize("costs, expected", [
    # the ratio form: a false positive costs 1, a false negative the ratio; correct decisions 0
    ({"ratio_fn_to_fp": 5}, {"false_positive": 1, "false_negative": 5, "true_positive": 0, "true_negative": 0}),
    ({"ratio_fn_to_fp": 2.5, "true_negative": 0.5},
     {"false_positive": 1, "false_negative": 2.5, "true_positive": 0, "true_negative": 0.5}),
    ({"false_positive": 2, "false_negative": 7, "true_positive": 1},
     {"false_positive": 2, "false_negative": 7, "true_positive": 1, "true_negative": 0}),
])
def test_every_cost_form_is_normalised_once(demo_config, root, costs, expected):
    demo_config["costs"] = costs
    checked = check_config(demo_config, project_dir=root)
    assert {k: checked["costs"][k] for k in expected} == expected
    assert "ratio_fn_to_fp" not in checked["costs"]
    assert checked["costs"]["currency"] == "unit" and checked["costs"]["adopt"] == "empirical"
    # the normalised form is a fixed point (a recorded configuration read back stays the same)
    assert normalised_costs(checked["costs"]) == checked["costs"]


def test_ratio_and_pair_together_refused(demo_config, root):
    demo_config["costs"] = {"ratio_fn_to_fp": 5, "false_positive": 1, "false_negative": 5}
    assert "not both" in _problems(demo_config, project_dir=root)


def test_constrained_needs_a_limit(demo_config, root):
    demo_config["costs"] = {"false_positive": 1, "false_negative": 5, "adopt": "constrained"}
    assert "costs.adopt 'constrained' needs max_flag_rate or min_sensitivity" in _problems(demo_config, project_dir=root)


def test_the_baseline_takes_the_schema_defaults(demo_config, root):
    baseline = check_config(demo_config, project_dir=root)["candidates"][-1]
    assert baseline == {"name": "baseline", "kind": "baseline", "inner_folds": 3, "l1_ratio": 0.5, "max_iter": 200}


def test_interaction_with_unknown_feature(demo_config, root):
    demo_config["interactions"] = [["credit_score", "shoe_size"]]
    assert "'shoe_size' is not a declared feature" in _problems(demo_config, project_dir=root)


def test_split_fraction_outside_unit_interval(demo_config, root):
    demo_config["split"] = {"method": "stratified", "test_fraction": 1.5}
    assert "split.test_fraction" in _problems(demo_config, project_dir=root)


def test_read_config_file_errors(tmp_path):
    with pytest.raises(ConfigError, match="not found"):
        read_config_file(tmp_path / "nope.yaml")
    bad = tmp_path / "bad.yaml"
    bad.write_text("run: [unclosed\n")
    with pytest.raises(ConfigError, match="not valid YAML"):
        read_config_file(bad)


def test_config_readme_documents_every_key(root):
    from oddsmith.config import schema_reference_markdown

    text = (root / "config" / "README.md").read_text()
    assert schema_reference_markdown() in text, "regenerate the table in config/README.md"


def test_every_schema_key_has_type_and_description():
    from oddsmith.config import load_schema

    def walk(props, prefix=""):
        for name, spec in props.items():
            assert "description" in spec and "type" in spec, prefix + name
            if "properties" in spec:
                walk(spec["properties"], prefix + name + ".")
            if isinstance(spec.get("items"), dict) and "properties" in spec["items"]:
                walk(spec["items"]["properties"], prefix + name + "[].")

    walk(load_schema()["properties"])


def test_sensitive_attribute_in_bands(demo_config, root):
    demo_config["fairness"]["sensitive"] = ["owner_age_band", {"name": "age", "bands": [30, 45, 60]}]
    cfg = check_config(demo_config, project_dir=root)
    assert cfg["fairness"]["sensitive"] == ["owner_age_band", "age"]
    assert cfg["fairness"]["bands"] == {"age": [30, 45, 60]}


def test_demo_config_keeps_its_resolved_form_without_bands(demo_config, root):
    assert "bands" not in check_config(demo_config, project_dir=root)["fairness"]


@pytest.mark.parametrize("entry, fragment", [
    ({"name": "age", "bands": [45, 30]}, "fairness.sensitive.1.bands ('age'): expected strictly increasing"),
    ({"name": "age", "bands": [30, 30]}, "expected strictly increasing finite numbers, found [30, 30]"),
    ({"name": "age", "bands": [30, float("inf")]}, "strictly increasing finite"),
    ({"name": "age", "bands": []}, "fairness.sensitive.1.bands: expected minItems 1"),
    ({"name": "age", "blanks": ""}, "fairness.sensitive.1.blanks"),
    ({"bands": [30]}, "'name' is a required property"),
    ({"name": "age", "bands": ["thirty"]}, "fairness.sensitive.1.bands.0: expected type 'number', found 'thirty'"),
    ("owner_age_band", "'owner_age_band' is listed more than once"),
])
def test_bad_bands(demo_config, root, entry, fragment):
    demo_config["fairness"]["sensitive"] = ["owner_age_band", entry]
    assert fragment in _problems(demo_config, project_dir=root)


def test_segments_take_the_same_forms_as_sensitive_attributes(demo_config, root):
    demo_config["fairness"]["segments"] = [{"name": "region", "blanks": "unknown"},
                                           {"name": "credit_score", "bands": [600, 700]}]
    cfg = check_config(demo_config, project_dir=root)
    assert cfg["fairness"]["segments"] == ["region", "credit_score"]
    assert cfg["fairness"]["blank_groups"] == {"region": "unknown"}
    assert cfg["fairness"]["bands"] == {"credit_score": [600.0, 700.0]}


@pytest.mark.parametrize("segments, fragment", [
    ([{"name": "credit_score", "bands": [700, 600]}], "fairness.segments.0.bands ('credit_score'): expected strictly"),
    (["region", "region"], "fairness.segments.1: 'region' is listed more than once"),
    (["owner_age_band"], "fairness.segments: ['owner_age_band'] also listed under fairness.sensitive"),
    ([{"name": "region", "colour": "red"}], "fairness.segments.0: Additional properties are not allowed"),
])
def test_bad_segments(demo_config, root, segments, fragment):
    demo_config["fairness"]["segments"] = segments
    assert fragment in _problems(demo_config, project_dir=root)


def test_long_values_are_cut_in_config_messages(demo_config, root):
    demo_config["cross_validation"]["folds"] = "9" * 100_000
    message = _problems(demo_config, project_dir=root)
    assert "cross_validation.folds" in message and "cut; 100,000 characters in all" in message
    assert len(message) < 1_000


def test_validation_file_keys_checked_together(demo_config, root):
    demo_config["monitoring"] = {"psi_warning": 0.3, "psi_action": 0.2}
    demo_config["data"]["extraction_date"] = "2025-02-30"
    demo_config["data"]["date_column"] = None
    demo_config["split"]["method"] = "stratified"
    demo_config["split"].pop("cutoff_date")
    msg = _problems(demo_config, project_dir=root)
    assert "psi_warning (0.3) must be below psi_action (0.2)" in msg
    assert "data.extraction_date" in msg and "2025-02-30" in msg
    assert "data.outcome_window_months: needs data.date_column" in msg


def test_exclusion_needs_reason_and_a_count(demo_config, root):
    demo_config["data"]["exclusions"] = [{"reason": "fraud", "rows": -1}, {"rows": 3}]
    msg = _problems(demo_config, project_dir=root)
    assert "data.exclusions.0.rows" in msg and "'reason' is a required property" in msg


def test_key_order_and_number_spelling_give_one_configuration(demo_config, root):
    """Rule params are compared by repr: the checked config must not keep the file's key
    order or its int/float spelling (a number where the schema says number is a float, a
    whole number where it says integer an int)."""
    reordered = {key: demo_config[key] for key in reversed(list(demo_config))}
    reordered["costs"] = {key: demo_config["costs"][key] for key in reversed(list(demo_config["costs"]))}
    reordered["costs"]["false_positive"] = float(demo_config["costs"]["false_positive"])  # 1200.0
    reordered["cross_validation"] = dict(demo_config["cross_validation"], folds=5.0)
    reordered["candidates"] = [dict(c, grid=[int(g) if g == int(g) else g for g in c["grid"]]) if "grid" in c else c
                               for c in demo_config["candidates"]]
    plain, spelled = check_config(demo_config, project_dir=root), check_config(reordered, project_dir=root)
    assert repr(plain) == repr(spelled)
    assert plain["costs"]["false_positive"] == 1200.0 and isinstance(plain["costs"]["false_positive"], float)
    assert spelled["cross_validation"]["folds"] == 5 and isinstance(spelled["cross_validation"]["folds"], int)
    assert list(plain["costs"]) == sorted(plain["costs"])


def test_ratio_form_gives_float_costs(demo_config, root):
    demo_config["costs"] = {"ratio_fn_to_fp": 5, "adopt": "empirical"}
    costs = check_config(demo_config, project_dir=root)["costs"]
    assert [repr(costs[k]) for k in ("false_positive", "false_negative", "true_positive", "true_negative")] == \
        ["1.0", "5.0", "0.0", "0.0"]
