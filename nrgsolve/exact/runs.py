"""Which exact curve belongs to a run, and how far a run's thermodynamics lies from it.

The exact curves (:mod:`nrgsolve.exact.bethe_ansatz`) describe Kondo models in
the scaling limit with a conduction band of finite density of states at the
Fermi level and no field: the "kondo" model (one channel, S = ½), the
"spin-kondo" model (one channel, spin S) and the "two-channel-kondo" model with
equal couplings.  Temperatures in units of D; T·χ in (g μ_B)²/k_B, S and C in k_B.
"""

from __future__ import annotations

import math

import numpy as np

from nrgsolve.errors import NrgInputError

from .bethe_ansatz import WILSON_NUMBER_EXACT, kondo_thermodynamics

__all__ = ["exact_model", "deviation_from_exact", "DEVIATION_WINDOW"]

#: T/T_K range over which a one-channel Kondo run is compared with the exact curves.
DEVIATION_WINDOW = (0.01, 10.0)


def exact_model(spec):
    """(channels, spin) of the exact curve of a run, from its validated config.

    Parameters
    ----------
    spec : nrgsolve.config.RunSpec

    Returns
    -------
    (int, float)

    Raises
    ------
    NrgInputError
        When the run's model has no exact curve (the message says why).
    """
    imp, bath = spec.impurity, spec.bath
    found = imp.declaration.exact_curve(imp)
    if isinstance(found, str):
        raise NrgInputError(found)
    k, spin = found
    if bath.shape == "table" or (bath.shape == "power-law" and bath.exponent != 0):
        raise NrgInputError(f"no exact curve for bath shape \"{bath.shape}\"; the exact curves need a finite "
                            f"density of states at the Fermi level (flat or semicircular)")
    return k, spin


def deviation_from_exact(temperature, t_chi, entropy, heat, chi_zero, window=DEVIATION_WINDOW):
    """Largest deviation of a one-channel Kondo run from the exact curves over a T/T_K window.

    T_K is Wilson's, taken from the run's own χ_imp(0): T_K = w/(4 χ_imp(0)), w = 0.4107.

    Parameters
    ----------
    temperature, t_chi, entropy, heat : ndarray (M,)
        The run's z-averaged curves (T in D).
    chi_zero : float
        The run's χ_imp(T → 0) in (g μ_B)²/k_B per D.
    window : (float, float)
        T/T_K range.

    Returns
    -------
    dict
        ``kondo_temperature`` (D) and, for "T_chi", "entropy", "heat", a tuple
        (largest |run − exact|, the reference it is measured against — ¼, ln 2,
        the exact peak of C — and the T/T_K where it occurs); None when the run
        has no point in the window.
    """
    T = np.asarray(temperature, float)
    tk = WILSON_NUMBER_EXACT / (4.0 * float(chi_zero))
    t = T / tk
    sel = (t >= window[0]) & (t <= window[1]) & np.isfinite(t)
    if sel.sum() == 0:
        return None
    ex = kondo_thermodynamics(t[sel])
    peak = float(np.max(kondo_thermodynamics(np.logspace(-1, 1, 81)).heat_capacity))
    out = {"kondo_temperature": tk}
    for name, run, exact, ref in (("T_chi", t_chi, ex.t_chi, 0.25), ("entropy", entropy, ex.entropy, math.log(2)),
                                  ("heat", heat, ex.heat_capacity, peak)):
        d = np.abs(np.asarray(run, float)[sel] - exact)
        i = int(np.nanargmax(d))
        out[name] = (float(d[i]), ref, float(t[sel][i]))
    return out
