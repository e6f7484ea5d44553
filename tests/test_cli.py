"""The top-level command line: --version, the help a newcomer reads, the commands it lists."""

from __future__ import annotations

from importlib.metadata import version

import pytest

from oddsmith.cli import build_parser, main

from conftest import ROOT


def test_version_names_the_distribution_version_and_the_package_folder(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0
    assert capsys.readouterr().out == f"oddsmith {version('oddsmith')} ({ROOT / 'oddsmith'})\n"


def test_help_lists_every_command_with_a_purpose(capsys):
    with pytest.raises(SystemExit):
        main(["--help"])
    text = capsys.readouterr().out
    for command in ("init", "verify", "release", "diff", "score", "rescore"):
        assert f"\n    {command} " in text, command
    assert "what-if" not in text


@pytest.mark.parametrize("command", ["score", "rescore", "diff"])
def test_each_command_help_has_an_example(command, capsys):
    with pytest.raises(SystemExit):
        main([command, "--help"])
    text = capsys.readouterr().out
    assert f"example:\n  oddsmith {command} " in text


def test_the_old_command_name_is_gone(capsys):
    with pytest.raises(SystemExit) as stop:
        build_parser().parse_args(["what-if", "results/x"])
    assert stop.value.code == 2 and "invalid choice: 'what-if'" in capsys.readouterr().err


def test_no_command_prints_help_and_fails(capsys):
    assert main([]) == 2
    assert "usage: oddsmith" in capsys.readouterr().out
