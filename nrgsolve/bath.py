"""Hybridization functions of the conduction bath on the band [−D, D].

The hybridization function of the impurity is written

.. math::

    \\Gamma(\\varepsilon) = \\Gamma \\, g(\\varepsilon),

where the prefactor Γ (units of D) belongs to the impurity model and the
dimensionless *shape* :math:`g(\\varepsilon) \\ge 0` belongs to the bath and
lives here.  Energies are absolute energies in units of the half-bandwidth D
(D = 1 by default); the Fermi level is at ε = 0.  Shapes:

``"flat"``
    :math:`g = 1` for :math:`|\\varepsilon| \\le D` (constant density of states
    ρ = 1/(2D) per spin).
``"semicircular"``
    :math:`g = \\sqrt{1 - (\\varepsilon/D)^2}`, the Bethe-lattice density of
    states normalised so that g(0) = 1.
``"power-law"``
    :math:`g = |\\varepsilon/D|^r` with r ≥ 0 (pseudogap for r > 0).
``"table"``
    piecewise-linear interpolation of tabulated values (:func:`read_table`),
    zero outside the tabulated range.  The band of a table is
    D = max(|ε_min|, |ε_max|); the table may be particle-hole asymmetric.

All shapes vanish outside [−D, D].  The cumulative integral
:meth:`Bath.cumulative` is evaluated in closed form for every shape (exactly,
for the piecewise-linear table), with full *relative* accuracy for tiny |ε|,
which the logarithmic discretization needs down to ε ~ D Λ^{-100}.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from .errors import NrgInputError, TableError

__all__ = ["SHAPES", "MIN_TABLE_POINTS", "Bath", "make_bath", "read_table"]

#: The bath shapes that :class:`Bath` understands.
SHAPES = ("flat", "semicircular", "power-law", "table")

#: Smallest number of (ε, g) points a table may have.
MIN_TABLE_POINTS = 5

# Relative tolerance of the particle-hole symmetry test of a table.
_SYMMETRY_RTOL = 1e-12


@dataclass(frozen=True)
class Bath:
    """Shape g(ε) of the hybridization function Γ(ε) = Γ·g(ε).

    Construct it with :func:`make_bath` or :func:`read_table`; the constructor
    validates its input as well.

    Parameters
    ----------
    shape : {"flat", "semicircular", "power-law", "table"}
        Functional form of g (see the module docstring).
    half_bandwidth : float, optional
        D > 0, units of the energy unit (D = 1 by default).  For a table it is
        derived from the table, D = max(|ε_min|, |ε_max|), and the given value
        is replaced.
    exponent : float, optional
        r ≥ 0 of the power law g = |ε/D|^r; ignored for other shapes.
    table_energy : tuple of float or None
        Strictly increasing energies ε_k (absolute, units of D) of a table,
        with ε_0 < 0 < ε_last.  Only for ``shape="table"``.
    table_value : tuple of float or None
        Values g(ε_k) ≥ 0, same length as `table_energy`.
    source : str, optional
        Where the table came from (a file name), used in messages.

    Raises
    ------
    NrgInputError
        Unknown shape, D ≤ 0 or not finite, r < 0 or not finite for a
        power law, table fields given for a non-table shape.
    TableError
        Malformed table data (see :func:`read_table` for the rules).
    """

    shape: str
    half_bandwidth: float = 1.0
    exponent: float = 0.0
    table_energy: tuple | None = None
    table_value: tuple | None = None
    source: str = ""

    def __post_init__(self):
        if self.shape not in SHAPES:
            raise NrgInputError(
                f"bath.shape: unknown shape {self.shape!r}; allowed: " + ", ".join(f'"{s}"' for s in SHAPES))
        if self.shape == "table":
            if self.table_energy is None or self.table_value is None:
                raise NrgInputError("bath.table: shape \"table\" needs table_energy and table_value")
            energy, value = _check_table_points(self.table_energy, self.table_value,
                                                self.source or "bath.table", lines=None)
            object.__setattr__(self, "table_energy", tuple(float(x) for x in energy))
            object.__setattr__(self, "table_value", tuple(float(x) for x in value))
            object.__setattr__(self, "half_bandwidth", float(max(-energy[0], energy[-1])))
            return
        if self.table_energy is not None or self.table_value is not None:
            raise NrgInputError(
                f"bath.table: a table is only allowed with bath.shape = \"table\" (got {self.shape!r})")
        d = self.half_bandwidth
        if not _is_real(d) or not math.isfinite(d) or d <= 0:
            raise NrgInputError(f"bath.half_bandwidth: must be a finite number > 0, got {d!r}")
        if self.shape == "power-law":
            r = self.exponent
            if not _is_real(r) or not math.isfinite(r) or r < 0:
                raise NrgInputError(f"bath.exponent: power-law exponent r must be finite and >= 0, got {r!r}")
        object.__setattr__(self, "half_bandwidth", float(d))
        object.__setattr__(self, "exponent", float(self.exponent) if _is_real(self.exponent) else 0.0)

    # ------------------------------------------------------------------ #
    @cached_property
    def _table(self):
        """Segments of the table, split at ε = 0 (private cache).

        Returns nodes x_k (0 inserted), values g_k, slopes s_k of each
        segment, and the cumulative integral C_k = ∫_0^{x_k} g at the nodes.
        """
        x = np.asarray(self.table_energy, dtype=float)
        v = np.asarray(self.table_value, dtype=float)
        if not np.any(x == 0.0):
            k = int(np.searchsorted(x, 0.0))
            g0 = v[k - 1] + (v[k] - v[k - 1]) * (0.0 - x[k - 1]) / (x[k] - x[k - 1])
            x = np.insert(x, k, 0.0)
            v = np.insert(v, k, g0)
        slope = np.diff(v) / np.diff(x)
        seg = 0.5 * (v[1:] + v[:-1]) * np.diff(x)       # exact trapezoid = exact integral
        k0 = int(np.flatnonzero(x == 0.0)[0])
        cum = np.empty(len(x))
        # Positive side accumulated upward from 0, negative side downward, so
        # that small |ε| keeps full relative accuracy.
        cum[k0:] = np.concatenate([[0.0], np.cumsum(seg[k0:])])
        cum[:k0] = -np.cumsum(seg[:k0][::-1])[::-1]
        return x, v, slope, cum, k0

    def shape_function(self, eps):
        """Dimensionless shape g(ε) of the hybridization function.

        Parameters
        ----------
        eps : array_like
            Energies, units of D; any shape.

        Returns
        -------
        numpy.ndarray
            g(ε) ≥ 0, same shape as `eps`; 0 outside [−D, D] (outside the
            tabulated range for a table).
        """
        e = np.asarray(eps, dtype=float)
        d = self.half_bandwidth
        inside = np.abs(e) <= d
        if self.shape == "flat":
            return np.where(inside, 1.0, 0.0)
        if self.shape == "semicircular":
            u = np.clip(e / d, -1.0, 1.0)
            return np.where(inside, np.sqrt(np.maximum(1.0 - u * u, 0.0)), 0.0)
        if self.shape == "power-law":
            u = np.minimum(np.abs(e) / d, 1.0)
            return np.where(inside, u ** self.exponent, 0.0)
        x = np.asarray(self.table_energy)
        return np.interp(e, x, np.asarray(self.table_value), left=0.0, right=0.0)

    def cumulative(self, eps):
        """Signed cumulative integral F(ε) = ∫_0^ε g(ε') dε'.

        Closed form for every shape (exact for the piecewise-linear table),
        accurate to a few ulp *relative* to F(ε) even for |ε| ≪ D.

        Parameters
        ----------
        eps : array_like
            Energies, units of D; any shape.

        Returns
        -------
        numpy.ndarray
            F(ε), units of D, same shape as `eps`; F(ε) < 0 for ε < 0; constant
            outside the band.
        """
        e = np.asarray(eps, dtype=float)
        d = self.half_bandwidth
        if self.shape == "flat":
            return np.clip(e, -d, d)
        if self.shape == "semicircular":
            u = np.clip(e / d, -1.0, 1.0)
            return 0.5 * d * (u * np.sqrt(np.maximum(1.0 - u * u, 0.0)) + np.arcsin(u))
        if self.shape == "power-law":
            r = self.exponent
            u = np.minimum(np.abs(e) / d, 1.0)
            return np.sign(e) * d * u ** (r + 1.0) / (r + 1.0)
        x, v, slope, cum, k0 = self._table
        ec = np.clip(e, x[0], x[-1])
        k = np.clip(np.searchsorted(x, ec, side="right") - 1, 0, len(x) - 2)
        # Positive segments are based at their left node, negative ones at
        # their right node: the base node is the one nearer to ε = 0.
        pos = k >= k0
        base = np.where(pos, k, k + 1)
        h = ec - x[base]
        return cum[base] + v[base] * h + 0.5 * slope[k] * h * h

    def integral(self, a, b):
        """Integral ∫_a^b g(ε) dε.

        Parameters
        ----------
        a, b : float
            Limits, units of D (any order; b < a gives a negative result).

        Returns
        -------
        float
            The integral, units of D, from the closed-form :meth:`cumulative`.
        """
        f = self.cumulative(np.array([a, b], dtype=float))
        return float(f[1] - f[0])

    def is_particle_hole_symmetric(self):
        """Whether g(−ε) = g(ε).

        Returns
        -------
        bool
            Always True for the flat, semicircular and power-law shapes; for a
            table, True if its energies and values are mirror symmetric to a
            relative tolerance of 1e-12.
        """
        if self.shape != "table":
            return True
        x = np.asarray(self.table_energy)
        v = np.asarray(self.table_value)
        if not np.allclose(x, -x[::-1], rtol=0.0, atol=_SYMMETRY_RTOL * self.half_bandwidth):
            return False
        return bool(np.allclose(v, v[::-1], rtol=0.0, atol=_SYMMETRY_RTOL * max(np.max(v), 1e-300)))


def _is_real(x):
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool)


def _check_table_points(energy, value, where, lines):
    """Validate table data; `lines` gives the file line of each point (or None)."""
    try:
        e = np.asarray(energy, dtype=float)
        v = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise TableError(f"{where}: table energies and values must be numbers") from None
    if e.ndim != 1 or v.shape != e.shape:
        raise TableError(f"{where}: table energies and values must be two sequences of equal length, "
                         f"got shapes {e.shape} and {v.shape}")

    def at(i):
        return f"{where}, line {lines[i]}" if lines is not None else f"{where}[{i}]"

    for i in range(len(e)):
        if not (math.isfinite(e[i]) and math.isfinite(v[i])):
            raise TableError(f"{at(i)}: non-finite entry ({float(e[i])!r}, {float(v[i])!r}); energies and values must be finite")
        if v[i] < 0:
            raise TableError(f"{at(i)}: hybridization value {float(v[i])!r} < 0; values must be >= 0")
        if i > 0 and not e[i] > e[i - 1]:
            raise TableError(f"{at(i)}: energy {float(e[i])!r} does not exceed the previous {float(e[i - 1])!r}; "
                             "energies must be strictly increasing")
    if len(e) < MIN_TABLE_POINTS:
        last = f", last line {lines[-1]}" if lines else ""
        raise TableError(f"{where}{last}: {len(e)} data points; a table needs at least {MIN_TABLE_POINTS}")
    if not (e[0] < 0.0 < e[-1]):
        raise TableError(f"{where}: energy range [{float(e[0])!r}, {float(e[-1])!r}] must contain the Fermi level strictly "
                         "inside (ε_min < 0 < ε_max)")
    if not np.any(v > 0):
        raise TableError(f"{where}: all hybridization values are 0; at least one must be > 0")
    return e, v


def read_table(path):
    """Read a tabulated hybridization shape g(ε) from a text file.

    The file has two columns, energy ε (absolute, units of D) and g(ε) ≥ 0,
    separated by white space (or a comma).  Text after '#' is a comment;
    blank lines are skipped.  The shape is the piecewise-linear interpolation
    of the table and 0 outside it; the band half-width is
    D = max(|ε_min|, |ε_max|).

    Parameters
    ----------
    path : str or os.PathLike
        The file.

    Returns
    -------
    Bath
        ``shape="table"`` with the tabulated points; ``source`` is the path.

    Raises
    ------
    TableError
        Naming the file and the line: file missing or unreadable, a line that
        is not exactly two numbers, a non-finite entry, a negative value,
        energies not strictly increasing, fewer than 5 points, a range not
        containing ε = 0 strictly inside, all values zero.
    """
    name = os.fspath(path)
    try:
        with open(name, encoding="utf-8") as fh:
            text = fh.read()
    except (OSError, UnicodeDecodeError) as exc:
        reason = getattr(exc, "strerror", None) or type(exc).__name__
        raise TableError(f"{name}: cannot read hybridization table ({reason})") from None
    energy, value, lines = [], [], []
    for number, raw in enumerate(text.splitlines(), start=1):
        body = raw.split("#", 1)[0].replace(",", " ").strip()
        if not body:
            continue
        parts = body.split()
        try:
            if len(parts) != 2:
                raise ValueError
            x, y = float(parts[0]), float(parts[1])
        except ValueError:
            raise TableError(f"{name}, line {number}: expected two numbers 'energy value', "
                             f"got {raw.strip()!r}") from None
        energy.append(x)
        value.append(y)
        lines.append(number)
    e, v = _check_table_points(energy, value, name, lines)
    return Bath("table", table_energy=tuple(e.tolist()), table_value=tuple(v.tolist()), source=name)


def make_bath(shape, half_bandwidth=1.0, exponent=0.0, table=None):
    """Build a validated :class:`Bath`.

    Parameters
    ----------
    shape : {"flat", "semicircular", "power-law", "table"}
        Functional form of g(ε).
    half_bandwidth : float, optional
        D > 0, units of the energy unit.  Replaced by the table's own range for
        ``shape="table"``.
    exponent : float, optional
        r ≥ 0 for ``shape="power-law"``; ignored otherwise.
    table : str, os.PathLike, tuple of two sequences, or None
        For ``shape="table"`` only: a file (read with :func:`read_table`) or a
        pair ``(energies, values)``.

    Returns
    -------
    Bath

    Raises
    ------
    NrgInputError
        Naming ``bath.shape``, ``bath.half_bandwidth``, ``bath.exponent`` or
        ``bath.table`` with the allowed range.
    TableError
        Malformed table (file and line named).

    Examples
    --------
    >>> bath = make_bath("semicircular")
    >>> round(bath.integral(-1.0, 1.0), 12) == round(np.pi / 2, 12)
    True
    """
    if shape not in SHAPES:
        raise NrgInputError(f"bath.shape: unknown shape {shape!r}; allowed: " + ", ".join(f'"{s}"' for s in SHAPES))
    if shape != "table":
        if table is not None:
            raise NrgInputError(f"bath.table: a table is only allowed with bath.shape = \"table\" (got {shape!r})")
        return Bath(shape, half_bandwidth=half_bandwidth, exponent=exponent if shape == "power-law" else 0.0)
    if table is None:
        raise NrgInputError("bath.table: shape \"table\" needs a table file or (energies, values)")
    if isinstance(table, (str, os.PathLike)):
        return read_table(table)
    if isinstance(table, Bath):
        if table.shape != "table":
            raise NrgInputError(f"bath.table: expected a table bath, got shape {table.shape!r}")
        return table
    try:
        energy, value = table
    except (TypeError, ValueError):
        raise NrgInputError("bath.table: expected a file path or a pair (energies, values)") from None
    e, v = _check_table_points(energy, value, "bath.table", lines=None)
    return Bath("table", table_energy=tuple(e.tolist()), table_value=tuple(v.tolist()), source="bath.table")
