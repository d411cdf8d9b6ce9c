"""The Kondo model (spin ½, one channel) and the block builders of every Kondo model.

H_imp = J S·s_0 + K (n_0 − 1) − h S_z, J > 0 antiferromagnetic, energies in units of D;
the config gives ρJ and ρK with ρ = 1/(2D).  The spin-S and two-channel variants are declared
in :mod:`.spin_kondo` and :mod:`.two_channel_kondo` and build their blocks here.
"""

from __future__ import annotations


from ..engine.fock import FockSpace, ExplicitBlock
from .parameters import EXCHANGE, POTENTIAL_SCATTERING, FIELD
from .registry import ModelDeclaration, ChainContact

__all__ = ["kondo_block", "two_channel_kondo_block", "MODEL"]


def _spin_dot(space: FockSpace, up: int):
    """S_imp · s for the orbital whose up mode is ``up`` (down mode ``up + 1``)."""
    cu, cd = space.annihilator(up), space.annihilator(up + 1)
    nu, nd = cu.T @ cu, cd.T @ cd
    s_z = 0.5 * (nu - nd)
    s_plus = cu.T @ cd
    Sz, Sp = space.local_sz, space.local_splus
    return Sz @ s_z + 0.5 * (Sp @ s_plus.T + Sp.T @ s_plus)


def kondo_block(exchange: float, potential: float = 0.0, twice_spin: int = 1, field: float = 0.0,
                onsite0: float = 0.0) -> ExplicitBlock:
    """Spin-S Kondo impurity plus chain site 0.

    .. math:: H_0 = J \\vec S\\cdot\\vec s_0 + K (n_0 - 1) + ε_0 n_0 - h S_z

    Parameters
    ----------
    exchange : float
        J in units of D (> 0 antiferromagnetic).
    potential : float
        K in units of D.
    twice_spin : int
        2S of the impurity spin (1 for spin-1/2).
    field : float
        Zeeman energy h on the impurity (units of D); non-zero needs the abelian mode.
    onsite0 : float
        On-site energy ε_0 of chain site 0 (units of D).

    Returns
    -------
    ExplicitBlock
        Block holding site 0; the next site to add is site 1.
    """
    sp = FockSpace([(0, 1), (0, -1)], local_spin_twice=twice_spin)
    n0 = sp.number(0) + sp.number(1)
    H = exchange * _spin_dot(sp, 0) + potential * (n0 - sp.identity) + onsite0 * n0 - field * sp.local_sz
    return ExplicitBlock(space=sp, hamiltonian=H, last_site={0: (sp.creator(0), sp.creator(1))},
                         scalar_ops={"spin_correlation": _spin_dot(sp, 0)}, first_site=1,
                         sz_ops={"impurity_sz": sp.local_sz})


def two_channel_kondo_block(exchange: float, exchange2: float, twice_spin: int = 1, field: float = 0.0,
                            onsite0: float = 0.0) -> ExplicitBlock:
    """Spin-S impurity coupled to site 0 of two independent channels.

    .. math:: H_0 = J_1 \\vec S\\cdot\\vec s_{0,1} + J_2 \\vec S\\cdot\\vec s_{0,2}
              + ε_0 (n_{0,1} + n_{0,2}) - h S_z

    Energies in units of D; J > 0 antiferromagnetic.
    """
    sp = FockSpace([(0, 1), (0, -1), (1, 1), (1, -1)], local_spin_twice=twice_spin, n_channels=2)
    n0 = sum(sp.number(j) for j in range(4))
    H = exchange * _spin_dot(sp, 0) + exchange2 * _spin_dot(sp, 2) + onsite0 * n0 - field * sp.local_sz
    return ExplicitBlock(space=sp, hamiltonian=H,
                         last_site={0: (sp.creator(0), sp.creator(1)), 1: (sp.creator(2), sp.creator(3))},
                         scalar_ops={}, first_site=1, sz_ops={"impurity_sz": sp.local_sz})


def build_kondo(imp, contact: ChainContact, twice_spin: int = 1) -> ExplicitBlock:
    """Block of a one-channel Kondo model from its parameters (ρJ, ρK → J, K with ρ and A_Λ)."""
    scale = contact.correction / contact.density
    return kondo_block(imp.exchange * scale, imp.potential_scattering * scale, twice_spin, imp.field,
                       contact.onsite0)


def kondo_exact_curve(imp, spin: float = 0.5):
    """The one-channel spin-S Bethe-ansatz curve, or why it does not apply."""
    if imp.exchange <= 0:
        return f"no exact curve for a ferromagnetic or zero coupling (exchange = {imp.exchange:g})"
    if imp.field != 0:
        return f"no exact curve in a field (field = {imp.field:g}); the exact curves are for zero field"
    return 1, spin


MODEL = ModelDeclaration(
    name="kondo",
    summary="spin-½ local moment exchange-coupled to one conduction channel, J S·s_0 + K (n_0 − 1) − h S_z",
    parameters={"exchange": EXCHANGE, "potential_scattering": POTENTIAL_SCATTERING, "field": FIELD},
    build=build_kondo,
    averages=("spin_correlation",),
    particle_hole_symmetric=lambda imp: imp.potential_scattering == 0.0,
    particle_hole_breaker=lambda imp: f"impurity.potential_scattering = {imp.potential_scattering:g} ≠ 0",
    exact_curve=kondo_exact_curve,
    order=0,
)
