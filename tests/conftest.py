"""Shared test set-up: ``tests/`` on the import path so test modules can use ``cases``
(the shared case generators) whatever directory pytest is started from."""
import sys
from pathlib import Path

_TESTS = str(Path(__file__).resolve().parent)
if _TESTS not in sys.path:
    sys.path.insert(0, _TESTS)
