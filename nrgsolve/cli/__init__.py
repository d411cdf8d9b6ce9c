"""The ``nrgsolve`` command line: parses, calls the library and reports; no physics here.

One module per command: :mod:`.run`, :mod:`.sweep`, :mod:`.plot`, :mod:`.inspect`; what they share is
in :mod:`.common`.  Every input error (bad config, bad file, bad range, existing output) is one line on
stderr and exit code 2; nothing is written.
"""

from __future__ import annotations

import sys

from ..errors import NrgInputError, NrgNumericalError
from .common import Parser, fail
from . import inspect as _inspect, plot as _plot, run as _run, sweep as _sweep

__all__ = ["main", "build_parser"]


def build_parser() -> Parser:
    """The parser of every command."""
    p = Parser(prog="nrgsolve", description="Numerical renormalization group solver for quantum impurity models.")
    from .. import __version__
    p.add_argument("--version", action="version", version=f"nrgsolve {__version__}")
    sub = p.add_subparsers(dest="command", parser_class=Parser)
    sub.required = True
    for module in (_run, _sweep, _plot, _inspect):
        module.add_command(sub)
    return p


def main(argv=None) -> int:
    """Run one command; the exit code (0 success, 1 failure, 2 bad input, 130 Ctrl-C, 128 + signal)."""
    try:
        return _main(argv)
    except KeyboardInterrupt:         # also while the numerical libraries are still being imported
        print("nrgsolve: error: interrupted; no output written", file=sys.stderr)
        return 130


def _main(argv) -> int:
    from ..workers import Terminated, WorkerDied, install_termination_handler

    install_termination_handler()      # SIGTERM/SIGHUP end the run like Ctrl-C: workers stopped, nothing written
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except NrgInputError as exc:
        return fail(str(exc))
    except NrgNumericalError as exc:
        return fail(f"numerical problem: {exc}")
    except WorkerDied as exc:
        print(f"nrgsolve: error: {exc}; no output written", file=sys.stderr)
        return 1
    except Terminated as exc:
        print(f"nrgsolve: error: terminated (signal {exc.signum}); no output written", file=sys.stderr)
        return 128 + exc.signum
    except KeyboardInterrupt:
        print("nrgsolve: error: interrupted; no output written", file=sys.stderr)
        return 130




if __name__ == "__main__":
    sys.exit(main())
