"""Naming things in untrusted files: which column (or array, or field) holds the probe voltage and which
the current, the units written in their names, and :func:`sanitise_id` for names used in file names."""
from __future__ import annotations

import re
from typing import Sequence

import numpy as np

from ._messages import _fail, _show, _show_list

__all__ = ["sanitise_id", "identify_columns", "norm_name"]

_ID_BAD = re.compile(r"[^A-Za-z0-9._-]")
_WINDOWS_RESERVED = {"CON", "PRN", "AUX", "NUL"} | {f"COM{k}" for k in range(1, 10)} | {
    f"LPT{k}" for k in range(1, 10)
}


def sanitise_id(text: object) -> str:
    """Turn any text into a short name that is safe to use in a file name.

    Only ``A-Z a-z 0-9 . _ -`` survive (everything else becomes ``_``), runs
    of dots collapse to one (so ``..`` can never appear), leading dots,
    underscores and dashes are removed, and the result is at most 64
    characters.  An empty result becomes ``"sweep"``.
    """
    s = "" if text is None else str(text)
    s = s[:1024]
    s = _ID_BAD.sub("_", s)
    s = re.sub(r"\.{2,}", ".", s)
    s = re.sub(r"_{2,}", "_", s)
    s = s.lstrip("._-")
    s = s[:64].rstrip("._")
    if not s:
        return "sweep"
    if s.split(".")[0].upper() in _WINDOWS_RESERVED:
        s = ("_" + s)[:64]
    return s


_VOLTAGE_NAMES = {
    "v", "u", "voltage", "volt", "volts", "bias", "v_bias", "vbias", "u_bias",
    "ubias", "bias_voltage", "probe_voltage", "voltage_probe", "v_probe",
    "vprobe", "probe_bias", "u_probe", "v_b", "vb", "potential",
    "probe_potential", "applied_voltage", "sweep_voltage",
}
_CURRENT_NAMES = {
    "i", "current", "i_probe", "iprobe", "probe_current", "current_probe",
    "i_p", "ip", "probe_i", "collected_current", "probe_signal_current",
}

# unit spelling (lower case, micro signs mapped to "u") -> (kind, factor, shown as)
_UNITS = {
    "a": ("A", 1.0, "A"), "amp": ("A", 1.0, "A"), "amps": ("A", 1.0, "A"),
    "ampere": ("A", 1.0, "A"), "amperes": ("A", 1.0, "A"),
    "ma": ("A", 1e-3, "mA"), "ua": ("A", 1e-6, "uA"), "na": ("A", 1e-9, "nA"),
    "pa": ("A", 1e-12, "pA"),
    "v": ("V", 1.0, "V"), "volt": ("V", 1.0, "V"), "volts": ("V", 1.0, "V"),
    "mv": ("V", 1e-3, "mV"), "kv": ("V", 1e3, "kV"),
}
_UNIT_HELP = {"A": "A, mA, uA (or µA), nA or pA", "V": "V, mV or kV"}


def norm_name(text: str) -> str:
    """A column name compared loosely: lower case, white space and dashes as one ``_``, no outer ``_``."""
    s = text.strip().lower()
    s = re.sub(r"[\s\-]+", "_", s)
    return s.strip("_")


def _split_unit(raw: str):
    """Split a header entry into (normalised base name, unit text or None, style)."""
    low = raw.strip().strip("\"'").strip().lower().replace("\u00b5", "u").replace("\u03bc", "u")
    if len(low) > 200:
        return norm_name(low), None, None
    if norm_name(low) in _VOLTAGE_NAMES or norm_name(low) in _CURRENT_NAMES:
        return norm_name(low), None, None
    for close, open_ in (("]", "["), (")", "(")):
        if low.endswith(close):
            k = low.rfind(open_)
            if k > 0:
                return norm_name(low[:k]), low[k + 1: -1].strip().replace(" ", ""), "bracket"
    if "/" in low:
        base, _, unit = low.rpartition("/")
        if unit.strip() in _UNITS and base.strip():
            return norm_name(base), unit.strip(), "slash"
    idx = max(low.rfind(" "), low.rfind("_"), low.rfind("-"))
    if idx > 0 and low[idx + 1:] in _UNITS:
        return norm_name(low[:idx]), low[idx + 1:], "suffix"
    return norm_name(low), None, None


def _role_of(base: str):
    if base in _VOLTAGE_NAMES:
        return "V"
    if base in _CURRENT_NAMES:
        return "A"
    return None


def _unit_factor(raw: str, unit, kind: str, where: str):
    """Return (factor, shown unit) for a column of the given kind ("V" or "A")."""
    if unit is None or unit == "":
        return 1.0, _UNITS["v" if kind == "V" else "a"][2]
    info = _UNITS.get(unit)
    quantity = "voltage" if kind == "V" else "current"
    if info is None:
        raise _fail(
            f"{where}: unrecognised unit {_show(unit, 20)} in the {quantity} column {_show(raw, 40)}; "
            f"write the unit as one of {_UNIT_HELP[kind]}"
        )
    if info[0] != kind:
        raise _fail(
            f"{where}: the {quantity} column {_show(raw, 40)} carries the unit {_show(info[2], 10)}, "
            f"which is not a {quantity} unit; use one of {_UNIT_HELP[kind]} or name the right column explicitly"
        )
    return info[1], info[2]


def _find_explicit(names: Sequence[str], wanted, role: str, where: str) -> int:
    quantity = "voltage" if role == "V" else "current"
    if isinstance(wanted, (bool, np.bool_)):
        raise _fail(f"{where}: the {quantity} column must be given as a name or a 0-based index")
    if isinstance(wanted, (int, np.integer)):
        k = int(wanted)
        if k < 0:
            k += len(names)
        if not 0 <= k < len(names):
            raise _fail(
                f"{where}: {quantity} column index {int(wanted)} is out of range for {len(names)} "
                f"columns; use an index from 0 to {len(names) - 1}"
            )
        return k
    target = str(wanted).strip().lower()
    for k, name in enumerate(names):
        if name.strip().strip("\"'").strip().lower() == target:
            return k
    target_norm = norm_name(target.replace("\u00b5", "u").replace("\u03bc", "u"))
    for k, name in enumerate(names):
        if _split_unit(name)[0] == target_norm:
            return k
    if target.isdigit() and target.isascii():  # an index given as text, e.g. from a command line
        return _find_explicit(names, int(target), role, where)
    raise _fail(
        f"{where}: no {quantity} column named {_show(wanted, 40)}; the columns are "
        f"{_show_list(list(names))} - name one of these"
    )


def identify_columns(names: Sequence[str], voltage_column, current_column, where: str, what="column"):
    """Pick the voltage and current columns among ``names``; return ``(iv, ic, fv, fi, notes)``.

    ``iv``/``ic`` are 0-based indices, ``fv``/``fi`` the factors to SI (V, A) read from the units in
    the names, ``notes`` the conversions made.  ``voltage_column``/``current_column`` (a name or an
    index, or None to recognise the usual names) choose explicitly; ``what`` names the things being
    chosen in messages (``"column"``, ``"array"``, ``"field"``).  Raises a one-line InputError.
    """
    parsed = [_split_unit(n) for n in names]
    chosen = {}
    for role, wanted in (("V", voltage_column), ("A", current_column)):
        if wanted is not None:
            chosen[role] = _find_explicit(names, wanted, role, where)
    for role in ("V", "A"):
        if role in chosen:
            continue
        taken = set(chosen.values())
        cands = [k for k, p in enumerate(parsed) if _role_of(p[0]) == role and k not in taken]
        quantity = "voltage" if role == "V" else "current"
        if not cands:
            raise _fail(
                f"{where}: no {what} is recognisable as the probe {quantity} (the {what}s are "
                f"{_show_list(list(names))}); call them 'voltage' and 'current' (units such as "
                f"'current [mA]' are allowed) or name the {quantity} {what} explicitly"
            )
        if len(cands) > 1:
            raise _fail(
                f"{where}: several {what}s could be the probe {quantity} "
                f"({_show_list([names[k] for k in cands])}); name the {quantity} {what} explicitly"
            )
        chosen[role] = cands[0]
    iv, ic = chosen["V"], chosen["A"]
    if iv == ic:
        raise _fail(
            f"{where}: the same {what} {_show(names[iv], 40)} was chosen for voltage and current; "
            f"name two different {what}s"
        )
    notes = []
    factors = []
    for role, k in (("V", iv), ("A", ic)):
        base, unit, style = parsed[k]
        if style == "bracket" and unit not in _UNITS and _role_of(base) is None:
            # an explicitly chosen column such as "Ch2 (raw)": brackets are not a unit
            unit = None
        factor, shown = _unit_factor(names[k], unit, role, where)
        factors.append(factor)
        if factor != 1.0:
            quantity = "voltage" if role == "V" else "current"
            si = "V" if role == "V" else "A"
            notes.append(f"{quantity} {what} {_show(names[k], 40)} converted from {shown} to {si}")
    return iv, ic, factors[0], factors[1], notes


# the names used before these two helpers were public (kept for existing imports)
_norm_name = norm_name
_identify_columns = identify_columns
