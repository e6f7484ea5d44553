"""`oddsmith init`: drafts a contract and config that accept the file they were drafted from,
and never overwrites existing files."""

import shutil

import pytest
import yaml

from oddsmith.cli import main
from oddsmith.config import check_config
from oddsmith.validate import run_validate

from conftest import ROOT


def test_drafts_validate_their_own_data(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    shutil.copy(ROOT / "data_demo" / "lease_applications.csv", tmp_path / "apps.csv")
    assert main(["init", "apps.csv", "--contract", "c/contract.yaml", "--config", "c/config.yaml"]) == 0
    assert "review both" in capsys.readouterr().out
    contract_text = (tmp_path / "c/contract.yaml").read_text()
    assert contract_text.startswith("# DRAFT")
    raw_config = yaml.safe_load((tmp_path / "c/config.yaml").read_text())
    assert raw_config["data"]["id_column"] == "application_id"
    assert raw_config["data"]["target"] == "serious_delinquency"
    cfg = check_config(raw_config, project_dir=tmp_path)
    report = run_validate(config=cfg, data_path="apps.csv", contract_path="c/contract.yaml",
                          out_data="out/data.parquet", out_report="out/report.json", out_summary="out/summary.txt")
    assert report["rows"] == 12_000


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
