"""bayesprobe: Bayesian analysis of electrostatic (Langmuir) probe I-V sweeps.

Fits a physical forward model of the whole characteristic to every measured point
with MCMC and returns posteriors, diagnostics, model comparison and figures.

The names below load on first use (PEP 562), so ``import bayesprobe`` and the command
line's ``--help`` stay fast: the sampler, arviz, matplotlib and scipy's statistics are
imported only by the code that needs them.
"""
from __future__ import annotations

import importlib
import sys
import types

from ._version import __version__

#: public name -> module (relative to this package) that defines it
_LAZY = {
    "Probe": ".physics.geometry",
    "Sweep": ".sweep",
    "ModelConfig": ".model",
    "probe_current": ".model",
    "floating_potential": ".model",
    "simulate": ".simulate",
    "fit": ".fitting",
    "FitResult": ".result",
    "SamplerSettings": ".inference.sampler",
    "InputError": ".errors",
    "ConvergenceWarning": ".errors",
    "FitOptions": ".options",
}


def load_sweep(*args, **kwargs):
    """Read a sweep file (CSV/TSV/text with a header, .npy, .npz); see :func:`bayesprobe.io.load_sweep`."""
    from .io import load_sweep as _load
    return _load(*args, **kwargs)


def compare(results):
    """Compare FitResults of different electron models by PSIS-LOO; see :mod:`bayesprobe.comparison`."""
    from .comparison import compare_models
    return compare_models(results)


def __getattr__(name):
    try:
        module = _LAZY[name]
    except KeyError:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module, __name__), name)
    globals()[name] = value          # later look-ups skip this function
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))


class _Package(types.ModuleType):
    """This package's module type: a public name that is also the name of a submodule
    (``simulate``) keeps meaning the public object. The import system sets the package
    attribute to a submodule when that is first imported (``from .simulate import ...``
    anywhere); that one assignment is skipped, and the submodule stays in ``sys.modules``."""

    def __setattr__(self, name, value):
        if name in _LAZY and isinstance(value, types.ModuleType) and value.__name__ == f"{__name__}.{name}":
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package


__all__ = ["Probe", "Sweep", "ModelConfig", "probe_current", "floating_potential", "simulate", "fit",
           "FitResult", "FitOptions", "SamplerSettings", "InputError", "ConvergenceWarning", "load_sweep", "compare", "__version__"]
