"""Logarithmic discretization of the bath into a star of levels.

Each side of the band (ε > 0, and ε < 0 with g(−ε)) is cut into intervals
with the boundaries

.. math::

    D,\\; D\\Lambda^{-z},\\; D\\Lambda^{-1-z},\\; D\\Lambda^{-2-z},\\;\\ldots

(`n_intervals` intervals per side; z = 1 gives Wilson's D, D/Λ, D/Λ², …).
With the continuous label x = j + z (j = 1, 2, …) interval x spans
[ε(x+1), ε(x)] with ε(x) = D Λ^{2−x} for x ≥ 2 and ε(x) = D for x ≤ 2.
Every interval becomes one level E_j of weight

.. math::

    w_j = \\frac{1}{\\pi} \\int_{\\varepsilon(x+1)}^{\\varepsilon(x)} g(\\varepsilon)\\,d\\varepsilon ,

so that the discretized hybridization is Γ_disc(ε) = πΓ Σ_j w_j δ(ε − E_j)
and Σ_j w_j = (1/π)∫ g dε (up to the part of the band below the last
interval, D Λ^{-n_intervals-z+1}).  Energies and weights are in units of D.

Schemes
-------
``"wilson"`` (Wilson 1975; Krishna-murthy, Wilkins, Wilson 1980)
    E_j is the arithmetic mean of the interval end points, for every shape.
    For the flat band at z = 1 this is Wilson's discretization with the
    closed-form chain.  Averaged over z it does not reproduce g: for the flat
    band, below ε = D(1+Λ⁻¹)/2, the z-averaged hybridization is g/A_Λ with
    A_Λ = ½(1+Λ⁻¹)/(1−Λ⁻¹) ln Λ (for g = |ε/D|^r the factor is
    (1−Λ^{−r−1}) / [(r+1) ln Λ ((1+Λ⁻¹)/2)^{r+1}]).  Option
    `wilson_correction` multiplies all weights by A_Λ, which compensates this
    reduction of the low-energy coupling (Wilson 1975; Krishna-murthy et al.
    1980).
``"adaptive"`` (Campo & Oliveira 2005; Žitko & Pruschke 2009)
    Same weights, but E(x) is chosen such that the z-average
    ∫ dx w(x) δ(ε − E(x)) equals g(ε)/π exactly, i.e. E solves
    dE/dx = −π w(x)/g(E(x)).  Instead of integrating this ODE numerically we
    use its first integral: with F(ε) = ∫_0^ε g, dF(E(x))/dx = −π w(x), and
    since F(E(∞)) = 0 and the integrand telescopes,

    .. math::

        F(E(x)) = \\int_x^{x+1} F(\\varepsilon(x'))\\,dx'
                = \\max(0, 2-x)\\,F(D) + \\frac{1}{\\ln\\Lambda}
                  \\int_{\\varepsilon(x+1)}^{\\varepsilon(x)} \\frac{F(\\varepsilon)}{\\varepsilon}\\,d\\varepsilon .

    This is exact at every x (no asymptotic starting value and no special
    last interval are needed), is well conditioned where g → 0 (band edge of
    the semicircle, pseudogap), and reduces to E = ε(x)(1−Λ⁻¹)/ln Λ for the
    flat band at x ≥ 2.  The ε-integral is closed form for the flat,
    power-law and table shapes and is done by tanh-sinh quadrature (which
    tolerates the square-root edge) for the semicircle; F is inverted by
    bisection in ln ε inside the interval, where E(x) is guaranteed to lie.

Levels whose weight is exactly 0 (parts of the band where g = 0, e.g. above
a table's range) are left out of the star.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .bath import Bath
from .errors import NrgInputError

__all__ = ["SCHEMES", "Star", "twists", "discretize", "wilson_correction_factor"]

#: Discretization schemes understood by :func:`discretize`.
SCHEMES = ("wilson", "adaptive")

_BISECTION_STEPS = 64


@dataclass(frozen=True, eq=False)
class Star:
    """Discrete bath levels coupled to the impurity ("star" geometry).

    Parameters
    ----------
    energies : numpy.ndarray, shape (M,)
        Level energies E_i, strictly ascending, units of D.
    weights : numpy.ndarray, shape (M,)
        Weights w_i ≥ 0, units of D: the impurity couples to level i with
        V_i² = Γ w_i.  Σ w_i = (1/π)∫ g dε (times A_Λ with Wilson's correction).
    Lambda : float
        Discretization parameter Λ > 1.
    z : float
        Twist, 0 < z ≤ 1.
    scheme : str
        Label of the scheme that made the star.

    Raises
    ------
    NrgInputError
        Shapes differ, energies not strictly ascending or not finite, negative
        weights, Λ ≤ 1 or z outside (0, 1].

    Notes
    -----
    The arrays are stored as read-only copies.
    """

    energies: np.ndarray
    weights: np.ndarray
    Lambda: float
    z: float
    scheme: str

    def __post_init__(self):
        e = np.array(self.energies, dtype=float)
        w = np.array(self.weights, dtype=float)
        if e.ndim != 1 or w.shape != e.shape or e.size == 0:
            raise NrgInputError(f"star: energies and weights must be non-empty 1-d arrays of equal length, "
                                f"got shapes {e.shape} and {w.shape}")
        if not (np.all(np.isfinite(e)) and np.all(np.isfinite(w))):
            raise NrgInputError("star: energies and weights must be finite")
        if np.any(np.diff(e) <= 0):
            raise NrgInputError("star: energies must be strictly ascending")
        if np.any(w < 0):
            raise NrgInputError("star: weights must be >= 0")
        _check_lambda_z(self.Lambda, self.z)
        e.setflags(write=False)
        w.setflags(write=False)
        object.__setattr__(self, "energies", e)
        object.__setattr__(self, "weights", w)

    @property
    def total_weight(self):
        """Σ w_i, units of D."""
        return math.fsum(self.weights.tolist())


def _check_lambda_z(Lambda, z):
    if isinstance(Lambda, bool) or not isinstance(Lambda, (int, float, np.integer, np.floating)) \
            or not math.isfinite(Lambda) or Lambda <= 1:
        raise NrgInputError(f"discretization.Lambda: must be > 1 (and finite), got {Lambda!r}")
    if isinstance(z, bool) or not isinstance(z, (int, float, np.integer, np.floating)) \
            or not (0 < z <= 1):
        raise NrgInputError(f"discretization.z: twist z must be in (0, 1], got {z!r}")


def wilson_correction_factor(Lambda):
    """Wilson's discretization correction A_Λ = ½ (1+Λ⁻¹)/(1−Λ⁻¹) ln Λ.

    Wilson 1975; Krishna-murthy, Wilkins, Wilson 1980.  A_Λ → 1 as Λ → 1.

    Parameters
    ----------
    Lambda : float
        Λ > 1.

    Returns
    -------
    float
        A_Λ ≥ 1 (dimensionless).

    Raises
    ------
    NrgInputError
        Λ ≤ 1.
    """
    _check_lambda_z(Lambda, 1.0)
    lam = float(Lambda)
    return 0.5 * (1.0 + 1.0 / lam) / (1.0 - 1.0 / lam) * math.log(lam)


def twists(n):
    """Evenly spaced twists z_k = k/n, k = 1..n.

    Parameters
    ----------
    n : int
        Number of twists, n ≥ 1.

    Returns
    -------
    numpy.ndarray, shape (n,)
        z values in (0, 1]; ``twists(1)`` is ``[1.0]``.

    Raises
    ------
    NrgInputError
        n not an integer ≥ 1.
    """
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise NrgInputError(f"discretization.twists: number of twists must be an integer >= 1, got {n!r}")
    return np.arange(1, int(n) + 1, dtype=float) / float(n)


# --------------------------------------------------------------------------- #
# One side of the band.  F_side(e) = ∫_0^e g(±ε) dε for e >= 0.

def _side_cumulative(bath, sign, e):
    return sign * bath.cumulative(sign * np.asarray(e, dtype=float))


def _tanh_sinh(n_half=24, h=0.125):
    k = np.arange(-n_half, n_half + 1) * h
    u = 0.5 * np.pi * np.sinh(k)
    nodes = np.tanh(u)
    # 1 - |node| computed without cancellation: 2 / (exp(2|u|) + 1)
    gap = 2.0 / (np.exp(2.0 * np.abs(u)) + 1.0)
    weights = h * 0.5 * np.pi * np.cosh(k) / np.cosh(u) ** 2
    return nodes, gap, weights


def _log_moment(bath, sign, lo, hi):
    """∫_lo^hi F_side(ε)/ε dε for 0 < lo < hi (arrays), units of D."""
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    d = bath.half_bandwidth
    if bath.shape == "flat":
        return np.minimum(hi, d) - np.minimum(lo, d) + (
            d * np.log(np.maximum(hi, d) / np.maximum(lo, d)))
    if bath.shape == "power-law":
        p = bath.exponent + 1.0
        top_hi, top_lo = np.minimum(hi, d), np.minimum(lo, d)
        inner = d * ((top_hi / d) ** p - (top_lo / d) ** p) / (p * p)
        return inner + d / p * np.log(np.maximum(hi, d) / np.maximum(lo, d))
    if bath.shape == "table":
        return _table_log_primitive(bath, sign, hi) - _table_log_primitive(bath, sign, lo)
    # Semicircle (and any shape without a closed form): tanh-sinh in t = ln ε.
    nodes, gap, weights = _tanh_sinh()
    a, b = np.log(lo)[:, None], np.log(hi)[:, None]
    half = 0.5 * (b - a)
    # t measured from the nearer end point keeps precision next to ε = D
    t = np.where(nodes < 0, a + half * gap, b - half * gap)
    vals = _side_cumulative(bath, sign, np.exp(t))
    return half[:, 0] * (vals @ weights)


def _table_log_primitive(bath, sign, e):
    """P(e) = ∫_0^e F_side(ε)/ε dε for a table, exact (piecewise closed form)."""
    x, v, slope, cum, k0 = bath._table
    if sign > 0:
        nodes, vals, cums, slopes = x[k0:], v[k0:], cum[k0:], slope[k0:]
    else:
        nodes = -x[:k0 + 1][::-1]
        vals = v[:k0 + 1][::-1]
        cums = -cum[:k0 + 1][::-1]
        slopes = -slope[:k0][::-1]
    e = np.asarray(e, dtype=float)
    # Segment m spans [a_m, a_{m+1}]: F = c0 + c1 ε + s ε²/2 with
    # c0 = C_m − g_m a_m + s a_m²/2, c1 = g_m − s a_m (c0 = 0 on the first).
    a, s = nodes[:-1], slopes
    c0 = cums[:-1] - vals[:-1] * a + 0.5 * s * a * a
    c0[0] = 0.0
    c1 = vals[:-1] - s * a

    def piece(m, lo, hi):
        ratio = np.where(lo > 0, hi / np.where(lo > 0, lo, 1.0), 1.0)   # c0 = 0 where lo = 0
        log_part = c0[m] * np.log(ratio)
        return log_part + c1[m] * (hi - lo) + 0.25 * s[m] * (hi * hi - lo * lo)

    seg_int = piece(np.arange(len(a)), a, nodes[1:])
    prim_nodes = np.concatenate([[0.0], np.cumsum(seg_int)])
    last = nodes[-1]
    inside = np.minimum(e, last)
    m = np.clip(np.searchsorted(nodes, inside, side="right") - 1, 0, len(a) - 1)
    out = prim_nodes[m] + piece(m, a[m], inside)
    # Above the table the cumulative is constant: ∫ F_total/ε dε.
    above = e > last
    out = out + np.where(above, cums[-1] * np.log(np.where(above, e, last) / last), 0.0)
    return out


def _side_levels(bath, sign, Lambda, z, n, scheme):
    """Energies (>0, measured outward) and weights of the n intervals on one side."""
    d = bath.half_bandwidth
    lam = float(Lambda)
    j = np.arange(1, n + 1, dtype=float)
    x = j + z
    hi = np.where(x <= 2.0, d, d * lam ** (2.0 - x))
    lo = d * lam ** (1.0 - x)
    f_hi = _side_cumulative(bath, sign, hi)
    f_lo = _side_cumulative(bath, sign, lo)
    weight = (f_hi - f_lo) / np.pi
    if scheme == "wilson":
        energy = 0.5 * (hi + lo)
    else:
        target = np.maximum(0.0, 2.0 - x) * _side_cumulative(bath, sign, np.array([d]))[0] \
            + _log_moment(bath, sign, lo, hi) / math.log(lam)
        # F is non-decreasing and target lies in [F(lo), F(hi)]: bisect in ln ε.
        a, b = np.log(lo), np.log(hi)
        for _ in range(_BISECTION_STEPS):
            mid = 0.5 * (a + b)
            below = _side_cumulative(bath, sign, np.exp(mid)) < target
            a = np.where(below, mid, a)
            b = np.where(below, b, mid)
        energy = np.exp(0.5 * (a + b))
    return energy, np.maximum(weight, 0.0)


def discretize(bath, Lambda, z, n_intervals, scheme="wilson", wilson_correction=False):
    """Logarithmic discretization of a bath into a star of levels.

    See the module docstring for the interval boundaries and the two schemes.

    Parameters
    ----------
    bath : Bath
        Hybridization shape g(ε) on [−D, D].
    Lambda : float
        Discretization parameter Λ > 1.
    z : float
        Twist, 0 < z ≤ 1 (z = 1: Wilson's intervals).
    n_intervals : int
        Number of intervals per side, ≥ 1.  The lowest boundary is
        D Λ^{1−z−n_intervals}.
    scheme : {"wilson", "adaptive"}, optional
        Choice of representative energies.
    wilson_correction : bool, optional
        Multiply all weights by A_Λ (:func:`wilson_correction_factor`); only
        for ``scheme="wilson"``.

    Returns
    -------
    Star
        Levels in ascending order (negative side first); M ≤ 2 n_intervals
        levels (zero-weight intervals are left out), energies and weights in
        units of D.

    Raises
    ------
    NrgInputError
        Λ ≤ 1 (``discretization.Lambda``), z outside (0, 1]
        (``discretization.z``), n_intervals < 1
        (``discretization.n_intervals``), unknown scheme
        (``discretization.scheme``), Wilson's correction asked for with the
        adaptive scheme, or a bath with zero total weight.

    Examples
    --------
    >>> from nrgsolve.bath import make_bath
    >>> star = discretize(make_bath("flat"), 2.0, 1.0, 3)
    >>> star.energies[3:]
    array([0.1875, 0.375 , 0.75  ])
    """
    if not isinstance(bath, Bath):
        raise NrgInputError(f"bath: expected a nrgsolve.bath.Bath, got {type(bath).__name__}")
    _check_lambda_z(Lambda, z)
    if isinstance(n_intervals, bool) or not isinstance(n_intervals, (int, np.integer)) or n_intervals < 1:
        raise NrgInputError(f"discretization.n_intervals: must be an integer >= 1, got {n_intervals!r}")
    if scheme not in SCHEMES:
        raise NrgInputError(f"discretization.scheme: unknown scheme {scheme!r}; allowed: "
                            + ", ".join(f'"{s}"' for s in SCHEMES))
    if wilson_correction and scheme != "wilson":
        raise NrgInputError("discretization.wilson_correction: only meaningful with scheme \"wilson\", "
                            f"got scheme {scheme!r}")
    z = float(z)
    e_pos, w_pos = _side_levels(bath, +1.0, Lambda, z, int(n_intervals), scheme)
    e_neg, w_neg = _side_levels(bath, -1.0, Lambda, z, int(n_intervals), scheme)
    energies = np.concatenate([-e_neg, e_pos[::-1]])
    weights = np.concatenate([w_neg, w_pos[::-1]])
    keep = weights > 0
    if not np.any(keep):
        raise NrgInputError("bath: the hybridization shape has zero weight on the discretized band")
    weights = weights[keep]
    if wilson_correction:
        weights = weights * wilson_correction_factor(Lambda)
    return Star(energies[keep], weights, float(Lambda), z, scheme)
