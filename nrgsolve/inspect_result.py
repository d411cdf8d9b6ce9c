"""Describe a stored result file in plain text (the ``nrgsolve inspect`` command).

Reads only what :func:`nrgsolve.store.read_result` returns; computes no
physics.  Besides the stored numbers it derives a few checks from them:
truncation too aggressive (largest discarded weight above
:data:`nrgsolve.health.DISCARDED_WEIGHT_LIMIT`), lowest temperature not reached, Kondo
temperature not reached, a config that no longer parses (:mod:`nrgsolve.health`, the same rules as a run).
Temperatures are in units of the half-bandwidth D.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import NrgInputError
from .health import run_warnings
from .result import Result
from .store import stored_fixed_points
from .uncertainty import HEADLINE, format_with_error

__all__ = ["convergence", "derived_warnings", "describe",
           "summary_lines", "method_lines", "dynamics_lines"]



def _number(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _fmt(v, unit: str = "") -> str:
    x = _number(v)
    return "not reached" if not math.isfinite(x) else f"{x:.6g}{unit}"


def convergence(stored: Result) -> dict:
    """Convergence numbers over all twists of a stored run.

    Returns
    -------
    dict
        ``max_discarded_weight`` (fraction), ``kept_states_min``,
        ``kept_states_max`` (states, counting 2S+1), ``iterations`` (list,
        one per twist) and ``z`` (list of twists).
    """
    diags = [t.diagnostics for t in stored.twists] or [stored.diagnostics]
    weights = np.concatenate([np.ravel(d.get("discarded_weight", [])) for d in diags])
    kept = np.concatenate([np.ravel(d.get("kept_states", [])) for d in diags])
    finite = weights[np.isfinite(weights)]
    return {
        "max_discarded_weight": float(finite.max()) if finite.size else math.nan,
        "kept_states_min": int(kept.min()) if kept.size else 0,
        "kept_states_max": int(kept.max()) if kept.size else 0,
        "iterations": [len(np.ravel(d.get("iteration", []))) for d in diags],
        "z": [t.z for t in stored.twists],
    }


def _spec(stored: Result):
    if stored.spec is None:
        raise NrgInputError("the stored config does not parse with this version")
    return stored.spec


def derived_warnings(stored: Result) -> list[str]:
    """Warnings derived again from the stored numbers by today's rules (:func:`nrgsolve.health.run_warnings`).

    Returns
    -------
    list of str
        One sentence per problem found; empty when nothing is suspicious.
    """
    if stored.spec is None:
        return ["the stored config does not parse with this version"]
    conv = convergence(stored)
    onsite = np.asarray(stored.chain.get("onsite", np.zeros((0, 0))), dtype=float)
    sites = [int(np.sum(np.isfinite(row))) for row in np.atleast_2d(onsite)]
    z = [float(x) for x in np.ravel(stored.chain.get("z", []))]
    return run_warnings(stored.spec, conv["max_discarded_weight"], stored.thermo.get("temperature", []),
                        stored.thermo.get("T_chi", []), stored.summary.get("kondo_temperature_crossover"),
                        sites if len(sites) == len(z) else None, z)


def summary_lines(values: dict, errors: dict | None = None) -> list[str]:
    """Lines of the headline numbers, each with its uncertainty when there is one.

    Parameters
    ----------
    values : dict
        name → value (None or NaN: not reached), names as in :data:`nrgsolve.uncertainty.HEADLINE`.
    errors : dict, optional
        name → uncertainty (same unit).
    """
    errors = errors or {}
    out = []
    units = {"kondo_temperature_wilson": "D", "kondo_temperature_crossover": "D", "chi_zero": "(g μ_B)²/(k_B D)",
             "gamma_zero": "k_B/D", "wilson_ratio": "", "T_chi_lowest": "(g μ_B)²/k_B", "entropy_lowest": "k_B"}
    for name, meaning, _ in HEADLINE:
        v = _number(values.get(name))
        e = _number(errors.get(name))
        shown = format_with_error(v if math.isfinite(v) else None, e if math.isfinite(e) else None, units[name])
        out.append(f"{meaning}: {shown}")
    return out


def dynamics_lines(summary: dict) -> list[str]:
    """Lines of the zero-temperature dynamics that a run computed (none when it computed none)."""
    shown = (("t_matrix_zero", "−πρ Im T(ω = 0) at T = 0", ""),
             ("resistivity_zero", "alloy resistivity ρ(T = 0)/ρ_unitary", ""),
             ("static_susceptibility_zero", "static χ from χ''(ω) at T = 0", " (g μ_B)²/D"))
    out = []
    for name, meaning, unit in shown:
        v = _number(summary.get(name))
        if math.isfinite(v):
            out.append(f"{meaning}: {v:.6g}{unit}")
    return out


def method_lines(attrs: dict) -> list[str]:
    """Which discretization, thermodynamics and Wilson number a file used (format 1 files: the
    defaults of that version, unless the stored config says otherwise)."""
    if "thermodynamics_method" in attrs:
        scheme = str(attrs.get("discretization_scheme"))
        if scheme == "wilson":
            scheme += " (with A_Λ correction)" if bool(attrs.get("wilson_correction")) else " (no A_Λ correction)"
        return [f"discretization: {scheme}", f"thermodynamics: {attrs.get('thermodynamics_method')}",
                f"Wilson number: {float(attrs.get('wilson_number')):.4f}"]
    import tomllib
    try:
        raw = tomllib.loads(str(attrs.get("config_text", "")))
    except tomllib.TOMLDecodeError:
        raw = {}
    d = raw.get("discretization", {}) if isinstance(raw.get("discretization"), dict) else {}
    scheme = d.get("scheme", "wilson")
    if scheme == "wilson":
        scheme += " (with A_Λ correction)" if d.get("wilson_correction") is True else " (no A_Λ correction)"
    return [f"discretization: {scheme} (file format 1)", "thermodynamics: conventional (file format 1)",
            "Wilson number: 0.4128 (file format 1: Wilson's numerical estimate)"]


def _fixed_point_lines(stored: Result) -> list[str]:
    """The fixed-point sequence and crossover temperatures (nothing for older files)."""
    fp = stored_fixed_points(stored)
    if fp is None:
        return ["  fixed points: not stored (file older than the fixed-point analysis)"]
    lines = [f"  fixed points: {fp['text'] or 'no fixed point identified'}"]
    if fp["crossover_temperatures"]:
        pairs = zip(fp["sequence"][:-1], fp["sequence"][1:], fp["crossover_temperatures"])
        lines.append("  crossover temperatures: "
                     + ", ".join(f"{a[0]} → {b[0]} at {T:.3g} D" for a, b, T in pairs))
    return lines


def describe(stored: Result) -> str:
    """Multi-line text: provenance, config, summary, convergence and warnings of a result file."""
    a = stored.provenance
    conv = convergence(stored)
    s = stored.summary
    lines = [f"file: {stored.path or '(not saved)'}",
             "",
             "provenance",
             f"  nrgsolve version: {a.get('nrgsolve_version', '?')} (file format {a.get('format_version', '?')})",
             f"  created (UTC): {a.get('created_utc', '?')}",
             f"  git commit: {a.get('git_commit') or 'unknown'}",
             f"  python {a.get('python_version', '?')}, numpy {a.get('numpy_version', '?')}, "
             f"scipy {a.get('scipy_version', '?')}, h5py {a.get('h5py_version', '?')}",
             f"  config file: {a.get('config_path') or 'unknown'}",
             f"  model: {a.get('model', '?')}, symmetry: {a.get('symmetry', '?')}",
             "",
             "config",
             *("  " + ln for ln in str(a.get("config_text", "")).rstrip("\n").splitlines()),
             "",
             "method",
             *("  " + ln for ln in method_lines(a)),
             "",
             "summary",
             *("  " + ln for ln in summary_lines(s, {k[:-len("_error")]: v for k, v in s.items()
                                                     if k.endswith("_error")})),
             *([f"  uncertainties from: {s['error_checks']}"] if s.get("error_checks") else []),
             f"  lowest temperature reached: {_fmt(s.get('lowest_temperature_reached'), ' D')}",
             f"  wall time: {_fmt(s.get('wall_seconds'), ' s')}",
             *("  " + ln for ln in dynamics_lines(s)),
             *_fixed_point_lines(stored),
             "",
             "convergence",
             f"  max discarded weight: {conv['max_discarded_weight']:.3g}",
             f"  kept states: {conv['kept_states_min']} to {conv['kept_states_max']}",
             f"  twists: {len(conv['z'])}"]
    for z, n in zip(conv["z"], conv["iterations"]):
        lines.append(f"    z = {z:.6g}: {n} iterations")
    lines += ["", "stored quantities (units from nrgsolve.result.QUANTITIES)"]
    for group in ("thermo", "spectral", "transport"):
        g = getattr(stored, group)
        if g is not None and len(g):
            lines.append(f"  {group}: " + ", ".join(f"{k} [{u}]" for k, u in g.units.items()))
    lines += ["", "stored warnings"]
    lines += [f"  {w}" for w in stored.warnings] or ["  none"]
    lines += ["", "derived warnings"]
    lines += [f"  {w}" for w in derived_warnings(stored)] or ["  none"]
    lines += exact_comparison(stored)
    return "\n".join(lines) + "\n"


def exact_comparison(stored: Result) -> list[str]:
    """Lines comparing a one-channel Kondo run with the exact Bethe-ansatz curves (empty otherwise).

    T_K is Wilson's from the run's own χ_imp(0) with w = 0.4107; the deviations are the largest
    over T/T_K in [0.01, 10], relative to ¼, ln 2 and the exact peak of C_imp.
    """
    from .exact.runs import DEVIATION_WINDOW, deviation_from_exact, exact_model
    from .observables.kondo_scale import kondo_summary

    try:
        if exact_model(_spec(stored)) != (1, 0.5):
            return []
    except NrgInputError:
        return []
    th = stored.thermo
    if not all(k in th for k in ("temperature", "T_chi", "entropy", "heat")):
        return []
    head = ["", f"exact comparison (Bethe ansatz, one-channel Kondo, T/T_K in "
                f"[{DEVIATION_WINDOW[0]:g}, {DEVIATION_WINDOW[1]:g}], T_K = 0.4107/(4 χ_imp(0)) of this run)"]
    T = np.asarray(th["temperature"], float)
    chi0 = kondo_summary(T, np.asarray(th["T_chi"], float), np.asarray(th["heat"], float)).chi_zero
    dev = deviation_from_exact(T, th["T_chi"], th["entropy"], th["heat"], chi0) if chi0 else None
    if dev is None:
        return head + ["  not available: χ_imp(0) not reached or no temperature in the window"]
    lines = head + [f"  T_K = {dev['kondo_temperature']:.6g} D"]
    for key, what, ref in (("T_chi", "T·χ_imp", "of 1/4"), ("entropy", "S_imp", "of ln 2"),
                           ("heat", "C_imp", "of its peak")):
        d, r, at = dev[key]
        lines.append(f"  {what}: largest deviation {d:.3g} ({100 * d / r:.2f} % {ref}) at T/T_K = {at:.3g}")
    return lines
