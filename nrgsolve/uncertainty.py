"""Error estimates of a run's headline numbers from two further runs (``run.error_estimate``).

A converged NRG number has two kinds of error: truncation (finite kept states)
and discretization (finite Λ, finitely many twists).  Each is estimated by
repeating the run with only that approximation changed:

* **truncation**: the same run with ``TRUNCATION_FACTOR`` × the kept states;
* **discretization**: the same run at Λ' = Λ^``LAMBDA_POWER`` (a coarser
  grid, so that the change over- rather than under-states the error of the
  finer one) with twice the twists.  The adaptive discretization makes the
  physical scales nearly independent of Λ; what remains is the z-averaging
  residual (measured: the crossover T_K of the Kondo model, ρJ = 0.2, Λ = 3,
  moves by 0.9 % from 2 to 4 twists) and the Λ-dependence of the truncation.

The uncertainty of a number x is ``TRUNCATION_WEIGHT·|x − x_states| + |x − x_Λ|``.
The truncation error falls slowly with the kept states (no faster than 1/K
in our measurements), so the change from K to 1.5 K is only about a third of
the error at K: hence the weight 3 = 1/(1 − 1/1.5).  The coarser Λ' over- rather
than understates the discretization error of Λ, so its change counts once.  The
two add rather than combine in quadrature, which keeps the estimate on the safe
side when one of them happens to be small by accident of sign.  A number that one of the runs does not reach (e.g. a Kondo
temperature below the lowest temperature) gets no uncertainty.

Units are those of each quantity (temperatures in D, χ_imp(0) in
(g μ_B)²/k_B per D, γ_imp in k_B per D, T·χ_imp in (g μ_B)²/k_B, S_imp in k_B).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["HEADLINE", "TRUNCATION_FACTOR", "TRUNCATION_WEIGHT", "LAMBDA_POWER", "variant_specs", "headline_values",
           "uncertainties", "format_with_error"]

#: Kept states of the truncation check, relative to the run's own.
TRUNCATION_FACTOR = 1.5
#: Weight of the truncation change: 1/(1 − 1/TRUNCATION_FACTOR) for an error ∝ 1/kept states.
TRUNCATION_WEIGHT = 1.0 / (1.0 - 1.0 / TRUNCATION_FACTOR)
#: Λ of the discretization check: Λ' = Λ ** LAMBDA_POWER.
LAMBDA_POWER = 1.25

#: The headline numbers that get an uncertainty: (name, meaning, unit).
HEADLINE = (
    ("kondo_temperature_wilson", "Kondo temperature (Wilson)", "D"),
    ("kondo_temperature_crossover", "Kondo temperature (crossover)", "D"),
    ("chi_zero", "χ_imp(0)", "(g mu_B)^2/(k_B D)"),
    ("gamma_zero", "γ_imp = lim C_imp/T", "k_B/D"),
    ("wilson_ratio", "Wilson ratio", "1"),
    ("T_chi_lowest", "T·χ_imp at the lowest temperature", "(g mu_B)^2/k_B"),
    ("entropy_lowest", "S_imp at the lowest temperature", "k_B"),
)


def variant_specs(spec):
    """The two checking runs of ``spec``: more kept states, and a coarser Λ.

    Returns
    -------
    list of (str, RunSpec)
        ``("kept states × 1.5", spec1)``, ``("Λ = … with … twists", spec2)``; neither asks for error
        estimates.
    """
    base = spec.with_value("run.error_estimate", False)
    more = base.with_value("run.kept_states", int(math.ceil(TRUNCATION_FACTOR * spec.run.kept_states)))
    lam = spec.discretization.Lambda ** LAMBDA_POWER
    twists = 2 * spec.discretization.twists
    coarse = base.with_value("discretization.Lambda", round(lam, 6)).with_value("discretization.twists", twists)
    return [(f"kept states × {TRUNCATION_FACTOR:g}", more), (f"Λ = {lam:.4g} with {twists} twists", coarse)]


def headline_values(result, at_temperature: float | None = None) -> dict:
    """The headline numbers of a run (None where not reached).

    Parameters
    ----------
    result : RunResult
    at_temperature : float, optional
        Temperature (D) for T·χ_imp and S_imp (default: the run's lowest); interpolated in ln T.
    """
    s, th = result.summary, result.thermo
    T = float(th.temperature[0]) if at_temperature is None else float(at_temperature)
    lt = np.log(th.temperature)
    at = lambda y: float(np.interp(math.log(T), lt, y)) if th.temperature[0] <= T * (1 + 1e-9) else None
    return {"kondo_temperature_wilson": s.kondo_temperature_wilson,
            "kondo_temperature_crossover": s.kondo_temperature_crossover,
            "chi_zero": s.chi_zero, "gamma_zero": s.gamma_zero, "wilson_ratio": s.wilson_ratio,
            "T_chi_lowest": at(th.T_chi), "entropy_lowest": at(th.entropy)}


def uncertainties(main, variants) -> dict:
    """Uncertainty of every headline number of ``main`` from the checking runs.

    Parameters
    ----------
    main : RunResult
    variants : list of RunResult
        The runs of :func:`variant_specs`.

    Returns
    -------
    dict
        name → uncertainty (same unit as the number), or None when a run lacks the number.
    """
    T0 = float(main.thermo.temperature[0])
    ref = headline_values(main)
    others = [headline_values(v, T0) for v in variants]
    out = {}
    for name, _, _ in HEADLINE:
        x = ref[name]
        ys = [o[name] for o in others]
        if x is None or any(y is None for y in ys):
            out[name] = None
        else:
            out[name] = float(TRUNCATION_WEIGHT * abs(x - ys[0]) + sum(abs(x - y) for y in ys[1:]))
    return out


def format_with_error(value, error, unit: str = "") -> str:
    """Compact form of a number with its uncertainty, e.g. ``4.119(3)e-4 D``.

    The uncertainty is rounded to one significant digit (two when it starts with 1 or 2) and
    the value to the same decimal place; ``value`` alone when ``error`` is None or zero.
    """
    u = f" {unit}" if unit else ""
    if value is None:
        return "not reached"
    if error is None or not math.isfinite(error) or error <= 0:
        return f"{value:.6g}{u}"
    exp = int(math.floor(math.log10(abs(value)))) if value != 0 else 0
    if abs(exp) <= 2:
        exp = 0
    scale = 10.0 ** exp
    v, e = value / scale, error / scale
    first = int(math.floor(math.log10(e)))
    digits = 2 if e / 10 ** first < 3 else 1
    place = first - digits + 1
    if place > 0:        # the uncertainty exceeds the units digit: plain ± form
        text = f"{v:.0f} ± {round(e, -place):.0f}"
    else:
        dec = -place
        err_digits = int(round(e * 10 ** dec))
        text = f"{v:.{dec}f}({err_digits})"
    return f"{text}e{exp}{u}" if exp else f"{text}{u}"
