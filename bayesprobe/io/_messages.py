"""One-line error messages about untrusted input: quoting user text safely and building the InputError."""
from __future__ import annotations

import re
from typing import Sequence

from ..errors import InputError

_CONTROL_CHARS = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def _show(text: object, limit: int = 80) -> str:
    """Quote user-supplied text for a one-line message (control chars hidden)."""
    s = _CONTROL_CHARS.sub("?", str(text))
    if len(s) > limit:
        s = s[: limit - 3] + "..."
    return "'" + s + "'"


def _fail(message: str) -> InputError:
    """Build an InputError whose message is guaranteed to be one line."""
    return InputError(" ".join(message.split()))


def _show_list(names: Sequence[str], limit: int = 8) -> str:
    shown = ", ".join(_show(n, 40) for n in names[:limit])
    if len(names) > limit:
        shown += f", ... ({len(names)} in all)"
    return shown
