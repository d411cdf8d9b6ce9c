"""The single-impurity Anderson model.

H_imp = ε_d n_d + U n_d↑ n_d↓ − h S_z + V_0 Σ_σ (d†_σ f_0σ + h.c.), Γ = πρV² (energies in units of D);
ε_d defaults to −U/2, the particle-hole symmetric point.
"""

from __future__ import annotations

from ..engine.fock import FockSpace, ExplicitBlock
from .parameters import LEVEL, INTERACTION, HYBRIDIZATION, FIELD
from .registry import ModelDeclaration, ChainContact

__all__ = ["anderson_block", "MODEL"]


def anderson_block(level: float, interaction: float, coupling: float, field: float = 0.0) -> ExplicitBlock:
    """The bare impurity level; chain site 0 is added by the engine with hopping V_0.

    .. math:: H_d = ε_d n_d + U n_{d↑} n_{d↓} - h (n_{d↑} - n_{d↓})/2,
              \\qquad H_{hyb} = V_0 \\sum_σ (d^†_σ f_{0σ} + \\mathrm{h.c.})

    Parameters
    ----------
    level : float
        ε_d (units of D).
    interaction : float
        U ≥ 0 (units of D); 0 gives the resonant-level model.
    coupling : float
        V_0 = sqrt(Γ · (1/π)∫g(ε)dε) (units of D); flat band: V_0² = 2DΓ/π.
    field : float
        Zeeman energy h (units of D).

    Returns
    -------
    ExplicitBlock
        Impurity-only block (chain index −1); observables n_d and n_d↑n_d↓
        (spin scalars) and the impurity S_z (abelian mode).
    """
    sp = FockSpace([(0, 1), (0, -1)])
    nu, nd = sp.number(0), sp.number(1)
    H = level * (nu + nd) + interaction * (nu @ nd) - 0.5 * field * (nu - nd)
    return ExplicitBlock(space=sp, hamiltonian=H, last_site={0: (sp.creator(0), sp.creator(1))},
                         scalar_ops={"occupation": nu + nd, "double_occupancy": nu @ nd},
                         first_site=0, first_hopping={0: coupling},
                         sz_ops={"impurity_sz": 0.5 * (nu - nd)})


def _build(imp, contact: ChainContact) -> ExplicitBlock:
    return anderson_block(imp.epsilon_d, imp.U, (imp.hybridization * contact.coupling_sq) ** 0.5, imp.field)


MODEL = ModelDeclaration(
    name="anderson",
    summary="an interacting level (ε_d, U) hybridized with one channel (Γ = πρV²)",
    parameters={"level": LEVEL, "interaction": INTERACTION, "hybridization": HYBRIDIZATION, "field": FIELD},
    build=_build,
    impurity_level=True,
    averages=("occupation", "double_occupancy"),
    particle_hole_symmetric=lambda imp: abs(imp.epsilon_d + 0.5 * imp.U) < 1e-15,
    particle_hole_breaker=lambda imp: f"impurity.level = {imp.epsilon_d:g} ≠ −interaction/2 = {-0.5 * imp.U:g}",
    exact_curve=lambda imp: "no exact curve for model \"anderson\"; exact curves exist for kondo, "
                            "spin-kondo and two-channel-kondo",
    order=1,
)
