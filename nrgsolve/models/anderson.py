"""The single-impurity Anderson model (and the resonant level, U = 0)."""

from __future__ import annotations

from ..engine.fock import FockSpace, ExplicitBlock

__all__ = ["anderson_block"]


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
