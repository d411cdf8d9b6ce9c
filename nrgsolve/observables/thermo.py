"""Impurity thermodynamics from the NRG flow (Wilson 1975; Krishna-murthy, Wilkins & Wilson 1980).

At iteration N the spectrum of the impurity plus chain sites 0..N (all
states computed at that iteration, before truncation) gives the
thermodynamics at T_N = ω_N/β̄.  The *impurity contribution* of a quantity
X is X(impurity + chain) − X(chain alone) on the same chain sites 0..N.

The bare chain is computed in one of two ways (``run.bath_reference``):

* ``"nrg"`` (default): a second NRG run of the chain alone, with the same
  chain and the same truncation.  Truncation removes the same high-lying
  states from both runs wherever the impurity is screened, so the errors
  largely cancel in the difference (measured: at Λ = 2, 1000 kept states,
  β̄ = 0.75 a screened Kondo impurity gives S_imp(T→0) = −4e-4 this way and
  −1.6e-2 with the exact reference).
* ``"exact"``: the exact single-particle thermodynamics of the same finite
  chain (scipy.linalg.eigvalsh_tridiagonal); no extra run and no truncation
  error of its own, but nothing cancels the impurity run's truncation error.

Units: T, energies in D; T·χ in (g μ_B)²/k_B (a free spin-1/2 has 1/4);
S and C in k_B.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.linalg import eigvalsh_tridiagonal

__all__ = ["ThermoCurve", "iteration_thermodynamics", "free_chain_thermodynamics",
           "impurity_thermodynamics", "average_twists", "temperature_grid"]


@dataclass(frozen=True)
class ThermoCurve:
    """Thermodynamic curves on a temperature grid (ascending T, units of D).

    ``T_chi``, ``entropy``, ``heat`` are impurity contributions; ``extra``
    holds impurity expectation values (e.g. ⟨n_d⟩, ⟨n_d↑n_d↓⟩, ⟨S_z⟩).
    ``iteration`` is the iteration N of each point (None after averaging).
    """

    temperature: np.ndarray
    T_chi: np.ndarray
    entropy: np.ndarray
    heat: np.ndarray
    extra: dict = field(default_factory=dict)
    iteration: np.ndarray | None = None


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
        ``free_energy`` = −2T Σ_k ln(1 + e^{−ε_k/T}) (units of D, the empty chain at zero),
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
            "free_energy": n_channels * float(-2.0 * temperature * np.logaddexp(0.0, -x).sum()),
            "entropy": n_channels * float(2.0 * s.sum()),
            "heat": n_channels * float(2.0 * (x * x * ff).sum())}


def impurity_thermodynamics(records, chain_onsite, chain_hopping, beta_bar, n_channels=1,
                            bath_records=None) -> ThermoCurve:
    """Impurity contributions at T_N = ω_N/β̄ for every iteration record.

    Parameters
    ----------
    records : list of IterationRecord
    chain_onsite, chain_hopping : ndarray
        The chain the run used (units of D); the same chain, cut at site N, is
        the bare reference of iteration N when ``bath_records`` is None.
    beta_bar : float
    n_channels : int
    bath_records : list of IterationRecord, optional
        An NRG run of the bare chain (same chain, same truncation); if given it
        is the reference instead of the exact single-particle answer.

    Returns
    -------
    ThermoCurve
        Ascending in temperature.
    """
    T, tchi, ent, heat, its = [], [], [], [], []
    extra: dict = {}
    abelian = records[-1].twice_sz is not None      # the labels resolve S_z: the magnetization is known
    bath = {}
    if bath_records is not None:
        for b in bath_records:
            bath[b.index] = iteration_thermodynamics(b.energies, b.multiplicity, b.spin_sq, b.twice_spin,
                                                     beta_bar, abelian)
    for rec in records:
        th = iteration_thermodynamics(rec.energies, rec.multiplicity, rec.spin_sq, rec.twice_spin,
                                      beta_bar, abelian, rec.scalars)
        temp = rec.scale / beta_bar
        n = rec.index
        if bath_records is not None:
            if n not in bath:
                continue
            fr = bath[n]
        else:
            fr = free_chain_thermodynamics(chain_onsite[:n + 1], chain_hopping[:n], temp, n_channels)
        T.append(temp)
        its.append(n)
        tchi.append(th["T_chi"] - fr["T_chi"])
        ent.append(th["entropy"] - fr["entropy"])
        heat.append(th["heat"] - fr["heat"])
        for name in rec.scalars:
            extra.setdefault(name, []).append(th[name])
        if abelian:
            extra.setdefault("total_sz", []).append(th["sz"])
    order = np.argsort(T)
    arr = lambda v: np.asarray(v, dtype=float)[order]
    return ThermoCurve(arr(T), arr(tchi), arr(ent), arr(heat), {k: arr(v) for k, v in extra.items()},
                       np.asarray(its, dtype=int)[order])


def _parity_parts(curve):
    """Index sets of the even-N and odd-N points (one set if the curve has no iteration numbers)."""
    if curve.iteration is None:
        return [np.arange(len(curve.temperature))]
    parts = [np.nonzero(curve.iteration % 2 == p)[0] for p in (0, 1)]
    return [p for p in parts if len(p) >= 2] or [np.arange(len(curve.temperature))]


def temperature_grid(curves, points_per_decade=12):
    """Common logarithmic grid inside the range that every curve (and each of its parities) covers (units of D)."""
    parts = [c.temperature[p] for c in curves for p in _parity_parts(c)]
    lo = max(float(t[0]) for t in parts)
    hi = min(float(t[-1]) for t in parts)
    n = max(2, int(np.ceil(np.log10(hi / lo) * points_per_decade)) + 1)
    return np.geomspace(lo, hi, n)


def _smooth(grid, curve, values):
    """Even/odd average: interpolate the even-N and the odd-N points separately in ln T, then average
    (Krishna-murthy, Wilkins & Wilson 1980).  This removes the alternation of the finite-chain
    reference between chains of even and odd length.  The interpolation is monotone cubic (PCHIP):
    no overshoot, and exact enough for curves like T·χ ∝ T on a grid spaced by Λ in T."""
    parts = _parity_parts(curve)
    x = np.log(grid)
    out = []
    for p in parts:
        lt = np.log(curve.temperature[p])
        if len(p) >= 3:
            out.append(PchipInterpolator(lt, values[p], extrapolate=True)(np.clip(x, lt[0], lt[-1])))
        else:
            out.append(np.interp(x, lt, values[p]))
    return np.mean(out, axis=0)


def average_twists(curves, grid=None) -> ThermoCurve:
    """z-average (Oliveira & Oliveira 1994) of even/odd-averaged curves on a common ln T grid.

    Parameters
    ----------
    curves : list of ThermoCurve
        One per twist (with iteration numbers).
    grid : ndarray, optional
        Target temperatures; default :func:`temperature_grid`.
    """
    if all(c.iteration is None for c in curves) and all(
            len(c.temperature) == len(curves[0].temperature) and np.array_equal(c.temperature, curves[0].temperature)
            for c in curves) and grid is None:
        # curves already on one grid (full density matrix): a plain mean, nothing interpolated
        keys = set.intersection(*[set(c.extra) for c in curves])
        mean = lambda vals: np.mean(vals, axis=0)
        return ThermoCurve(curves[0].temperature.copy(), mean([c.T_chi for c in curves]),
                           mean([c.entropy for c in curves]), mean([c.heat for c in curves]),
                           {k: mean([c.extra[k] for c in curves]) for k in sorted(keys)})
    if grid is None:
        grid = temperature_grid(curves)
    mean = lambda attr: np.mean([_smooth(grid, c, getattr(c, attr)) for c in curves], axis=0)
    keys = set.intersection(*[set(c.extra) for c in curves]) if curves else set()
    extra = {k: np.mean([_smooth(grid, c, c.extra[k]) for c in curves], axis=0) for k in sorted(keys)}
    return ThermoCurve(grid, mean("T_chi"), mean("entropy"), mean("heat"), extra)
