"""Exception classes of nrgsolve.

Every error that a user can cause with bad input derives from
:class:`NrgInputError`; the command line turns it into a one-line message and
exit code 2.  Errors that indicate a numerical breakdown derive from
:class:`NrgNumericalError`.
"""

from __future__ import annotations

__all__ = ["NrgError", "NrgInputError", "ConfigError", "TableError", "NrgNumericalError"]


class NrgError(Exception):
    """Base class of all nrgsolve errors."""


class NrgInputError(NrgError, ValueError):
    """Bad user input: the message names the parameter and the allowed range."""


class ConfigError(NrgInputError):
    """A config file has an unknown key, a wrong type or an out-of-range value."""


class TableError(NrgInputError):
    """A hybridization table file cannot be read or is malformed (message names file and line)."""


class NrgNumericalError(NrgError, ArithmeticError):
    """The numerics broke down (NaN in the chain, truncation impossible, ...)."""
