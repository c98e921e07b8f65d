"""The shape the contributor guide promises (DEVELOPERS.md, "Layout"), checked on the source.

Common practice, no source: these are the project's own structural rules.

* Physics choices are objects: outside ``bayesprobe/physics/`` and the registry, no code compares
  electron-model or ion-theory names (ask ``config.electron_model`` / ``config.ion_theory``).
* Functions stay short (at most 80 lines, docstring not counted) and modules hold one job
  (at most ~500 lines; the named exceptions are single-job modules).
* Test modules share case generators through ``tests/cases``, never by importing each other.
* ``bayesprobe.quantities`` knows every quantity a fit reports (tests/test_quantities.py checks
  the values; here: no other module defines a table of labels or units).
"""
from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "bayesprobe"
STRATEGY_HOMES = ("physics/", "quantities.py")
MAX_FUNCTION_LINES = 80
MAX_MODULE_LINES = 500
#: modules allowed above MAX_MODULE_LINES: one job each, named here with it
ONE_JOB_LARGE = {"classical.py": "the windowed textbook analysis, one pipeline of named steps"}

_NAMES = r"(maxwellian|bi-maxwellian|thin-sheath|oml|abr)"
_COMPARISON = re.compile(r"""(==|!=)\s*["']""" + _NAMES + r"""["']|["']""" + _NAMES + r"""["']\s*(==|!=)"""
                         r"""|\bin\s*\(\s*["']""" + _NAMES + r"""["']""")


def _modules():
    return sorted(p for p in PACKAGE.rglob("*.py"))


def _rel(p: Path) -> str:
    return p.relative_to(PACKAGE).as_posix()


def test_no_model_or_theory_name_comparisons_outside_the_strategy_modules():
    found = []
    for p in _modules():
        if _rel(p).startswith(STRATEGY_HOMES):
            continue
        for i, line in enumerate(p.read_text().splitlines(), 1):
            code = line.split("#", 1)[0]
            if _COMPARISON.search(code) and not re.search(r"\b(ion_current|ion_mode|mode)\b\s*(==|!=)", code):
                found.append(f"{_rel(p)}:{i}: {line.strip()}")
    assert not found, "ask config.electron_model / config.ion_theory instead:\n" + "\n".join(found)


def test_the_comparison_pattern_catches_what_it_should():
    """Negative control for the check above."""
    assert _COMPARISON.search('if config.electrons == "maxwellian":')
    assert _COMPARISON.search("x = theory in ('oml', 'auto')")
    assert not _COMPARISON.search("model: str = 'maxwellian'")


def _function_lengths(p: Path):
    tree = ast.parse(p.read_text())
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            n = node.end_lineno - node.lineno + 1
            first = node.body[0]
            if isinstance(first, ast.Expr) and isinstance(getattr(first, "value", None), ast.Constant) \
                    and isinstance(first.value.value, str):
                n -= first.end_lineno - first.lineno + 1
            yield node.name, node.lineno, n


def test_functions_are_short():
    long = [f"{_rel(p)}:{line} {name} ({n} lines)" for p in _modules() for name, line, n in _function_lengths(p)
            if n > MAX_FUNCTION_LINES]
    assert not long, "split into named steps:\n" + "\n".join(long)


def test_modules_hold_one_job():
    big = [f"{_rel(p)} ({n} lines)" for p in _modules()
           if (n := len(p.read_text().splitlines())) > MAX_MODULE_LINES and _rel(p) not in ONE_JOB_LARGE]
    assert not big, "split along its jobs, or name its one job in ONE_JOB_LARGE:\n" + "\n".join(big)


@pytest.mark.parametrize("p", sorted((ROOT / "tests").glob("*.py")), ids=lambda p: p.name)
def test_test_modules_do_not_import_each_other(p):
    tree = ast.parse(p.read_text())
    for node in ast.walk(tree):
        names = [a.name for a in node.names] if isinstance(node, ast.Import) else \
            [node.module or ""] if isinstance(node, ast.ImportFrom) else []
        assert not any(n.split(".")[0].startswith("test_") for n in names), \
            f"{p.name} imports a test module; move the helper into tests/cases/"


def test_no_second_table_of_labels():
    """Labels of quantities come from the registry: no module outside it has a string constant
    that is a quantity's TeX or HTML label (prose that mentions a symbol is fine)."""
    from bayesprobe.quantities import QUANTITIES
    labels = {q.tex for q in QUANTITIES.values() if q.tex.startswith("$")} | \
        {q.html for q in QUANTITIES.values() if "<sub>" in q.html}
    found = []
    for p in _modules():
        if _rel(p) == "quantities.py":
            continue
        found += [f"{_rel(p)}:{node.lineno} {node.value}" for node in ast.walk(ast.parse(p.read_text()))
                  if isinstance(node, ast.Constant) and node.value in labels]
    assert not found, "read bayesprobe.quantities instead:\n" + "\n".join(found)


def test_label_check_has_power():
    """Negative control: the old report table spelled labels as constants."""
    from bayesprobe.quantities import html_label
    tree = ast.parse('_SYMBOLS = {"T_e": "T<sub>e</sub>"}')
    assert any(isinstance(n, ast.Constant) and n.value == html_label("T_e") for n in ast.walk(tree))
