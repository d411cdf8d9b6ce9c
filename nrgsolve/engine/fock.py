"""Explicit many-body spaces of a few orbitals (and an optional local spin).

Models describe their initial block (the impurity, possibly with the first
chain sites) as explicit matrices in a small Fock space; the symmetry layer
then resolves them into blocks of good quantum numbers.  Fermionic signs use
the Jordan–Wigner ordering of the modes as listed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["FockSpace", "ExplicitBlock"]


class FockSpace:
    """Fock space of ``modes`` fermionic orbitals, tensored with a local spin.

    Parameters
    ----------
    modes : list of (channel, spin)
        One entry per fermionic mode; ``channel`` is an integer charge-channel
        index (each channel carries its own conserved charge; ``None`` for a
        mode whose charge counts towards channel 0 too), ``spin`` is +1 (up)
        or −1 (down).
    local_spin_twice : int
        Twice the spin of a local moment without charge (0 for none).

    Notes
    -----
    Basis order: local-spin index (m = S, S−1, …, −S) is the slow index, the
    Fock occupation bit pattern the fast one.  Charges are counted from half
    filling: every mode contributes n − 1/2, so a spinful orbital contributes
    n↑ + n↓ − 1.
    """

    def __init__(self, modes, local_spin_twice: int = 0, n_channels: int = 1):
        self.modes = list(modes)
        self.n_channels = n_channels
        self.local_spin_twice = int(local_spin_twice)
        nm = len(self.modes)
        self.n_fock = 2 ** nm
        self.n_local = self.local_spin_twice + 1
        self.dim = self.n_fock * self.n_local
        occ = (np.arange(self.n_fock)[:, None] >> np.arange(nm)[None, :]) & 1  # (n_fock, nm)
        self._occ = occ
        eye_l = np.eye(self.n_local)
        self._c = []
        for j in range(nm):
            c = np.zeros((self.n_fock, self.n_fock))
            for s in range(self.n_fock):
                if occ[s, j]:
                    t = s ^ (1 << j)
                    sign = (-1) ** int(occ[s, :j].sum())
                    c[t, s] = sign
            self._c.append(np.kron(eye_l, c))
        # local spin operators
        S = self.local_spin_twice / 2.0
        ms = S - np.arange(self.n_local)
        sz = np.diag(ms)
        sp = np.zeros((self.n_local, self.n_local))
        for i in range(1, self.n_local):
            m = ms[i]
            sp[i - 1, i] = np.sqrt(S * (S + 1) - m * (m + 1))
        eye_f = np.eye(self.n_fock)
        self.local_sz = np.kron(sz, eye_f)
        self.local_splus = np.kron(sp, eye_f)
        self.local_sminus = self.local_splus.T.copy()
        self.identity = np.eye(self.dim)

    def annihilator(self, mode_index: int) -> np.ndarray:
        """Matrix of c_j (real, dense, shape (dim, dim))."""
        return self._c[mode_index]

    def creator(self, mode_index: int) -> np.ndarray:
        return self._c[mode_index].T

    def number(self, mode_index: int) -> np.ndarray:
        c = self._c[mode_index]
        return c.T @ c

    def mode(self, channel, spin) -> int:
        return self.modes.index((channel, spin))

    def total_sz(self) -> np.ndarray:
        out = self.local_sz.copy()
        for j, (_, s) in enumerate(self.modes):
            out += 0.5 * s * self.number(j)
        return out

    def total_splus(self) -> np.ndarray:
        """Total S+ (local spin plus every orbital; modes 2i, 2i+1 are the up, down of orbital i)."""
        out = self.local_splus.copy()
        for up in range(0, len(self.modes), 2):
            out += self.creator(up) @ self.annihilator(up + 1)
        return out

    def channel_charges(self) -> list[np.ndarray]:
        """Charge of each channel from half filling, as diagonal matrices."""
        out = []
        for ch in range(self.n_channels):
            q = np.zeros((self.dim, self.dim))
            for j, (c, _) in enumerate(self.modes):
                if c == ch:
                    q += self.number(j) - 0.5 * self.identity
            out.append(q)
        return out

    def fermion_parity_count(self) -> np.ndarray:
        """Number of fermions of every basis state, shape (dim,)."""
        n = self._occ.sum(axis=1)
        return np.tile(n, self.n_local)


@dataclass
class ExplicitBlock:
    """An explicit small system handed from a model to the symmetry layer.

    Attributes
    ----------
    space : FockSpace
        The explicit space; orbitals are listed as consecutive (up, down) pairs.
    hamiltonian : ndarray, shape (dim, dim)
        Hamiltonian in units of D (not yet rescaled).
    last_site : dict[int, tuple[ndarray, ndarray]]
        For each channel, the creation operators (up, down) of the orbital that
        couples to the next chain site.
    scalar_ops : dict[str, ndarray]
        Spin-scalar operators (e.g. n_d, n_d↑n_d↓) whose thermal averages are wanted.
    first_site : int
        Index of the first chain site still to be added (0 for the Anderson
        model whose block is the bare level, 1 for Kondo models whose block
        contains site 0).
    first_hopping : dict[int, float]
        Coupling (units of D) between ``last_site`` and the first added site, per channel.
    sz_ops : dict[str, ndarray]
        Operators of S_z type (abelian mode only), e.g. the impurity spin ⟨S_z⟩.
    """

    space: FockSpace
    hamiltonian: np.ndarray
    last_site: dict
    scalar_ops: dict = field(default_factory=dict)
    first_site: int = 1
    first_hopping: dict = field(default_factory=dict)
    sz_ops: dict = field(default_factory=dict)
