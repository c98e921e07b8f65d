"""One-line messages: user text shown safely, and the InputError every batch problem becomes."""
from __future__ import annotations

import re

from ..errors import InputError

_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def one_line(text, limit: int = 500) -> str:
    """``text`` on one line (control characters and runs of white space become one space), capped."""
    s = " ".join(_CONTROL.sub(" ", str(text)).split())
    return s if len(s) <= limit else s[: limit - 3] + "..."


def show(text, limit: int = 80) -> str:
    """``text`` quoted for a message: control characters replaced, capped."""
    s = _CONTROL.sub("?", str(text))
    return "'" + (s if len(s) <= limit else s[: limit - 3] + "...") + "'"


def fail(msg: str) -> InputError:
    """The InputError of ``msg`` (one line)."""
    return InputError(one_line(msg, 2000))
