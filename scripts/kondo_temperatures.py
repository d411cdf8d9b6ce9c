#!/usr/bin/env python
"""Kondo temperatures of the spin-1/2 Kondo model for several ρJ and Λ (a table for the README).

    python scripts/kondo_temperatures.py                 # ρJ = 0.1 0.15 0.2 0.3, Λ = 2 2.5 3 4, defaults
    python scripts/kondo_temperatures.py --exchange 0.15 --Lambda 2 3 --scheme wilson --no-correction
    python scripts/kondo_temperatures.py --thermodynamics conventional

Prints both Kondo temperatures (Wilson's χ_imp(0) = w/(4T_K), w = 0.4107, and the crossover
T_K χ(T_K) = 0.07), 4 T_K χ_imp(0) with T_K from the crossover, the Wilson ratio and the wall time, and
the config used.  Everything not given on the command line is nrgsolve's default (adaptive
discretization, full-density-matrix thermodynamics, 2 twists).
"""

from __future__ import annotations

import argparse
import sys
import time

CONFIG = """
[impurity]
model = "kondo"
exchange = {rhoJ}
[discretization]
Lambda = {Lam}
twists = {twists}
scheme = "{scheme}"
wilson_correction = {corr}
[run]
kept_states = {kept}
lowest_temperature = {lowest}
thermodynamics = "{thermo}"
"""


def main(argv=None):
    from nrgsolve.config import parse_config
    from nrgsolve.solve import solve

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--exchange", type=float, nargs="+", default=[0.1, 0.15, 0.2, 0.3])
    p.add_argument("--Lambda", type=float, nargs="+", default=[2.0, 2.5, 3.0, 4.0])
    p.add_argument("--twists", type=int, default=2)
    p.add_argument("--kept", type=int, nargs="+", default=None,
                   help="kept states per Λ (default 2000 for Λ <= 2, 1000 otherwise)")
    p.add_argument("--scheme", default="adaptive", choices=["adaptive", "wilson"])
    p.add_argument("--no-correction", action="store_true", help="Wilson scheme without the A_Λ correction")
    p.add_argument("--thermodynamics", default="full-density-matrix", choices=["full-density-matrix", "conventional"])
    p.add_argument("--workers", type=int, default=2)
    a = p.parse_args(argv)
    print(f"{'ρJ':>5} {'Λ':>4} {'kept':>5} {'T_K (Wilson)':>13} {'T_K (crossover)':>16} {'4 T_K χ(0)':>11} {'R':>6} {'time':>6}")
    for i, Lam in enumerate(a.Lambda):
        kept = a.kept[i] if a.kept else (2000 if Lam <= 2.0 else 1000)
        for rhoJ in a.exchange:
            # reach three decades below the crossover estimate ~ exp(-1/ρJ)
            import math
            lowest = min(1e-8, 3e-6 * math.sqrt(rhoJ) * math.exp(-1 / rhoJ))
            text = CONFIG.format(rhoJ=rhoJ, Lam=Lam, twists=a.twists, kept=kept, lowest=f"{lowest:.1e}",
                                 corr=str(not a.no_correction).lower(), scheme=a.scheme, thermo=a.thermodynamics)
            t0 = time.perf_counter()
            res = solve(parse_config(text, "kondo-temperatures"), workers=a.workers)
            s = res.summary
            f = lambda v, fmt: "not reached" if v is None else format(v, fmt)
            w = 4 * s.kondo_temperature_crossover * s.chi_zero if (s.chi_zero and s.kondo_temperature_crossover) else None
            print(f"{rhoJ:5.2f} {Lam:4.1f} {kept:5d} {f(s.kondo_temperature_wilson, '13.4e')} "
                  f"{f(s.kondo_temperature_crossover, '16.4e')} {f(w, '11.4f')} {f(s.wilson_ratio, '6.3f')} "
                  f"{time.perf_counter() - t0:6.1f}", flush=True)
    print("config used (with ρJ, Λ, kept_states, lowest_temperature filled in):" + CONFIG)
    return 0


if __name__ == "__main__":
    sys.exit(main())
