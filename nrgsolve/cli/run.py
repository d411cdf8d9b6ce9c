"""``nrgsolve run``: one configuration, all twists, one HDF5 result file."""

from __future__ import annotations

import sys
from pathlib import Path

from ..errors import NrgInputError
from .common import OVERWRITE_HINT, progress_bar

__all__ = ["add_command", "cmd_run"]


def _output_path(spec, override):
    if override is not None:
        if not override.strip():
            raise NrgInputError("--output: got an empty file name; allowed: a path ending in .h5")
        return Path(override)
    if spec.output.file:
        return Path(spec.output.file)
    return Path.cwd() / (Path(spec.config_path).stem + ".h5")


def cmd_run(args) -> int:
    from ..config import load_config
    from ..solve import solve, n_iterations, bath_from_spec
    from ..store import write_result, check_output_path
    from ..result import result_from_run
    from ..resources import check_resources, concurrent_workers, note

    spec = load_config(args.config)
    if spec.sweep.parameters:
        raise NrgInputError(f"{args.config}: has a [sweep] table; 'nrgsolve run' runs one configuration: "
                            f"use 'nrgsolve sweep {args.config}', or remove the [sweep] table")
    if args.error_estimate and not spec.run.error_estimate:
        spec = spec.with_value("run.error_estimate", True)
    if args.no_cache:
        spec = spec.with_value("run.bath_cache", False)
    out = _output_path(spec, args.output)
    flag = "--output" if args.output is not None else "output.file"
    if not str(out).endswith((".h5", ".hdf5")):
        raise NrgInputError(f"{flag}: got {str(out)[:200]!r}; allowed: a path ending in .h5")
    check_output_path(out, args.force, name=flag, create_folder=False, hint=OVERWRITE_HINT)
    bath = bath_from_spec(spec)
    workers = concurrent_workers(spec)
    est = check_resources(spec, bath, workers=workers)
    msg = note(est, workers)
    if msg and not args.quiet:
        print(f"nrgsolve: note: {msg}", file=sys.stderr)
    total = n_iterations(spec, bath)
    with progress_bar(total, args.quiet, f"{spec.impurity.model} ({spec.discretization.twists} twist(s))") as bar:
        result = solve(spec, progress=bar.update)
    stored = result_from_run(result)
    path = write_result(stored, out, overwrite=args.force, name=flag, hint=OVERWRITE_HINT)
    if not args.quiet:
        from ..inspect_result import summary_lines, dynamics_lines
        from ..uncertainty import headline_values
        from ..observables.kondo_scale import WILSON_NUMBER
        s, d = result.summary, spec.discretization
        scheme = d.scheme + ((" with A_Λ correction" if d.wilson_correction else " without A_Λ correction")
                             if d.scheme == "wilson" else "")
        print(f"model {spec.impurity.model}, Λ = {d.Lambda:g} ({scheme}), {d.twists} twist(s), "
              f"kept states {spec.run.kept_states}, symmetry {result.spec.run.symmetry}")
        print(f"thermodynamics: {spec.run.thermodynamics}; Kondo temperature (Wilson): χ(0) = w/4T_K, "
              f"w = {WILSON_NUMBER:.4f}; (crossover): T_K χ(T_K) = 0.07")
        for line in summary_lines(headline_values(result), result.uncertainties):
            print(line)
        if result.checks:
            print(f"uncertainties from two checking runs: {'; '.join(result.checks)}")
        if result.fixed_points is not None:
            print(f"fixed points: {result.fixed_points[1].text()}")
        for line in dynamics_lines(stored.summary):
            print(line)
        print(f"lowest temperature reached: {s.lowest_temperature_reached:.3g} D")
        print(f"wall time: {result.wall_seconds:.1f} s")
        for w in result.warnings:
            print(f"warning: {w}")
        print(f"wrote {path}")
    return 0


def add_command(sub) -> None:
    """Register ``run``."""
    r = sub.add_parser("run", help="run one config (all twists) and write an HDF5 result file")
    r.add_argument("config", help="TOML config file")
    r.add_argument("--output", "-o", help="result file (default: [output] file, or <config name>.h5 here)")
    r.add_argument("--force", action="store_true", help="overwrite an existing result file")
    r.add_argument("--quiet", "-q", action="store_true", help="no progress bar, no summary")
    r.add_argument("--error-estimate", action="store_true",
                   help="also run with 1.5 x kept states and at a coarser Λ with twice the twists, and give each "
                        "headline number an uncertainty (same as run.error_estimate = true; about 3 x the time)")
    r.add_argument("--no-cache", action="store_true",
                   help="compute the bath-only reference run afresh, without reading or writing the cache folder "
                        "(same as run.bath_cache = false)")
    r.set_defaults(func=cmd_run)
