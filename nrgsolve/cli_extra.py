"""Commands ``sweep``, ``plot flow``, ``plot thermo`` and ``inspect`` of the command line.

:func:`add_commands` registers them on the sub-command parser built by
:mod:`nrgsolve.cli`; each handler parses nothing itself, calls the library
and reports.  Input errors raise :class:`~nrgsolve.errors.NrgInputError`,
which the main entry point turns into one line on stderr and exit code 2.
"""

from __future__ import annotations

import sys
from pathlib import Path

from .errors import NrgInputError

__all__ = ["add_commands", "cmd_sweep", "cmd_plot_flow", "cmd_plot_thermo", "cmd_inspect", "cmd_plot_spectral",
           "cmd_plot_conductance"]


def _positive_int(name):
    def parse(text):
        try:
            n = int(text)
        except ValueError:
            n = None
        if n is None or n < 1:
            import argparse
            raise argparse.ArgumentTypeError(f"{name}: got {text!r}; allowed: an integer >= 1")
        return n
    return parse


def _bar(total, quiet, desc, unit):
    from tqdm import tqdm
    return tqdm(total=total, desc=desc, unit=unit, disable=quiet or not sys.stderr.isatty(), leave=False)


def cmd_sweep(args) -> int:
    """Run every point of a sweep config; write point files and index.csv."""
    from .config import load_config
    from .resources import check_resources
    from .sweep import WorkerLost, default_folder, remove_stale_parts, run_sweep, sweep_points
    from .workers import Terminated

    spec = load_config(args.config)
    if args.output_folder is not None and not args.output_folder.strip():
        raise NrgInputError("--output-folder: got an empty folder name")
    folder = Path(args.output_folder) if args.output_folder else default_folder(spec)
    points = sweep_points(spec)
    n = len(points)
    jobs = 1 if args.scheduler else min(args.jobs, n)
    for p in points:          # refuse a point that cannot fit into memory before any point starts
        try:
            check_resources(p.spec, workers=jobs)
        except NrgInputError as exc:
            where = ", ".join(f"{k} = {v!r}" for k, v in p.values)
            raise NrgInputError(f"sweep point {p.number} ({where}): {exc}") from None
    with _bar(n, args.quiet, f"sweep {Path(args.config).name}", "point") as bar:
        try:
            out = run_sweep(spec, folder, jobs=args.jobs, scheduler=args.scheduler, force=args.force,
                            progress=bar.update)
        except (WorkerLost, KeyboardInterrupt) as exc:
            if folder.is_dir():
                remove_stale_parts(folder)
            done = len(list(folder.glob("point_*.h5"))) if folder.is_dir() else 0
            if isinstance(exc, WorkerLost):
                what, code = str(exc), 1
            elif isinstance(exc, Terminated):
                what, code = f"terminated (signal {exc.signum})", 128 + exc.signum
            else:
                what, code = "interrupted", 130
            print(f"nrgsolve: error: {what}; {done} of {n} point files are on disk in {folder}; "
                  f"run the same command again to resume", file=sys.stderr)
            return code
    if not args.quiet:
        print(f"{len(out.rows)} points: {len(out.computed)} computed, {len(out.skipped)} already done")
        print(f"wrote {out.index}")
    return 0


def _default_png(name):
    return Path.cwd() / name


def _plot(args, files, default_name, draw) -> int:
    """Shared body of the plot commands: read the files, check the target, draw, save PNG and PDF."""
    from .plots import save_figure
    from .store import read_result

    results = [read_result(f) for f in files]
    if args.output is not None and not args.output.strip():
        raise NrgInputError("--output: got an empty file name; allowed: a file name ending in .png")
    png = Path(args.output) if args.output is not None else _default_png(default_name)
    _check_png(png, args.force)
    try:
        figure = draw(results)
    except (KeyError, IndexError, TypeError, ValueError, AttributeError) as exc:
        raise NrgInputError(f"{_files_named(files)}: cannot plot this result file ({_reason(exc)})") from None
    written = save_figure(figure, png, force=args.force)
    if not args.quiet:
        print("wrote " + ", ".join(str(p) for p in written))
    return 0


def cmd_plot_flow(args) -> int:
    """Draw the level flow of one result file, or of several side by side."""
    from .plots import plot_flows
    name = f"{Path(args.files[0]).stem}_flow.png" if len(args.files) == 1 else "flows.png"
    return _plot(args, args.files, name, lambda r: plot_flows(r, levels=args.levels))


def cmd_plot_thermo(args) -> int:
    """Draw T·χ, entropy or specific heat of one or more result files on one axis."""
    from .plots import plot_thermo

    def draw(results):
        try:
            return plot_thermo(results, quantity=args.quantity, scale=args.scale, exact=args.exact)
        except NrgInputError as exc:      # the library names its arguments; here they are flags
            msg = str(exc)
            if msg.startswith("exact: "):
                msg = "--exact: " + msg[len("exact: "):].replace('scale = "kondo"', "--scale kondo")
            raise NrgInputError(msg) from None

    return _plot(args, args.files, f"thermo_{args.quantity}.png", draw)


def cmd_plot_spectral(args) -> int:
    """Draw the impurity spectral function A(ω) of one result file."""
    from .plots import plot_spectral
    return _plot(args, [args.file], f"{Path(args.file).stem}_spectral.png",
                 lambda r: plot_spectral(r[0], improved=True if args.improved else None, xscale=args.xscale))


def cmd_plot_conductance(args) -> int:
    """Draw the linear conductance G(T) of one or more result files on one axis."""
    from .plots import plot_conductance
    return _plot(args, args.files, "conductance.png", plot_conductance)


def _image_options(parser, default_name: str):
    """The options every plot command shares: --output, --force, --quiet."""
    parser.add_argument("--output", "-o", metavar="PNG",
                        help=f"image file (default: {default_name} here; a PDF is written beside it)")
    parser.add_argument("--force", action="store_true", help="overwrite existing images")
    parser.add_argument("--quiet", "-q", action="store_true", help="print nothing")


def _files_named(files) -> str:
    return ", ".join(str(f) for f in files)


def _reason(exc) -> str:
    return " ".join(str(exc).split())[:200] or exc.__class__.__name__


def _check_png(png: Path, force: bool):
    # fail before any drawing: a wrong name, an existing file or a place that cannot be written is an input error
    from .store import check_output_path
    if png.suffix.lower() != ".png":
        raise NrgInputError(f"--output: got {str(png)[:200]!r}; allowed: a file name ending in .png")
    for t in (png, png.with_suffix(".pdf")):
        check_output_path(t, force, name="--output", suffix=".png", create_folder=False)


def cmd_inspect(args) -> int:
    """Print what a result file holds."""
    from .inspect_result import describe
    from .store import read_result

    stored = read_result(args.file)
    try:
        text = describe(stored)
    except (KeyError, IndexError, TypeError, ValueError, AttributeError) as exc:
        raise NrgInputError(f"{args.file}: not a valid result file ({_reason(exc)})") from None
    sys.stdout.write(text)
    return 0


def add_commands(subparsers) -> None:
    """Register ``sweep``, ``plot`` and ``inspect`` on the ``nrgsolve`` sub-command parser."""
    s = subparsers.add_parser("sweep", help="run every point of a [sweep] config, one result file per point")
    s.add_argument("config", help="TOML config with a [sweep] table")
    s.add_argument("--jobs", "-j", type=_positive_int("--jobs"), default=1,
                   help="points run in parallel processes (default 1)")
    s.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the points on an existing dask.distributed cluster (e.g. tcp://host:8786)")
    s.add_argument("--output-folder", metavar="DIR",
                   help="folder for point_NNNN.h5 and index.csv (default: [sweep] folder, else <config name>_sweep)")
    s.add_argument("--force", action="store_true", help="recompute points whose files already exist")
    s.add_argument("--quiet", "-q", action="store_true", help="no progress bar, no summary")
    s.set_defaults(func=cmd_sweep)

    p = subparsers.add_parser("plot", help="draw figures from result files")
    kinds = p.add_subparsers(dest="plot_kind", metavar="{flow,thermo,spectral,conductance}", parser_class=type(p))
    kinds.required = True
    f = kinds.add_parser("flow", help="energy-level flow of one or more runs (even and odd iterations), "
                                      "fixed points shaded")
    f.add_argument("files", nargs="+", metavar="FILE", help="result files (.h5); several are drawn side by side")
    f.add_argument("--levels", type=_positive_int("--levels"), default=12,
                   help="lowest levels drawn per iteration (default 12)")
    _image_options(f, "<file name>_flow.png, or flows.png for several files")
    f.set_defaults(func=cmd_plot_flow)
    t = kinds.add_parser("thermo", help="impurity thermodynamics of one or more runs on a log-T axis")
    t.add_argument("files", nargs="+", metavar="FILE", help="result files (.h5)")
    from .plots import THERMO_QUANTITIES
    t.add_argument("--quantity", choices=tuple(THERMO_QUANTITIES), default="T_chi",
                   help="T·χ_imp, S_imp, C_imp, or the impurity averages M = ⟨S_z⟩ (abelian runs), ⟨n_d⟩, "
                        "⟨n_d↑n_d↓⟩ (Anderson runs) (default T_chi)")
    t.add_argument("--scale", choices=("kondo",), help="plot against T/T_K (crossover Kondo temperature)")
    t.add_argument("--exact", action="store_true",
                   help="also draw the exact Bethe-ansatz curve of the runs' Kondo model (needs --scale kondo)")
    _image_options(t, "thermo_<quantity>.png")
    t.set_defaults(func=cmd_plot_thermo)
    a = kinds.add_parser("spectral", help="impurity spectral function A(omega) of one run ([spectral] table)")
    a.add_argument("file", help="result file (.h5)")
    a.add_argument("--xscale", choices=("symlog", "linear"), default="symlog",
                   help="frequency axis (default symlog)")
    a.add_argument("--improved", action="store_true", help="draw the self-energy improved estimate (must be stored)")
    _image_options(a, "<file name>_spectral.png")
    a.set_defaults(func=cmd_plot_spectral)
    g = kinds.add_parser("conductance", help="linear conductance G(T) of one or more runs")
    g.add_argument("files", nargs="+", metavar="FILE", help="result files (.h5)")
    _image_options(g, "conductance.png")
    g.set_defaults(func=cmd_plot_conductance)

    i = subparsers.add_parser("inspect", help="show provenance, config, summary and diagnostics of a result file")
    i.add_argument("file", help="result file (.h5)")
    i.set_defaults(func=cmd_inspect)
