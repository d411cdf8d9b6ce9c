"""The one place that decides what about a run is suspicious: the warnings a run prints and stores, and
the ones ``nrgsolve inspect`` derives again from a stored file (so old files are checked by today's rules).

Pure functions of plain numbers; temperatures and energies in units of the half-bandwidth D.
"""

from __future__ import annotations

import math

import numpy as np

from .chain import energy_scale

__all__ = ["DISCARDED_WEIGHT_LIMIT", "FDM_REACH_WARNING", "LOW_TEMPERATURE_SLACK", "KONDO_SEARCH_LEVEL",
           "run_warnings"]

#: Largest discarded thermal weight per iteration (fraction of the Boltzmann weight at T_N carried by the
#: discarded states) before a run warns.  Measured on configs/kondo.toml (Λ = 2.5, 2 twists): 600 kept
#: states give weights up to 9e-3 and change T·χ_imp by 5e-5, S_imp by 1.1e-3 and T_K by 1e-4 relative to
#: 1500 kept states; weights above 1e-2 mean errors of order 1e-3 or more.
DISCARDED_WEIGHT_LIMIT = 1e-2
#: Full density matrix: warn when the chain ends less than this factor below the lowest temperature.
FDM_REACH_WARNING = 3.0
#: Conventional thermodynamics: the lowest temperature counts as reached when it is at most this factor
#: above the requested one.
LOW_TEMPERATURE_SLACK = 1.5
#: T·χ_imp below which the crossover Kondo temperature is looked for ((g μ_B)²/k_B).
KONDO_SEARCH_LEVEL = 0.07


def run_warnings(spec, max_discarded_weight: float, temperature, T_chi, kondo_temperature_crossover,
                 chain_sites=None, twists=None) -> list[str]:
    """Everything suspicious about a run, one sentence each.

    Parameters
    ----------
    spec : RunSpec
    max_discarded_weight : float
        Largest discarded thermal weight of any iteration of any twist (NaN: unknown).
    temperature, T_chi : array_like
        The z-averaged thermodynamics (D; (g μ_B)²/k_B), ascending temperature.
    kondo_temperature_crossover : float or None
        None or NaN when not reached.
    chain_sites, twists : sequence, optional
        Sites of each twist's chain and the twists z (to check how far the chain reaches).

    Returns
    -------
    list of str
    """
    out = []
    w = float(max_discarded_weight)
    if math.isfinite(w) and w > DISCARDED_WEIGHT_LIMIT:
        out.append(f"truncation too aggressive: discarded thermal weight up to {w:.2e} > {DISCARDED_WEIGHT_LIMIT:g} "
                   f"(increase run.kept_states)")
    T = np.asarray(temperature, dtype=float)
    d = spec.discretization
    if T.size == 0:
        out.append(f"lowest temperature not reached: no temperature stored (requested "
                   f"{spec.run.lowest_temperature:.3g} D)")
    else:
        fdm = spec.run.thermodynamics == "full-density-matrix"
        want = min(spec.run.temperatures) if (fdm and spec.run.temperatures) else spec.run.lowest_temperature
        low = float(T[0])
        if low > LOW_TEMPERATURE_SLACK * want:
            out.append(f"lowest temperature not reached: {low:.3g} D > requested {want:.3g} D")
        if fdm and chain_sites is not None and len(chain_sites):
            last = max(energy_scale(n - 1, d.Lambda, z, spec.bath.half_bandwidth, d.scheme)
                       for n, z in zip(chain_sites, twists))
            if last > low / FDM_REACH_WARNING:
                out.append(f"the chain ends at ω_N = {last:.3g} D, not far enough below the lowest temperature "
                           f"{low:.3g} D (want ω_N ≤ T/{FDM_REACH_WARNING:g}): the lowest temperatures see the "
                           f"finite chain")
    tk = math.nan if kondo_temperature_crossover is None else float(kondo_temperature_crossover)
    imp = spec.impurity
    if imp.declaration.kondo_scale(imp) and not math.isfinite(tk):
        if T.size and np.all(np.asarray(T_chi, dtype=float) < KONDO_SEARCH_LEVEL):
            out.append(f"Kondo temperature not found: T·χ_imp is below {KONDO_SEARCH_LEVEL} already at the "
                       f"highest temperature computed ({float(T[-1]):.3g} D); the Kondo scale is at or above it")
        else:
            out.append(f"Kondo temperature not reached (T·χ_imp never falls below {KONDO_SEARCH_LEVEL}: "
                       f"unscreened, or run not low enough)")
    return out
