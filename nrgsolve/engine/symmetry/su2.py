"""SU(2) spin × U(1) charge per channel: labels ``(Q_1, …, Q_K, 2S)``.

The charge of each conduction channel is counted from half filling, the spin
label is twice the total spin.  Only one state per multiplet is kept; matrix
elements of the spinor creation operator f†_σ of the last site are stored as
*reduced* matrix elements in the Clebsch–Gordan convention
⟨S' M'| f†_σ |S M⟩ = ⟨S M; ½ σ| S' M'⟩ ⟨S'‖f†‖S⟩ (Wigner–Eckart), as in
Krishna-murthy, Wilkins & Wilson (1980) and Tóth, Moca, Legeza & Zaránd (2008).
The recoupling coefficients are computed numerically (and cached) from the
explicit Fock vectors of the site multiplets and Clebsch–Gordan coefficients,
so new site types (several channels) need no new formulas.
"""

from __future__ import annotations

import numpy as np

from ..clebsch import cg
from ..fock import FockSpace, ExplicitBlock
from .base import (Symmetry, BlockSet, SiteMultiplet, LevelView, TOL, sector_index, highest_weights,
                   reduced_spin_vector)

__all__ = ["Su2Symmetry"]


class Su2Symmetry(Symmetry):
    """SU(2) spin × U(1) charge per channel (see module docstring)."""

    name = "su2"
    label_names = ("Q", "S")

    def levels(self, label) -> tuple:
        q = tuple(int(x) for x in label[:-1])
        s2 = int(label[-1])
        return (LevelView(sum(q), q, s2, s2 + 1, s2 * (s2 + 2) / 12.0),)

    def mirror(self, label):
        return tuple(-q for q in label[:-1]) + (label[-1],)

    def component_channel(self, comp) -> int:
        return int(comp)

    @property
    def component_names(self) -> tuple:
        return ("spin",) if self.n_channels == 1 else tuple(f"spin{k}" for k in range(self.n_channels))

    def operator_components(self, twice_rank: int = 1) -> int:
        return twice_rank + 1

    def multiplicity(self, label) -> int:
        return int(label[-1]) + 1

    def spin_square_over_three(self, label) -> float:
        """S(S+1)/3 = ⟨S_z²⟩ averaged over the multiplet."""
        s = label[-1] / 2.0
        return s * (s + 1) / 3.0

    @property
    def components(self):
        return tuple(range(self.n_channels))

    def _shift(self, k):
        d = [0] * self.n_channels
        d[k] = 1
        return tuple(d)

    def f_targets(self, comp, label):
        """Labels that f†_comp connects ``label`` to."""
        q = tuple(a + b for a, b in zip(label[:-1], self._shift(comp)))
        s2 = label[-1]
        return [q + (s2 + 1,)] + ([q + (s2 - 1,)] if s2 >= 1 else [])

    def combine(self, label, site_label):
        q = tuple(a + b for a, b in zip(label[:-1], site_label[:-1]))
        j1, j2 = label[-1], site_label[-1]
        return [q + (J,) for J in range(abs(j1 - j2), j1 + j2 + 1, 2)]

    # ---- explicit small spaces -> multiplets
    def _multiplets(self, space: FockSpace, H):
        charges, tsz = sector_index(space)
        splus = space.total_splus()
        sminus = splus.T
        out = []   # (label, energies, list of component matrices (dim, n) from m=S down)
        keys = sorted({tuple(c[i] for c in charges) + (tsz[i],) for i in range(space.dim)})
        for key in keys:
            if key[-1] < 0:
                continue
            idx = np.array([i for i in range(space.dim)
                            if tuple(c[i] for c in charges) + (tsz[i],) == key])
            found = highest_weights(space.dim, idx, splus[:, idx], H)
            if found is None:
                continue
            e, hw = found
            comps = [hw]
            S = key[-1] / 2.0
            m = S
            for _ in range(key[-1]):
                v = sminus @ comps[-1] / np.sqrt(S * (S + 1) - m * (m - 1))
                comps.append(v)
                m -= 1
            out.append((key, e, comps))
        return out

    def _site_multiplets(self):
        sites = []
        nf = self.site_space.fermion_parity_count()
        for key, _, comps in self._multiplets(self.site_space, None):
            for i in range(comps[0].shape[1]):
                vecs = tuple(c[:, i].copy() for c in comps)
                n = int(round(float(vecs[0] ** 2 @ nf)))
                sites.append(SiteMultiplet(key, n, vecs))
        return sites

    def from_explicit(self, block: ExplicitBlock) -> BlockSet:
        """Resolve an explicit block into (Q, S) multiplets (energies in the block's units)."""
        space = block.space
        mults = self._multiplets(space, block.hamiltonian)
        energies = {key: e for key, e, _ in mults}
        comps = {key: c for key, _, c in mults}
        F = {}
        for k, (cup, cdn) in block.last_site.items():
            Fk = {}
            for L, cL in comps.items():
                for Lp in self.f_targets(k, L):
                    if Lp not in comps:
                        continue
                    S, Sp = L[-1], Lp[-1]
                    # pick the component with a non-zero CG: m = S' - sigma
                    for sigma, op in ((1, cup), (-1, cdn)):
                        m2 = Sp - sigma
                        if abs(m2) <= S:
                            break
                    c = cg(S, m2, 1, sigma, Sp, Sp)
                    mi = (S - m2) // 2
                    red = comps[Lp][0].T @ op @ cL[mi] / c
                    if np.abs(red).max(initial=0) > TOL:
                        Fk[(Lp, L)] = red
            F[k] = Fk
        scalars = {name: {L: comps[L][0].T @ op @ comps[L][0] for L in comps}
                   for name, op in block.scalar_ops.items()}
        return BlockSet(energies, F, scalars, {})

    # ---- recoupling coefficients for adding a site
    def hop_coef(self, comp, L_in, a, L_out, b, L_new, index: int = 0) -> float:
        """Coefficient of ⟨L_out‖f†_comp‖L_in⟩ in ⟨(L_out, b) L_new| Σ_σ f†_{N,σ} f_{N+1,σ} |(L_in, a) L_new⟩."""
        key = ("hop", comp, L_in[-1], a, L_out[-1], b, L_new[-1])
        if key in self._cache:
            return self._cache[key]
        A, B = self.site[a], self.site[b]
        S1, S1p, Sn = L_in[-1], L_out[-1], L_new[-1]
        sa, sb = A.label[-1], B.label[-1]
        sign = (-1) ** B.n_fermions
        total = 0.0
        for sigma in (1, -1):
            c_site = self.site_space.annihilator(self.site_space.mode(comp, sigma))
            for ia, ma in enumerate(range(sa, -sa - 1, -2)):
                m1 = Sn - ma
                c1 = cg(S1, m1, sa, ma, Sn, Sn)
                if c1 == 0.0:
                    continue
                m1p = m1 + sigma
                mb = Sn - m1p
                if abs(mb) > sb:
                    continue
                ib = (sb - mb) // 2
                c2 = cg(S1p, m1p, sb, mb, Sn, Sn)
                c3 = cg(S1, m1, 1, sigma, S1p, m1p)
                if c2 == 0.0 or c3 == 0.0:
                    continue
                elem = B.vectors[ib] @ c_site @ A.vectors[ia]
                total += c1 * c2 * c3 * sign * elem
        self._cache[key] = total
        return total

    def site_coef(self, comp, L, a, L_in, b, L_out, index: int = 0) -> float:
        """Reduced element ⟨(L, b) L_out‖f†_{N+1,comp}‖(L, a) L_in⟩ of the new site's spinor."""
        key = ("site", comp, L[-1], a, L_in[-1], b, L_out[-1])
        if key in self._cache:
            return self._cache[key]
        A, B = self.site[a], self.site[b]
        S1, Sp, Spp = L[-1], L_in[-1], L_out[-1]
        sa, sb = A.label[-1], B.label[-1]
        total = 0.0
        for sigma in (1, -1):
            cdag = self.site_space.creator(self.site_space.mode(comp, sigma))
            Mp = Spp - sigma
            c0 = cg(Sp, Mp, 1, sigma, Spp, Spp)
            if c0 == 0.0:
                continue
            for ib, mb in enumerate(range(sb, -sb - 1, -2)):
                m1 = Spp - mb
                c1 = cg(S1, m1, sb, mb, Spp, Spp)
                if c1 == 0.0:
                    continue
                ma = Mp - m1
                if abs(ma) > sa:
                    continue
                ia = (sa - ma) // 2
                c2 = cg(S1, m1, sa, ma, Sp, Mp)
                if c2 == 0.0:
                    continue
                total += c0 * c1 * c2 * (B.vectors[ib] @ cdag @ A.vectors[ia])
        self._cache[key] = total
        return total



    def block_op_coef(self, comp, L_old_in, a, L_in, L_old_out, L_out, twice_rank: int = 1) -> float:
        """Tensor operator O of rank twice_rank/2 acting on the old block: the 6j recoupling evaluated from
        Clebsch–Gordan coefficients (see :mod:`nrgsolve.engine.operators` for the formula); a fermionic
        (odd-rank) operator takes the sign (−1)^{n_a} of moving past the site's creators."""
        site = self.site[a]
        sign = -1.0 if (site.n_fermions % 2 and twice_rank % 2) else 1.0
        key = ("blockop", twice_rank, L_old_in[-1], a, L_in[-1], L_old_out[-1], L_out[-1])
        cache = self._cache
        if key in cache:
            return cache[key]
        S1, S, S1p, Sp = L_old_in[-1], L_in[-1], L_old_out[-1], L_out[-1]
        sa = site.label[-1]
        total = 0.0
        den = 0.0
        for sigma in range(twice_rank, -twice_rank - 1, -2):
            M = Sp - sigma
            den = cg(S, M, twice_rank, sigma, Sp, Sp)
            if den != 0.0:
                break
        if den != 0.0:
            for ma in range(sa, -sa - 1, -2):
                m1 = M - ma
                m1p = m1 + sigma
                c1 = cg(S1, m1, sa, ma, S, M)
                if c1 == 0.0:
                    continue
                c2 = cg(S1p, m1p, sa, ma, Sp, Sp)
                c3 = cg(S1, m1, twice_rank, sigma, S1p, m1p)
                total += c1 * c2 * c3
            total = sign * total / den
        cache[key] = total
        return total

    def _vector_targets(self, label) -> list:
        q, s2 = tuple(label[:-1]), int(label[-1])
        return [q + (t,) for t in (s2 - 2, s2, s2 + 2) if t >= 0 and (t or s2)]

    def spin_vector(self, block: ExplicitBlock, sz) -> dict:
        """Reduced elements from the z component alone: ⟨S'‖S‖S⟩ = ⟨S' M|S_z|S M⟩ / ⟨S M; 1 0|S' M⟩ with
        M = min(S, S') (a non-zero Clebsch–Gordan coefficient for every allowed pair, S = S' = 0 excluded)."""
        comps = {key: c for key, _e, c in self._multiplets(block.space, block.hamiltonian)}
        return reduced_spin_vector(comps, lambda L, M2: comps[L][(L[-1] - M2) // 2], sz, self._vector_targets)
