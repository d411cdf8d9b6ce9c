"""Impurity thermodynamics from the full density matrix, at any temperature and without β̄.

The discarded states of every iteration n, each times the 4^{n_channels (N−n)}
states of the sites n+1..N that were not yet added (the *environment*), form a
complete basis of the whole Wilson chain (Anders & Schiller 2005).  Within the
NRG approximation a discarded state |s⟩ of shell n keeps its energy E_s^n in
that basis, whatever the environment does, so the partition function of the
whole chain at any temperature T is

.. math::

    Z(T) = \\sum_{n} 4^{n_c (N-n)} \\sum_{s \\in \\mathrm{disc}(n)} (2S_s+1)\\, e^{-E^n_s/T},

with all states of the last iteration N counted as discarded (Weichselbaum &
von Delft 2007; for thermodynamics Merker & Costi 2012 and Merker,
Weichselbaum & Costi 2012, from memory).  The energy, entropy and specific heat
follow as moments of the same weights: S = ln Z + ⟨E⟩/T, C = (⟨E²⟩ − ⟨E⟩²)/T².

The susceptibility needs one more term.  In a uniform field the environment
sites are spins too: each of the 4 states of a free site has S_z² = 0, ¼, ¼,
0, so in the degenerate environment every site adds ⅛ per channel to
⟨(S_z^{tot})²⟩, and the cross terms vanish because the environment's ⟨S_z⟩
is zero.  Hence T·χ = Σ_{n,s} p_{ns} [S_s(S_s+1)/3 + n_c (N−n)/8] − ⟨S_z⟩².
Leaving the environment term out would make T·χ of the chain jump between
shells; with it, it is the total susceptibility, and its environment part
largely cancels in the impurity contribution below.

The impurity contribution of each quantity is the difference between the
impurity run and a bath-only run on the same chain with the same truncation
(or the exact single-particle answer of the same finite chain), evaluated at
the same temperatures; nothing is interpolated and there is no even/odd
alternation, because every temperature sees every shell.

Units: energies and temperatures in D; T·χ in (g μ_B)²/k_B (a free spin-½
has ¼); S and C in k_B; the free energy F in D.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .thermo import ThermoCurve, free_chain_thermodynamics

__all__ = ["ShellStates", "shell_states", "chain_thermodynamics", "impurity_thermodynamics_fdm",
           "default_temperatures", "SITE_SPIN_SQUARE"]

#: ⟨S_z²⟩ of one free chain site (states 0, ↑, ↓, ↑↓ with S_z² = 0, ¼, ¼, 0).
SITE_SPIN_SQUARE = 0.125


@dataclass(frozen=True)
class ShellStates:
    """The complete basis of discarded states of a run, flattened over shells.

    Attributes
    ----------
    energy : ndarray (M,)
        Energy of each discarded multiplet, units of D, measured from ``reference``.
    reference : float
        Absolute energy (units of D) subtracted from ``energy`` (the last ground state).
    log_weight : ndarray (M,)
        ln of its degeneracy: ln(2S+1) (su2; 0 in the abelian mode) plus the environment,
        n_c (N−n) ln 4.
    spin_square : ndarray (M,)
        S(S+1)/3 (su2) or S_z² (abelian) of the shell state plus the environment's n_c (N−n)/8.
    sz : ndarray (M,)
        S_z of each state (when the labels resolve it; zero otherwise).
    scalars : dict of ndarray (M,)
        Diagonal elements of the impurity operators carried by the run.
    last_index : int
        Iteration N of the last shell.
    """

    energy: np.ndarray
    reference: float
    log_weight: np.ndarray
    spin_square: np.ndarray
    sz: np.ndarray
    scalars: dict
    last_index: int
    shell: np.ndarray | None = None


def shell_states(records, n_channels: int = 1) -> ShellStates:
    """Collect the discarded states of every shell (all states of the last one).

    Parameters
    ----------
    records : list of IterationRecord
        One per iteration, in order, each with all states before truncation and its
        ``truncation_energy`` (units of ω_N; infinite when nothing was discarded).
    n_channels : int
        Chain channels (each environment site has 4^{n_channels} states).

    Returns
    -------
    ShellStates
    """
    last = records[-1]
    N = last.index
    ref = float(last.ground_energy)
    parts = []
    for k, rec in enumerate(records):
        E = np.asarray(rec.energies, dtype=float)
        sel = np.ones(len(E), bool) if k == len(records) - 1 else E > rec.truncation_energy
        if not np.any(sel):
            continue
        env = n_channels * (N - rec.index)
        mult = np.asarray(rec.multiplicity, dtype=float)[sel]
        parts.append({
            # ground_n − ground_N first: both are O(D) while their difference may be tiny
            "energy": (float(rec.ground_energy) - ref) + rec.scale * E[sel],
            "log_weight": np.log(mult) + env * math.log(4.0),
            "spin_square": np.asarray(rec.spin_sq, dtype=float)[sel] + env * SITE_SPIN_SQUARE,
            "sz": (0.5 * np.asarray(rec.twice_sz, dtype=float)[sel]) if rec.twice_sz is not None
                  else np.zeros(int(sel.sum())),
            "scalars": {name: np.asarray(v, dtype=float)[sel] for name, v in rec.scalars.items()},
            "shell": np.full(int(sel.sum()), rec.index),
        })
    cat = lambda key: np.concatenate([p[key] for p in parts])
    names = set.intersection(*[set(p["scalars"]) for p in parts]) if parts else set()
    return ShellStates(energy=cat("energy"), reference=ref, log_weight=cat("log_weight"),
                       spin_square=cat("spin_square"), sz=cat("sz"),
                       scalars={n: np.concatenate([p["scalars"][n] for p in parts]) for n in sorted(names)},
                       last_index=int(N), shell=cat("shell"))


def chain_thermodynamics(states: ShellStates, temperatures, chunk: int = 16) -> dict:
    """Thermodynamics of the whole chain from its complete basis (a pure kernel).

    Parameters
    ----------
    states : ShellStates
    temperatures : array_like (K,)
        Temperatures, units of D, > 0.
    chunk : int
        Temperatures handled at once (bounds the memory to chunk × states).

    Returns
    -------
    dict of ndarray (K,)
        ``free_energy`` (D, absolute), ``entropy`` (k_B), ``heat`` (k_B), ``T_chi``
        ((g μ_B)²/k_B, total including the environment), ``sz`` (ħ) and one thermal
        average per impurity scalar.
    """
    T = np.asarray(temperatures, dtype=float)
    shift = float(states.energy.min())
    E = states.energy - shift
    out = {k: np.empty(len(T)) for k in ("free_energy", "entropy", "heat", "T_chi", "sz", *states.scalars)}
    for lo in range(0, len(T), chunk):
        t = T[lo:lo + chunk, None]
        a = states.log_weight[None, :] - E[None, :] / t
        amax = a.max(axis=1, keepdims=True)
        w = np.exp(a - amax)
        Z = w.sum(axis=1)
        p = w / Z[:, None]
        mean_e = p @ E
        var_e = np.einsum("km,km->k", p, (E[None, :] - mean_e[:, None]) ** 2)
        lnZ = amax[:, 0] + np.log(Z)
        tt = t[:, 0]
        out["free_energy"][lo:lo + chunk] = shift - tt * lnZ
        out["entropy"][lo:lo + chunk] = lnZ + mean_e / tt
        out["heat"][lo:lo + chunk] = var_e / tt ** 2
        sz = p @ states.sz
        out["sz"][lo:lo + chunk] = sz
        out["T_chi"][lo:lo + chunk] = p @ states.spin_square - sz * sz
        for name, d in states.scalars.items():
            out[name][lo:lo + chunk] = p @ d
    return out


def impurity_thermodynamics_fdm(records, temperatures, n_channels: int = 1,
                                bath_records=None, chain_onsite=None, chain_hopping=None) -> ThermoCurve:
    """Impurity contributions from the full density matrix of the impurity run and of the bath.

    Parameters
    ----------
    records : list of IterationRecord
        The impurity run (impurity plus chain sites 0..n at shell n).
    temperatures : array_like (K,)
        Ascending temperatures (units of D).
    n_channels : int
    bath_records : list of IterationRecord, optional
        A bath-only run on the same chain sites with the same truncation (the reference
        whose errors cancel those of the impurity run).  Its last shell must be the same
        iteration as the impurity run's.
    chain_onsite, chain_hopping : ndarray, optional
        The chain (units of D); used for the exact single-particle reference of the whole
        chain 0..N when ``bath_records`` is None.

    Returns
    -------
    ThermoCurve
        ``T_chi``, ``entropy``, ``heat`` (impurity contributions) and ``extra`` with
        the impurity averages and ``free_energy`` (F_imp, units of D); ``iteration`` is None.
    """
    T = np.asarray(temperatures, dtype=float)
    N = records[-1].index

    def thermo_of(recs):
        return chain_thermodynamics(shell_states(recs, n_channels), T)

    imp = thermo_of(records)
    if bath_records is not None:
        if bath_records[-1].index != N:
            raise ValueError(f"bath run ends at iteration {bath_records[-1].index}, impurity run at {N}")
        ref = thermo_of(bath_records)
    else:
        ons, hop = np.asarray(chain_onsite, float)[:N + 1], np.asarray(chain_hopping, float)[:N]
        ref = {k: np.empty(len(T)) for k in ("T_chi", "entropy", "heat", "free_energy")}
        for i, t in enumerate(T):
            fr = free_chain_thermodynamics(ons, hop, float(t), n_channels)
            for k in ref:
                ref[k][i] = fr[k]
    extra = {name: imp[name] for name in sorted(records[-1].scalars)}
    if records[-1].twice_sz is not None:          # the labels resolve S_z: the magnetization is known
        extra["total_sz"] = imp["sz"]
    extra["free_energy"] = imp["free_energy"] - ref["free_energy"]
    return ThermoCurve(T, imp["T_chi"] - ref["T_chi"], imp["entropy"] - ref["entropy"], imp["heat"] - ref["heat"],
                       extra, None)


def default_temperatures(lowest: float, highest: float, per_decade: int = 10) -> np.ndarray:
    """Log-spaced temperatures from ``lowest`` to ``highest`` (units of D), about ``per_decade`` per decade."""
    n = max(2, int(round(math.log10(highest / lowest) * per_decade)) + 1)
    return np.geomspace(lowest, highest, n)
