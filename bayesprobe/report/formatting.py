"""HTML pieces of the report: escaping, traced numbers, units, labels, small cells.

Every string read from a results folder is untrusted and goes through :func:`_e`; HTML
markup comes only from this module and the quantity registry (:func:`~bayesprobe.quantities.html_label`).
Numbers are written as ``<data value="full precision">shown</data>`` so each can be traced to
the file it came from.
"""
from __future__ import annotations

import html
import json
import math
import re
import struct

from ..quantities import QUANTITIES, html_label

#: longest string taken from a file that is shown (characters)
MAX_TEXT = 2000
_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")


def _e(text, limit: int = MAX_TEXT) -> str:
    """HTML-escape untrusted text (control characters hidden, length capped)."""
    s = _CONTROL.sub("?", str(text))
    if len(s) > limit:
        s = s[: limit - 1] + "\u2026"
    return html.escape(s, quote=True)


def _num(v):
    """A finite float from a JSON/CSV value, or None (bools and strings other than numbers are not numbers)."""
    if isinstance(v, bool) or v is None:
        return None
    if isinstance(v, (int, float)):
        x = float(v)
    elif isinstance(v, str):
        try:
            x = float(v.strip())
        except ValueError:
            return None
    else:
        return None
    return x if math.isfinite(x) else None


def _dict(v) -> dict:
    return v if isinstance(v, dict) else {}


def _list(v) -> list:
    return v if isinstance(v, list) else []


def _natural_key(s: str):
    return [(0, int(t), "") if t.isdigit() else (1, 0, t) for t in re.split(r"(\d+)", s) if t] + [(2, 0, s)]


def _sig_digits(value, lo=None, hi=None) -> int:
    """Significant digits that show the shorter side of an interval to two digits (3 to 8)."""
    widths = [w for w in ((value - lo) if lo is not None else None, (hi - value) if hi is not None else None)
              if w is not None and w > 0]
    if not widths or value == 0:
        return 4
    w = min(widths)
    digits = math.floor(math.log10(abs(value))) - math.floor(math.log10(w)) + 2
    return int(min(8, max(3, digits)))


def _mantissa_html(text: str) -> str:
    """'1.234e+16' -> '1.234 &times; 10<sup>16</sup>'; plain numbers unchanged."""
    if "e" not in text:
        return text
    mant, exp = text.split("e")
    return f"{mant}&#8239;&times;&#8239;10<sup>{int(exp)}</sup>"     # narrow no-break spaces


def _format(x: float, digits: int) -> str:
    if x == 0:
        return "0"
    exp = math.floor(math.log10(abs(x)))
    if -3 <= exp < 5:
        decimals = max(0, digits - 1 - exp)
        text = f"{x:.{decimals}f}"
        if float(text) != 0 and abs(float(text)) >= 10 ** 5:     # rounded up past the range
            text = f"{x:.{digits - 1}e}"
        return text
    return f"{x:.{digits - 1}e}"


def _n(v, digits: int = 4, *, fixed: int | None = None, shortest: bool = False) -> str:
    """A number from a results file as <data value=full precision>formatted</data>; '–' if missing.

    ``digits`` significant digits (trailing zeros kept, they show the precision), or
    ``fixed`` decimals, or with ``shortest`` up to ``digits`` significant digits without
    trailing zeros (settings such as 0.9 or 1e-4).
    """
    x = _num(v)
    if x is None:
        return '<span class="na" title="not available">&ndash;</span>'
    if isinstance(v, int) and not isinstance(v, bool) and abs(v) < 10 ** 40:     # counts, seeds: exact
        return f'<data value="{v}">{v}</data>'
    if fixed is not None:
        shown = f"{x:.{fixed}f}"
    elif shortest:
        shown = f"{x:.{digits}g}".replace("e+", "e")
        if "e" in shown:
            m, ex = shown.split("e")
            shown = f"{m}e{int(ex)}"
    else:
        shown = _format(x, digits)
    return f'<data value="{x!r}" title="{x!r}">{_mantissa_html(shown)}</data>'


def _unit(u) -> str:
    """Unit string as HTML: 'm^-3' -> m<sup>-3</sup>; '1' -> dimensionless dash."""
    if u is None or u == "":
        return ""
    s = str(u)
    if s == "1":
        return '<span class="dimless" title="dimensionless">1</span>'
    return re.sub(r"\^(-?\d+)", lambda m: f"<sup>{m.group(1).replace('-', '&minus;')}</sup>", _e(s, 40))


def _symbol(name: str) -> str:
    return html_label(name) or _e(name, 80)


def _name_cell(name: str, description: str | None = None) -> str:
    desc = f'<span class="desc">{_e(description, 200)}</span>' if description else ""
    return f'<th scope="row">{_symbol(name)} <code>{_e(name, 80)}</code>{desc}</th>'


def _pct(level) -> str:
    x = _num(level)
    return "?" if x is None else f"{100 * x:g}&nbsp;%"


def _yesno(v) -> str:
    if v is True:
        return '<span class="yes">yes</span>'
    if v is False:
        return '<span class="no">no</span>'
    return '<span class="na">&ndash;</span>'


def _value(v) -> str:
    """Any JSON scalar as HTML (numbers traced, strings escaped); booleans as plain yes/no."""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if v is None:
        return '<span class="na">&ndash;</span>'
    if isinstance(v, (int, float)):
        return _n(v, 6, shortest=True)
    if isinstance(v, (list, tuple)):
        return ", ".join(_value(x) for x in v[:50]) or "&ndash;"
    if isinstance(v, dict):
        return _e(json.dumps(v, sort_keys=True)[:MAX_TEXT])
    return _e(v)


def _flatten(d: dict, prefix: str = "") -> list[tuple[str, object]]:
    out = []
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out += _flatten(v, key + ".")
        else:
            out.append((key, v))
    return out


def _png_size(data: bytes):
    """(width, height) from a PNG's IHDR chunk, or None if the bytes are not a PNG."""
    if len(data) < 24 or not data.startswith(_PNG_MAGIC) or data[12:16] != b"IHDR":
        return None
    w, h = struct.unpack(">II", data[16:24])
    return (w, h) if 0 < w < 100_000 and 0 < h < 100_000 else None



def _status_badge(status: str) -> str:
    text = {"ok": "converged", "not-converged": "not converged", "failed": "failed"}.get(status, status)
    cls = status if status in ("ok", "not-converged", "failed") else "failed"
    return f'<span class="badge {cls}">{_e(text, 40)}</span>'


def _interval(e: dict, digits: int) -> str:
    return f"[{_n(e.get('ci_low'), digits)}, {_n(e.get('ci_high'), digits)}]"


def _digits_of(e: dict) -> int:
    """Significant digits for a summary entry (median and interval)."""
    med = _num(e.get("median"))
    return _sig_digits(med, _num(e.get("ci_low")), _num(e.get("ci_high"))) if med is not None else 4


_NAMES = re.compile(r"(?<![A-Za-z0-9_])(" + "|".join(sorted(map(re.escape, QUANTITIES), key=len, reverse=True))
                    + r")(?![A-Za-z0-9_])")


def _labelled(text, limit: int = MAX_TEXT) -> str:
    """Untrusted text escaped, with registry quantity names (T_e, n_i_over_n_e ...) shown as
    their registry HTML labels: the only markup added comes from the registry."""
    return _NAMES.sub(lambda m: html_label(m.group(1)) or m.group(1), _e(text, limit))
