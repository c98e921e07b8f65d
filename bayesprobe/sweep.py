"""The measured sweep as a value object, and the detection of up/down sweep branches."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Sweep", "detect_branches", "MIN_BRANCH_POINTS"]

#: each sweep direction must hold at least this many points to count as a branch
MIN_BRANCH_POINTS = 10


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
    direction : ndarray of int8, shape (n,), optional
        For a file holding both sweep directions: +1 where the point was recorded
        while the bias rose, -1 while it fell (see :func:`detect_branches`);
        ``None`` for a one-directional sweep.
    ramp : ndarray, shape (n,), optional
        dV/dt at each point divided by the mean |dV/dt| (uniform sampling in time
        assumed), with sign; present together with ``direction``.
    record_order : ndarray of int, shape (n,), optional
        Position of each (sorted) point in the recorded sequence.
    """

    voltage: np.ndarray
    current: np.ndarray
    sweep_id: str = "sweep"
    source: str = "array"
    notes: list = field(default_factory=list)
    sign_flipped: bool = False
    direction: np.ndarray | None = None
    ramp: np.ndarray | None = None
    record_order: np.ndarray | None = None

    def __post_init__(self):
        self.voltage = np.asarray(self.voltage, dtype=float)
        self.current = np.asarray(self.current, dtype=float)
        if self.voltage.ndim != 1 or self.voltage.shape != self.current.shape:
            raise ValueError("voltage and current must be 1-D arrays of the same length")
        if (self.direction is None) != (self.ramp is None):
            raise ValueError("direction and ramp come together (both arrays or both None)")
        if self.direction is not None:
            self.direction = np.asarray(self.direction, dtype=np.int8)
            self.ramp = np.asarray(self.ramp, dtype=float)
            if self.direction.shape != self.voltage.shape or self.ramp.shape != self.voltage.shape:
                raise ValueError("direction and ramp must have one value per point")
            if not np.all(np.isin(self.direction, (-1, 1))):
                raise ValueError("direction must be +1 (rising bias) or -1 (falling bias) at every point")
        if self.record_order is not None:
            self.record_order = np.asarray(self.record_order, dtype=np.intp)
            if self.record_order.shape != self.voltage.shape:
                raise ValueError("record_order must have one value per point")

    @property
    def n_points(self) -> int:
        return int(self.voltage.size)

    @property
    def branches(self):
        """``(direction, ramp)`` when the sweep holds both directions, else ``None``."""
        return None if self.direction is None else (self.direction, self.ramp)

    def in_record_order(self):
        """Voltage and current in the order they were recorded (sorted order if unknown)."""
        if self.record_order is None:
            return self.voltage, self.current
        order = np.argsort(self.record_order, kind="stable")
        return self.voltage[order], self.current[order]


def detect_branches(voltage, min_points: int = MIN_BRANCH_POINTS):
    """Rising/falling labels of a sweep given in recorded order, or ``None``.

    The recorded voltages are cut into monotone runs (steps of zero inherit the run
    they sit in). The sweep counts as holding both directions when rising and falling
    points each number at least ``min_points`` and every run has at least
    ``min_points`` points (so a shuffled or jittering file is not mistaken for a
    hysteresis loop). Each point takes the direction of the step that led to it (the
    first point that of the first step). ``ramp`` is the central-difference
    dV/d(sample) divided by its mean magnitude: for a triangular sweep +-1, for a
    sinusoidal one it follows the cosine (uniform sampling in time assumed).

    Returns ``(direction, ramp)`` in recorded order, or ``None``.
    """
    v = np.asarray(voltage, dtype=float)
    if v.ndim != 1 or v.size < 2 * min_points:
        return None
    d = np.sign(np.diff(v))
    if not (np.any(d > 0) and np.any(d < 0)):
        return None
    # fill zero steps with the previous non-zero direction (the first ones with the next)
    nz = np.flatnonzero(d)
    idx = np.maximum.accumulate(np.where(d != 0, np.arange(d.size), -1))
    idx = np.where(idx < 0, nz[0], idx)
    d = d[idx]
    step_dir = np.concatenate([d[:1], d])                 # direction of the step leading to each point
    starts = np.flatnonzero(np.diff(step_dir) != 0) + 1
    bounds = np.concatenate([[0], starts, [v.size]])
    if np.min(np.diff(bounds)) < min_points:
        return None
    if np.count_nonzero(step_dir > 0) < min_points or np.count_nonzero(step_dir < 0) < min_points:
        return None
    slope = np.gradient(v)
    mean = float(np.mean(np.abs(slope)))
    if not mean > 0:
        return None
    return step_dir.astype(np.int8), slope / mean
