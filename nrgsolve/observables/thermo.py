"""Impurity thermodynamics from the NRG flow (Wilson 1975; Krishna-murthy, Wilkins & Wilson 1980).

At iteration N the spectrum of the impurity plus chain sites 0..N (all
states computed at that iteration, before truncation) gives the
thermodynamics at T_N = ω_N/β̄.  The *impurity contribution* of a quantity
X is X(impurity + chain) − X(chain alone) on the same chain sites 0..N.

The bare chain is computed *exactly* from its single-particle eigenvalues
(scipy.linalg.eigvalsh_tridiagonal): it is non-interacting, the exact answer
costs nothing, and it carries no truncation error of its own.  The price is
that truncation errors of the impurity run are not cancelled by those of a
second truncated run; they are controlled by the kept-state convergence
checks instead.

Units: T, energies in D; T·χ in (g μ_B)²/k_B (a free spin-1/2 has 1/4);
S and C in k_B.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.linalg import eigvalsh_tridiagonal

__all__ = ["ThermoCurve", "iteration_thermodynamics", "free_chain_thermodynamics",
           "impurity_thermodynamics", "average_twists", "temperature_grid"]


@dataclass(frozen=True)
class ThermoCurve:
    """Thermodynamic curves on a temperature grid (ascending T, units of D).

    ``T_chi``, ``entropy``, ``heat`` are impurity contributions; ``extra``
    holds impurity expectation values (e.g. ⟨n_d⟩, ⟨n_d↑n_d↓⟩, ⟨S_z⟩).
    """

    temperature: np.ndarray
    T_chi: np.ndarray
    entropy: np.ndarray
    heat: np.ndarray
    extra: dict = field(default_factory=dict)


def iteration_thermodynamics(energies, multiplicity, spin_sq, twice_spin, beta_bar, abelian=False, scalars=None):
    """Thermodynamics of one iteration's spectrum at T_N = ω_N/β̄.

    Parameters
    ----------
    energies : ndarray (M,)
        Levels in units of ω_N from the ground state.
    multiplicity : ndarray (M,)
        2S+1 (su2) or 1 (abelian).
    spin_sq : ndarray (M,)
        S(S+1)/3 (su2) or S_z² (abelian) of each level.
    twice_spin : ndarray (M,)
        2S_z of each level in the abelian mode (used for ⟨S_z⟩); ignored in su2.
    beta_bar : float
    abelian : bool
    scalars : dict of ndarray (M,), optional
        Diagonal elements of impurity operators.

    Returns
    -------
    dict
        ``T_chi`` (units (gμ_B)²/k_B), ``entropy`` and ``heat`` (k_B), ``sz`` and one
        entry per scalar (thermal averages).
    """
    x = beta_bar * energies
    w = multiplicity * np.exp(-(x - x.min()))
    Z = w.sum()
    p = w / Z
    mean_x = p @ x
    out = {
        "entropy": float(np.log(Z) - x.min() + mean_x),
        "heat": float(p @ (x - mean_x) ** 2),
    }
    sz = float(p @ (0.5 * twice_spin)) if abelian else 0.0
    out["T_chi"] = float(p @ spin_sq - sz * sz)
    out["sz"] = sz
    for name, d in (scalars or {}).items():
        out[name] = float(p @ d)
    return out


def free_chain_thermodynamics(onsite, hopping, temperature, n_channels=1):
    """Exact thermodynamics of the bare tight-binding chain (spin-1/2 fermions).

    Parameters
    ----------
    onsite : ndarray (N+1,)
        ε_n (units of D).
    hopping : ndarray (N,)
        t_n (units of D).
    temperature : float
        T (units of D).
    n_channels : int
        Identical channels (each a copy of this chain).

    Returns
    -------
    dict
        ``T_chi`` = Σ_k ½ f(1−f), ``entropy`` = 2Σ_k s(f), ``heat`` = 2Σ_k (βε)² f(1−f),
        each times ``n_channels``.
    """
    if len(onsite) == 1:
        eps = np.asarray(onsite, dtype=float)
    else:
        eps = eigvalsh_tridiagonal(np.asarray(onsite, float), np.asarray(hopping, float))
    x = eps / temperature
    f = 0.5 * (1.0 - np.tanh(0.5 * x))
    ff = f * (1.0 - f)
    # entropy of one fermion level: ln(1+e^{-x}) + x f, written stably
    s = np.logaddexp(0.0, -x) + x * f
    return {"T_chi": n_channels * float(0.5 * ff.sum()),
            "entropy": n_channels * float(2.0 * s.sum()),
            "heat": n_channels * float(2.0 * (x * x * ff).sum())}


def impurity_thermodynamics(records, chain_onsite, chain_hopping, beta_bar, abelian, n_channels=1) -> ThermoCurve:
    """Impurity contributions at T_N = ω_N/β̄ for every iteration record.

    Parameters
    ----------
    records : list of IterationRecord
    chain_onsite, chain_hopping : ndarray
        The chain the run used (units of D); the same chain, cut at site N, is
        the bare reference of iteration N.
    beta_bar : float
    abelian : bool
    n_channels : int

    Returns
    -------
    ThermoCurve
        Ascending in temperature.
    """
    T, tchi, ent, heat = [], [], [], []
    extra: dict = {}
    for rec in records:
        th = iteration_thermodynamics(rec.energies, rec.multiplicity, rec.spin_sq, rec.twice_spin,
                                      beta_bar, abelian, rec.scalars)
        temp = rec.scale / beta_bar
        n = rec.index
        fr = free_chain_thermodynamics(chain_onsite[:n + 1], chain_hopping[:n], temp, n_channels)
        T.append(temp)
        tchi.append(th["T_chi"] - fr["T_chi"])
        ent.append(th["entropy"] - fr["entropy"])
        heat.append(th["heat"] - fr["heat"])
        for name in rec.scalars:
            extra.setdefault(name, []).append(th[name])
        if abelian:
            extra.setdefault("total_sz", []).append(th["sz"])
    order = np.argsort(T)
    arr = lambda v: np.asarray(v, dtype=float)[order]
    return ThermoCurve(arr(T), arr(tchi), arr(ent), arr(heat), {k: arr(v) for k, v in extra.items()})


def temperature_grid(curves, points_per_decade=12):
    """Common logarithmic grid inside the range that every curve covers (units of D)."""
    lo = max(float(c.temperature[0]) for c in curves)
    hi = min(float(c.temperature[-1]) for c in curves)
    n = max(2, int(np.ceil(np.log10(hi / lo) * points_per_decade)) + 1)
    return np.geomspace(lo, hi, n)


def _interp(T, curve_T, values):
    return np.interp(np.log(T), np.log(curve_T), values)


def average_twists(curves, grid=None) -> ThermoCurve:
    """z-average (Oliveira & Oliveira 1994): interpolate each twist's curves in ln T onto a common grid and average.

    Parameters
    ----------
    curves : list of ThermoCurve
        One per twist.
    grid : ndarray, optional
        Target temperatures; default :func:`temperature_grid`.
    """
    if grid is None:
        grid = temperature_grid(curves)
    mean = lambda attr: np.mean([_interp(grid, c.temperature, getattr(c, attr)) for c in curves], axis=0)
    keys = set.intersection(*[set(c.extra) for c in curves]) if curves else set()
    extra = {k: np.mean([_interp(grid, c.temperature, c.extra[k]) for c in curves], axis=0) for k in sorted(keys)}
    return ThermoCurve(grid, mean("T_chi"), mean("entropy"), mean("heat"), extra)
