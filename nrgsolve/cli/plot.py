"""``nrgsolve plot``: figures (PNG and PDF) from result files, drawn by :mod:`nrgsolve.plots`."""

from __future__ import annotations

from pathlib import Path

from ..errors import NrgInputError
from .common import check_png, files_named, image_options, positive_int, reason

__all__ = ["add_command", "cmd_plot_flow", "cmd_plot_thermo", "cmd_plot_spectral", "cmd_plot_conductance",
           "cmd_plot_transport"]


def _default_png(name):
    return Path.cwd() / name


def _plot(args, files, default_name, draw) -> int:
    """Shared body of the plot commands: read the files, check the target, draw, save PNG and PDF."""
    from ..plots import save_figure
    from ..store import read_result

    results = [read_result(f) for f in files]
    if args.output is not None and not args.output.strip():
        raise NrgInputError("--output: got an empty file name; allowed: a file name ending in .png")
    png = Path(args.output) if args.output is not None else _default_png(default_name)
    check_png(png, args.force)
    try:
        figure = draw(results)
    except NrgInputError:
        raise
    except (KeyError, IndexError, TypeError, ValueError, AttributeError) as exc:
        raise NrgInputError(f"{files_named(files)}: cannot plot this result file ({reason(exc)})") from None
    written = save_figure(figure, png, force=args.force)
    if not args.quiet:
        print("wrote " + ", ".join(str(p) for p in written))
    return 0


def cmd_plot_flow(args) -> int:
    """Draw the level flow of one result file, or of several side by side."""
    from ..plots import plot_flows
    name = f"{Path(args.files[0]).stem}_flow.png" if len(args.files) == 1 else "flows.png"
    return _plot(args, args.files, name, lambda r: plot_flows(r, levels=args.levels))


def cmd_plot_thermo(args) -> int:
    """Draw T·χ, entropy or specific heat of one or more result files on one axis."""
    from ..plots import plot_thermo

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
    """Draw a spectral quantity (default: the impurity spectral function A(ω)) of one result file."""
    from ..plots import plot_spectral
    quantity = getattr(args, "quantity", "impurity")
    suffix = "spectral" if quantity == "impurity" else quantity
    if args.improved and quantity != "impurity":
        raise NrgInputError(f"--improved: only with --quantity impurity (got --quantity {quantity})")

    def draw(results):
        try:
            return plot_spectral(results[0], improved=True if args.improved else None, xscale=args.xscale,
                                 quantity=quantity)
        except NrgInputError as exc:      # the library names its arguments; here they are flags
            msg = str(exc).replace("quantities = [", "spectral.quantities = [")
            msg = msg.replace("(stored: ", "(stored, for --quantity: ")
            raise NrgInputError(msg) from None

    return _plot(args, [args.file], f"{Path(args.file).stem}_{suffix}.png", draw)


def cmd_plot_transport(args) -> int:
    """Draw the dilute-alloy resistivity (or thermopower, thermal conductivity) of one or more files."""
    from ..plots import plot_transport

    def draw(results):
        try:
            return plot_transport(results, quantity=args.quantity.replace("-", "_"), scale=args.scale,
                                  normalized=args.normalized)
        except NrgInputError as exc:
            raise NrgInputError(str(exc).replace("plot against T (no scale)", "leave out --scale")) from None

    return _plot(args, args.files, f"transport_{args.quantity}.png", draw)


def cmd_plot_conductance(args) -> int:
    """Draw the linear conductance G(T) of one or more result files on one axis."""
    from ..plots import plot_conductance
    return _plot(args, args.files, "conductance.png", plot_conductance)


def add_command(sub) -> None:
    """Register ``plot`` and its kinds."""
    p = sub.add_parser("plot", help="draw figures from result files")
    kinds = p.add_subparsers(dest="plot_kind", metavar="{flow,thermo,spectral,conductance,transport}", parser_class=type(p))
    kinds.required = True
    f = kinds.add_parser("flow", help="energy-level flow of one or more runs (even and odd iterations), "
                                      "fixed points shaded")
    f.add_argument("files", nargs="+", metavar="FILE", help="result files (.h5); several are drawn side by side")
    f.add_argument("--levels", type=positive_int("--levels"), default=12,
                   help="lowest levels drawn per iteration (default 12)")
    image_options(f, "<file name>_flow.png, or flows.png for several files")
    f.set_defaults(func=cmd_plot_flow)
    t = kinds.add_parser("thermo", help="impurity thermodynamics of one or more runs on a log-T axis")
    t.add_argument("files", nargs="+", metavar="FILE", help="result files (.h5)")
    from ..plots import THERMO_QUANTITIES
    from ..result import quantity
    t.add_argument("--quantity", choices=tuple(THERMO_QUANTITIES), default="T_chi",
                   help="; ".join(f"{k}: {quantity('thermo', v).meaning} [{quantity('thermo', v).unit}]"
                                  for k, v in THERMO_QUANTITIES.items()) + " (default T_chi)")
    t.add_argument("--scale", choices=("kondo",), help="plot against T/T_K (crossover Kondo temperature)")
    t.add_argument("--exact", action="store_true",
                   help="also draw the exact Bethe-ansatz curve of the runs' Kondo model (needs --scale kondo)")
    image_options(t, "thermo_<quantity>.png")
    t.set_defaults(func=cmd_plot_thermo)
    a = kinds.add_parser("spectral", help="impurity spectral function A(omega), T-matrix or dynamical spin "
                                          "susceptibility of one run ([spectral] table)")
    a.add_argument("file", help="result file (.h5)")
    a.add_argument("--quantity", choices=("impurity", "t-matrix", "spin-susceptibility"), default="impurity",
                   help="A_d(omega), -pi rho Im T(omega) or chi''(omega) (default impurity; must be stored)")
    a.add_argument("--xscale", choices=("symlog", "linear"), default="symlog",
                   help="frequency axis (default symlog)")
    a.add_argument("--improved", action="store_true", help="draw the self-energy improved estimate (must be stored)")
    image_options(a, "<file name>_spectral.png")
    a.set_defaults(func=cmd_plot_spectral)
    g = kinds.add_parser("conductance", help="linear conductance G(T) of one or more runs")
    g.add_argument("files", nargs="+", metavar="FILE", help="result files (.h5)")
    image_options(g, "conductance.png")
    g.set_defaults(func=cmd_plot_conductance)
    r = kinds.add_parser("transport", help="dilute-alloy resistivity, thermopower or thermal conductivity of "
                                           "one or more runs (spectral.transport_temperatures)")
    r.add_argument("files", nargs="+", metavar="FILE", help="result files (.h5)")
    r.add_argument("--quantity", choices=("resistivity", "thermopower", "thermal-conductivity", "lorenz-ratio"),
                   default="resistivity", help="what to draw (default resistivity, in units of the unitary limit)")
    r.add_argument("--scale", choices=("kondo",), help="plot against T/T_K (crossover Kondo temperature)")
    r.add_argument("--normalized", action="store_true",
                   help="divide each curve by its value at the lowest temperature (rho(T)/rho(0))")
    image_options(r, "transport_<quantity>.png")
    r.set_defaults(func=cmd_plot_transport)

