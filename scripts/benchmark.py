#!/usr/bin/env python
"""Benchmark of the iterative diagonalization (run it, don't time it in tests).

Standard problem: symmetric Anderson model (U = 0.1 D, Γ = 0.01 D), flat band,
Λ = 2, one twist, a fixed number of iterations.  For every kept_states and
symmetry mode it prints the wall time per iteration, the time spent inside
the dense diagonalizations (LAPACK through scipy.linalg.eigh), their ratio and
the peak resident memory.  Each case runs in its own process so that the
memory figures do not mix.  Beside the engine's own diagonalization time it
prints the time LAPACK alone needs for blocks of the same sizes (random symmetric
matrices, same driver, one call per block of every iteration), the floor any
implementation of the same symmetry must pay.  Further parts time a standard
Kondo run (Λ = 2, 1000 kept states, one twist, down to T = 1e-10 D) and the
two-channel Kondo model (Λ = 3, β̄ = 1, conventional thermodynamics) through the
driver, with its residual entropy against ½ ln 2.

Usage::

    python scripts/benchmark.py                      # kept 500 1000 2000 4000, isospin, su2 and abelian
    python scripts/benchmark.py --kept 1000 2000 --symmetry su2 --iterations 30
    python scripts/benchmark.py --only-dynamics --kept 1000 --symmetry su2 abelian --iterations 30
    python scripts/benchmark.py --only-two-channel --two-channel-kept 1500 3000
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time


def one_case(kept: int, symmetry: str, iterations: int, driver: str, threads: int = 1,
             observables: bool = True) -> dict:
    import resource

    import numpy as np

    from nrgsolve.bath import make_bath
    from nrgsolve.chain import build_chain
    from nrgsolve.engine import make_symmetry, run_chain, EngineSettings
    from nrgsolve.engine.iterate import Step
    from nrgsolve.models import anderson_block
    from nrgsolve.chain import energy_scale

    Lam = 2.0
    chain = build_chain(make_bath("flat"), Lam, 1.0, iterations + 1)
    V = np.sqrt(0.01 * chain.coupling_sq)
    sym = make_symmetry(symmetry)
    blk = sym.from_explicit(anderson_block(-0.05, 0.1, V))
    if not observables:        # engine alone: no impurity operators (n_d, double occupancy) carried along
        blk.scalars = {}
    steps = [Step(n, (float(chain.onsite[n]),), ((V if n == 0 else float(chain.hopping[n - 1])),),
                  energy_scale(n, Lam)) for n in range(iterations + 1)]
    from threadpoolctl import threadpool_limits
    t0 = time.perf_counter()
    with threadpool_limits(limits=threads):
        res = run_chain(blk, -1, energy_scale(-1, Lam), sym, steps,
                        EngineSettings(kept_states=kept, driver=driver, particle_hole_symmetric=True))
    wall = time.perf_counter() - t0
    big = max(int(r.block_dims[0]) for r in res.records)
    with threadpool_limits(limits=threads):
        lapack = lapack_alone([d for r in res.records for d in r.block_dims], driver)
    return {"kept": kept, "symmetry": symmetry, "iterations": len(res.records), "wall": wall,
            "diag": res.diag_seconds, "lapack": lapack, "largest_block": big,
            "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}


def lapack_alone(dims, driver: str) -> float:
    """Seconds scipy.linalg.eigh (LAPACK) needs for random symmetric matrices of the given sizes."""
    import numpy as np
    import scipy.linalg as sla

    rng = np.random.default_rng(1)
    total = 0.0
    for d in dims:
        d = int(d)
        if d == 0:
            continue
        a = rng.standard_normal((d, d))
        a += a.T
        t = time.perf_counter()
        sla.eigh(a, driver=driver, overwrite_a=True, check_finite=False)
        total += time.perf_counter() - t
    return total


def two_channel_case(kept: int, symmetry: str) -> dict:
    """Two-channel Kondo model (ρJ = 0.15 in both channels), Λ = 3, β̄ = 1, conventional thermodynamics,
    one twist, down to T = 1e-10 D, through the driver: wall time and the lowest-temperature entropy."""
    import math

    from nrgsolve.config import parse_config
    from nrgsolve.solve import solve

    spec = parse_config(f"""
[impurity]
model = "two-channel-kondo"
exchange = 0.15
[discretization]
Lambda = 3.0
twists = 1
[run]
kept_states = {kept}
beta_bar = 1.0
thermodynamics = "conventional"
lowest_temperature = 1e-10
symmetry = "{symmetry}"
bath_cache = false
""", "benchmark-two-channel")
    t0 = time.perf_counter()
    res = solve(spec, workers=1)
    wall = time.perf_counter() - t0
    S = float(res.thermo.entropy[0])              # the lowest temperature
    return {"wall": wall, "diag": sum(t.diag_seconds for t in res.twists), "entropy": S,
            "deviation": S / (0.5 * math.log(2.0)) - 1.0, "symmetry": res.spec.run.symmetry}


def kondo_case() -> dict:
    from nrgsolve.config import parse_config
    from nrgsolve.solve import solve

    spec = parse_config("""
[impurity]
model = "kondo"
exchange = 0.15
[discretization]
Lambda = 2.0
twists = 1
[run]
kept_states = 1000
lowest_temperature = 1e-10
""", "benchmark-kondo")
    t0 = time.perf_counter()
    res = solve(spec, workers=1)
    return {"wall": time.perf_counter() - t0, "diag": sum(t.diag_seconds for t in res.twists),
            "iterations": len(res.twists[0].flow.iteration), "T_K": res.summary.kondo_temperature_crossover}


def thermodynamics_case() -> dict:
    """Cost of full-density-matrix thermodynamics against the forward runs it reads, and of a run with
    error estimates against a plain one (the Kondo model at the defaults, one process)."""
    from nrgsolve.config import parse_config
    from nrgsolve.solve import solve
    from nrgsolve.observables import thermo_fdm

    text = """
[impurity]
model = "kondo"
exchange = 0.15
[run]
lowest_temperature = 1e-9
{extra}
"""
    spent = {"fdm": 0.0}
    kernel = thermo_fdm.chain_thermodynamics

    def timed(*args, **kw):
        t = time.perf_counter()
        try:
            return kernel(*args, **kw)
        finally:
            spent["fdm"] += time.perf_counter() - t

    thermo_fdm.chain_thermodynamics = timed
    try:
        t0 = time.perf_counter()
        plain = solve(parse_config(text.format(extra=""), "benchmark-thermo"), workers=1)
        wall = time.perf_counter() - t0
    finally:
        thermo_fdm.chain_thermodynamics = kernel
    t0 = time.perf_counter()
    solve(parse_config(text.format(extra="error_estimate = true"), "benchmark-errors"), workers=1)
    wall_err = time.perf_counter() - t0
    return {"wall": wall, "fdm": spent["fdm"], "diag": sum(t.diag_seconds for t in plain.twists),
            "points": len(plain.thermo.temperature), "wall_error_estimate": wall_err}


def spectral_case(kept: int, symmetry: str, iterations: int, threads: int = 1) -> dict:
    """The standard Anderson problem with the spectral pass (full density matrix, T = 0)."""
    import numpy as np

    from nrgsolve.bath import make_bath
    from nrgsolve.chain import build_chain
    from nrgsolve.engine import make_symmetry, EngineSettings
    from nrgsolve.engine.iterate import Step
    from nrgsolve.models import anderson_block
    from nrgsolve.engine.backward import spectral_run, impurity_operators
    from nrgsolve.chain import energy_scale

    Lam = 2.0
    chain = build_chain(make_bath("flat"), Lam, 1.0, iterations + 1)
    V = np.sqrt(0.01 * chain.coupling_sq)
    sym = make_symmetry(symmetry)
    model = anderson_block(-0.05, 0.1, V)
    steps = [Step(n, (float(chain.onsite[n]),), ((V if n == 0 else float(chain.hopping[n - 1])),),
                  energy_scale(n, Lam)) for n in range(iterations + 1)]
    from threadpoolctl import threadpool_limits
    with threadpool_limits(limits=threads):
        _, ds = spectral_run(sym.from_explicit(model), -1, energy_scale(-1, Lam), sym, steps,
                             EngineSettings(kept_states=kept, particle_hole_symmetric=True),
                             impurity_operators(sym, model), [0.0])
    return {"forward": ds.forward_seconds, "spectral": ds.spectral_seconds}


def dynamics_case(kept: int, symmetry: str, iterations: int, model: str, quantities, temperatures=(0.0,),
                  threads: int = 1) -> dict:
    """The backward pass for a set of ``spectral.quantities``: forward and extra seconds.

    ``model``: "anderson" (symmetric, U = 0.1 D, Γ = 0.01 D) or "kondo" (ρJ = 0.15); Λ = 2, one twist.
    """
    import numpy as np

    from nrgsolve.bath import make_bath
    from nrgsolve.chain import build_chain
    from nrgsolve.engine import make_symmetry, EngineSettings
    from nrgsolve.engine.iterate import Step
    from nrgsolve.models import anderson_block, kondo_block
    from nrgsolve.engine.backward import spectral_run
    from nrgsolve.observables.dynamics import backward_operators
    from nrgsolve.chain import energy_scale

    Lam = 2.0
    chain = build_chain(make_bath("flat"), Lam, 1.0, iterations + 2)
    sym = make_symmetry(symmetry)
    if model == "anderson":
        V = np.sqrt(0.01 * chain.coupling_sq)
        block, first, level = anderson_block(-0.05, 0.1, V), 0, True
    else:
        V = None
        block, first, level = kondo_block(0.15 / 0.5), 1, False
    steps = [Step(n, (float(chain.onsite[n]),), ((V if n == 0 else float(chain.hopping[n - 1])),),
                  energy_scale(n, Lam)) for n in range(first, first + iterations + 1)]
    ops, corr = backward_operators(sym, block, quantities, level)
    from threadpoolctl import threadpool_limits
    with threadpool_limits(limits=threads):
        _, ds = spectral_run(sym.from_explicit(block), first - 1, energy_scale(first - 1, Lam), sym, steps,
                             EngineSettings(kept_states=kept, particle_hole_symmetric=True), ops, list(temperatures),
                             corr)
    return {"forward": ds.forward_seconds, "spectral": ds.spectral_seconds}


def dynamics_table(kept: int, symmetry: str, iterations: int, threads: int = 1):
    """Print the cost of each spectral quantity relative to the forward run."""
    cases = [("anderson", ("impurity",)), ("anderson", ("spin-susceptibility",)),
             ("anderson", ("impurity", "t-matrix", "spin-susceptibility")),
             ("kondo", ("t-matrix",)), ("kondo", ("spin-susceptibility",)),
             ("kondo", ("t-matrix", "spin-susceptibility"))]
    print(f"backward pass, T = 0, kept {kept}, {symmetry}, Λ = 2, {iterations} iterations, one twist "
          f"(extra time of the backward pass / forward run)")
    for model, q in cases:
        c = dynamics_case(kept, symmetry, iterations, model, q, threads=threads)
        print(f"  {model:9s} {' + '.join(q):45s} forward {c['forward']:6.2f} s  backward {c['spectral']:6.2f} s  "
              f"ratio {c['spectral'] / c['forward']:.2f}", flush=True)


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--kept", type=int, nargs="+", default=[500, 1000, 2000, 4000])
    p.add_argument("--symmetry", nargs="+", default=["isospin", "su2", "abelian"],
                   choices=["isospin", "su2", "abelian"])
    p.add_argument("--iterations", type=int, default=25)
    p.add_argument("--driver", default="evd", choices=["evd", "evr", "ev"])
    p.add_argument("--threads", type=int, default=1, help="BLAS threads")
    p.add_argument("--no-observables", action="store_true",
                   help="do not carry the impurity operators n_d and n_d↑n_d↓ (engine cost alone)")
    p.add_argument("--no-kondo", action="store_true", help="skip the standard Kondo run")
    p.add_argument("--no-spectral", action="store_true", help="skip the spectral-pass timing")
    p.add_argument("--no-thermodynamics", action="store_true",
                   help="skip the cost of full-density-matrix thermodynamics and of error estimates")
    p.add_argument("--only-thermodynamics", action="store_true", help="run only that part")
    p.add_argument("--only-dynamics", action="store_true",
                   help="only the cost of each spectral quantity (impurity, t-matrix, spin-susceptibility) "
                        "relative to the forward run")
    p.add_argument("--two-channel-kept", type=int, nargs="*", default=[1500],
                   help="kept states of the two-channel Kondo case (none: skip it)")
    p.add_argument("--two-channel-symmetry", nargs="+", default=["isospin", "su2"], choices=["isospin", "su2"])
    p.add_argument("--only-two-channel", action="store_true", help="run only the two-channel case")
    p.add_argument("--sweep-points", type=int, default=10,
                   help="points of the Kondo-coupling sweep case (0: skip it)")
    p.add_argument("--only-sweep", action="store_true", help="run only the sweep case")
    p.add_argument("--case", help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.only_dynamics:
        for kept in a.kept:
            for sym in a.symmetry:
                dynamics_table(kept, sym, a.iterations, a.threads)
        return 0
    if a.case:
        kept, sym = a.case.split(":")
        if kept.startswith("2ch"):
            print(json.dumps(two_channel_case(int(kept[3:]), sym)))
        else:
            print(json.dumps(one_case(int(kept), sym, a.iterations, a.driver, a.threads, not a.no_observables)))
        return 0
    if a.only_two_channel:
        run_two_channel(a)
        return 0
    if a.only_sweep or a.sweep_points:
        if a.sweep_points:
            c = sweep_case(a.sweep_points, 1000)
            print(f"Kondo sweep, {a.sweep_points} values of ρJ in 0.1 … 0.3 (Λ = 3, 2 twists, 1000 kept, full density "
                  f"matrix, down to 1e-8 D, one process): {a.sweep_points} independent su2 runs without the bath cache "
                  f"{c['old']:.1f} s; the sweep with the defaults (auto symmetry, cached bath runs: {c['computed']} "
                  f"computed, {c['reused']} reused) {c['new']:.1f} s = {c['new'] / c['old']:.2f} x", flush=True)
        if a.only_sweep:
            return 0
    if not a.no_thermodynamics:
        c = thermodynamics_case()
        print(f"Kondo model at the defaults (ρJ = 0.15, Λ = 3, 2 twists, 1000 kept, T down to 1e-9 D, one process): "
              f"{c['wall']:.1f} s wall, {c['diag']:.1f} s in diagonalizations; full-density-matrix thermodynamics "
              f"at {c['points']} temperatures (impurity and bath, both twists) {c['fdm']:.2f} s = "
              f"{100 * c['fdm'] / c['wall']:.1f} % of the run; with error estimates {c['wall_error_estimate']:.1f} s "
              f"= {c['wall_error_estimate'] / c['wall']:.1f} x the plain run", flush=True)
        if a.only_thermodynamics:
            return 0
    print(f"symmetric Anderson model, Λ = 2, {a.iterations} iterations, one twist, LAPACK driver {a.driver}, "
          f"{a.threads} BLAS thread(s), impurity observables {'off' if a.no_observables else 'on'}")
    print(f"{'kept':>6} {'mode':>8} {'s/iter':>8} {'diag s/iter':>12} {'LAPACK s/iter':>14} {'wall/diag':>10} "
          f"{'wall/LAPACK':>12} {'largest block':>14} {'peak MB':>8}")
    rows = {}
    for kept in a.kept:
        for sym in a.symmetry:
            out = subprocess.run([sys.executable, __file__, "--case", f"{kept}:{sym}", "--iterations",
                                  str(a.iterations), "--driver", a.driver, "--threads", str(a.threads)]
                                 + (["--no-observables"] if a.no_observables else []), capture_output=True, text=True)
            if out.returncode != 0:
                print(f"{kept:>6} {sym:>8} failed: {out.stderr.strip().splitlines()[-1]}")
                continue
            r = json.loads(out.stdout)
            rows[(kept, sym)] = r
            n = r["iterations"]
            print(f"{kept:>6} {sym:>8} {r['wall'] / n:8.3f} {r['diag'] / n:12.3f} {r['lapack'] / n:14.3f} "
                  f"{r['wall'] / r['diag']:10.2f} {r['wall'] / r['lapack']:12.2f} {r['largest_block']:>14} "
                  f"{r['peak_mb']:8.0f}", flush=True)
    for kept in a.kept:
        for other in ("abelian", "isospin"):
            if (kept, "su2") in rows and (kept, other) in rows:
                print(f"kept {kept}: {other} / su2 wall time = "
                      f"{rows[(kept, other)]['wall'] / rows[(kept, 'su2')]['wall']:.2f}")
    run_two_channel(a)
    if not a.no_kondo:
        k = kondo_case()
        print(f"standard Kondo run (ρJ = 0.15, Λ = 2, 1000 kept, one twist, T down to 1e-10 D, impurity and bath runs): "
              f"{k['wall']:.1f} s wall, {k['diag']:.1f} s in diagonalizations, {k['iterations']} iterations, "
              f"T_K = {k['T_K']:.4g} D")
    if not a.no_spectral:
        for kept in a.kept:
            for sym in a.symmetry:
                sc = spectral_case(kept, sym, a.iterations, a.threads)
                print(f"spectral pass (T = 0, full density matrix) kept {kept} {sym}: forward {sc['forward']:.1f} s, "
                      f"spectral {sc['spectral']:.1f} s, spectral/forward = {sc['spectral'] / sc['forward']:.2f}",
                      flush=True)
    return 0


def sweep_case(points: int, kept: int) -> dict:
    """A sweep over the Kondo coupling ρJ = 0.1 … 0.3 (defaults otherwise: Λ = 3, 2 twists, full density
    matrix, down to 1e-8 D, one process): ``points`` independent runs as before this change (su2, no bath
    cache) against the sweep with the new defaults (symmetry "auto", bath runs cached in a fresh folder)."""
    import os
    import tempfile

    import numpy as np

    from nrgsolve.config import parse_config
    from nrgsolve.solve import solve
    from nrgsolve.sweep import run_sweep
    from nrgsolve import bath_cache

    values = [float(v) for v in np.linspace(0.1, 0.3, points)]
    base = f"""
[impurity]
model = "kondo"
exchange = 0.2
[run]
kept_states = {kept}
lowest_temperature = 1e-8
"""
    t0 = time.perf_counter()
    for v in values:
        solve(parse_config(base.replace("exchange = 0.2", f"exchange = {v!r}")
                           + 'symmetry = "su2"\nbath_cache = false\n', "old"), workers=1)
    old = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as cache, tempfile.TemporaryDirectory() as out:
        os.environ["NRGSOLVE_CACHE_DIR"] = cache
        spec = parse_config(base + f'\n[sweep]\n"impurity.exchange" = {values!r}\n', "sweep.toml")
        bath_cache.STATS.computed = bath_cache.STATS.reused = 0
        t0 = time.perf_counter()
        run_sweep(spec, out, jobs=1)
        new = time.perf_counter() - t0
    return {"old": old, "new": new, "computed": bath_cache.STATS.computed, "reused": bath_cache.STATS.reused}


def run_two_channel(a):
    """The two-channel Kondo case, each run in its own process."""
    for kept in a.two_channel_kept:
        for sym in a.two_channel_symmetry:
            out = subprocess.run([sys.executable, __file__, "--case", f"2ch{kept}:{sym}"], capture_output=True,
                                 text=True)
            if out.returncode != 0:
                print(f"two-channel Kondo, kept {kept}, {sym}: failed: {out.stderr.strip().splitlines()[-1]}")
                continue
            r = json.loads(out.stdout)
            print(f"two-channel Kondo (ρJ = 0.15, Λ = 3, β̄ = 1, conventional, one twist, T down to 1e-10 D, "
                  f"bath run included), kept {kept}, {sym}: {r['wall']:.1f} s wall, {r['diag']:.1f} s in "
                  f"diagonalizations, S_imp(lowest T) = {r['entropy']:.4f} = ½ ln 2 × (1 {r['deviation']:+.3%})",
                  flush=True)


if __name__ == "__main__":
    sys.exit(main())
