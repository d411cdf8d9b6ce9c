"""Symmetry layer: quantum-number labels, site multiplets and recoupling coefficients.

Two implementations behind one interface:

* :class:`Su2Symmetry` — labels ``(Q_1, …, Q_K, 2S)``: the charge of each
  conduction channel counted from half filling and twice the total spin.
  Only one state per multiplet is kept; matrix elements of the spinor
  creation operator f†_σ of the last site are stored as *reduced* matrix
  elements in the Clebsch–Gordan convention
  ⟨S' M'| f†_σ |S M⟩ = ⟨S M; ½ σ| S' M'⟩ ⟨S'‖f†‖S⟩ (Wigner–Eckart), as in
  Krishna-murthy, Wilkins & Wilson (1980) and Tóth et al. (2008).
* :class:`AbelianSymmetry` — labels ``(Q_1, …, Q_K, 2S_z)``; plain matrix
  elements of f†_↑ and f†_↓.  Needed when a field breaks spin symmetry.

The recoupling coefficients are computed numerically (and cached) from the
explicit Fock-space vectors of the site multiplets and Clebsch–Gordan
coefficients, so new site types (several channels) need no new formulas.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla

from .clebsch import cg
from .fock import FockSpace, ExplicitBlock

__all__ = ["BlockSet", "Su2Symmetry", "AbelianSymmetry", "make_symmetry", "SiteMultiplet"]

_TOL = 1e-10


@dataclass
class BlockSet:
    """States of one iteration, block by block.

    Attributes
    ----------
    energies : dict label -> ndarray (n_L,)
        Eigenvalues of each block, ascending.
    F : dict component -> dict (label_out, label_in) -> ndarray (n_out, n_in)
        (Reduced) matrix elements of the creation operator(s) of the last site.
    scalars : dict name -> dict label -> ndarray (n_L, n_L)
        Spin-scalar operators (diagonal in the block label).
    sz_ops : dict name -> dict label -> ndarray
        S_z-type operators (abelian mode only).
    """

    energies: dict
    F: dict
    scalars: dict = field(default_factory=dict)
    sz_ops: dict = field(default_factory=dict)


@dataclass(frozen=True)
class SiteMultiplet:
    label: tuple           # (q_1..q_K, 2s) or (q_1..q_K, 2s_z)
    n_fermions: int
    vectors: tuple         # explicit Fock vectors, one per component m = s, s-1, ..., -s


def _sector_index(space: FockSpace):
    charges = [np.rint(np.diag(q)).astype(int).tolist() for q in space.channel_charges()]
    twice_sz = np.rint(2 * np.diag(space.total_sz())).astype(int).tolist()
    return charges, twice_sz


class _Base:
    name = ""

    def __init__(self, n_channels: int = 1):
        self.n_channels = n_channels
        modes = []
        for ch in range(n_channels):
            modes += [(ch, +1), (ch, -1)]
        self.site_space = FockSpace(modes, 0, n_channels)
        self.site = self._site_multiplets()
        self._coef_cache = {}

    # label helpers
    @staticmethod
    def charge(label) -> int:
        return int(sum(label[:-1]))

    @staticmethod
    def twice_spin(label) -> int:
        return int(label[-1])

    def _site_creator(self, k, sigma):
        return self.site_space.creator(self.site_space.mode(k, sigma))


class Su2Symmetry(_Base):
    """SU(2) spin × U(1) charge per channel (see module docstring)."""

    name = "su2"

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
        charges, tsz = _sector_index(space)
        splus = space.total_splus()
        sminus = splus.T
        out = []   # (label, energies, list of component matrices (dim, n) from m=S down)
        keys = sorted({tuple(c[i] for c in charges) + (tsz[i],) for i in range(space.dim)})
        for key in keys:
            if key[-1] < 0:
                continue
            idx = np.array([i for i in range(space.dim)
                            if tuple(c[i] for c in charges) + (tsz[i],) == key])
            sp = splus[:, idx]
            if np.abs(sp).max(initial=0) > 0:
                ns = sla.null_space(sp, rcond=1e-10)
            else:
                ns = np.eye(len(idx))
            if ns.shape[1] == 0:
                continue
            hw = np.zeros((space.dim, ns.shape[1]))
            hw[idx] = ns
            if H is not None:
                h = hw.T @ H @ hw
                e, w = np.linalg.eigh(0.5 * (h + h.T))
                hw = hw @ w
            else:
                e = np.zeros(hw.shape[1])
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
                    if np.abs(red).max(initial=0) > _TOL:
                        Fk[(Lp, L)] = red
            F[k] = Fk
        scalars = {name: {L: comps[L][0].T @ op @ comps[L][0] for L in comps}
                   for name, op in block.scalar_ops.items()}
        return BlockSet(energies, F, scalars, {})

    # ---- recoupling coefficients for adding a site
    def hop_coef(self, comp, L_in, a, L_out, b, L_new) -> float:
        """Coefficient of ⟨L_out‖f†_comp‖L_in⟩ in ⟨(L_out, b) L_new| Σ_σ f†_{N,σ} f_{N+1,σ} |(L_in, a) L_new⟩."""
        key = ("hop", comp, L_in[-1], a, L_out[-1], b, L_new[-1])
        if key in self._coef_cache:
            return self._coef_cache[key]
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
        self._coef_cache[key] = total
        return total

    def site_coef(self, comp, L, a, L_in, b, L_out) -> float:
        """Reduced element ⟨(L, b) L_out‖f†_{N+1,comp}‖(L, a) L_in⟩ of the new site's spinor."""
        key = ("site", comp, L[-1], a, L_in[-1], b, L_out[-1])
        if key in self._coef_cache:
            return self._coef_cache[key]
        A, B = self.site[a], self.site[b]
        S1, Sp, Spp = L[-1], L_in[-1], L_out[-1]
        sa, sb = A.label[-1], B.label[-1]
        total = 0.0
        for sigma in (1, -1):
            cdag = self._site_creator(comp, sigma)
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
        self._coef_cache[key] = total
        return total


class AbelianSymmetry(_Base):
    """U(1) charge per channel × U(1) spin S_z (see module docstring)."""

    name = "abelian"

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
        charges, tsz = _sector_index(space)
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
                            if np.abs(m).max(initial=0) > _TOL:
                                Fc[(Lp, L)] = m
                F[(k, sigma)] = Fc
        ops = dict(block.scalar_ops)
        ops.update(block.sz_ops)   # S_z-type operators are diagonal in (Q, S_z) too
        scalars = {name: {L: v.T @ op @ v for L, v in vecs.items()} for name, op in ops.items()}
        return BlockSet(energies, F, scalars, {})

    def hop_coef(self, comp, L_in, a, L_out, b, L_new) -> float:
        k, sigma = comp
        key = ("hop", comp, a, b)
        if key not in self._coef_cache:
            A, B = self.site[a], self.site[b]
            c = self.site_space.annihilator(self.site_space.mode(k, sigma))
            self._coef_cache[key] = (-1) ** B.n_fermions * float(B.vectors[0] @ c @ A.vectors[0])
        return self._coef_cache[key]

    def site_coef(self, comp, L, a, L_in, b, L_out) -> float:
        k, sigma = comp
        key = ("site", comp, a, b)
        if key not in self._coef_cache:
            A, B = self.site[a], self.site[b]
            self._coef_cache[key] = float(B.vectors[0] @ self._site_creator(k, sigma) @ A.vectors[0])
        return self._coef_cache[key]


def make_symmetry(name: str, n_channels: int = 1):
    """The symmetry object for ``name`` = "su2" or "abelian"."""
    if name == "su2":
        return Su2Symmetry(n_channels)
    if name == "abelian":
        return AbelianSymmetry(n_channels)
    raise ValueError(f"symmetry: got {name!r}; allowed: su2, abelian")
