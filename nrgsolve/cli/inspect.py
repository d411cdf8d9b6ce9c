"""``nrgsolve inspect``: what a result file holds, in plain text."""

from __future__ import annotations

import sys

from ..errors import NrgInputError
from .common import reason

__all__ = ["add_command", "cmd_inspect"]


def cmd_inspect(args) -> int:
    """Print what a result file holds."""
    from ..inspect_result import describe
    from ..store import read_result

    stored = read_result(args.file)
    try:
        text = describe(stored)
    except (KeyError, IndexError, TypeError, ValueError, AttributeError) as exc:
        raise NrgInputError(f"{args.file}: not a valid result file ({reason(exc)})") from None
    sys.stdout.write(text)
    return 0


def add_command(sub) -> None:
    """Register ``inspect``."""
    i = sub.add_parser("inspect", help="show provenance, config, summary and diagnostics of a result file")
    i.add_argument("file", help="result file (.h5)")
    i.set_defaults(func=cmd_inspect)
