"""bayesprobe: Bayesian analysis of electrostatic (Langmuir) probe I-V sweeps.

Fits a physical forward model of the whole characteristic to every measured point
with MCMC and returns posteriors, diagnostics, model comparison and figures.
"""
from ._version import __version__

from .physics.geometry import Probe
from .sweep import Sweep
from .model import ModelConfig, probe_current, floating_potential
from .simulate import simulate
from .fitting import fit
from .result import FitResult
from .inference.sampler import SamplerSettings
from .errors import InputError


def load_sweep(*args, **kwargs):
    """Read a sweep file (CSV/TSV/text with a header, .npy, .npz); see :func:`bayesprobe.io.load_sweep`."""
    from .io import load_sweep as _load
    return _load(*args, **kwargs)


def compare(results):
    """Compare FitResults of different electron models by PSIS-LOO; see :mod:`bayesprobe.comparison`."""
    from .comparison import compare_models
    return compare_models(results)


__all__ = ["Probe", "Sweep", "ModelConfig", "probe_current", "floating_potential", "simulate", "fit",
           "FitResult", "SamplerSettings", "InputError", "load_sweep", "compare", "__version__"]
