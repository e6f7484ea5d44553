"""The project's one YAML reader: syntax errors give file, line and column; anchors and
aliases are refused before anything is built from them (a nested alias bomb costs nothing)."""

from __future__ import annotations

import time

import pytest

from oddsmith.config import read_config_file
from oddsmith.data.contract import load_contract
from oddsmith.errors import ConfigError, ContractError, quoted
from oddsmith.io import read_yaml


def alias_bomb(depth: int = 9, width: int = 10) -> str:
    """A flow mapping of nested aliases that stands for width**(depth+1) strings (10**10 here)."""
    parts = ["{a0: &a0 [" + ", ".join(['"lol"'] * width) + "]"]
    parts += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * width) + "]" for i in range(1, depth + 1)]
    return ", ".join(parts) + "}"


def test_syntax_error_names_file_line_and_column(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("run: demo\ndata:\n  path: [unclosed\n  target: y\n")
    with pytest.raises(ConfigError) as err:
        read_config_file(path)
    message = str(err.value)
    # the flow sequence opened on line 3 meets a mapping key on line 4, column 9 (1-based)
    assert str(path) in message and "line 4, column 9" in message and "not valid YAML" in message


def test_contract_syntax_error_names_line_and_column(tmp_path):
    path = tmp_path / "contract.yaml"
    path.write_text("format: oddsmith-contract/1\ncolumns:\n  id: {type: string\n")
    with pytest.raises(ContractError, match=r"contract.yaml is not valid YAML: line 4, column 1"):
        load_contract(path)


@pytest.mark.parametrize("text, found", [
    ("base: &b {x: 1}\nother: *b\n", "found &b"),
    ("card:\n  title: &t hello\n", "found &t"),
])
def test_anchors_and_aliases_are_refused(tmp_path, text, found):
    path = tmp_path / "config.yaml"
    path.write_text(text)
    with pytest.raises(ConfigError) as err:
        read_config_file(path)
    assert found in str(err.value) and "anchors and aliases are not accepted" in str(err.value)
    assert "line " in str(err.value) and "column " in str(err.value)


@pytest.mark.parametrize("place", ["card.title", "card.out_of_scope list", "unknown key", "nested mapping"])
def test_alias_bomb_is_refused_at_once_under_every_kind_of_key(demo_config, tmp_path, place):
    import yaml

    text = yaml.safe_dump(demo_config, sort_keys=False)
    bomb = alias_bomb()
    text = {
        "card.title": lambda t: t.replace(f"  title: {demo_config['card']['title']}", f"  title: {bomb}"),
        "card.out_of_scope list": lambda t: t.replace("  out_of_scope:\n", f"  out_of_scope:\n  - {bomb}\n"),
        "unknown key": lambda t: t + f"extra: {bomb}\n",
        "nested mapping": lambda t: t.replace("fairness:\n", f"fairness:\n  groups: {bomb}\n"),
    }[place](text)
    assert bomb in text
    path = tmp_path / "config.yaml"
    path.write_text(text)
    start = time.perf_counter()
    with pytest.raises(ConfigError, match="anchors and aliases are not accepted, found &a0"):
        read_config_file(path)
    assert time.perf_counter() - start < 2.0


def test_quoted_values_are_cut_and_the_cut_is_marked():
    cell = "x" * 200_000
    shown = quoted(cell)
    assert len(shown) < 120 and "cut; 200,000 characters in all" in shown
    assert quoted("short") == "'short'" and quoted(3.5) == "3.5"
