"""The validate stage: good data gives a typed snapshot; bad data gives one complete list of
problems, a non-zero exit, no snapshot, and an untouched input file."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from oddsmith.config import check_config
from oddsmith.data.validate import run_validate
from oddsmith.errors import ContractError
from oddsmith.evidence.filehash import file_state
from oddsmith.io import sha256_file

from conftest import ROOT, run_snakemake

CONTRACT = ROOT / "schemas" / "contracts" / "lease_applications.yaml"
DEMO = ROOT / "data_demo" / "lease_applications.csv"


@pytest.fixture()
def cfg(demo_config):
    # The first 400 demo rows (most tests' data) span 2023-01-01 to 2023-02-10.
    demo_config["split"]["cutoff_date"] = "2023-02-01"
    return check_config(demo_config, project_dir=ROOT)


def _run(cfg, data: Path, out: Path, contract=CONTRACT, **options):
    return run_validate(config=cfg, data_path=str(data), contract_path=str(contract),
                        out_data=str(out / "data.parquet"), out_report=str(out / "report.json"),
                        out_summary=str(out / "summary.txt"), **options)


def _expect_failure(cfg, tmp_path, data: Path, *fragments, contract=CONTRACT):
    before = sha256_file(data) if data.exists() else None
    out = tmp_path / "validated"
    with pytest.raises(ContractError) as err:
        _run(cfg, data, out, contract=contract)
    message = str(err.value)
    for fragment in fragments:
        assert fragment in message, f"{fragment!r} not in:\n{message}"
    assert not out.exists() or not any(out.iterdir()), "nothing may be written on failure"
    if before:
        assert sha256_file(data) == before, "the raw input must never be modified"
    return message


def _demo_frame(n=400) -> pd.DataFrame:
    return pd.read_csv(DEMO, dtype=str, keep_default_na=False).head(n)


def _write(tmp_path, frame: pd.DataFrame, name="data.csv", **kw) -> Path:
    path = tmp_path / name
    frame.to_csv(path, index=False, **kw)
    return path


def test_demo_data_validates(cfg, tmp_path):
    before = sha256_file(DEMO)
    report = _run(cfg, DEMO, tmp_path)
    df = pd.read_parquet(tmp_path / "data.parquet")
    assert len(df) == 12_000 and df["serious_delinquency"].isin([0, 1]).all()
    assert report["events_per_parameter"] > 10 and report["duplicate_ids"] == 0
    assert report["column_profile"]["guarantor_score"]["missing_share"] > 0
    assert "Peduzzi" in report["epv_source"]
    assert sha256_file(DEMO) == before


def test_raw_hash_is_taken_from_the_remembered_hashes(cfg, tmp_path):
    # In a build the workflow has hashed the raw file when it started (oddsmith.evidence.filehash);
    # validate takes that hash for an unchanged file instead of reading every byte again.
    data = _write(tmp_path, pd.read_csv(DEMO, nrows=400))
    cache = tmp_path / "hashes.json"
    cache.write_text(json.dumps({os.path.abspath(data): {"state": file_state(data), "sha256": "f" * 64}}))
    assert _run(cfg, data, tmp_path / "a", hash_cache=cache)["source"]["sha256"] == "f" * 64
    # A changed file (another state) is read; so is every file without remembered hashes.
    data.write_bytes(data.read_bytes())
    os.utime(data, ns=(1, 1))
    assert _run(cfg, data, tmp_path / "b", hash_cache=cache)["source"]["sha256"] == sha256_file(data)
    assert _run(cfg, data, tmp_path / "c")["source"]["sha256"] == sha256_file(data)


def test_missing_file(cfg, tmp_path):
    _expect_failure(cfg, tmp_path, tmp_path / "absent.csv", "data file not found", "absent.csv")


def test_empty_file(cfg, tmp_path):
    path = tmp_path / "empty.csv"
    path.write_bytes(b"")
    _expect_failure(cfg, tmp_path, path, "is empty")


def test_header_only(cfg, tmp_path):
    path = _write(tmp_path, _demo_frame(0))
    _expect_failure(cfg, tmp_path, path, "header but no data rows")


def test_wrong_delimiter(cfg, tmp_path):
    path = _write(tmp_path, _demo_frame(20), sep=";")
    _expect_failure(cfg, tmp_path, path, "delimited by ';'")


def test_missing_required_column(cfg, tmp_path):
    path = _write(tmp_path, _demo_frame().drop(columns=["credit_score"]))
    _expect_failure(cfg, tmp_path, path, "column 'credit_score': required by the contract, not found")


def test_extra_column_rejected_or_ignored(cfg, tmp_path):
    frame = _demo_frame().assign(favourite_colour="blue")
    path = _write(tmp_path, frame)
    _expect_failure(cfg, tmp_path, path, "favourite_colour", "extra_columns")
    cfg["data"]["extra_columns"] = "ignore"
    report = _run(cfg, path, tmp_path / "ok")
    assert report["ignored_columns"] == ["favourite_colour"]
    assert "favourite_colour" not in pd.read_parquet(tmp_path / "ok" / "data.parquet").columns


@pytest.mark.parametrize("values, fragment", [
    ({3: "2"}, "check isin(['0', '1'])"),
    ({3: "yes"}, "LA-000004='yes'"),
    ({3: ""}, "column 'serious_delinquency', check not empty"),
])
def test_bad_target_values(cfg, tmp_path, values, fragment):
    frame = _demo_frame()
    for row, value in values.items():
        frame.loc[row, "serious_delinquency"] = value
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame), fragment)


def test_only_one_class(cfg, tmp_path):
    frame = _demo_frame().assign(serious_delinquency="0")
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame), "only one class present")


def test_all_problems_reported_at_once(cfg, tmp_path):
    frame = _demo_frame()
    frame.loc[1, "credit_score"] = "high"            # text in a numeric column
    frame.loc[2, "debt_service_ratio"] = "inf"       # infinite value
    frame.loc[3, "credit_score"] = "999"             # out of range
    frame.loc[4, "region"] = "moon"                  # unknown category
    frame.loc[5, "application_id"] = frame.loc[6, "application_id"]  # duplicate id
    frame.loc[7, "application_date"] = "31/12/2024"  # unparseable date
    msg = _expect_failure(
        cfg, tmp_path, _write(tmp_path, frame),
        "column 'credit_score', check type: expected a number: 1 row(s) fail, e.g. LA-000002='high'",
        "column 'debt_service_ratio', check finite (not inf)",
        "column 'credit_score', check less_than_or_equal_to(850): 1 row(s) fail, e.g. LA-000004=999.0",
        "column 'region', check isin",
        "LA-000005='moon'",
        "column 'application_id', check unique: 2 row(s) fail",
        "column 'application_date', check type: expected a date YYYY-MM-DD",
    )
    assert msg.count("\n  - ") >= 7


def test_missing_id(cfg, tmp_path):
    frame = _demo_frame()
    frame.loc[8, "application_id"] = ""
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame), "column 'application_id', check not empty")


def test_utf8_bom_is_accepted(cfg, tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbf" + _demo_frame().to_csv(index=False).encode())
    report = _run(cfg, path, tmp_path / "ok")
    assert report["rows"] == 400


def test_latin1_refused_then_accepted_when_declared(cfg, tmp_path):
    frame = _demo_frame()
    frame["region"] = frame["region"].str.replace("metro", "métro")
    path = _write(tmp_path, frame, encoding="latin-1")
    _expect_failure(cfg, tmp_path, path, "is not valid utf-8: byte 0xe9", "data.encoding")
    cfg["data"]["encoding"] = "latin-1"
    _expect_failure(cfg, tmp_path, path, "LA-0000", "'métro'")  # decoded; now an unknown level


def test_target_not_in_contract(cfg, tmp_path):
    cfg["data"]["target"] = "defaulted"
    _expect_failure(cfg, tmp_path, DEMO, "data.target: column 'defaulted' is not declared in the data contract")


@pytest.mark.e2e
def test_workflow_stops_before_any_output_on_bad_data(project):
    data = project / "data_demo" / "lease_applications.csv"
    text = data.read_text().replace("LA-000010,", "LA-000009,", 1)
    data.write_text(text)
    before = sha256_file(data)
    result = run_snakemake(project, check=False)
    assert result.returncode != 0
    terminal = result.stderr + result.stdout
    # one readable block on the terminal: the rule, the class, the column, the check, the row id
    assert "oddsmith: rule validate stopped (ContractError)" in terminal
    assert "column 'application_id', check unique: 2 row(s) fail, e.g. LA-000009" in terminal
    assert "Traceback" not in terminal
    assert "Traceback" in (project / "logs/lease_demo/validate.log").read_text()
    assert not (project / "work/lease_demo/validated/data.parquet").exists()
    assert not (project / "results/lease_demo").exists()
    assert sha256_file(data) == before


@pytest.mark.e2e
def test_workflow_refuses_an_alias_bomb_in_a_config_file_before_walking_it(project):
    """Snakemake parses --configfile itself (cheaply: aliases become shared references); the
    workflow reads each config file again with oddsmith's reader before checking the config, so
    the bomb is refused by name instead of exhausting memory while the config is walked."""
    from test_io import alias_bomb

    cfg = project / "config" / "demo.yaml"
    bombed = project / "config" / "bombed.yaml"
    bombed.write_text(cfg.read_text().replace("  title: Equipment-lease", f"  title: {alias_bomb()}\n  x: ", 1))
    result = run_snakemake(project, "--dry-run", check=False, config="config/bombed.yaml")
    terminal = result.stderr + result.stdout
    assert result.returncode != 0
    assert "configuration file config/bombed.yaml is not valid YAML: line " in terminal
    assert "anchors and aliases are not accepted, found &a0" in terminal and "Traceback" not in terminal
    assert not (project / "results").exists()


def test_workflow_refuses_bad_config(project):
    cfg = project / "config" / "demo.yaml"
    cfg.write_text(cfg.read_text() + "\nsurprise: 1\n")
    result = run_snakemake(project, "--dry-run", check=False)
    assert result.returncode != 0
    assert "'surprise' was unexpected" in result.stderr + result.stdout


def test_sensitive_attribute_with_one_group(cfg, tmp_path):
    frame = _demo_frame().assign(owner_age_band="35-49")
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame), "attribute 'owner_age_band' has a single group '35-49'")


def test_decoding_is_checked_piece_by_piece_with_the_file_offset(tmp_path):
    # Tiny pieces: a two-byte character split across pieces is fine, and the offset of a bad
    # byte is its offset in the file, not in the piece.
    from oddsmith.data.contract import _check_decodes
    from oddsmith.errors import ContractError

    good = "id,name\n1,Zoë\n2,Åsa\n".encode("utf-8")
    path = tmp_path / "good.csv"
    path.write_bytes(good)
    for size in (1, 2, 3, 5, 64):
        assert _check_decodes(path, "utf-8-sig", "utf-8", chunk_bytes=size)
    bad = good + b"3,Ren\xe9\n"
    path.write_bytes(bad)
    where = bad.index(b"\xe9")
    for size in (1, 2, 3, 7, 64):
        with pytest.raises(ContractError, match=f"byte 0xe9 at offset {where};"):
            _check_decodes(path, "utf-8-sig", "utf-8", chunk_bytes=size)
    path.write_bytes(b"  \n\n")
    assert not _check_decodes(path, "utf-8-sig", "utf-8", chunk_bytes=2)


def test_numbers_parse_the_same_through_the_fast_path_and_pandas():
    # _to_float uses Arrow's cast when every cell parses and pandas otherwise; both must give
    # the same doubles (reference: pandas.to_numeric), and cells that are not numbers stay missing.
    from oddsmith.data.contract import _to_float

    rng = np.random.default_rng(3)
    x = (rng.standard_normal(20_000) * 10.0 ** rng.integers(-6, 9, 20_000)).tolist()
    cells = [repr(v) for v in x] + [f"{v:.6f}" for v in x[:3000]] + [f"{v:.20e}" for v in x[:3000]] + [None, "7", "-0.5"]
    text = pd.Series(cells, dtype="str")
    expected = pd.to_numeric(text, errors="coerce").astype("float64").to_numpy()
    np.testing.assert_array_equal(_to_float(text).to_numpy(), expected)
    messy = pd.Series(["1", " 2", "three", None, "4e1"], dtype="str")
    np.testing.assert_array_equal(_to_float(messy).to_numpy(),
                                  pd.to_numeric(messy, errors="coerce").astype("float64").to_numpy())


# ------------------------------------------------------------------ unreadable files, in our words


def test_row_with_more_fields_than_the_header(cfg, tmp_path):
    path = _write(tmp_path, _demo_frame(20))
    lines = path.read_text().splitlines()
    lines[6] += ",surplus"  # line 7 of the file (the header is line 1)
    path.write_text("\n".join(lines) + "\n")
    _expect_failure(cfg, tmp_path, path, "line 7", "expected 14 fields", "found 15")


def test_repeated_header_name_is_reported_as_such(cfg, tmp_path):
    path = _write(tmp_path, _demo_frame(20))
    text = path.read_text().replace(",owner_age_band,", ",region,", 1)
    path.write_text(text)
    message = _expect_failure(cfg, tmp_path, path, "column 'region' appears 2 times in the header (positions 12, 13)")
    assert "region.1" not in message  # pandas' renamed copy is not reported as an undeclared column


def test_a_huge_cell_is_quoted_cut(cfg, tmp_path):
    frame = _demo_frame(20)
    frame.loc[2, "credit_score"] = "n/a " * 50_000
    message = _expect_failure(cfg, tmp_path, _write(tmp_path, frame), "LA-000003=", "cut; 200,000 characters in all")
    assert len(message) < 2_000


# ------------------------------------------------------- what later stages need, checked at validate


def test_blank_sensitive_attribute_is_refused_with_row_ids(cfg, tmp_path):
    frame = _demo_frame()
    frame.loc[[4, 9], "owner_age_band"] = ""
    cfg["data"]["contract"] = str(tmp_path / "contract.yaml")
    contract = CONTRACT.read_text().replace('levels: ["18-34", "35-49", "50-64", "65+"]',
                                            'levels: ["18-34", "35-49", "50-64", "65+"], nullable: true')
    (tmp_path / "contract.yaml").write_text(contract)
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame),
                    "fairness.sensitive: column 'owner_age_band' is blank in 2 row(s), e.g. ids 'LA-000005', 'LA-000010'",
                    contract=tmp_path / "contract.yaml")


def test_blank_sensitive_cells_can_form_a_declared_group(cfg, tmp_path):
    frame = _demo_frame()
    frame.loc[[4, 9], "owner_age_band"] = ""
    cfg["data"]["contract"] = str(tmp_path / "contract.yaml")
    contract = CONTRACT.read_text().replace('levels: ["18-34", "35-49", "50-64", "65+"]',
                                            'levels: ["18-34", "35-49", "50-64", "65+"], nullable: true')
    (tmp_path / "contract.yaml").write_text(contract)
    cfg["fairness"]["blank_groups"] = {"owner_age_band": "not stated"}
    _run(cfg, _write(tmp_path, frame), tmp_path / "ok", contract=tmp_path / "contract.yaml")
    assert (tmp_path / "ok" / "data.parquet").exists()
    cfg["fairness"]["blank_groups"] = {"owner_age_band": "65+"}  # a label the data already uses
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame),
                    "the label '65+' given to the blank cells of 'owner_age_band' is also one of its values",
                    contract=tmp_path / "contract.yaml")


def test_five_rows_are_too_few_and_the_advice_keeps_the_minimum_of_two_folds(cfg, tmp_path):
    cfg["split"] |= {"method": "stratified", "cutoff_date": None}
    message = _expect_failure(cfg, tmp_path, _write(tmp_path, _demo_frame(5)), "the data cannot support")
    assert "at most 1 folds" not in message and "at most 0 folds" not in message
    assert "split" in message or "folds" in message


def test_more_folds_than_a_class_has(cfg, tmp_path):
    frame = _demo_frame()
    events = frame.index[frame["serious_delinquency"] == "1"]
    frame.loc[events[3:], "serious_delinquency"] = "0"  # 3 events left, all in the training part
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame),
                    "the training part has 3 events and", "fewer than 5 folds", "use at most 3 folds",
                    "the test part has no events")


def test_cutoff_date_outside_the_dates(cfg, tmp_path):
    cfg["split"]["cutoff_date"] = "2024-06-01"
    _expect_failure(cfg, tmp_path, _write(tmp_path, _demo_frame()),
                    "cutoff_date 2024-06-01 is outside the data's date range 2023-01-01 to 2023-02-10")


def test_level_seen_only_in_the_test_part(cfg, tmp_path):
    frame = _demo_frame()
    train = frame["application_date"] < "2023-02-01"
    frame.loc[train & (frame["region"] == "metro"), "region"] = "coastal"
    first = frame.loc[~train & (frame["region"] == "metro"), "application_id"].iloc[0]
    _expect_failure(cfg, tmp_path, _write(tmp_path, frame),
                    "features.region: level(s) 'metro' occur only in the test part", f"'{first}'")


def test_no_fit_possible_with_more_parameters_than_rows(cfg, tmp_path):
    cfg["split"] |= {"method": "stratified", "cutoff_date": None}
    cfg["cross_validation"]["folds"] = 2
    frame = _demo_frame(30)
    # 30 rows: 22 train (ceil(0.25 * 30) = 8 test); 2 folds leave at most 11 rows per fit,
    # while logit_main has 1 + 6 + 2 (guarantor + indicator) + 5 + 3 + 1 (interaction) = 18.
    message = _expect_failure(cfg, tmp_path, _write(tmp_path, frame),
                              "candidates: logit_main (logit, 18 parameters), probit_main (probit, 18 parameters), "
                              "cloglog_main (cloglog, 18 parameters) have more parameters than the at most 11 rows")
    assert "lasso" not in message and "logit_compact" not in message


def test_numeric_sensitive_attribute_needs_bands(cfg, tmp_path):
    cfg["fairness"]["sensitive"] = ["credit_score"]
    _expect_failure(cfg, tmp_path, _write(tmp_path, _demo_frame()),
                    "fairness.sensitive: 'credit_score' is numeric (integer in the contract)", "give round-number bands",
                    "declare it `type: category`")


def test_banded_numeric_sensitive_attribute_validates(demo_config, tmp_path):
    demo_config["fairness"]["sensitive"] = ["owner_age_band", {"name": "credit_score", "bands": [600, 700]}]
    demo_config["fairness"]["use_sensitive_as_features"] = True  # every numeric demo column is a feature
    cfg = check_config(demo_config, project_dir=ROOT)
    assert cfg["fairness"]["sensitive"] == ["owner_age_band", "credit_score"]
    assert cfg["fairness"]["bands"] == {"credit_score": [600, 700]}
    _run(cfg, DEMO, tmp_path)
    assert (tmp_path / "data.parquet").exists()
    cfg["fairness"]["bands"] = {"credit_score": [100, 200]}  # every score is 300 or more: one band
    _expect_failure(cfg, tmp_path / "again", DEMO, "every value of 'credit_score' falls in one band")


# ------------------------------------------------------- the file is read and checked in row pieces


def _outputs(out: Path) -> dict:
    return {name: (out / name).read_bytes() for name in ("data.parquet", "report.json", "summary.txt")}


def _run_in_pieces(cfg, data: Path, out: Path, piece_rows: int):
    return run_validate(config=cfg, data_path=str(data), contract_path=str(CONTRACT), out_data=str(out / "data.parquet"),
                        out_report=str(out / "report.json"), out_summary=str(out / "summary.txt"), piece_rows=piece_rows)


def _whole_frame_snapshot(cfg, data: Path, path: Path, group_rows: int) -> None:
    """The snapshot as a check of the whole file at once writes it: the typed frame cut into
    row groups (the reference for the piece-by-piece writer)."""
    from oddsmith.data.contract import load_contract, read_raw, validate_frame
    from oddsmith.io import write_parquet_chunks

    d = cfg["data"]
    typed = validate_frame(read_raw(data), load_contract(CONTRACT), id_column=d["id_column"], target=d["target"],
                           positive_label=d["positive_label"], extra_columns=d["extra_columns"])
    write_parquet_chunks(path, (typed.iloc[s:s + group_rows] for s in range(0, len(typed), group_rows)))


def test_pieces_of_seven_rows_give_the_same_bytes_as_one_piece(cfg, tmp_path):
    path = _write(tmp_path, _demo_frame())
    _run_in_pieces(cfg, path, tmp_path / "one", piece_rows=100_000)
    _run_in_pieces(cfg, path, tmp_path / "seven", piece_rows=7)  # 58 pieces, the last of 1 row
    assert _outputs(tmp_path / "seven") == _outputs(tmp_path / "one")


def test_row_groups_do_not_depend_on_the_pieces(cfg, tmp_path, monkeypatch):
    # Row groups of 50 rows from pieces of 7 rows: each group is assembled from several
    # pieces and cut inside one; the bytes equal the whole typed frame cut every 50 rows.
    import oddsmith.data.validate as validate

    monkeypatch.setattr(validate, "PARQUET_CHUNK_ROWS", 50)
    path = _write(tmp_path, _demo_frame(333))
    _run_in_pieces(cfg, path, tmp_path / "pieces", piece_rows=7)
    _whole_frame_snapshot(cfg, path, tmp_path / "whole.parquet", group_rows=50)
    assert (tmp_path / "pieces" / "data.parquet").read_bytes() == (tmp_path / "whole.parquet").read_bytes()
    import pyarrow.parquet as pq
    assert pq.ParquetFile(tmp_path / "whole.parquet").metadata.num_row_groups == 7


def test_the_demo_snapshot_in_pieces_equals_the_whole_file_typed_at_once(cfg, tmp_path):
    from oddsmith.data.validate import PARQUET_CHUNK_ROWS

    _run_in_pieces(cfg, DEMO, tmp_path / "pieces", piece_rows=1_000)
    _whole_frame_snapshot(cfg, DEMO, tmp_path / "whole.parquet", group_rows=PARQUET_CHUNK_ROWS)
    assert (tmp_path / "pieces" / "data.parquet").read_bytes() == (tmp_path / "whole.parquet").read_bytes()


def _scattered_problems() -> pd.DataFrame:
    frame = _demo_frame()
    frame.loc[[2, 150, 391], "credit_score"] = ["high", "low", "n/a"]     # type, in pieces 1, 22 and 56
    frame.loc[[10, 200, 390, 399], "credit_score"] = "999"                # range, four pieces
    frame.loc[[30, 260], "region"] = "moon"                                # unknown level
    frame.loc[300, "application_id"] = frame.loc[5, "application_id"]     # repeat 295 rows apart
    frame.loc[[80, 81, 350], "application_id"] = "LA-REPEAT"              # a second repeated id
    frame.loc[[33, 333], "prior_late_payments"] = ["1.5", "2.5"]           # not whole numbers
    return frame


def test_problems_scattered_over_pieces_are_merged_as_one_piece_reports_them(cfg, tmp_path):
    path = _write(tmp_path, _scattered_problems())
    whole = _expect_failure(cfg, tmp_path, path)
    pieces = str(pytest.raises(ContractError, _run_in_pieces, cfg, path, tmp_path / "validated", 7).value)
    assert pieces == whole
    assert not (tmp_path / "validated").exists() or not any((tmp_path / "validated").iterdir())
    # Counts over all pieces, the first three examples in file order (ids count from 1).
    for fragment in (
        "column 'credit_score', check type: expected a number: 3 row(s) fail, e.g. LA-000003='high', "
        "LA-000151='low', LA-000392='n/a'",
        "column 'credit_score', check less_than_or_equal_to(850): 4 row(s) fail, e.g. LA-000011=999.0, "
        "LA-000201=999.0, LA-000391=999.0",
        "column 'region', check isin",
        "column 'prior_late_payments', check whole number: 2 row(s) fail, e.g. LA-000034='1.5', LA-000334='2.5'",
        "column 'application_id', check unique: 5 row(s) fail, e.g. LA-000006='LA-000006', "
        "LA-REPEAT='LA-REPEAT', LA-REPEAT='LA-REPEAT'",
    ):
        assert fragment in pieces, f"{fragment!r} not in:\n{pieces}"
    assert pieces.index("prior_late_payments', check whole") < pieces.index("credit_score', check type")


def test_a_hash_shared_by_different_ids_is_not_a_repeat(cfg, tmp_path, monkeypatch):
    # Rows whose hashes agree are looked at again: with every hash forced equal, only the
    # real repeat (rows 6 and 301) may be reported.
    import oddsmith.data.contract as contract

    monkeypatch.setattr(contract, "_value_hashes", lambda values: np.zeros(len(values), dtype=np.uint64))
    frame = _demo_frame()
    frame.loc[300, "application_id"] = frame.loc[5, "application_id"]
    message = str(pytest.raises(ContractError, _run_in_pieces, cfg, _write(tmp_path, frame), tmp_path / "v", 7).value)
    assert "column 'application_id', check unique: 2 row(s) fail, e.g. LA-000006='LA-000006', LA-000006='LA-000006'" \
        in message
    frame.loc[300, "application_id"] = "LA-000301"
    _run_in_pieces(cfg, _write(tmp_path, frame), tmp_path / "ok", 7)


def test_rows_cut_short_are_refused_in_any_piece_all_at_once(cfg, tmp_path):
    # A row with fewer fields than the header would read as blank trailing cells, reported (or,
    # for nullable columns, accepted) as missing values; it is refused as the short row it is.
    frame = _demo_frame(60)
    path = _write(tmp_path, frame)
    lines = path.read_text().splitlines()
    for k in (9, 45):  # lines 10 and 46: the second and seventh pieces of 7 rows
        lines[k] = lines[k].rsplit(",", 3)[0]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(ContractError) as err:
        _run_in_pieces(cfg, path, tmp_path / "validated", 7)
    assert "2 row(s) have fewer fields than the header's 14: line 10 (11), line 46 (11)" in str(err.value)
    out = tmp_path / "validated"
    assert not out.exists() or not any(out.iterdir())


def test_a_blank_last_cell_with_its_comma_is_not_a_short_row(cfg, tmp_path):
    frame = _demo_frame(60)
    last = frame.columns[-1]
    path = _write(tmp_path, frame)
    lines = path.read_text().splitlines()
    lines[20] = lines[20].rsplit(",", 1)[0] + ","  # the last cell emptied, its comma kept
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(ContractError) as err:  # refused by the column's own rule, not as short
        _run_in_pieces(cfg, path, tmp_path / "validated", 7)
    assert "fewer fields" not in str(err.value) and last in str(err.value)


def test_ragged_row_in_a_later_piece_names_its_line(cfg, tmp_path):
    path = _write(tmp_path, _demo_frame(60))
    lines = path.read_text().splitlines()
    lines[45] += ",surplus"  # line 46 of the file, in the seventh piece of 7 rows
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(ContractError, match="line 46: expected 14 fields") as err:
        _run_in_pieces(cfg, path, tmp_path / "validated", 7)
    assert "found 15" in str(err.value)
    out = tmp_path / "validated"
    assert not out.exists() or not any(out.iterdir())  # nothing written, not even the folder


def test_blank_rejected_feature_counts_every_piece(cfg, tmp_path):
    from oddsmith.errors import DataError

    for f in cfg["features"]:
        if f["name"] == "guarantor_score":
            f["missing"] = "reject"
    path = _write(tmp_path, _demo_frame())
    whole = str(pytest.raises(DataError, _run_in_pieces, cfg, path, tmp_path / "a", 100_000).value)
    pieces = str(pytest.raises(DataError, _run_in_pieces, cfg, path, tmp_path / "b", 7).value)
    assert pieces == whole
    blanks = int((_demo_frame()["guarantor_score"] == "").sum())
    assert f"features.guarantor_score: blank in {blanks} row(s)" in pieces and blanks > 7


def test_nullable_whole_numbers_without_blanks_are_stored_as_int64(cfg, tmp_path, monkeypatch):
    # guarantor_score is a nullable integer: without a blank anywhere it is int64, as when the
    # whole file is typed at once, although each piece held it as float64.
    import oddsmith.data.validate as validate

    monkeypatch.setattr(validate, "PARQUET_CHUNK_ROWS", 50)
    frame = _demo_frame()
    frame.loc[frame["guarantor_score"] == "", "guarantor_score"] = "700"
    path = _write(tmp_path, frame)
    _run_in_pieces(cfg, path, tmp_path / "pieces", piece_rows=7)
    _whole_frame_snapshot(cfg, path, tmp_path / "whole.parquet", group_rows=50)
    assert pd.read_parquet(tmp_path / "pieces" / "data.parquet")["guarantor_score"].dtype == "int64"
    assert (tmp_path / "pieces" / "data.parquet").read_bytes() == (tmp_path / "whole.parquet").read_bytes()


def test_the_file_is_read_in_bounded_pieces(cfg, tmp_path, monkeypatch):
    import oddsmith.data.validate as validate
    from oddsmith.data.contract import PIECE_ROWS

    asked = []

    def spy(path, **options):
        asked.append(options)
        return validate_reader(path, **options)

    validate_reader = validate.read_raw_pieces
    monkeypatch.setattr(validate, "read_raw_pieces", spy)
    _run(cfg, _write(tmp_path, _demo_frame()), tmp_path / "v")
    assert asked and all(o["rows"] == PIECE_ROWS <= 65_536 for o in asked)


def test_rows_a_multiple_of_the_row_group_leave_no_empty_group(cfg, tmp_path, monkeypatch):
    import pyarrow.parquet as pq

    import oddsmith.data.validate as validate

    monkeypatch.setattr(validate, "PARQUET_CHUNK_ROWS", 100)
    _run_in_pieces(cfg, _write(tmp_path, _demo_frame()), tmp_path / "v", piece_rows=7)
    groups = pq.ParquetFile(tmp_path / "v" / "data.parquet").metadata
    assert [groups.row_group(i).num_rows for i in range(groups.num_row_groups)] == [100, 100, 100, 100]
