"""Start-up cost: ``import bayesprobe``, ``import bayesprobe.cli`` and ``bayesprobe --help`` must not
import the heavy libraries (the sampler, arviz, plotting, labelled arrays, scipy's statistics).

Each check runs in a fresh interpreter (a subprocess), because this test process has long imported
them. The mechanism is the module ``__getattr__`` of PEP 562 ("Module __getattr__ and __dir__",
Python 3.7); the language reference ("The import system", section 5.4.2 "Submodules") states that
importing a submodule binds it as an attribute of its package, which the simulate check below
guards against. No timing assertions: speed is measured by hand (see the contributor guide).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import bayesprobe

HEAVY = ("arviz", "matplotlib", "emcee", "corner", "xarray", "scipy.stats", "pandas")
ROOT = Path(bayesprobe.__file__).resolve().parents[1]


def _modules_after(code: str) -> set[str]:
    """Names in sys.modules after running ``code`` in a fresh interpreter that imports this checkout."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + ([env["PYTHONPATH"]] if env.get("PYTHONPATH") else []))
    probe = code + "\nimport json, sys\nprint(json.dumps(sorted(sys.modules)))"
    run = subprocess.run([sys.executable, "-c", probe], env=env, capture_output=True, text=True, timeout=120,
                         check=True)
    return set(json.loads(run.stdout.strip().splitlines()[-1]))


@pytest.mark.parametrize("code", ["import bayesprobe",
                                  "import bayesprobe.cli",
                                  "import bayesprobe; dir(bayesprobe); bayesprobe.__version__; bayesprobe.InputError",
                                  "import bayesprobe.cli, contextlib, io\n"
                                  "with contextlib.redirect_stdout(io.StringIO()), contextlib.suppress(SystemExit):\n"
                                  "    bayesprobe.cli.main(['--help'])\n"
                                  "with contextlib.redirect_stdout(io.StringIO()), contextlib.suppress(SystemExit):\n"
                                  "    bayesprobe.cli.main(['fit', '--help'])",
                                  # a bad sweep file is reported before the fitting stack is imported
                                  "import bayesprobe.cli, contextlib, io\n"
                                  "with contextlib.redirect_stderr(io.StringIO()):\n"
                                  "    assert bayesprobe.cli.main(['fit', '/nonexistent/sweep.csv', '--out', "
                                  "'/nonexistent/out']) == 2"])
def test_light_imports_leave_heavy_libraries_unloaded(code):
    loaded = _modules_after(code)
    assert "bayesprobe" in loaded
    assert not [m for m in HEAVY if m in loaded]


def test_first_use_of_a_name_loads_its_module():
    """Negative control of the check above: asking for ``fit`` must load the sampler (emcee), so the
    sys.modules test does see a heavy import when one happens."""
    loaded = _modules_after("import bayesprobe\nbayesprobe.fit")
    assert "emcee" in loaded and "bayesprobe.fitting" in loaded


def test_every_public_name_resolves_and_is_listed():
    for name in bayesprobe.__all__:
        assert getattr(bayesprobe, name) is not None, name
    assert set(bayesprobe.__all__) <= set(dir(bayesprobe))
    from bayesprobe.fitting import fit
    from bayesprobe.physics.geometry import Probe
    assert bayesprobe.fit is fit and bayesprobe.Probe is Probe
    with pytest.raises(AttributeError, match="no attribute 'not_a_name'"):
        bayesprobe.not_a_name  # noqa: B018


def test_simulate_stays_the_function_after_its_module_is_imported():
    """``bayesprobe.simulate`` is the function, also when the submodule of the same name is imported
    first (the import system would bind the module to the package attribute)."""
    loaded = _modules_after("import bayesprobe, bayesprobe.simulate\n"
                            "from bayesprobe.simulate import simulate\n"
                            "assert bayesprobe.simulate is simulate, bayesprobe.simulate\n"
                            "assert callable(bayesprobe.simulate)")
    assert "bayesprobe.simulate" in loaded
