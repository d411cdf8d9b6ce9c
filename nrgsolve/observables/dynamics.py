"""Which operators the backward pass follows for each spectral quantity, and their curves.

Quantities (``spectral.quantities``)
------------------------------------
``"impurity"``
    A_dσ(ω, T) = −(1/π) Im ⟨⟨d_σ; d†_σ⟩⟩ of the d level (units of 1/D), models with a d level.
``"t-matrix"``
    t_σ(ω, T) = −πρ Im T_σ(ω, T) (dimensionless; 1 is the unitary limit) of the conduction
    electrons scattering off the impurity.  With H_imp the impurity part of the Hamiltonian and
    f_0σ chain site 0, the equation of motion gives T_σ(ω) = ⟨{O_σ, f†_0σ}⟩ + ⟨⟨O_σ; O†_σ⟩⟩ with
    O_σ = [f_0σ, H_imp]; the first term is real, so

    * Anderson models (O_σ = V d_σ): t_σ = πρV² π A_dσ = πΓ A_dσ;
    * Kondo models (J S·s_0 + K (n_0 − 1)): O_σ = (J/2) Σ_σ' (S·σ)_σσ' f_0σ' + K f_0σ, the
      composite operator of the impurity spin and site 0 (Costi 2000, from memory), and
      t_σ = π²ρ A_Oσ with A_O = −(1/π) Im ⟨⟨O_σ; O†_σ⟩⟩.  Per channel for the two-channel model.

    ρ is the density of states of site 0 at the Fermi level, 1/(2D) for the flat band (divided by
    A_Λ when Wilson's correction multiplies the couplings, so that ρJ is the continuum coupling).
``"spin-susceptibility"``
    χ''(ω, T) = π Σ |⟨s|S_z|r⟩|² (ρ_r − ρ_s) δ(ω − E_s + E_r) of the impurity spin (units of
    (g μ_B)²/D, with χ of a free spin ½ equal to 1/(4T)); its Kramers–Kronig static limit
    χ(ω = 0) = (1/π) ∫ χ''(ω)/ω dω is computed from the discrete poles (pairs of states closer
    than the degeneracy tolerance are left out: at T > 0 it misses the elastic Curie-like part of
    the isothermal susceptibility, which is the thermodynamic one only at T = 0).

Everything here is a pure function of arrays and of the model's explicit block.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..engine.backward import spinor_operator, spin_vector_operator, impurity_operators

__all__ = ["QUANTITY_CORRELATORS", "backward_operators", "DynamicsCurves", "dynamics_curves",
           "t_matrix_prefactor", "static_susceptibility", "zero_temperature_values", "ZERO_TEMPERATURE_VALUES"]

#: Headline numbers of the dynamics at T = 0 (summary attributes and ``index.csv`` columns), with units.
ZERO_TEMPERATURE_VALUES = {
    "t_matrix_zero": "1",                  # −πρ Im T(ω = 0, T = 0), averaged over spins and channels
    "resistivity_zero": "rho_unitary",     # ρ(T = 0)/ρ_unitary = 1/⟨1/t(0)⟩ over spins and channels
    "static_susceptibility_zero": "(g mu_B)^2/D",   # Kramers–Kronig static limit of χ''(ω) at T = 0
}

#: The correlators (name, op1, op2) behind each quantity, per kind of model (with / without a d level).
QUANTITY_CORRELATORS = {
    ("impurity", True): ("G", "d", "d"),
    ("t-matrix", True): ("G", "d", "d"),
    ("t-matrix", False): ("T", "t", "t"),
    ("spin-susceptibility", True): ("chi", "S", "S"),
    ("spin-susceptibility", False): ("chi", "S", "S"),
}


def _composite_creators(block, onsite0: float) -> dict:
    """O†_kσ = [H_imp, f†_0kσ] for every channel k: the block's Hamiltonian minus the chain's own
    on-site energy ε_0 n_0 (which gives ε_0 f†_0kσ)."""
    H = block.hamiltonian
    out = {}
    for k, (up, dn) in block.last_site.items():
        out[k] = tuple(H @ c - c @ H - onsite0 * c for c in (up, dn))
    return out


def backward_operators(sym, block, quantities, impurity_level: bool, self_energy: bool = False,
                       onsite0: float = 0.0):
    """Operators and correlators the backward pass needs for ``quantities``.

    Parameters
    ----------
    sym : Su2Symmetry or AbelianSymmetry
    block : ExplicitBlock
        The model's initial block: the d level (models with a d level) or the impurity spin and
        chain site 0 (Kondo models, ``last_site`` = f†_0 per channel); ``sz_ops["impurity_sz"]`` the
        impurity S_z.
    quantities : sequence of str
        Names from :data:`nrgsolve.config.SPECTRAL_QUANTITIES`.
    impurity_level : bool
        The model has a d level.
    self_energy : bool
        Also ⟨⟨d_σ n_{d,−σ}; d†_σ⟩⟩ (needs a d level).
    onsite0 : float
        On-site energy ε_0 of chain site 0 inside the block (units of D).

    Returns
    -------
    (operators, correlators)
        ``operators``: name -> TensorOperator or spinor matrices; ``correlators``: tuple of
        (name, op1, op2) for :func:`nrgsolve.engine.backward.spectral_run`.

    Raises
    ------
    ValueError
        A quantity this model cannot give (the config refuses it earlier with a clear message).
    """
    ops, corr = {}, []
    for q in quantities:
        key = (q, impurity_level)
        if key not in QUANTITY_CORRELATORS:
            raise ValueError(f"spectral quantity {q!r} needs a model with a d level")
        c = QUANTITY_CORRELATORS[key]
        if c not in corr:
            corr.append(c)
    if self_energy:
        if not impurity_level:
            raise ValueError("the self-energy needs a model with a d level")
        corr += [c for c in (("G", "d", "d"), ("F", "dn", "d")) if c not in corr]
    names = {o for _n, o1, o2 in corr for o in (o1, o2)}
    if names & {"d", "dn"}:
        ops.update(impurity_operators(sym, block, self_energy))
    if "t" in names:
        ops["t"] = spinor_operator(sym, block, _composite_creators(block, onsite0))
    if "S" in names:
        ops["S"] = spin_vector_operator(sym, block, block.sz_ops["impurity_sz"])
    # the d-level function first: it carries the occupation and the spin components of the curves
    corr.sort(key=lambda c: {"G": 0, "T": 1, "F": 2, "chi": 3}[c[0]])
    return ops, tuple(corr)


def t_matrix_prefactor(impurity_level: bool, hybridization: float = 0.0, density: float = 0.5,
                       correction: float = 1.0) -> float:
    """The factor turning a broadened spectral function into −πρ Im T.

    πΓ for A_d (models with a d level, Γ = πρV² in units of D); π²ρ/A_Λ for the composite operator
    of Kondo models (ρ = 1/(2D) in 1/D, A_Λ Wilson's correction or 1).
    """
    if impurity_level:
        return math.pi * hybridization
    return math.pi ** 2 * density / correction


def static_susceptibility(inverse_moments) -> np.ndarray:
    """χ(ω = 0) = Σ_p w_p/ω_p of the commutator weights of S_z (Kramers–Kronig; (g μ_B)²/D).

    ``inverse_moments`` : array (n_twists, n_T); the z-average is returned, shape (n_T,).
    """
    return np.mean(np.asarray(inverse_moments, dtype=float), axis=0)


@dataclass(frozen=True)
class DynamicsCurves:
    """The requested quantities on the frequency grid of the spectra (z-averaged).

    Attributes
    ----------
    quantities : tuple of str
    curves : dict quantity -> ndarray (n_T, n_comp, n_ω)
        ``"impurity"`` A_d (1/D); ``"t-matrix"`` −πρ Im T (1); ``"spin-susceptibility"`` χ''
        ((g μ_B)²/D).
    components : dict quantity -> tuple of str
    static_susceptibility : ndarray (n_T,) or None
        Kramers–Kronig static limit of χ'' ((g μ_B)²/D).
    """

    quantities: tuple
    curves: dict
    components: dict
    static_susceptibility: np.ndarray | None = None


def dynamics_curves(correlator_curves: dict, correlator_components: dict, quantities, impurity_level: bool,
                    t_factor: float, inverse_moments=None) -> DynamicsCurves:
    """Turn broadened correlator spectra into the quantities.

    Parameters
    ----------
    correlator_curves : dict name -> ndarray (n_T, n_comp, n_ω)
        Broadened, z-averaged discrete weights of each correlator (``"G"``, ``"T"``, ``"chi"``).
    correlator_components : dict name -> tuple of str
    quantities : sequence of str
    impurity_level : bool
    t_factor : float
        :func:`t_matrix_prefactor`.
    inverse_moments : array (n_twists, n_T), optional
        Σ w/ω of the ``"chi"`` correlator per twist.
    """
    curves, comps = {}, {}
    for q in quantities:
        name = QUANTITY_CORRELATORS[(q, impurity_level)][0]
        a = correlator_curves[name]
        if q == "t-matrix":
            a = t_factor * a
        elif q == "spin-susceptibility":
            a = math.pi * a
        curves[q] = a
        comps[q] = correlator_components[name]
    static = None
    if "spin-susceptibility" in quantities and inverse_moments is not None:
        static = static_susceptibility(inverse_moments)
    return DynamicsCurves(tuple(quantities), curves, comps, static)


def zero_temperature_values(omega, temperatures, dyn: DynamicsCurves) -> dict:
    """The T = 0 headline numbers of :data:`ZERO_TEMPERATURE_VALUES` (NaN when the run has no T = 0
    spectrum or not the quantity).

    ρ(T = 0)/ρ_unitary is the T → 0 limit of the transport integral, 1/L̃_0 = 1/⟨1/t(0)⟩.
    """
    out = {k: math.nan for k in ZERO_TEMPERATURE_VALUES}
    temps = np.asarray(temperatures, dtype=float)
    if dyn is None or not np.any(temps == 0):
        return out
    i = int(np.flatnonzero(temps == 0)[0])
    om = np.asarray(omega, dtype=float)
    if "t-matrix" in dyn.curves:
        t0 = np.array([float(np.interp(0.0, om, c)) for c in dyn.curves["t-matrix"][i]])
        out["t_matrix_zero"] = float(np.mean(t0))
        out["resistivity_zero"] = float(1.0 / np.mean(1.0 / np.maximum(t0, 1e-300)))
    if dyn.static_susceptibility is not None:
        out["static_susceptibility_zero"] = float(dyn.static_susceptibility[i])
    return out
