"""Kondo models: a local spin S exchange-coupled to chain site 0 of one or two channels."""

from __future__ import annotations


from ..engine.fock import FockSpace, ExplicitBlock

__all__ = ["kondo_block", "two_channel_kondo_block", "bare_chain_block"]


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


def bare_chain_block(onsite0: float = 0.0, n_channels: int = 1) -> ExplicitBlock:
    """Chain site 0 alone (no impurity), for the bath-only reference run.

    .. math:: H_0 = ε_0 \\sum_{kσ} n_{0kσ}
    """
    modes = [(k, s) for k in range(n_channels) for s in (1, -1)]
    sp = FockSpace(modes, 0, n_channels)
    n0 = sum(sp.number(j) for j in range(len(modes)))
    last = {k: (sp.creator(2 * k), sp.creator(2 * k + 1)) for k in range(n_channels)}
    return ExplicitBlock(space=sp, hamiltonian=onsite0 * n0, last_site=last, first_site=1)
