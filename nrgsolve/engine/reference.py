"""Slow, obviously-correct references: dense exact diagonalization of short chains.

Used by the tests to check the symmetry-resolved engine.  The whole Fock
space of the impurity and chain sites 0..N is built explicitly (Jordan–Wigner)
and diagonalized; only feasible for a handful of sites.
Energies in units of D; conventions as in :mod:`nrgsolve.models`.
"""

from __future__ import annotations

import numpy as np

from .fock import FockSpace

__all__ = ["kondo_dense_spectrum", "anderson_dense_spectrum"]


def _chain_terms(sp, first_mode, onsite, hopping):
    """Σ ε_n n_n + Σ t_n (f†_n f_{n+1} + h.c.) for sites whose up mode is first_mode + 2n."""
    H = np.zeros((sp.dim, sp.dim))
    for n, e in enumerate(onsite):
        for s in range(2):
            H += e * sp.number(first_mode + 2 * n + s)
    for n, t in enumerate(hopping):
        for s in range(2):
            a, b = first_mode + 2 * n + s, first_mode + 2 * (n + 1) + s
            hop = sp.creator(a) @ sp.annihilator(b)
            H += t * (hop + hop.T)
    return H


def kondo_dense_spectrum(exchange, potential, twice_spin, field, onsite, hopping):
    """All eigenvalues (units of D) of J S·s_0 + K(n_0−1) − h S_z + chain, sites 0..len(onsite)−1."""
    n = len(onsite)
    modes = [(0, s) for _ in range(n) for s in (1, -1)]
    sp = FockSpace(modes, local_spin_twice=twice_spin)
    cu, cd = sp.annihilator(0), sp.annihilator(1)
    sdot = sp.local_sz @ (0.5 * (cu.T @ cu - cd.T @ cd)) + 0.5 * (sp.local_splus @ (cd.T @ cu) + sp.local_sminus @ (cu.T @ cd))
    n0 = cu.T @ cu + cd.T @ cd
    H = exchange * sdot + potential * (n0 - sp.identity) - field * sp.local_sz + _chain_terms(sp, 0, onsite, hopping[:n - 1])
    return np.linalg.eigvalsh(H)


def anderson_dense_spectrum(level, interaction, coupling, field, onsite, hopping):
    """All eigenvalues (units of D) of the Anderson impurity + chain sites 0..len(onsite)−1."""
    n = len(onsite)
    modes = [(0, s) for _ in range(n + 1) for s in (1, -1)]
    sp = FockSpace(modes)
    nu, nd = sp.number(0), sp.number(1)
    H = level * (nu + nd) + interaction * (nu @ nd) - 0.5 * field * (nu - nd)
    for s in range(2):
        hop = sp.creator(s) @ sp.annihilator(2 + s)
        H += coupling * (hop + hop.T)
    H += _chain_terms(sp, 2, onsite, hopping[:n - 1])
    return np.linalg.eigvalsh(H)
