"""The measured sweep as a value object."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Sweep"]


@dataclass
class Sweep:
    """One I-V sweep in SI units, electron current positive, sorted by voltage.

    Attributes
    ----------
    voltage : ndarray, shape (n,)
        Probe bias in V, increasing.
    current : ndarray, shape (n,)
        Probe current in A, electron collection positive.
    sweep_id : str
        A short name (file stem by default), safe for file names.
    source : str
        Where the sweep came from (path or "array").
    notes : list of str
        What the reader did (sign flip, rows dropped, unit conversion).
    sign_flipped : bool
        True if the file used the ion-current-positive convention and was flipped.
    """

    voltage: np.ndarray
    current: np.ndarray
    sweep_id: str = "sweep"
    source: str = "array"
    notes: list = field(default_factory=list)
    sign_flipped: bool = False

    def __post_init__(self):
        self.voltage = np.asarray(self.voltage, dtype=float)
        self.current = np.asarray(self.current, dtype=float)
        if self.voltage.ndim != 1 or self.voltage.shape != self.current.shape:
            raise ValueError("voltage and current must be 1-D arrays of the same length")

    @property
    def n_points(self) -> int:
        return int(self.voltage.size)
