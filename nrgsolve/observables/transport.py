"""Linear conductance through a quantum dot from its spectral function.

For a dot (the Anderson d level) coupled symmetrically to two leads, the
linear conductance is (Meir & Wingreen 1992)

.. math::

    \\frac{G(T)}{2e^2/h} = \\frac12 \\sum_σ \\int dω \\left(-\\frac{∂f}{∂ω}\\right) π Γ(ω) A_σ(ω, T),

with f the Fermi function at temperature T, Γ(ω) = Γ g(ω) the total
hybridization (both leads) and A_σ the spectral function per spin.  At T = 0
this is πΓ(0) A(0) = sin²(π⟨n_d⟩/2) by the Friedel sum rule (Langreth 1966).
Energies and temperatures in units of D (k_B = 1); G in units of 2e²/h.

Dilute magnetic alloy
---------------------
For a small concentration of impurities in a metal (Costi, Hewson & Zlatić
1994, from memory) the transport time of the conduction electrons is
τ^{-1}(ω, T) ∝ −2 Im T(ω, T), and with t(ω, T) = −πρ Im T (1 at the unitary
limit) the transport integrals

.. math::

    \\tilde L_n(T) = \\int dω \\left(-\\frac{∂f}{∂ω}\\right) \\frac{ω^n}{t(ω, T)}

give the impurity resistivity ρ(T)/ρ_unitary = 1/L̃_0, the thermopower
S(T) = −L̃_1/(T L̃_0) (units of k_B/|e|; electrons of charge −|e|, so S > 0 when
the scattering is stronger above the Fermi level than below) and the thermal
conductivity through κ ρ_unitary/T = (L̃_2 − L̃_1²/L̃_0)/T² (units of k_B²/e²;
π²/3 in the unitary limit, the Wiedemann–Franz value).  With several
channels or spins the integrals are averaged over them (they conduct in
parallel).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import expit

from ..errors import NrgInputError
from .spectral import spectral_weight

__all__ = ["ConductanceCurve", "linear_conductance", "thermal_window", "AlloyTransport", "transport_integrals",
           "alloy_transport"]


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


@dataclass(frozen=True)
class AlloyTransport:
    """Impurity transport of a dilute alloy at temperatures (units of D), all shape (n_T,).

    Attributes
    ----------
    temperature : ndarray
        Units of D.
    resistivity : ndarray
        ρ(T)/ρ_unitary (dimensionless).
    thermopower : ndarray
        S(T) in units of k_B/|e|.
    thermal_conductivity : ndarray
        κ(T) ρ_unitary / T in units of k_B²/e² (π²/3 at the unitary limit).
    lorenz_ratio : ndarray
        κ ρ/(T L_0), L_0 = π²/3: 1 when the Wiedemann–Franz law holds.
    """

    temperature: np.ndarray
    resistivity: np.ndarray
    thermopower: np.ndarray
    thermal_conductivity: np.ndarray
    lorenz_ratio: np.ndarray


#: t(ω) below which the scattering is taken as this floor (a vanishing T-matrix would divide by zero).
_T_FLOOR = 1e-12


def transport_integrals(omega, t_matrix, temperature: float, orders=(0, 1, 2),
                        half_bandwidth: float | None = None) -> np.ndarray:
    """L̃_n = ∫ dω (−∂f/∂ω) ω^n / t(ω) for n in ``orders`` (units of D^n).

    Parameters
    ----------
    omega : ndarray, shape (n_ω,)
        Symmetric logarithmic grid with ω = 0 (units of D).
    t_matrix : ndarray, shape (n_ω,) or (n_comp, n_ω)
        t(ω) = −πρ Im T (dimensionless); several components are averaged after the integral.
    temperature : float
        > 0 (units of D).
    half_bandwidth : float, optional
        Only conduction electrons inside the band, |ω| ≤ D, carry current (default: the whole grid).

    Raises
    ------
    NrgInputError
        For T ≤ 0.
    """
    om = np.asarray(omega, dtype=float)
    t = np.atleast_2d(np.asarray(t_matrix, dtype=float))
    win = thermal_window(om, temperature)
    if half_bandwidth is not None:
        win = np.where(np.abs(om) <= half_bandwidth, win, 0.0)
    inv = 1.0 / np.maximum(t, _T_FLOOR)
    return np.array([float(np.mean(spectral_weight(om, win * om ** n * inv))) for n in orders])


def alloy_transport(omega, t_matrix, temperatures, half_bandwidth: float | None = None) -> AlloyTransport:
    """Resistivity, thermopower and thermal conductivity of a dilute alloy (see the module docstring).

    Parameters
    ----------
    omega : ndarray, shape (n_ω,)
        Frequency grid (units of D) from :func:`~nrgsolve.observables.spectral.frequency_grid`.
    t_matrix : ndarray, shape (n_T, n_comp, n_ω)
        −πρ Im T at each temperature.
    temperatures : ndarray, shape (n_T,)
        > 0 (units of D).
    half_bandwidth : float, optional
        D: the integrals run over the band |ω| ≤ D only.  The formulas assume T ≪ D: at T ≳ D/50
        electrons far from the Fermi level, which the impurity barely scatters, carry the current, and
        ρ(T) is no longer a universal function of T/T_K.

    Returns
    -------
    AlloyTransport

    Raises
    ------
    NrgInputError
        On mismatched shapes or non-positive temperatures.
    """
    temps = np.asarray(temperatures, dtype=float).ravel()
    t = np.asarray(t_matrix, dtype=float)
    if t.ndim == 2:
        t = t[:, None, :]
    if t.ndim != 3 or t.shape[0] != len(temps) or t.shape[-1] != len(np.asarray(omega)):
        raise NrgInputError(f"alloy_transport: t_matrix has shape {np.shape(t_matrix)}; "
                            f"expected ({len(temps)}, [n_comp,] {len(np.asarray(omega))})")
    L = np.array([transport_integrals(omega, t[i], T, half_bandwidth=half_bandwidth) for i, T in enumerate(temps)])
    L0, L1, L2 = L[:, 0], L[:, 1], L[:, 2]
    kappa = (L2 - L1 ** 2 / L0) / temps ** 2
    return AlloyTransport(temperature=temps, resistivity=1.0 / L0, thermopower=-L1 / (temps * L0),
                          thermal_conductivity=kappa, lorenz_ratio=kappa / L0 / (math.pi ** 2 / 3))
