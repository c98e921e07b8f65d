"""Sweep ids: the safe file name of an id, and the random seed of a sweep."""
from __future__ import annotations

import hashlib

import numpy as np

from ..io import sanitise_id


def sha8(text: str) -> str:
    """The first 8 hex digits of the SHA-256 of ``text``."""
    return hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:8]


def file_id_for(raw) -> str:
    """The safe file name stem of a sweep id.

    Ids that are already safe are kept; any other id is sanitised and gets the first
    8 hex digits of its SHA-256 appended, so that different ids (``a/b`` and ``a_b``)
    never share a file.
    """
    raw = str(raw)
    s = sanitise_id(raw)
    if s != raw:
        s = sanitise_id(f"{s[:55]}-{sha8(raw)}")
    return s


def sweep_seed(seed: int, sweep_id: str) -> int:
    """The seed of one sweep: a 64-bit integer from ``SeedSequence([seed, sha256(sweep_id)])``.

    Independent of Python's hash randomisation, the executor and the worker count.
    """
    h = int.from_bytes(hashlib.sha256(str(sweep_id).encode("utf-8")).digest()[:8], "big")
    words = np.random.SeedSequence([int(seed), h]).generate_state(2, np.uint32)
    return int(words[0]) << 32 | int(words[1])
