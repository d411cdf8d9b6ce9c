"""Exact universal impurity thermodynamics of Kondo models from the thermodynamic Bethe ansatz.

The k-channel Kondo model with impurity spin S, in the scaling limit, has the
impurity free energy (Andrei, Furuya & Lowenstein 1983; Tsvelick & Wiegmann
1983; the form below is written from memory and checked against the limits
listed under *Checks*)

.. math::

    \\ln\\eta_n(x) = s * \\ln[(1+\\eta_{n-1})(1+\\eta_{n+1})](x)
                    - \\delta_{n,k}\\, e^{\\pi x},\\qquad \\eta_0 \\equiv 0,

    \\lim_{n\\to\\infty} \\ln\\eta_n / n = 2h,\\qquad h = H/(2T),

    F_{imp}(T, H) = -T \\int dx\\, s\\!\\left(x + \\tfrac{1}{\\pi}\\ln\\tfrac{T}{T_0}\\right)
                    \\ln[1 + \\eta_{2S}(x)],

with :math:`s(x) = 1/(2\\cosh \\pi x)` and :math:`(s * f)(x) = \\int dy\\, s(x-y) f(y)`.
H is the Zeeman energy g μ_B B (a spin-½ has levels ±H/2).  All the temperature
dependence sits in the shift of the kernel, so one solution of the η's serves
every temperature.

Numerics (all in :func:`solve_tower`):

* The η's are represented by ln(1 + η_n) on a grid that is uniform (spacing
  ``spacing``) for x ≥ ``core_left`` and widens linearly in |x| further left,
  out to ``far_left``; the high-temperature side is approached only
  logarithmically (x → −∞), the low-temperature side exponentially.
* The convolution is a product integration: ln(1 + η) is taken piecewise
  linear between the nodes and constant beyond the ends, and s is integrated
  exactly against it with its first and second primitives
  G(u) = arctan(e^{πu})/π and K(u) = Ti₂(e^{πu})/π² (Ti₂ the inverse tangent
  integral).  The same weights, differentiated analytically in the shift, give
  the free energy and its first two temperature derivatives (entropy and
  specific heat) without numerical differencing.
* The tower is cut at n = ``levels``; the level above is closed with the x-
  independent solution 1 + η_n = [sinh((n + c)h)/sinh h]² matched to level n
  (at h = 0: 1 + η_{n+1} = (1 + √(1 + η_n))²), exact for both x → ±∞ limits.
* The nonlinear equations at h = 0 are solved by Anderson-accelerated fixed-
  point iteration; the susceptibility comes from the equations linearized in
  h² (their O(h²) term), solved by GMRES, not by differencing.
* The discretization error is O(spacing²); two grids (spacing and spacing/2)
  are combined by Richardson extrapolation.

Units: T·χ_imp in (g μ_B)²/k_B (free spin-½: 1/4), S_imp and C_imp in k_B.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.sparse.linalg import LinearOperator, gmres
from scipy.special import spence

from nrgsolve.errors import NrgInputError, NrgNumericalError

__all__ = [
    "ExactThermodynamics",
    "kondo_thermodynamics",
    "has_exact_curve",
    "solve_tower",
    "TowerSolution",
    "WILSON_NUMBER_EXACT",
    "SOLVER_VERSION",
]

#: Wilson number w = e^{C + 1/4}/π^{3/2} (C Euler's constant), relating Wilson's
#: T_K to χ_imp(0) = w/(4 T_K) (Andrei & Lowenstein 1981, from memory).
WILSON_NUMBER_EXACT = math.exp(np.euler_gamma + 0.25) / math.pi ** 1.5

#: Bumped whenever the numerics change, so that stale cache entries are not reused.
SOLVER_VERSION = 1

#: Temperatures (in the model's scale) inside which the curves carry the documented accuracy.
T_RANGE = (1e-5, 1e5)


# ----------------------------------------------------------------------------------------------
# The kernel s and its primitives (pure functions on arrays)
# ----------------------------------------------------------------------------------------------

def _kernel(u):
    """s(u) = 1/(2 cosh πu), written to avoid overflow."""
    a = np.exp(-np.pi * np.abs(u))
    return a / (1.0 + a * a)


def _first_primitive(u):
    """G(u) = ∫_{-∞}^u s = arctan(e^{πu})/π, in (0, 1/2)."""
    u = np.asarray(u, float)
    g = np.arctan(np.exp(-np.pi * np.abs(u))) / np.pi
    return np.where(u <= 0, g, 0.5 - g)


def _ti2_small(z):
    """Inverse tangent integral Ti₂(z) = Im Li₂(iz) for 0 ≤ z ≤ 1."""
    z = np.asarray(z, float)
    out = np.imag(spence(1.0 - 1j * z))
    tiny = z < 1e-8
    return np.where(tiny, z, out)


def _second_primitive_even(u):
    """K(−|u|) where K(u) = ∫_{-∞}^u G; K(u) = K(−|u|) + max(u, 0)/2 exactly."""
    return _ti2_small(np.exp(-np.pi * np.abs(u))) / np.pi ** 2


def _hat_weights(X, nodes, order, kernel="sech"):
    """Weights W[i, j] with Σ_j W[i, j] f_j = d^order/dX^order ∫ s(X_i − x) f(x) dx.

    f is the piecewise-linear interpolant of the node values f_j, continued by
    its end values beyond the first and last node.

    Parameters
    ----------
    X : ndarray (P,)
        Evaluation points.
    nodes : ndarray (M,)
        Strictly increasing nodes, M ≥ 3.
    order : {0, 1, 2}
        Derivative order in X.
    kernel : {"sech", "lorentz"}
        s(u) = 1/(2 cosh πu), or the Lorentzian P(u) = (1/2π)/(u² + 1/4) whose
        Fourier transform e^{-|ω|/2} carries a level of the tower to the next one
        at large n (used only for the closure, order 0).

    Returns
    -------
    ndarray (P, M)
    """
    X = np.asarray(X, float)[:, None]
    x = np.asarray(nodes, float)
    d = np.diff(x)
    U = X - x[None, :]                   # (P, M)

    inv = 1.0 / d

    def functional(P):
        """Apply the basis functionals to primitive values P(X_i − x_j)."""
        W = np.empty_like(P)
        W[:, 1:-1] = (P[:, :-2] * inv[None, :-1] - P[:, 1:-1] * (inv[None, :-1] + inv[None, 1:])
                      + P[:, 2:] * inv[None, 1:])
        W[:, 0] = (P[:, 1] - P[:, 0]) * inv[0]
        W[:, -1] = (P[:, -2] - P[:, -1]) * inv[-1]
        return W

    if kernel == "lorentz":
        K = 0.5 * U + (U * np.arctan(2 * U) - 0.25 * np.log1p(4 * U * U)) / np.pi
        W = functional(K)
        W[:, 0] += 1.0
        return W
    if order == 1:
        return functional(_first_primitive(U))
    if order == 2:
        return functional(_kernel(U))
    # order 0: primitive K(u) = K(−|u|) + max(u, 0)/2; the linear part cancels exactly
    # in every functional whose points lie on one side of the kink, so it is added by hand.
    W = functional(_second_primitive_even(U))
    W[:, 0] += 0.5
    WR = functional(0.5 * np.maximum(U, 0.0))
    one_side = np.empty(W.shape, dtype=bool)
    one_side[:, 1:-1] = (U[:, 2:] >= 0) | (U[:, :-2] <= 0)
    one_side[:, 0] = (U[:, 1] >= 0) | (U[:, 0] <= 0)
    one_side[:, -1] = (U[:, -1] >= 0) | (U[:, -2] <= 0)
    WR[one_side] = 0.0
    WR[:, 0] = np.where(U[:, 1] >= 0, -0.5, WR[:, 0])
    WR[:, -1] = np.where(U[:, -1] >= 0, 0.5, WR[:, -1])
    W += WR
    return W


def make_grid(spacing, core_left, far_left, right, growth=3.0):
    """Nodes: uniform spacing on [core_left, right], spacing growing like 1 + (core_left − x)/growth left of it.

    The nodes for spacing/2 contain those for spacing.  Units: x is the
    rapidity variable of the equations (dimensionless).
    """
    n_right = int(round((right - core_left) / spacing))
    core = core_left + spacing * np.arange(n_right + 1)
    # x = core_left − growth·(e^{(u_c − u)/growth} − 1) for u < u_c, uniform in u
    u_end = growth * math.log1p((core_left - far_left) / growth)
    n_left = int(math.ceil(u_end / spacing))
    u = spacing * np.arange(n_left, 0, -1)
    left = core_left - growth * np.expm1(u / growth)
    return np.concatenate([left, core])


# ----------------------------------------------------------------------------------------------
# The tower of equations
# ----------------------------------------------------------------------------------------------

def _log1p_exp(a):
    """ln(1 + e^a), stable for any a."""
    return np.logaddexp(0.0, a)


def _anderson(fixed_map, x0, tol, max_iter=4000, history=12, mix=0.5):
    """Anderson-accelerated fixed-point iteration x = fixed_map(x) (Anderson 1965; Walker & Ni 2011).

    Returns the fixed point and the number of iterations; raises
    NrgNumericalError if the residual (max norm) does not fall below tol.
    """
    x = x0.copy()
    X_hist, F_hist = [], []
    for it in range(1, max_iter + 1):
        gx = fixed_map(x)
        f = gx - x
        res = float(np.max(np.abs(f)))
        if not np.isfinite(res):
            raise NrgNumericalError("Bethe-ansatz iteration produced a non-finite residual")
        if res < tol:
            return gx, it
        X_hist.append(x.copy())
        F_hist.append(f.copy())
        if len(X_hist) > history + 1:
            X_hist.pop(0)
            F_hist.pop(0)
        if len(F_hist) > 1:
            dF = np.stack([F_hist[i + 1] - F_hist[i] for i in range(len(F_hist) - 1)], axis=1)
            dX = np.stack([X_hist[i + 1] - X_hist[i] for i in range(len(X_hist) - 1)], axis=1)
            gram = dF.T @ dF
            gram += 1e-14 * np.trace(gram) * np.eye(gram.shape[0])
            gamma = np.linalg.solve(gram, dF.T @ f)
            x = x + mix * f - (dX + mix * dF) @ gamma
        else:
            x = x + mix * f
    raise NrgNumericalError(f"Bethe-ansatz iteration did not converge in {max_iter} steps "
                            f"(residual {res:.2e}, wanted {tol:.0e})")


@dataclass(frozen=True)
class TowerSolution:
    """Solution of the truncated tower on one grid.

    Attributes
    ----------
    nodes : ndarray (M,)
        Grid of the rapidity variable x.
    log_one_plus_eta : ndarray (levels, M)
        ln(1 + η_n(x_j)) at h = 0, n = 1 … levels.
    h2_response : ndarray (levels, M)
        ∂ ln(1 + η_n)/∂(h²) at h = 0.
    iterations : int
        Fixed-point iterations used for the h = 0 equations.
    """

    nodes: np.ndarray
    log_one_plus_eta: np.ndarray
    h2_response: np.ndarray
    iterations: int


def _constant_solution(levels, channels, side):
    """ln(1 + η_n) of the x-independent h = 0 solutions at x → −∞ (side −1) and x → +∞ (side +1)."""
    n = np.arange(1, levels + 1)
    if side < 0:
        return 2.0 * np.log(n + 1.0)
    k = channels
    out = np.empty(levels)
    low = n < k
    out[low] = 2.0 * np.log(np.sin(np.pi * (n[low] + 1) / (k + 2)) / np.sin(np.pi / (k + 2)))
    out[n == k] = 0.0
    high = n > k
    out[high] = 2.0 * np.log(n[high] - k + 1.0)
    return out


def solve_tower(channels, levels, nodes, tol=1e-11, closure="lorentz"):
    """Solve the truncated TBA tower at h = 0 and its linearization in h².

    Parameters
    ----------
    channels : int
        Number of conduction channels k ≥ 1.
    levels : int
        Truncation n_max > k of the tower.
    nodes : ndarray (M,)
        Grid (see :func:`make_grid`).
    tol : float
        Max-norm tolerance on the fixed-point residual.
    closure : {"lorentz", "local"}
        "local": level N+1 from the x-independent solution matched to level N
        point by point.  "lorentz": the same, then convolved with the
        Lorentzian whose Fourier transform e^{-|ω|/2} is the large-n propagator
        of x-dependent deviations from level to level; both are exact for
        x-independent solutions, the second converges much faster in N.

    Returns
    -------
    TowerSolution
    """
    k = int(channels)
    x = np.asarray(nodes, float)
    Kmat = _hat_weights(x, x, 0)
    drive = np.zeros((levels, x.size))
    drive[k - 1] = np.exp(np.pi * x)
    if closure == "lorentz":
        Pmat = _hat_weights(x, x, 0, "lorentz")
        spread = lambda v: Pmat @ v          # noqa: E731
    else:
        spread = lambda v: v                 # noqa: E731

    def neighbours(L):
        """ln[(1+η_{n−1})(1+η_{n+1})] with η_0 = 0 and the closure above the top level."""
        top = spread(2.0 * np.log1p(np.exp(0.5 * L[-1])))
        up = np.vstack([L[1:], top[None, :]])
        down = np.vstack([np.zeros((1, x.size)), L[:-1]])
        return up + down

    def fixed_map(flat):
        L = flat.reshape(levels, -1)
        log_eta = neighbours(L) @ Kmat.T - drive
        return _log1p_exp(log_eta).ravel()

    # start: the two constant limits joined smoothly around x = 0
    left = _constant_solution(levels, k, -1)[:, None]
    right = _constant_solution(levels, k, +1)[:, None]
    w = 0.5 * (1.0 + np.tanh(x))[None, :]
    L0 = (1 - w) * left + w * right
    flat, iterations = _anderson(fixed_map, L0.ravel(), tol)
    L = flat.reshape(levels, -1)

    # linearization in h²: ψ_n = τ_n s*(ψ_{n−1} + ψ_{n+1}), τ_n = η_n/(1+η_n),
    # closure ψ_{N+1} = A ψ_N/(A+1) + A with A = √(1+η_N)
    tau = -np.expm1(-L)
    A = np.exp(0.5 * L[-1])
    cA = A / (A + 1.0)

    def apply_lin(v):
        P = v.reshape(levels, -1)
        up = np.vstack([P[1:], spread(cA * P[-1])[None, :]])
        down = np.vstack([np.zeros((1, x.size)), P[:-1]])
        return (P - tau * ((up + down) @ Kmat.T)).ravel()

    rhs = np.zeros((levels, x.size))
    rhs[-1] = tau[-1] * (Kmat @ spread(A))
    op = LinearOperator((levels * x.size,) * 2, matvec=apply_lin, dtype=float)
    # start from the constant-solution response n(n+2)/3 (exact at x → −∞)
    n = np.arange(1, levels + 1)[:, None]
    psi0 = (tau * n * (n + 2) / 3.0).ravel()
    psi, info = gmres(op, rhs.ravel(), x0=psi0, rtol=1e-12, atol=0.0, restart=60, maxiter=200)
    if info != 0:
        raise NrgNumericalError(f"Bethe-ansatz h² equations: GMRES did not converge (info={info})")
    return TowerSolution(x, L, psi.reshape(levels, -1), iterations)
