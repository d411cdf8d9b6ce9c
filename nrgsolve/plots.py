"""Figures drawn from results, just computed or read from files (the plots compute no physics).

Every function takes :class:`~nrgsolve.result.Result` objects (from
:func:`nrgsolve.run` or :func:`nrgsolve.load`) or paths of result files and an optional ``ax``, and returns the
matplotlib figure.  Nothing here computes physics or calls ``show()``;
matplotlib is imported lazily and figures are made on the Agg canvas
directly (no pyplot state), so plotting is safe in worker processes and
tests.

Units: temperatures in D (or T/T_K with ``scale="kondo"``), T·χ_imp in
(g μ_B)²/k_B, S_imp and C_imp in k_B, flow energies in ω_N.
"""

from __future__ import annotations

import math
from fractions import Fraction
from pathlib import Path

import numpy as np

from .errors import NrgInputError
from .result import Result, quantity as _quantity
from .store import atomic_path, check_output_path

__all__ = ["THERMO_QUANTITIES", "PARAMETER_LABELS", "new_figure", "plot_flow", "plot_flows", "plot_thermo",
           "differing_parameters", "run_labels", "save_figure", "plot_spectral", "plot_conductance",
           "plot_transport", "SPECTRAL_DATASETS", "TRANSPORT_QUANTITIES"]

#: quantity a thermodynamics plot offers -> its name in ``Result.thermo`` (label and unit: nrgsolve.result.QUANTITIES)
THERMO_QUANTITIES = {"T_chi": "T_chi", "entropy": "entropy", "heat": "heat", "magnetization": "impurity_sz",
                     "occupation": "occupation", "double_occupancy": "double_occupancy"}


def as_results(items, what: str = "results") -> list:
    """Results from Results or paths of result files (read with :func:`nrgsolve.load`).

    Raises
    ------
    NrgInputError
        An item that is neither, or a path that is not a result file.
    """
    from .store import read_result
    if isinstance(items, (Result, str, Path)):
        items = [items]
    out = []
    for r in items:
        if isinstance(r, Result):
            out.append(r)
        elif isinstance(r, (str, Path)):
            out.append(read_result(r))
        else:
            raise NrgInputError(f"{what}: expected a Result or the path of a result file, got {type(r).__name__}")
    return out


def _name(r: Result) -> str:
    return str(r.path) if r.path else r.label

#: Short legend names of config parameters (others are shown as ``table.key``).
PARAMETER_LABELS = {
    "impurity.model": "model", "impurity.exchange": "ρJ", "impurity.exchange_second_channel": "ρJ₂",
    "impurity.potential_scattering": "ρK", "impurity.spin": "S", "impurity.level": "ε_d",
    "impurity.interaction": "U", "impurity.hybridization": "Γ", "impurity.field": "h",
    "bath.shape": "bath", "bath.half_bandwidth": "D", "bath.exponent": "r",
    "discretization.Lambda": "Λ", "discretization.twists": "twists", "run.kept_states": "kept states",
    "run.beta_bar": "β̄", "run.symmetry": "symmetry",
}
#: Keys that never distinguish runs in a legend (they do not change the result).
_IGNORED = {"output.file", "run.workers", "run.lowest_temperature", "run.flow_levels"}


def new_figure(nrows: int = 1, ncols: int = 1, figsize=(6.4, 4.4), **kw):
    """A figure on the Agg canvas (no pyplot), with its axes.

    Returns
    -------
    (Figure, ndarray of Axes or Axes)
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrows, ncols, squeeze=True, **kw)
    return fig, axes


def _spin_text(twice: int) -> str:
    f = Fraction(int(twice), 2)
    return str(f.numerator) if f.denominator == 1 else f"{f.numerator}/{f.denominator}"


def _level_label(q, twice_s, twice_iso=None) -> str:
    first = str(int(q)) if twice_iso is None else ",".join(_spin_text(i) for i in twice_iso)
    return f"({first}, {_spin_text(twice_s)})"


def plot_flow(result: Result, levels: int = 12, labelled: int = 8, ax=None):
    """Energy-level flow: the lowest levels against iteration N, even and odd N apart.

    Parameters
    ----------
    result : Result
        A stored run (its ``/flow`` group, twist z = 1).
    levels : int
        Number of lowest levels (multiplets for SU(2), states for the abelian
        mode) drawn per iteration, >= 1.
    labelled : int
        The lowest this-many levels of the last iteration of each panel get a
        quantum-number label (Q, S), (Q, S_z) or, in the isospin mode, (I, S); coinciding levels share one.
    ax : pair of Axes, optional
        Axes for the even and the odd iterations (default: a new figure with two panels).

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    NrgInputError
        If ``levels`` < 1 or the file holds no flow.
    """
    if not isinstance(levels, int) or levels < 1:
        raise NrgInputError(f"levels: got {levels!r}; allowed: an integer >= 1")
    result = as_results(result, "result")[0]
    flow = result.flow
    if "energy" not in flow or np.size(flow["energy"]) == 0:
        raise NrgInputError(f"{_name(result)}: holds no energy-level flow (/flow/energy)")
    N = np.asarray(flow["iteration"], dtype=int)
    E = np.asarray(flow["energy"], dtype=float)[:, :levels]
    Q = np.asarray(flow["charge"])[:, :levels]
    S = np.asarray(flow["twice_spin"])[:, :levels]
    from .engine.symmetry import make_symmetry
    # the label names of the symmetry used (files without the attribute were su2 runs)
    names = make_symmetry(str(result.provenance.get("symmetry", "su2"))).label_names
    iso = np.asarray(flow["twice_isospin"])[:, :levels] if "twice_isospin" in flow else None
    first_name, spin_name = ("I" if iso is not None else "Q"), names[-1]
    if ax is None:
        fig, axes = new_figure(1, 2, figsize=(9.0, 4.6), sharey=True)
    else:
        axes = list(ax)
        if len(axes) != 2:
            raise ValueError("plot_flow: ax must be a pair of Axes (even, odd)")
        fig = axes[0].figure
    finite = E[np.isfinite(E)]
    top = float(np.max(finite)) if finite.size else 1.0
    for parity, a in zip((0, 1), axes):
        rows = np.flatnonzero(N % 2 == parity)
        if rows.size == 0:
            a.set_title(f"{'even' if parity == 0 else 'odd'} N: none stored")
            continue
        colors = [f"C{k % 10}" for k in range(E.shape[1])]
        for k in range(E.shape[1]):
            a.plot(N[rows], E[rows, k], "-", color=colors[k], lw=1.0, marker=".", ms=2.5)
        last = rows[-1]
        groups = []                                   # (energy, [labels]) of coinciding levels
        for k in range(min(labelled, E.shape[1])):
            e = E[last, k]
            if not np.isfinite(e):
                continue
            lab = _level_label(Q[last, k], S[last, k], None if iso is None else iso[last, k])
            if groups and abs(groups[-1][0] - e) < 0.02 * max(top, 1e-12):
                if lab not in groups[-1][1]:
                    groups[-1][1].append(lab)
            else:
                groups.append((e, [lab]))
        x_text = N[last] + 0.015 * max(N[rows[-1]] - N[rows[0]], 1)
        for e, labs in groups:
            text = " ".join(labs[:4]) + (" …" if len(labs) > 4 else "")
            a.annotate(text, (x_text, e), fontsize=7, va="center", ha="left",
                       annotation_clip=False)
        a.set_xlabel("iteration N")
        a.set_title(f"{'even' if parity == 0 else 'odd'} N")
        a.set_xlim(N[rows[0]], N[last] + 0.22 * max(N[last] - N[rows[0]], 1))
        a.grid(alpha=0.25)
    axes[0].set_ylabel(r"$E/\omega_N$ (from the ground state)")
    _shade_fixed_points(axes, result)
    model = result.provenance.get("model", "")
    fig.suptitle(f"{result.label}: level flow, {model}, labels (${first_name}$, ${spin_name}$)", fontsize=10)
    return fig


#: Shading colour of each fixed point in the flow plot.
_FIXED_POINT_COLORS = {"free-orbital": "C0", "valence-fluctuation": "C4", "local-moment": "C1",
                       "strong-coupling": "C2", "fermi-liquid": "C8", "frozen-impurity": "C7",
                       "underscreened": "C5", "two-channel": "C3"}


def _shade_fixed_points(axes, result: Result):
    """Shade and name the iteration range of every fixed point (files without them: nothing)."""
    from .store import stored_fixed_points
    fp = stored_fixed_points(result)
    if fp is None:
        return
    for a in axes:
        lo, hi = a.get_xlim()
        for lab, first, last in fp["sequence"]:
            color = _FIXED_POINT_COLORS.get(lab, "0.5")
            a.axvspan(first - 0.5, last + 0.5, color=color, alpha=0.12, lw=0)
            a.text(max(first - 0.4, lo + 0.01 * (hi - lo)), 0.98, lab, transform=a.get_xaxis_transform(),
                   ha="left", va="top", fontsize=7, color=color, clip_on=True)


def plot_flows(results: list[Result], levels: int = 12, labelled: int = 8):
    """Level flows of several runs side by side (one column per run: even N above, odd N below).

    Returns
    -------
    matplotlib.figure.Figure
    """
    if not results:
        raise NrgInputError("results: no results given")
    results = as_results(results)
    if len(results) == 1:
        return plot_flow(results[0], levels=levels, labelled=labelled)
    n = len(results)
    fig, axes = new_figure(2, n, figsize=(4.6 * n, 7.2), sharey=True)
    names = run_labels(results)
    for k, r in enumerate(results):
        plot_flow(r, levels=levels, labelled=labelled, ax=(axes[0][k], axes[1][k]))
        stem = r.label
        title = stem if names[k] == stem else f"{stem} ({names[k]})"
        axes[0][k].set_title(f"{title}: even N", fontsize=9)
        axes[1][k].set_title("odd N", fontsize=9)
    fig.suptitle("level flows, labels (Q, S or S_z); shaded: fixed points", fontsize=10)
    return fig


def _parsed(result: Result):
    return result.spec


def differing_parameters(results: list[Result]) -> list[str]:
    """The config parameters (``table.key``) whose values differ between the runs.

    Configs are read from each file's ``config_text`` attribute; settings that
    do not change the physics shown (output file, workers, lowest temperature,
    stored flow levels) are ignored.  Returns an empty list when a config
    cannot be parsed or all agree.
    """
    specs = [_parsed(r) for r in results]
    if len(specs) < 2 or any(s is None for s in specs):
        return []
    flat = []
    for s in specs:
        d = s.as_dict()
        flat.append({f"{t}.{k}": v for t in d for k, v in d[t].items()})
    keys = [k for k in flat[0] if k not in _IGNORED and len({repr(f[k]) for f in flat}) > 1]
    return keys


def _value_text(v) -> str:
    if v is None:
        return "default"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


#: More differing parameters than this make a legend unreadable: file names are used instead.
MAX_LEGEND_PARAMETERS = 3


def run_labels(results: list[Result]) -> list[str]:
    """Legend labels: the differing parameters and their values, else the file names.

    File names are used when no parameter differs, a config cannot be read,
    or more than :data:`MAX_LEGEND_PARAMETERS` parameters differ.
    """
    keys = differing_parameters(results)
    if not keys or len(keys) > MAX_LEGEND_PARAMETERS:
        return [r.label for r in results]
    specs = [_parsed(r).as_dict() for r in results]
    out = []
    for s in specs:
        parts = []
        for k in keys:
            t, key = k.split(".", 1)
            parts.append(f"{PARAMETER_LABELS.get(k, k)} = {_value_text(s[t][key])}")
        out.append(", ".join(parts))
    if len(set(out)) < len(out):                   # e.g. only ignored keys differ: add file names
        out = [f"{o} ({r.label})" for o, r in zip(out, results)]
    return out


def kondo_temperature(result: Result) -> float:
    """The stored crossover Kondo temperature T_K (D).

    Raises
    ------
    NrgInputError
        If the file holds none (NaN: not reached).
    """
    tk = float(result.summary.get("kondo_temperature_crossover", math.nan))
    if not (math.isfinite(tk) and tk > 0):
        raise NrgInputError(f"{_name(result)}: no Kondo temperature stored (summary kondo_temperature_crossover "
                            f"not reached); plot against T (scale = None)")
    return tk



def _figure_and_axes(ax):
    """(figure, axes): a new figure with one axes, or the given axes and its figure."""
    if ax is None:
        return new_figure()
    return ax.figure, ax


def _grid_and_legend(ax, legend: bool) -> None:
    """The light grid of every plot, and a frameless legend when there is something to tell apart."""
    ax.grid(alpha=0.25, which="both")
    if legend:
        ax.legend(fontsize=8, frameon=False)


def _with_transport(results, dataset: str, config_key: str) -> list:
    """``results`` as Results, each with ``/transport/<dataset>`` (else one line naming ``config_key``)."""
    results = as_results(results)
    for r in results:
        if r.transport is None or dataset not in r.transport:
            raise NrgInputError(f"{_name(r)}: holds no /transport/{dataset}; run with "
                                f"{config_key} in the config")
    return results


def plot_thermo(results: list[Result], quantity: str = "T_chi", scale: str | None = None,
                labels: list[str] | None = None, ax=None, exact: bool = False):
    """Impurity thermodynamics of several runs on one logarithmic temperature axis.

    Parameters
    ----------
    results : list of Result
        Stored runs (their z-averaged ``/thermodynamics``).
    quantity : {"T_chi", "entropy", "heat", "magnetization", "occupation", "double_occupancy"}
        T·χ_imp in (g μ_B)²/k_B, S_imp in k_B, or C_imp in k_B.
    scale : {None, "kondo"}
        ``None``: T in units of D; ``"kondo"``: T/T_K with the stored
        crossover Kondo temperature of each run.
    labels : list of str, optional
        Legend entries (default: :func:`run_labels`).
    ax : Axes, optional
        Axes to draw into (default: a new figure).
    exact : bool
        Also draw the exact (Bethe-ansatz) curve of each run's model, on the
        same T/T_K axis (its T_K from the same crossover definition); needs
        ``scale="kondo"`` and T_chi, entropy or heat.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> import nrgsolve
    >>> res = nrgsolve.run({"impurity": {"model": "kondo", "exchange": 0.3},
    ...                     "run": {"kept_states": 60, "lowest_temperature": 1e-4}, "discretization": {"twists": 1}})
    >>> fig = plot_thermo([res], "entropy")
    >>> fig.axes[0].get_xscale()
    'log'

    Raises
    ------
    NrgInputError
        Unknown quantity or scale, no runs, ``scale="kondo"`` for a run without T_K,
        or ``exact`` for a model, quantity or scale without an exact curve.
    """
    if quantity not in THERMO_QUANTITIES:
        raise NrgInputError(f"quantity: got {quantity!r}; allowed: {', '.join(THERMO_QUANTITIES)}")
    if scale not in (None, "kondo"):
        raise NrgInputError(f"scale: got {scale!r}; allowed: None or \"kondo\"")
    if not results:
        raise NrgInputError("results: give at least one result")
    results = as_results(results)
    name = THERMO_QUANTITIES[quantity]
    ylabel = _quantity("thermo", name).label
    models = _exact_models(results, quantity, scale) if exact else []
    scales = [kondo_temperature(r) if scale == "kondo" else 1.0 for r in results]
    for r in results:
        if name not in r.thermo or "temperature" not in r.thermo:
            raise NrgInputError(f"{_name(r)}: holds no {_quantity('thermo', name).meaning} "
                                f"(/thermodynamics/{_quantity('thermo', name).dataset})")
    curves = _exact_curves(results, models, quantity, scales) if exact else []
    labels = run_labels(results) if labels is None else list(labels)
    fig, ax = _figure_and_axes(ax)
    for r, tk, lab in zip(results, scales, labels):
        T = np.asarray(r.thermo["temperature"], dtype=float)
        y = np.asarray(r.thermo[name], dtype=float)
        keep = np.isfinite(T) & np.isfinite(y) & (T > 0)
        ax.plot(T[keep] / tk, y[keep], "-", lw=1.4, label=lab)
    styles = ("--", ":", "-.", (0, (5, 1, 1, 1)), (0, (1, 3)))
    for i, (x, y, lab) in enumerate(curves):
        style = styles[i % len(styles)]
        ax.plot(x, y, color="k", ls=style, lw=1.2, label=lab)
    ax.set_xscale("log")
    ax.set_xlabel(r"$T/T_K$" if scale == "kondo" else r"$T$  [$D$]")
    ax.set_ylabel(ylabel)
    _grid_and_legend(ax, len(results) > 1 or bool(labels[0]) or bool(curves))
    return fig


def _exact_models(results, quantity, scale):
    """The distinct (channels, spin) of the runs' exact curves; NrgInputError when there is none."""
    from .exact.runs import exact_model

    if scale != "kondo":
        raise NrgInputError("exact: needs scale = \"kondo\" (the exact curves are functions of T/T_K)")
    if quantity not in _EXACT_FIELDS:
        raise NrgInputError(f"exact: no exact curve for quantity {quantity!r}; allowed: T_chi, entropy, heat")
    models = []
    for r in results:
        spec = _parsed(r)
        if spec is None:
            raise NrgInputError(f"exact: {_name(r)}: the stored config does not parse; cannot tell its model")
        try:
            m = exact_model(spec)
        except NrgInputError as exc:
            raise NrgInputError(f"exact: {_name(r)}: {exc}") from None
        if m not in models:
            models.append(m)
    return models


_EXACT_FIELDS = {"T_chi": "t_chi", "entropy": "entropy", "heat": "heat_capacity"}


def _exact_curves(results, models, quantity, scales):
    """(x, y, label) of the exact curve of each model, x = T/T_K with T_K from the crossover definition."""
    from .exact import bethe_ansatz
    from .observables.kondo_scale import CROSSOVER_VALUE

    field = _EXACT_FIELDS[quantity]
    lo = min(float(np.nanmin(np.asarray(r.thermo["temperature"]))) / tk for r, tk in zip(results, scales))
    hi = max(float(np.nanmax(np.asarray(r.thermo["temperature"]))) / tk for r, tk in zip(results, scales))
    out = []
    for k, spin in models:
        tc = bethe_ansatz.crossover_temperature(k, spin, CROSSOVER_VALUE)
        if tc is None:
            raise NrgInputError(f"exact: the exact T·χ of k = {k}, S = {spin:g} never falls to "
                                f"{CROSSOVER_VALUE}; no crossover T_K to scale it with")
        x = np.logspace(max(math.log10(lo), -5.0), min(math.log10(hi), 4.0), 300)
        r = bethe_ansatz.kondo_thermodynamics(x * tc, k, spin)
        out.append((x, getattr(r, field), f"exact (Bethe ansatz, k = {k}, S = {_spin_text(int(2 * spin))})"))
    return out


def save_figure(fig, png: str | Path, force: bool = False, pdf: bool = True, dpi: int = 100) -> list[Path]:
    """Save a figure as PNG (and PDF beside it, same stem), atomically.

    Parameters
    ----------
    fig : Figure
    png : str or Path
        Target ending in ``.png``.
    force : bool
        Overwrite existing files.
    pdf : bool
        Also write ``<stem>.pdf`` beside the PNG.
    dpi : int
        PNG resolution.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    NrgInputError
        If the name does not end in .png, or a target exists and ``force`` is False.
    """
    png = Path(png)
    if png.suffix.lower() != ".png":
        raise NrgInputError(f"png: got {str(png)!r}; allowed: a file name ending in .png")
    targets = [png] + ([png.with_suffix(".pdf")] if pdf else [])
    for t in targets:
        check_output_path(t, force, name="png", suffix=".png", hint="pass force=True to replace it, or choose another name")
    managers = [atomic_path(t) for t in targets]
    temps = []
    try:
        for m, t in zip(managers, targets):
            tmp = m.__enter__()
            temps.append((m, tmp))
            fig.savefig(tmp, format=t.suffix[1:].lower(), dpi=dpi)
    except BaseException as exc:
        for m, _ in temps:
            m.__exit__(type(exc), exc, None)
        raise
    for m, _ in temps:
        m.__exit__(None, None, None)
    return targets


#: ``spectral.quantities`` name -> stored name in the /spectral group.
SPECTRAL_DATASETS = {"impurity": "A", "t-matrix": "t_matrix", "spin-susceptibility": "spin_susceptibility"}


def plot_spectral(result: Result, improved: bool | None = None, xscale: str = "symlog", ax=None,
                  quantity: str = "impurity"):
    """A spectral quantity of a stored run (default: the impurity spectral function A(ω)), one curve per
    stored temperature.

    Parameters
    ----------
    result : Result
        A run with a ``/spectral`` group (config table [spectral]).
    improved : bool, optional
        Draw the self-energy improved estimate (default: when stored).
    xscale : {"symlog", "linear"}
        Frequency axis: symmetric logarithmic (linear below the smallest stored |ω| × 10) or linear.
    ax : Axes, optional
    quantity : {"impurity", "t-matrix", "spin-susceptibility"}
        A_d(ω) (1/D), −πρ Im T(ω) (dimensionless), or χ''(ω) ((g μ_B)²/D).

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    NrgInputError
        If the file holds no such quantity, or on an unknown ``xscale`` or ``quantity``.

    Notes
    -----
    ω in units of D, A in 1/D per spin; in the abelian mode the spin-up curve
    is solid and the spin-down curve dashed.
    """
    result = as_results(result, "result")[0]
    if quantity not in SPECTRAL_DATASETS:
        raise NrgInputError(f"quantity: got {quantity!r}; allowed: {', '.join(SPECTRAL_DATASETS)}")
    name = SPECTRAL_DATASETS[quantity]
    sp = result.spectral
    if sp is None or name not in sp:
        from .result import dataset_name
        stored = [q for q, n in SPECTRAL_DATASETS.items() if sp is not None and n in sp]
        raise NrgInputError(f"{_name(result)}: holds no /spectral/{dataset_name('spectral', name)}"
                            + (f" (stored: {', '.join(stored)})" if stored else
                               f"; run with a [spectral] table (e.g. temperatures = [0.0], "
                               f"quantities = [\"{quantity}\"]) in the config"))
    if xscale not in ("symlog", "linear"):
        raise NrgInputError(f"xscale: got {xscale!r}; allowed: symlog, linear")
    use_improved = quantity == "impurity" and (("A_improved" in sp) if improved is None else bool(improved))
    if use_improved and "A_improved" not in sp:
        raise NrgInputError(f"{_name(result)}: holds no improved estimate; run with spectral.self_energy = true")
    om = np.asarray(sp["omega"], dtype=float)
    temps = np.atleast_1d(np.asarray(sp["temperature"], dtype=float))
    A = np.asarray(sp["A_improved" if use_improved else name], dtype=float)
    comps = str(sp.attrs.get("components" if name == "A" else f"{name}_components", "")).split(", ")
    spins = A[None] if A.ndim == 2 else A            # (n_spin, n_T, n_ω)
    fig, ax = _figure_and_axes(ax)
    styles = ["-", "--"]
    for i, T in enumerate(temps):
        color = f"C{i % 10}"
        for k, a in enumerate(spins):
            tag = "" if len(spins) == 1 else " " + (comps[k] if k < len(comps) else str(k))
            ax.plot(om, a[i], styles[k % 2], color=color, lw=1.3,
                    label=(f"T = {T:.3g} D" if T > 0 else "T = 0") + tag)
    if xscale == "symlog":
        pos = om[om > 0]
        lin = float(10 * pos.min()) if pos.size else 1e-12
        ax.set_xscale("symlog", linthresh=lin, linscale=0.5)
        lo, hi = math.ceil(math.log10(lin)), 0
        step = max(1, math.ceil((hi - lo + 1) / 5))
        ks = list(range(hi, lo - 1, -step))
        ticks = [-(10.0 ** k) for k in ks] + [0.0] + [10.0 ** k for k in reversed(ks)]
        ax.set_xticks(ticks, [("$-10^{%d}$" % k) for k in ks] + ["0"] + [("$10^{%d}$" % k) for k in reversed(ks)])
        ax.minorticks_off()
    ax.set_xlim(-2.0, 2.0)
    ax.set_xlabel(r"$\omega$  [$D$]")
    from .result import quantity as _quantity
    ax.set_ylabel(_quantity("spectral", name).label + (r"  (improved, $\Sigma = UF/G$)" if use_improved else ""))
    _grid_and_legend(ax, True)
    return fig


def plot_conductance(results: list[Result], labels: list[str] | None = None, ax=None):
    """Linear conductance G(T)/(2e²/h) of one or more stored runs on a logarithmic T axis.

    Parameters
    ----------
    results : list of Result
        Runs with a ``/transport`` group (spectral.conductance_temperatures).
    labels : list of str, optional
        Legend entries (default: :func:`run_labels`).
    ax : Axes, optional

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    NrgInputError
        If no runs are given or a run holds no conductance.
    """
    if not results:
        raise NrgInputError("results: give at least one result")
    results = _with_transport(results, "conductance", "spectral.conductance_temperatures")
    labels = run_labels(results) if labels is None else list(labels)
    fig, ax = _figure_and_axes(ax)
    for r, lab in zip(results, labels):
        T = np.asarray(r.transport["temperature"], dtype=float)
        g = np.asarray(r.transport["conductance"], dtype=float)
        ax.plot(T, g, "o-", ms=3, lw=1.3, label=lab)
    ax.set_xscale("log")
    ax.set_xlabel(r"$T$  [$D$]")
    ax.set_ylabel(r"$G/(2e^2/h)$")
    ax.set_ylim(bottom=0)
    _grid_and_legend(ax, len(results) > 1 or bool(labels[0]))
    return fig



#: ``plot_transport`` quantities -> (stored name, axis label suffix).
TRANSPORT_QUANTITIES = ("resistivity", "thermopower", "thermal_conductivity", "lorenz_ratio")


def plot_transport(results: list[Result], quantity: str = "resistivity", scale: str | None = None,
                   normalized: bool = False, labels: list[str] | None = None, ax=None):
    """Dilute-alloy transport of one or more stored runs against T (or T/T_K) on a log axis.

    Parameters
    ----------
    results : list of Result
        Runs with ``/transport/resistivity`` (spectral.transport_temperatures).
    quantity : {"resistivity", "thermopower", "thermal_conductivity", "lorenz_ratio"}
        ρ(T)/ρ_unitary, S(T) (k_B/|e|), κρ_unitary/T (k_B²/e²) or the Lorenz ratio.
    scale : {None, "kondo"}
        Temperature axis: T (units of D) or T/T_K (crossover Kondo temperature of each run).
    normalized : bool
        Divide each curve by its value at the lowest stored temperature (ρ(T)/ρ(0)).
    labels : list of str, optional
    ax : Axes, optional

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    NrgInputError
        No runs, a run without alloy transport, a run without T_K when ``scale = "kondo"``, or an
        unknown ``quantity`` or ``scale``.
    """
    if not results:
        raise NrgInputError("results: give at least one result")
    if quantity not in TRANSPORT_QUANTITIES:
        raise NrgInputError(f"quantity: got {quantity!r}; allowed: {', '.join(TRANSPORT_QUANTITIES)}")
    if scale not in (None, "kondo"):
        raise NrgInputError(f"scale: got {scale!r}; allowed: kondo (or none)")
    results = _with_transport(results, quantity, "spectral.transport_temperatures")
    for r in results:
        if scale == "kondo" and r.kondo_temperature is None:
            raise NrgInputError(f"{_name(r)}: has no Kondo temperature; plot against T (no scale)")
    labels = run_labels(results) if labels is None else list(labels)
    fig, ax = _figure_and_axes(ax)
    from .result import quantity as _quantity
    for r, lab in zip(results, labels):
        T = np.asarray(r.transport["alloy_temperature"], dtype=float)
        y = np.asarray(r.transport[quantity], dtype=float)
        if normalized:
            y = y / y[int(np.argmin(T))]
        x = T / r.kondo_temperature if scale == "kondo" else T
        ax.plot(x, y, "o-", ms=3, lw=1.3, label=lab)
    ax.set_xscale("log")
    ax.set_xlabel(r"$T/T_K$" if scale == "kondo" else r"$T$  [$D$]")
    label = _quantity("transport", quantity).label
    ax.set_ylabel(label + ("  (over its lowest-$T$ value)" if normalized else ""))
    _grid_and_legend(ax, len(results) > 1 or bool(labels[0]))
    return fig
