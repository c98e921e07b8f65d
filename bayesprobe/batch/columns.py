"""The per-sweep records read back into one table, held column-wise in typed buffers
(a few hundred bytes per sweep, so a million sweeps fit in the parent)."""
from __future__ import annotations

import math
import re
import sys
from array import array
from pathlib import Path

import numpy as np

from ..schema import RESULTS_FIXED, RESULTS_STATS
from ..io import sanitise_id
from ..quantities import table_names
from ._messages import one_line
from .loaders import MAX_COORDS
from .records import finite_or_none, read_record

#: the parameters reported in the tables (those present in any sweep)
#: (registry flag ``table``; distortion parameters are present only when that distortion is modelled)
TABLE_PARAMETERS = table_names()

STR_COLS = ("sweep_id", "label", "source", "status", "reason", "model", "engine")
INT_COLS = ("index", "n_points", "n_steps", "n_draws")          # -1: missing
FLOAT_COLS = ("credible_level", "r_hat_max", "ess_bulk_min", "tau_max", "khat")
#: the fixed columns of results.csv, in order (the sweep coordinates follow ``index``)
FIXED = RESULTS_FIXED
STATS = RESULTS_STATS
_TYPECODES = {"d": np.float64, "q": np.int64, "b": np.int8, "Q": np.uint64}
_UNREADABLE = {"status": "failed",
               "reason": "the result record of this sweep is unreadable; delete it and rerun to fit it again"}


def _nan(v):
    x = finite_or_none(v)
    return math.nan if x is None else x


def _dict(d, key) -> dict:
    v = d.get(key)
    return v if isinstance(v, dict) else {}


def natural_key(s: str):
    """Sort key putting ``s2`` before ``s10``."""
    return [(0, int(t), "") if t.isdigit() else (1, 0, t) for t in re.split(r"(\d+)", s) if t] + [(2, 0, s)]


class Columns:
    """The table held column-wise in typed buffers."""

    def __init__(self):
        self.n = 0
        self.s = {k: [] for k in STR_COLS}
        self.i = {k: array("q") for k in INT_COLS}
        self.f = {k: array("d") for k in FLOAT_COLS}
        self.converged = array("b")             # -1 no fit, 0, 1
        self.seed = array("Q")
        self.params: dict = {}                  # (name, stat) -> array("d")
        self.units: dict = {}
        self.coords: dict = {}                  # name -> array("d")

    def _padded(self, store, key):
        if key not in store:
            store[key] = array("d", [math.nan]) * self.n
        return store[key]

    def add(self, sid: str, rec: dict | None):
        """Append the row of sweep ``sid`` from its record (None: unreadable)."""
        rec = rec or _UNREADABLE
        s = _dict(rec, "summary")
        d, sw = _dict(s, "diagnostics"), _dict(s, "sweep")
        text = {"sweep_id": sid, "label": rec.get("label"), "source": rec.get("source"), "status": rec.get("status"),
                "reason": rec.get("reason"), "model": s.get("model"), "engine": d.get("engine")}
        for k in STR_COLS:
            v = text[k]
            self.s[k].append(sys.intern(one_line(v, 1000)) if v is not None else "")
        ints = {"index": rec.get("index"), "n_points": sw.get("n_points"), "n_steps": d.get("n_steps"),
                "n_draws": d.get("n_draws")}
        for k in INT_COLS:
            v = ints[k]
            ok = isinstance(v, int) and not isinstance(v, bool) and 0 <= v < 2**62
            self.i[k].append(v if ok else -1)
        floats = {"credible_level": s.get("credible_level"), **{k: d.get(k) for k in FLOAT_COLS[1:]}}
        for k in FLOAT_COLS:
            self.f[k].append(_nan(floats[k]))
        conv = d.get("converged")
        self.converged.append(-1 if conv is None else int(bool(conv)))
        seed = rec.get("seed")
        self.seed.append(seed if isinstance(seed, int) and 0 <= seed < 2**64 else 0)
        self._add_parameters(_dict(s, "parameters"))
        self._add_coords(_dict(rec, "coords"))
        self.n += 1

    def _add_parameters(self, params: dict):
        for name in TABLE_PARAMETERS:
            if isinstance(params.get(name), dict):
                self.units.setdefault(name, str(params[name].get("unit", "")))
                for st in STATS:
                    self._padded(self.params, (name, st))
        for (name, st), col in self.params.items():
            e = params.get(name)
            col.append(_nan(e.get(st)) if isinstance(e, dict) else math.nan)

    def _add_coords(self, coords: dict):
        coords = {sanitise_id(k)[:32]: v for k, v in list(coords.items())[:MAX_COORDS]}
        for cname in coords:
            self._padded(self.coords, cname)
        for cname, col in self.coords.items():
            col.append(_nan(coords.get(cname)))

    def parameters(self):
        """The table parameters present in any sweep, in registry order."""
        return [p for p in TABLE_PARAMETERS if (p, "median") in self.params]

    def value(self, k: str, j: int):
        """Fixed column ``k`` of row ``j`` (None where missing)."""
        if k in self.s:
            return self.s[k][j]
        if k in self.i:
            v = self.i[k][j]
            return None if v < 0 else v
        if k in self.f:
            return self.f[k][j]
        if k == "converged":
            c = self.converged[j]
            return None if c < 0 else bool(c)
        return self.seed[j]

    def np(self, buf):
        """A typed buffer as a NumPy array (a copy)."""
        dtype = _TYPECODES[buf.typecode]
        return np.frombuffer(buf, dtype=dtype, count=self.n).copy() if self.n else np.zeros(0, dtype)


def read_columns(out: Path) -> Columns:
    """Every record of ``out/sweeps``, in natural order of the sweep ids."""
    sweeps_dir = out / "sweeps"
    names = sorted((p.stem for p in sweeps_dir.glob("*.json") if not p.name.startswith(".")), key=natural_key)
    cols = Columns()
    for sid in names:
        cols.add(sid, read_record(sweeps_dir / f"{sid}.json"))
    return cols
