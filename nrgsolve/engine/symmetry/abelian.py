"""U(1) charge per channel × U(1) spin: labels ``(Q_1, …, Q_K, 2S_z)``.

Plain matrix elements of f†_↑ and f†_↓ of the last site; needed when a field
breaks spin-rotation symmetry.  Charges from half filling.
"""

from __future__ import annotations

import numpy as np

from ..fock import FockSpace, ExplicitBlock
from .base import Symmetry, BlockSet, SiteMultiplet, LevelView, TOL, sector_index

__all__ = ["AbelianSymmetry"]


class AbelianSymmetry(Symmetry):
    """U(1) charge per channel × U(1) spin S_z (see module docstring)."""

    name = "abelian"
    label_names = ("Q", "S_z")
    resolves_sz = True

    def levels(self, label) -> tuple:
        q = tuple(int(x) for x in label[:-1])
        s2 = int(label[-1])
        return (LevelView(sum(q), q, s2, 1, (s2 / 2.0) ** 2),)

    def mirror(self, label):
        return tuple(-q for q in label[:-1]) + (label[-1],)

    def component_channel(self, comp) -> int:
        return int(comp[0])

    @property
    def component_names(self) -> tuple:
        return tuple(("up" if s > 0 else "down") + (str(k) if k else "") for k, s in self.components)

    def block_op_coef(self, comp, L_old_in, a, L_in, L_old_out, L_out, twice_rank: int = 1) -> float:
        """Plain elements: only the sign (−1)^{n_a} of moving a fermionic O past the site's creators."""
        return -1.0 if (self.site[a].n_fermions % 2 and twice_rank % 2) else 1.0

    def _vector_targets(self, label) -> list:
        return [tuple(label)]          # the z component keeps S_z

    def spin_vector(self, block: ExplicitBlock, sz) -> dict:
        """Plain elements of the z component within each (charges, S_z) sector."""
        out = {}
        for L, _e, v in self._sectors(block.space, block.hamiltonian):
            m = v.T @ sz @ v
            if np.abs(m).max(initial=0) > 1e-12:
                out[(L, L)] = m
        return out

    def multiplicity(self, label) -> int:
        return 1

    def spin_square_over_three(self, label) -> float:
        """S_z² of the state (its thermal average is the susceptibility numerator)."""
        return (label[-1] / 2.0) ** 2

    @property
    def components(self):
        return tuple((k, s) for k in range(self.n_channels) for s in (1, -1))

    def f_targets(self, comp, label):
        k, sigma = comp
        q = list(label[:-1])
        q[k] += 1
        return [tuple(q) + (label[-1] + sigma,)]

    def combine(self, label, site_label):
        return [tuple(a + b for a, b in zip(label, site_label))]

    def _sectors(self, space: FockSpace, H):
        charges, tsz = sector_index(space)
        keys = sorted({tuple(c[i] for c in charges) + (tsz[i],) for i in range(space.dim)})
        out = []
        for key in keys:
            idx = np.array([i for i in range(space.dim)
                            if tuple(c[i] for c in charges) + (tsz[i],) == key])
            v = np.zeros((space.dim, len(idx)))
            v[idx, np.arange(len(idx))] = 1.0
            if H is not None:
                h = v.T @ H @ v
                e, w = np.linalg.eigh(0.5 * (h + h.T))
                v = v @ w
            else:
                e = np.zeros(len(idx))
            out.append((key, e, v))
        return out

    def _site_multiplets(self):
        nf = self.site_space.fermion_parity_count()
        sites = []
        for key, _, v in self._sectors(self.site_space, None):
            for i in range(v.shape[1]):
                vec = v[:, i].copy()
                sites.append(SiteMultiplet(key, int(round(float(vec ** 2 @ nf))), (vec,)))
        return sites

    def from_explicit(self, block: ExplicitBlock) -> BlockSet:
        secs = self._sectors(block.space, block.hamiltonian)
        energies = {key: e for key, e, _ in secs}
        vecs = {key: v for key, _, v in secs}
        F = {}
        for k, (cup, cdn) in block.last_site.items():
            for sigma, op in ((1, cup), (-1, cdn)):
                Fc = {}
                for L, v in vecs.items():
                    for Lp in self.f_targets((k, sigma), L):
                        if Lp in vecs:
                            m = vecs[Lp].T @ op @ v
                            if np.abs(m).max(initial=0) > TOL:
                                Fc[(Lp, L)] = m
                F[(k, sigma)] = Fc
        ops = dict(block.scalar_ops)
        ops.update(block.sz_ops)   # S_z-type operators are diagonal in (Q, S_z) too
        scalars = {name: {L: v.T @ op @ v for L, v in vecs.items()} for name, op in ops.items()}
        return BlockSet(energies, F, scalars, {})

    def hop_coef(self, comp, L_in, a, L_out, b, L_new, index: int = 0) -> float:
        k, sigma = comp
        key = ("hop", comp, a, b)
        if key not in self._cache:
            A, B = self.site[a], self.site[b]
            c = self.site_space.annihilator(self.site_space.mode(k, sigma))
            self._cache[key] = (-1) ** B.n_fermions * float(B.vectors[0] @ c @ A.vectors[0])
        return self._cache[key]

    def site_coef(self, comp, L, a, L_in, b, L_out, index: int = 0) -> float:
        k, sigma = comp
        key = ("site", comp, a, b)
        if key not in self._cache:
            A, B = self.site[a], self.site[b]
            self._cache[key] = float(B.vectors[0] @ self.site_space.creator(self.site_space.mode(k, sigma)) @ A.vectors[0])
        return self._cache[key]
