"""Non-finite numbers never reach a result: a check of a finished run before it is returned or stored.

A NaN or an infinity in the thermodynamic curves means the numerics broke down
(for example an overflow in the Boltzmann weights); the run stops with one
clear message instead of writing a file with negative entropies or NaN
specific heats.  Pure function of the result; no files, no printing.
"""

from __future__ import annotations

import numpy as np

from .errors import NrgNumericalError

__all__ = ["check_finite_result"]

_CURVES = (("T_chi", "T·χ_imp"), ("entropy", "S_imp"), ("heat", "C_imp"))


def _check_curve(curve, where: str) -> None:
    T = np.asarray(curve.temperature, dtype=float)
    if not np.all(np.isfinite(T)):
        raise NrgNumericalError(f"non-finite temperature grid{where}")
    items = [(getattr(curve, a), label) for a, label in _CURVES] + list((v, k) for k, v in curve.extra.items())
    for values, label in items:
        v = np.asarray(values, dtype=float)
        bad = ~np.isfinite(v)
        if np.any(bad):
            i = int(np.flatnonzero(bad.ravel())[0]) % max(len(T), 1)
            raise NrgNumericalError(f"{label} is not finite at T = {T[i]:.3g} D{where}; the result is not "
                                    f"trustworthy and was not written (check the impurity parameters against "
                                    f"the bandwidth, run.beta_bar and run.kept_states)")


def check_finite_result(thermo, twist_thermos=(), twist_z=()) -> None:
    """Raise :class:`NrgNumericalError` if a thermodynamic curve holds NaN or infinity.

    Parameters
    ----------
    thermo : ThermoCurve
        The z-averaged curves.
    twist_thermos : sequence of ThermoCurve
        The curves of each twist (checked first, so the message names the twist).
    twist_z : sequence of float
        The twists z, in the same order.
    """
    for curve, z in zip(twist_thermos, twist_z):
        _check_curve(curve, f" (twist z = {z:.4g})")
    _check_curve(thermo, "")
