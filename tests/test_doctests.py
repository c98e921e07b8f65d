"""The examples in the package's docstrings run and give what they show (standard-library
doctest; common practice, no source)."""
from __future__ import annotations

import doctest
import importlib
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "bayesprobe"
MODULES = sorted("bayesprobe." + ".".join(p.relative_to(PACKAGE).with_suffix("").parts)
                 for p in PACKAGE.rglob("*.py") if ">>>" in p.read_text() and p.name != "__main__.py")


def test_there_are_examples():
    assert MODULES, "no docstring examples found: the scan is broken"


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0, result
