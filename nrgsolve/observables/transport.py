"""Linear conductance through a quantum dot from its spectral function.

For a dot (the Anderson d level) coupled symmetrically to two leads, the
linear conductance is (Meir & Wingreen 1992)

.. math::

    \\frac{G(T)}{2e^2/h} = \\frac12 \\sum_σ \\int dω \\left(-\\frac{∂f}{∂ω}\\right) π Γ(ω) A_σ(ω, T),

with f the Fermi function at temperature T, Γ(ω) = Γ g(ω) the total
hybridization (both leads) and A_σ the spectral function per spin.  At T = 0
this is πΓ(0) A(0) = sin²(π⟨n_d⟩/2) by the Friedel sum rule (Langreth 1966).
Energies and temperatures in units of D (k_B = 1); G in units of 2e²/h.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import expit

from ..errors import NrgInputError
from .spectral import spectral_weight

__all__ = ["ConductanceCurve", "linear_conductance", "thermal_window"]


@dataclass(frozen=True)
class ConductanceCurve:
    """G(T) in units of 2e²/h at temperatures (units of D), both shape (n_T,)."""

    temperature: np.ndarray
    conductance: np.ndarray


def thermal_window(omega, temperature: float) -> np.ndarray:
    """−∂f/∂ω = f(1 − f)/T on the grid (units of 1/D); shape of ``omega``.

    Raises
    ------
    NrgInputError
        For T ≤ 0 or non-finite T.
    """
    if not (temperature > 0 and np.isfinite(temperature)):
        raise NrgInputError(f"conductance temperature: got {temperature}; allowed range: > 0 (units of D)")
    x = np.asarray(omega, dtype=float) / temperature
    f = expit(-x)
    return f * expit(x) / temperature


def linear_conductance(omega, spectral, temperatures, gamma) -> np.ndarray:
    """Linear conductance G(T)/(2e²/h) from spectral functions on a frequency grid.

    Parameters
    ----------
    omega : ndarray, shape (n_ω,)
        Symmetric logarithmic grid with ω = 0 (units of D), as from
        :func:`~nrgsolve.observables.spectral.frequency_grid`; the integral
        uses the trapezoid rule in ln|ω| (:func:`~nrgsolve.observables.spectral.spectral_weight`).
    spectral : ndarray, shape (n_T, n_ω) or (n_T, n_spin, n_ω)
        A(ω, T) at each temperature (units of 1/D); the spin axis is averaged.
    temperatures : ndarray, shape (n_T,)
        Temperatures ≥ 0 (units of D); T = 0 gives πΓ(0)A(0).
    gamma : float or ndarray, shape (n_ω,)
        Γ(ω) (units of D).

    Returns
    -------
    ndarray, shape (n_T,)
        G/(2e²/h).

    Raises
    ------
    NrgInputError
        On mismatched shapes or negative temperatures.
    """
    om = np.asarray(omega, dtype=float)
    A = np.asarray(spectral, dtype=float)
    if A.ndim == 3:
        A = A.mean(axis=1)
    temps = np.asarray(temperatures, dtype=float).ravel()
    if A.ndim != 2 or A.shape != (len(temps), len(om)):
        raise NrgInputError(f"linear_conductance: spectral has shape {np.shape(spectral)}; "
                            f"expected ({len(temps)}, [n_spin,] {len(om)})")
    if np.any(temps < 0) or not np.all(np.isfinite(temps)):
        raise NrgInputError(f"conductance temperatures: got {list(temps)}; allowed range: >= 0 (units of D)")
    g = np.broadcast_to(np.asarray(gamma, dtype=float), om.shape)
    out = np.empty(len(temps))
    for i, T in enumerate(temps):
        integrand = np.pi * g * A[i]
        if T == 0:
            out[i] = float(np.interp(0.0, om, integrand))
        else:
            out[i] = float(spectral_weight(om, thermal_window(om, T) * integrand))
    return out
