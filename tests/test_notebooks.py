"""The notebooks in notebooks/ are stored without outputs and run from top to bottom without errors.

Executed with nbclient in a fresh kernel (the python3 kernel of this interpreter) in a temporary
working directory; each notebook must finish within its time limit and print what it promises.
"""
from __future__ import annotations

import time
import warnings
from pathlib import Path

import pytest

NOTEBOOKS = Path(__file__).resolve().parent.parent / "notebooks"
#: seconds allowed per notebook (each takes well under half of this on two cores)
LIMITS = {"01-quick-start.ipynb": 240, "02-one-or-two-temperatures.ipynb": 400, "03-batch-time-series.ipynb": 300}
#: text each notebook must print (its point, not just "it ran")
EXPECTED = {
    "01-quick-start.ipynb": ["converged: True", "T_e  [  eV]", "inside", "report:", "summary.json"],
    "02-one-or-two-temperatures.ipynb": ["selected: bi-maxwellian", "selected: maxwellian",
                                         "A two-temperature electron distribution is supported",
                                         "A single Maxwellian electron temperature is retained"],
    "03-batch-time-series.ipynb": ["6 sweeps", "results.csv", "afterglow-5", "report:"],
}


def _require():
    missing = []
    for mod in ("nbformat", "nbclient", "ipykernel"):
        try:
            __import__(mod)
        except ImportError:
            missing.append(mod)
    if missing:
        pytest.skip(f"notebook execution needs {', '.join(missing)} (pip install nbclient nbformat ipykernel)")


def test_every_notebook_is_listed():
    found = sorted(p.name for p in NOTEBOOKS.glob("*.ipynb"))
    assert found and found == sorted(LIMITS), found


@pytest.mark.parametrize("name", sorted(LIMITS))
def test_notebook_is_stored_without_outputs(name):
    _require()
    import nbformat
    book = nbformat.read(NOTEBOOKS / name, as_version=4)
    nbformat.validate(book)
    code = [c for c in book.cells if c.cell_type == "code"]
    assert code
    for c in code:
        assert c.outputs == [] and c.execution_count is None, f"{name}: strip the outputs before committing"
    text = " ".join(c.source for c in book.cells if c.cell_type == "markdown").lower()
    assert "synthetic" in text                       # the data are labelled as invented


@pytest.mark.parametrize("name", sorted(LIMITS))
def test_notebook_runs(name, tmp_path, monkeypatch):
    _require()
    monkeypatch.setenv("JUPYTER_PLATFORM_DIRS", "1")
    scratch = tmp_path / "tmp"              # the notebooks' temporary folders end up here
    scratch.mkdir()
    monkeypatch.setenv("TMPDIR", str(scratch))
    import nbformat
    from nbclient import NotebookClient

    book = nbformat.read(NOTEBOOKS / name, as_version=4)
    client = NotebookClient(book, timeout=LIMITS[name], kernel_name="python3",
                            resources={"metadata": {"path": str(tmp_path)}})
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        # deprecation notices of the Jupyter machinery itself are not ours to fix
        warnings.simplefilter("ignore", DeprecationWarning)
        client.execute()
    seconds = time.perf_counter() - t0
    assert seconds < LIMITS[name], f"{name} took {seconds:.0f} s"
    printed, images = [], 0
    for c in book.cells:
        for out in c.get("outputs", []):
            assert out.get("output_type") != "error", f"{name}: {out.get('ename')}: {out.get('evalue')}"
            if out.get("output_type") == "stream":
                printed.append(out.get("text", ""))
            data = out.get("data", {})
            if "image/png" in data:
                images += 1
    text = "".join(printed)
    for want in EXPECTED[name]:
        assert want in text, f"{name} did not print {want!r}"
    assert images >= 2, f"{name} displayed {images} figures"
    print(f"{name}: {seconds:.0f} s")
