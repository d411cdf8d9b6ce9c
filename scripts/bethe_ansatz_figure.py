"""Run one Kondo config and draw it against the exact Bethe-ansatz curves.

    python scripts/bethe_ansatz_figure.py [--config configs/kondo_exact.toml] [--data DIR]

Writes ``results/kondo_vs_exact.png``: T·χ_imp, S_imp and C_imp of the run
against T/T_K, T_K = w/(4 χ_imp(0)) of the run itself with w = 0.4107, beside
the exact curves of nrgsolve.exact (thermodynamic Bethe ansatz), and prints
the largest deviations over 0.01 ≤ T/T_K ≤ 10.  The figure is drawn from the
stored result file.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from nrgsolve.config import load_config  # noqa: E402
from nrgsolve.exact import WILSON_NUMBER_EXACT, kondo_thermodynamics  # noqa: E402
from nrgsolve.exact.runs import deviation_from_exact  # noqa: E402
from nrgsolve.observables.kondo_scale import kondo_summary  # noqa: E402
from nrgsolve.plots import new_figure  # noqa: E402
from nrgsolve.solve import solve  # noqa: E402
from nrgsolve.store import read_result, write_result  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--config", default=str(ROOT / "configs" / "kondo_exact.toml"), help="one-channel Kondo config")
    ap.add_argument("--data", help="keep the result file in this folder (default: a temporary folder)")
    ap.add_argument("--output", default=str(ROOT / "results" / "kondo_vs_exact.png"), help="PNG to write")
    args = ap.parse_args(argv)
    spec = load_config(args.config)
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(args.data) if args.data else Path(tmp)
        data.mkdir(parents=True, exist_ok=True)
        path = data / (Path(args.config).stem + ".h5")
        write_result(solve(spec), path, force=True)
        stored = read_result(path)
    th = stored.thermo
    T = np.asarray(th["temperature"], float)
    curves = {"T_chi": np.asarray(th["T_chi"]), "entropy": np.asarray(th["entropy"]),
              "heat": np.asarray(th["heat"])}
    chi0 = kondo_summary(T, curves["T_chi"], curves["heat"]).chi_zero
    if not chi0:
        print("the run does not reach χ_imp(0); lower run.lowest_temperature", file=sys.stderr)
        return 1
    tk = WILSON_NUMBER_EXACT / (4 * chi0)
    dev = deviation_from_exact(T, curves["T_chi"], curves["entropy"], curves["heat"], chi0)
    x = np.logspace(-4, 4, 400)
    ex = kondo_thermodynamics(x)
    fig, axes = new_figure(1, 3, figsize=(13.0, 4.0))
    labels = {"T_chi": r"$T\chi_\mathrm{imp}$  [$(g\mu_B)^2/k_B$]", "entropy": r"$S_\mathrm{imp}$  [$k_B$]",
              "heat": r"$C_\mathrm{imp}$  [$k_B$]"}
    exact = {"T_chi": ex.t_chi, "entropy": ex.entropy, "heat": ex.heat_capacity}
    d = spec.discretization
    run_label = (f"NRG: ρJ = {spec.impurity.exchange:g}, Λ = {d.Lambda:g}, {d.twists} twists, "
                 f"{spec.run.kept_states} states")
    for ax, key in zip(axes, ("T_chi", "entropy", "heat")):
        keep = (T / tk >= x[0]) & (T / tk <= x[-1])
        ax.plot(T[keep] / tk, curves[key][keep], "-", lw=2.2, color="tab:blue", alpha=0.7, label=run_label)
        ax.plot(x, exact[key], "k--", lw=1.1, label="exact (Bethe ansatz)")
        d_abs, ref, _ = dev[key]
        ax.set_title(f"largest deviation {100 * d_abs / ref:.2f} % (0.01 ≤ T/T_K ≤ 10)", fontsize=9)
        ax.set_xscale("log")
        ax.set_xlabel(r"$T/T_K$   ($T_K = w/4\chi_\mathrm{imp}(0)$, $w = 0.4107$)")
        ax.set_ylabel(labels[key])
        ax.grid(alpha=0.25, which="both")
    axes[0].legend(fontsize=8, frameon=False, loc="upper left")
    out = Path(args.output)
    out.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(out, dpi=100)
    print(f"T_K = {tk:.6g} D")
    for key, what in (("T_chi", "T·χ_imp"), ("entropy", "S_imp"), ("heat", "C_imp")):
        d_abs, ref, at = dev[key]
        print(f"{what}: largest deviation {d_abs:.3g} = {100 * d_abs / ref:.2f} % at T/T_K = {at:.3g}")
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
