"""Describe a stored result file in plain text (the ``nrgsolve inspect`` command).

Reads only what :func:`nrgsolve.store.read_result` returns; computes no
physics.  Besides the stored numbers it derives a few checks from them:
truncation too aggressive (largest discarded weight above
:data:`DISCARDED_WEIGHT_LIMIT`), lowest temperature not reached, Kondo
temperature not reached, a config that no longer parses.
Temperatures are in units of the half-bandwidth D.
"""

from __future__ import annotations

import math

import numpy as np

from .config import parse_config
from .errors import NrgInputError
from .solve import DISCARDED_WEIGHT_LIMIT
from .store import StoredResult

__all__ = ["DISCARDED_WEIGHT_LIMIT", "LOW_TEMPERATURE_SLACK", "convergence", "derived_warnings", "describe"]

#: The lowest temperature counts as reached when it is at most this factor above the requested one.
LOW_TEMPERATURE_SLACK = 1.5


def _number(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _fmt(v, unit: str = "") -> str:
    x = _number(v)
    return "not reached" if not math.isfinite(x) else f"{x:.6g}{unit}"


def convergence(stored: StoredResult) -> dict:
    """Convergence numbers over all twists of a stored run.

    Returns
    -------
    dict
        ``max_discarded_weight`` (fraction), ``kept_states_min``,
        ``kept_states_max`` (states, counting 2S+1), ``iterations`` (list,
        one per twist) and ``z`` (list of twists).
    """
    diags = [t["diagnostics"] for t in stored.twists] or [stored.diagnostics]
    weights = np.concatenate([np.ravel(d.get("discarded_weight", [])) for d in diags])
    kept = np.concatenate([np.ravel(d.get("kept_states", [])) for d in diags])
    finite = weights[np.isfinite(weights)]
    return {
        "max_discarded_weight": float(finite.max()) if finite.size else math.nan,
        "kept_states_min": int(kept.min()) if kept.size else 0,
        "kept_states_max": int(kept.max()) if kept.size else 0,
        "iterations": [len(np.ravel(d.get("iteration", []))) for d in diags],
        "z": [t["z"] for t in stored.twists],
    }


def _spec(stored: StoredResult):
    text = stored.attrs.get("config_text", "")
    return parse_config(text, stored.attrs.get("config_path", "<stored config>") or "<stored config>", stored=True)


def derived_warnings(stored: StoredResult) -> list[str]:
    """Warnings derived from the stored numbers (not the ones stored by the run).

    Returns
    -------
    list of str
        One sentence per problem found; empty when nothing is suspicious.
    """
    out = []
    conv = convergence(stored)
    w = conv["max_discarded_weight"]
    if math.isfinite(w) and w > DISCARDED_WEIGHT_LIMIT:
        out.append(f"truncation too aggressive: discarded weight up to {w:.2e} > {DISCARDED_WEIGHT_LIMIT:g} "
                   f"(raise run.kept_states)")
    try:
        spec = _spec(stored)
    except NrgInputError as exc:
        out.append(f"the stored config does not parse with this version: {exc}")
        spec = None
    low = _number(stored.summary.get("lowest_temperature_reached"))
    if spec is not None:
        want = spec.run.lowest_temperature
        if not math.isfinite(low):
            out.append(f"lowest temperature not reached: no temperature stored (requested {want:.3g} D)")
        elif low > LOW_TEMPERATURE_SLACK * want:
            out.append(f"lowest temperature not reached: {low:.3g} D > requested {want:.3g} D")
        kondo_like = spec.impurity.model in ("kondo", "spin-kondo", "anderson")
        if kondo_like and not math.isfinite(_number(stored.summary.get("kondo_temperature_crossover"))):
            tchi = np.asarray(stored.thermodynamics.get("T_chi_imp", []), dtype=float)
            if tchi.size and np.all(tchi < 0.07):
                out.append("Kondo temperature not found: T·χ is below 0.07 (g μ_B)²/k_B already at the highest "
                           "temperature stored; the Kondo scale is at or above it")
            else:
                out.append("Kondo temperature not reached (T·χ never fell below 0.07 in (g μ_B)²/k_B)")
    return out


def describe(stored: StoredResult) -> str:
    """Multi-line text: provenance, config, summary, convergence and warnings of a result file."""
    a = stored.attrs
    conv = convergence(stored)
    s = stored.summary
    lines = [f"file: {stored.path}",
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
             "summary",
             f"  Kondo temperature (Wilson): {_fmt(s.get('kondo_temperature_wilson'), ' D')}",
             f"  Kondo temperature (crossover): {_fmt(s.get('kondo_temperature_crossover'), ' D')}",
             f"  Wilson ratio: {_fmt(s.get('wilson_ratio'))}",
             f"  lowest temperature reached: {_fmt(s.get('lowest_temperature_reached'), ' D')}",
             f"  wall time: {_fmt(s.get('wall_seconds'), ' s')}",
             "",
             "convergence",
             f"  max discarded weight: {conv['max_discarded_weight']:.3g}",
             f"  kept states: {conv['kept_states_min']} to {conv['kept_states_max']}",
             f"  twists: {len(conv['z'])}"]
    for z, n in zip(conv["z"], conv["iterations"]):
        lines.append(f"    z = {z:.6g}: {n} iterations")
    lines += ["", "stored warnings"]
    lines += [f"  {w}" for w in stored.warnings] or ["  none"]
    lines += ["", "derived warnings"]
    lines += [f"  {w}" for w in derived_warnings(stored)] or ["  none"]
    return "\n".join(lines) + "\n"
