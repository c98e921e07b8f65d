"""Command line: ``bayesprobe {demo,fit,simulate,batch,report}``.

Exit status: 0 success; 2 unusable input or options (one line on stderr, no
traceback, nothing written); 3 the fit ran but did not converge (results written,
``converged: false``).

Layout: :mod:`.arguments` (argument types), :mod:`.parser` (the parsers),
:mod:`.commands` (what each command does). Importing this package imports no numerical
library: ``--help`` and option errors stay fast.
"""
from __future__ import annotations

import os
import sys

from ..errors import InputError
from . import commands
from .commands import EXIT_INPUT, EXIT_NOT_CONVERGED, EXIT_OK
from .parser import build_parser

__all__ = ["main", "build_parser", "EXIT_OK", "EXIT_INPUT", "EXIT_NOT_CONVERGED"]


def main(argv=None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if args.command is None:
            parser.print_help()
            return EXIT_OK
        return getattr(commands, f"cmd_{args.command}")(args)
    except InputError as exc:
        print(f"error: {' '.join(str(exc).split())}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("interrupted; nothing was written to the output folder", file=sys.stderr)
        return 130
    except Exception as exc:                      # a bug, not the user's fault: still one line
        if os.environ.get("BAYESPROBE_DEBUG"):
            raise
        print(f"error: unexpected {type(exc).__name__}: {' '.join(str(exc).split())} "
              "(set BAYESPROBE_DEBUG=1 for a traceback and please report it)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
