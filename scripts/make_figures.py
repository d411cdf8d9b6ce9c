"""Run the shipped demo configs and draw the figures in results/.

    python scripts/make_figures.py [--kept-states N] [--jobs N] [--data DIR]

Writes (PNG only, small):

* ``results/kondo_flow.png``: level flow of configs/kondo.toml;
* ``results/demo_T_chi.png``, ``results/demo_entropy.png``: T·χ_imp and S_imp
  of the single-run demo configs;
* ``results/sweep_exchange_T_chi.png``: the configs/sweep_exchange.toml points
  on the T/T_K axis;
* ``results/anderson_spectral.png``, ``results/anderson_conductance.png``: A(ω, T)
  and G(T) of configs/anderson_spectral.toml;
* ``results/kondo_t_matrix.png``, ``results/alloy_resistivity.png``: −πρ Im T(ω) of
  configs/kondo_alloy.toml, and the dilute-alloy resistivity ρ(T)/ρ(0) of that run and of
  ρJ = 0.15 against T/T_K.

The result files go to a temporary folder (or ``--data``); also regenerates
docs/config.md.  Every figure is drawn from the stored files, like the
``nrgsolve plot`` commands do.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from nrgsolve.config import load_config  # noqa: E402
from nrgsolve.plots import (plot_conductance, plot_flow, plot_spectral, plot_thermo, plot_transport,  # noqa: E402
                            save_figure)
from nrgsolve.solve import solve  # noqa: E402
from nrgsolve.store import read_result, write_result  # noqa: E402
from nrgsolve.sweep import run_sweep  # noqa: E402

import make_docs  # noqa: E402

SINGLE = ["kondo", "kondo_ferromagnetic", "anderson_symmetric", "anderson_asymmetric", "resonant_level"]


def _spec(name, kept_states):
    spec = load_config(ROOT / "configs" / f"{name}.toml")
    if kept_states:
        spec = spec.with_value("run.kept_states", kept_states)
    return spec


def dynamics_figures(data: Path, out: Path, kept_states: int = 0) -> list:
    """T-matrix and alloy resistivity of configs/kondo_alloy.toml (and the same at ρJ = 0.15)."""
    runs = []
    for J in (0.2, 0.15):
        spec = _spec("kondo_alloy", kept_states).with_value("impurity.exchange", J)
        runs.append(read_result(write_result(solve(spec), data / f"kondo_alloy_{J}.h5", force=True)))
        print(f"ran kondo_alloy at ρJ = {J}")
    written = save_figure(plot_spectral(runs[0], quantity="t-matrix"), out / "kondo_t_matrix.png", force=True,
                          pdf=False)
    written += save_figure(plot_transport(runs, scale="kondo", normalized=True, labels=["ρJ = 0.2", "ρJ = 0.15"]),
                           out / "alloy_resistivity.png", force=True, pdf=False)
    return written


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--kept-states", type=int, default=0, help="override run.kept_states (default: as in the configs)")
    ap.add_argument("--jobs", type=int, default=2, help="parallel processes for the sweep")
    ap.add_argument("--data", help="keep the result files in this folder (default: a temporary folder)")
    args = ap.parse_args(argv)
    out = ROOT / "results"
    out.mkdir(exist_ok=True)
    make_docs.main()
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(args.data) if args.data else Path(tmp)
        data.mkdir(parents=True, exist_ok=True)
        stored = {}
        for name in SINGLE:
            spec = _spec(name, args.kept_states)
            path = write_result(solve(spec), data / f"{name}.h5", force=True)
            stored[name] = read_result(path)
            print(f"ran {name}")
        written = []
        written += save_figure(plot_flow(stored["kondo"], levels=12), out / "kondo_flow.png", force=True, pdf=False)
        labels = [n.replace("_", " ") for n in SINGLE]
        runs = [stored[n] for n in SINGLE]
        written += save_figure(plot_thermo(runs, "T_chi", labels=labels), out / "demo_T_chi.png", force=True,
                               pdf=False)
        written += save_figure(plot_thermo(runs, "entropy", labels=labels), out / "demo_entropy.png", force=True,
                               pdf=False)
        spectral = read_result(write_result(solve(_spec("anderson_spectral", args.kept_states)),
                                            data / "anderson_spectral.h5", force=True))
        written += save_figure(plot_spectral(spectral), out / "anderson_spectral.png", force=True, pdf=False)
        written += save_figure(plot_conductance([spectral], labels=["U/Γ = 10"]), out / "anderson_conductance.png",
                               force=True, pdf=False)
        written += dynamics_figures(data, out, args.kept_states)
        sweep = _spec("sweep_exchange", args.kept_states)
        outcome = run_sweep(sweep, data / "sweep_exchange", jobs=args.jobs, force=True)
        points = [read_result(outcome.folder / r["file"]) for r in outcome.rows]
        written += save_figure(plot_thermo(points, "T_chi", scale="kondo"), out / "sweep_exchange_T_chi.png",
                               force=True, pdf=False)
    for p in written:
        print(f"wrote {p} ({p.stat().st_size // 1024} kB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
