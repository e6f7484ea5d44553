"""Where the templates and schemas are found: the checkout's folders, or the installed data packages."""

from __future__ import annotations

import pytest

from oddsmith import resources
from oddsmith.errors import ArtifactError

from conftest import ROOT


def test_a_checkout_uses_its_own_top_level_folders():
    assert resources.source_checkout() == ROOT
    assert resources.template_dir() == ROOT / "reports"
    assert resources.schema_file("config.schema.yaml") == ROOT / "schemas" / "config.schema.yaml"
    assert resources.schema_file("contracts/lease_applications.yaml").is_file()


def test_the_users_of_templates_and_schemas_ask_the_one_lookup():
    from oddsmith import config
    from oddsmith.reporting import card
    from oddsmith.stages import score

    assert card.TEMPLATE_DIR == resources.template_dir()
    assert config.SCHEMA_PATH == resources.schema_file("config.schema.yaml")
    assert score.TEMPLATE == resources.template_dir() / "drift.html.j2"
    assert score.card_stylesheets() == [resources.template_dir() / "model_card.css"]


def test_a_missing_file_is_named(monkeypatch, tmp_path):
    with pytest.raises(ArtifactError, match=r"oddsmith's file schemas/no-such.yaml not found .*reinstall"):
        resources.schema_file("no-such.yaml")
    # An installed package whose data packages are missing (a broken install).
    monkeypatch.setattr(resources, "source_checkout", lambda: None)
    monkeypatch.setitem(resources.PACKAGES, "schemas", "oddsmith._no_such_data")
    with pytest.raises(ArtifactError, match="package data 'oddsmith._no_such_data' is not installed"):
        resources.schema_file("config.schema.yaml")


def test_every_shipped_file_is_declared_as_package_data():
    """pyproject.toml ships the patterns below; a new kind of file in reports/ or schemas/ must be added there."""
    import tomllib

    declared = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    assert declared["package-dir"] == {"oddsmith._reports": "reports", "oddsmith._schemas": "schemas"}
    patterns = declared["package-data"]
    for package, folder in (("oddsmith._reports", "reports"), ("oddsmith._schemas", "schemas"),
                            ("oddsmith._schemas.contracts", "schemas/contracts")):
        assert package in declared["packages"]
        for path in (ROOT / folder).iterdir():
            if path.is_file():
                assert any(path.match(p) for p in patterns[package]), f"{path} is not shipped"


def test_the_schema_parsed_once_by_libyaml_is_the_document_the_python_parser_reads():
    import yaml

    from oddsmith import settings

    text = resources.schema_file("config.schema.yaml").read_text(encoding="utf-8")
    assert settings.config_schema() == yaml.safe_load(text)
    copy = settings.config_schema()
    copy["properties"].clear()  # a caller's copy is its own
    assert settings.config_schema()["properties"]
