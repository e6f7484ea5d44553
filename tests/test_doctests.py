"""The examples in the package's docstrings run and give what they show."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import oddsmith

MODULES = sorted(m.name for m in pkgutil.walk_packages(oddsmith.__path__, "oddsmith."))


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, f"{result.failed} docstring example(s) of {name} failed (run python -m doctest)"
