"""What every command of the command line shares: the parser class, one-line errors, progress bars,
argument types and the image options of the plot commands."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ..errors import NrgInputError

__all__ = ["Parser", "fail", "progress_bar", "positive_int", "image_options", "check_png", "reason",
           "files_named", "OVERWRITE_HINT", "as_flags"]

#: What the command line says about an existing output file.
OVERWRITE_HINT = "use --force to overwrite or choose another --output"


class Parser(argparse.ArgumentParser):
    """Argument errors are one line and exit code 2."""

    def error(self, message):
        self.exit(2, f"nrgsolve: error: {message}\n")


def fail(msg: str) -> int:
    """Print one error line on stderr; exit code 2."""
    print(f"nrgsolve: error: {msg}", file=sys.stderr)
    return 2


def progress_bar(total, quiet, desc, unit="it"):
    """A tqdm bar on stderr, quiet off-terminal or with --quiet."""
    from tqdm import tqdm
    return tqdm(total=total, desc=desc, unit=unit, disable=quiet or not sys.stderr.isatty(), leave=False)


def positive_int(name):
    """argparse type: an integer >= 1 (the message names the flag)."""
    def parse(text):
        try:
            n = int(text)
        except ValueError:
            n = None
        if n is None or n < 1:
            raise argparse.ArgumentTypeError(f"{name}: got {text!r}; allowed: an integer >= 1")
        return n
    return parse


def image_options(parser, default_name: str):
    """The options every plot command shares: --output, --force, --quiet."""
    parser.add_argument("--output", "-o", metavar="PNG",
                        help=f"image file (default: {default_name} here; a PDF is written beside it)")
    parser.add_argument("--force", action="store_true", help="overwrite existing images")
    parser.add_argument("--quiet", "-q", action="store_true", help="print nothing")


def as_flags(exc: NrgInputError, flags: dict, phrases: dict | None = None) -> NrgInputError:
    """The library's message in the command line's words: a leading ``argument:`` becomes its flag,
    and phrases such as "pass force=True" become "use --force"."""
    msg = str(exc)
    for name, flag in flags.items():
        if msg.startswith(name + ":"):
            msg = flag + msg[len(name):]
    for old, new in (phrases or {}).items():
        msg = msg.replace(old, new)
    return NrgInputError(msg)


def files_named(files) -> str:
    return ", ".join(str(f) for f in files)


def reason(exc) -> str:
    return " ".join(str(exc).split())[:200] or exc.__class__.__name__


def check_png(png: Path, force: bool):
    """Fail before any drawing: a wrong name, an existing file or a place that cannot be written."""
    from ..store import check_output_path
    if png.suffix.lower() != ".png":
        raise NrgInputError(f"--output: got {str(png)[:200]!r}; allowed: a file name ending in .png")
    for t in (png, png.with_suffix(".pdf")):
        check_output_path(t, force, name="--output", suffix=".png", create_folder=False, hint=OVERWRITE_HINT)
