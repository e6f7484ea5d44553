"""rescore: probabilities before and after a change, contributions, refusals with reasons."""

from __future__ import annotations

import json

import numpy as np
import pytest

from oddsmith.errors import ContractError
from oddsmith.use.rescore import format_rescore, parse_settings, read_record, row_from_file, row_from_record, rescore_row

from test_score import BATCH, raw_rows, toy_model, verified_demo  # noqa: F401 (fixture)


def _logistic(eta: float) -> float:
    return 1.0 / (1.0 + np.exp(-eta))


def test_change_moves_probability_and_both_interaction_partners():
    sm = toy_model()
    result = rescore_row(sm, raw_rows(("R1", "3", "1", "y")), {"b": "2"})
    # eta before = -1 + 2.4 - 0.5 + 0.3*3 + 1.2 = 3.0; after: b = 2 -> -1 + 2.4 - 1.0 + 1.8 + 1.2 = 3.4.
    assert result["before"]["probability"] == pytest.approx(_logistic(3.0), abs=1e-15)
    assert result["after"]["probability"] == pytest.approx(_logistic(3.4), abs=1e-15)
    assert result["changes"] == [{"column": "b", "before": 1.0, "after": 2.0}]
    rows = {r["feature"]: r for r in result["contributions"]}
    # b: -0.5 per unit plus half of 0.3 * a (= 0.45) per unit -> -0.05; a gains half the
    # interaction change 0.5 * 0.3 * 3 * 1 = 0.45 without its own input changing.
    assert rows["b"]["change"] == pytest.approx(-0.05, abs=1e-12) and rows["b"]["input_changed"]
    assert rows["a"]["change"] == pytest.approx(0.45, abs=1e-12) and not rows["a"]["input_changed"]
    assert "c" not in rows
    assert sum(r["change"] for r in result["contributions"]) == pytest.approx(0.4, abs=1e-12)
    text = format_rescore(result)
    assert "through an interaction" in text and "log-odds" in text


def test_decision_crosses_the_cutoff():
    sm = toy_model(cutoff=0.5)
    result = rescore_row(sm, raw_rows(("R1", "0", "3", "x")), {"a": "4", "c": "y"})
    assert (result["before"]["decision"], result["after"]["decision"]) == ("pass", "flag")


def test_missing_and_unseen_values_follow_the_recipe_and_are_flagged():
    sm = toy_model()
    result = rescore_row(sm, raw_rows(("R1", "1", "1", "x")), {"c": None})
    assert result["after"]["flags"] == ["c:filled", "c:unseen"] and result["before"]["flags"] == []
    assert result["changes"][0]["after"] is None


def test_values_outside_the_contract_are_refused_with_the_reason():
    sm = toy_model()
    row = raw_rows(("R1", "1", "1", "x"))
    with pytest.raises(ContractError) as err:
        rescore_row(sm, row, {"a": "11", "c": "purple"})
    message = str(err.value)
    assert message.startswith("refused") and "less_than_or_equal_to(10)" in message and "'purple'" in message
    with pytest.raises(ContractError, match="expected a number"):
        rescore_row(sm, row, {"b": "lots"})
    with pytest.raises(ContractError, match="'colour' is not a column of the data contract"):
        rescore_row(sm, row, {"colour": "red"})
    with pytest.raises(ContractError, match="'id' is the id column"):
        rescore_row(sm, row, {"id": "R9"})
    with pytest.raises(ContractError, match="'y' is the target"):
        rescore_row(sm, row, {"y": "1"})


def test_parse_settings_and_records():
    assert parse_settings(["a=1", "c="]) == {"a": "1", "c": None}
    for bad in (["a"], ["=1"], ["a=1", "a=2"]):
        with pytest.raises(ContractError):
            parse_settings(bad)
    sm = toy_model()
    row = row_from_record(sm, read_record('{"a": 0.5, "b": 2, "c": null}'))
    assert row.iloc[0].to_dict() == {"a": "0.5", "b": "2", "c": None, "id": "(record)"}
    with pytest.raises(ContractError, match="not declared"):
        row_from_record(sm, {"a": 1, "zzz": 2})
    with pytest.raises(ContractError, match="number or text"):
        row_from_record(sm, {"a": True})
    with pytest.raises(ContractError, match="neither a JSON object nor a file"):
        read_record("no-such-file.json")


def test_row_from_file_finds_one_row(tmp_path):
    sm = toy_model()
    path = tmp_path / "rows.csv"
    path.write_text("id,a,b,c\nR1,1,1,x\nR2,2,2,y\nR2,3,3,y\n")
    assert row_from_file(sm, path, "R1").iloc[0].to_dict() == {"id": "R1", "a": "1", "b": "1", "c": "x"}
    with pytest.raises(ContractError, match="no row with id = 'R7'"):
        row_from_file(sm, path, "R7")
    with pytest.raises(ContractError, match="2 rows have id = 'R2'"):
        row_from_file(sm, path, "R2")


@pytest.mark.e2e
def test_cli_rescore_on_the_demo(verified_demo, capsys):
    from oddsmith.cli import main

    folder = verified_demo
    args = ["rescore", str(folder), "--row", "LB-000002", "--data", str(BATCH), "--set", "debt_service_ratio=0.3"]
    assert main(args + ["--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert result["after"]["probability"] < result["before"]["probability"]
    assert [c["column"] for c in result["changes"]] == ["debt_service_ratio"]
    assert main(args[:-1] + ["credit_score=900"]) == 1
    err = capsys.readouterr().err
    assert "refused" in err and "credit_score" in err and "less_than_or_equal_to(850)" in err
