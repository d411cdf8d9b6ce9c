"""Chain site 0 alone: the start of the bath-only reference run (not an impurity model)."""

from __future__ import annotations

from ..engine.fock import FockSpace, ExplicitBlock

__all__ = ["bare_chain_block"]


def bare_chain_block(onsite0: float = 0.0, n_channels: int = 1) -> ExplicitBlock:
    """Chain site 0 alone (no impurity), for the bath-only reference run.

    .. math:: H_0 = ε_0 \\sum_{kσ} n_{0kσ}
    """
    modes = [(k, s) for k in range(n_channels) for s in (1, -1)]
    sp = FockSpace(modes, 0, n_channels)
    n0 = sum(sp.number(j) for j in range(len(modes)))
    last = {k: (sp.creator(2 * k), sp.creator(2 * k + 1)) for k in range(n_channels)}
    return ExplicitBlock(space=sp, hamiltonian=onsite0 * n0, last_site=last, first_site=1)
