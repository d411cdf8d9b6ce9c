"""The symmetry interface of the engine: one abstract base, one file per implementation.

Everything symmetry-specific is answered here, so that the engine, the operator
transformation, the spectral pass and the observables never look at a
symmetry's name or at the layout of its labels:

* labels of blocks and what they mean (charge, spin, multiplicity, mirror block);
* how a block label combines with a site multiplet (:meth:`Symmetry.combine`);
* the multiplets of one added chain site and their occupation;
* the recoupling coefficients of the hopping term, of the new site's creation
  operator and of operators acting on the old block;
* the factors of thermodynamics (S(S+1)/3 or S_z²) and of spectral weights;
* names of the labels for plots.

A label is an opaque hashable tuple; its parts are read only through these
methods.  Energies are in units of the half-bandwidth D (or ω_N inside the
engine); spins are stored as twice their value (integers).

Conventions shared by all implementations (Krishna-murthy, Wilkins & Wilson
1980; Tóth, Moca, Legeza & Zaránd 2008): the engine's product state of an old
block state |L⟩ and a site multiplet a is A_a†|L⟩ (the site's creators to the
left); the matrices ``F[comp][(L_out, L_in)]`` of a block operator are reduced
matrix elements in the Wigner–Eckart convention
⟨L' m'|T_μ|L m⟩ = ⟨L m; t μ|L' m'⟩ ⟨L'‖T‖L⟩ (one Clebsch–Gordan factor per
non-abelian group), plain matrix elements for abelian labels.
"""

from __future__ import annotations

import abc
from dataclasses import dataclass, field

import numpy as np

from ..fock import FockSpace, ExplicitBlock

__all__ = ["Symmetry", "BlockSet", "SiteMultiplet", "LevelView", "highest_weights", "sector_index", "reduced_spin_vector"]

#: matrix elements below this are treated as zero when resolving explicit blocks
TOL = 1e-10


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
        Operators diagonal in the block label whose thermal averages are wanted.
    sz_ops : dict name -> dict label -> ndarray
        Kept for compatibility; empty (S_z-type operators join ``scalars`` in the abelian mode).
    """

    energies: dict
    F: dict
    scalars: dict = field(default_factory=dict)
    sz_ops: dict = field(default_factory=dict)


@dataclass(frozen=True)
class SiteMultiplet:
    """One multiplet of an added chain site.

    Attributes
    ----------
    label : tuple
        Its label (the same layout as block labels).
    n_fermions : int
        Number of fermions of its states (only its parity is meaningful when the
        multiplet mixes particle numbers, as the isospin doublet |0⟩, |↑↓⟩ does).
    vectors : tuple of ndarray
        Explicit Fock vectors of its components (implementation-defined order).
    """

    label: tuple
    n_fermions: int
    vectors: tuple


@dataclass(frozen=True)
class LevelView:
    """A block label seen as the (charge, spin) multiplets it contains.

    The observables and the stored flow work with charge multiplets; a label of a
    larger symmetry (an isospin multiplet) stands for several of them.

    Attributes
    ----------
    charge : int
        Total charge from half filling.
    channel_charge : tuple of int
        Charge of each channel from half filling.
    twice_spin : int
        2S (spin-rotation invariant labels) or 2S_z (abelian labels).
    multiplicity : int
        States of this charge multiplet (2S+1, or 1).
    spin_square : float
        S(S+1)/3, or S_z² for abelian labels: the susceptibility numerator per state.
    twice_isospin : tuple of int or None
        2I of each channel when the label carries isospin.
    """

    charge: int
    channel_charge: tuple
    twice_spin: int
    multiplicity: int
    spin_square: float
    twice_isospin: tuple | None = None


class Symmetry(abc.ABC):
    """The quantum numbers used by the engine (abstract base).

    Parameters
    ----------
    n_channels : int
        Conduction channels; each has its own conserved charge (or isospin).

    Attributes
    ----------
    name : str
        Identifier stored with results ("su2", "abelian", "isospin").
    site : list of SiteMultiplet
        The multiplets of one added chain site, in a fixed order (the same
        labels and fermion parities at every site).
    site_space : FockSpace
        The explicit Fock space of one chain site (modes (channel, ±1)).
    resolves_sz : bool
        Labels carry S_z (a field may be applied; the magnetization is available).
    particle_hole_only : bool
        Valid only on particle-hole symmetric chains (on-site energies ε_n = 0).
    label_names : tuple of str
        Names of the label parts for plots and summaries, e.g. ("Q", "S").
    component_names : tuple of str
        Names of the spectral components, one per entry of :attr:`components`.
    """

    name = ""
    resolves_sz = False
    particle_hole_only = False
    label_names: tuple = ()

    def __init__(self, n_channels: int = 1):
        self.n_channels = int(n_channels)
        modes = []
        for ch in range(self.n_channels):
            modes += [(ch, +1), (ch, -1)]
        self.site_space = FockSpace(modes, 0, self.n_channels)
        self.site = self._site_multiplets()
        self._cache = {}

    # ------------------------------------------------------------------ labels
    @abc.abstractmethod
    def multiplicity(self, label) -> int:
        """Number of states a block eigenstate of this label stands for."""

    @abc.abstractmethod
    def levels(self, label) -> tuple:
        """The label as a tuple of :class:`LevelView` (charge multiplets it contains)."""

    def spin_square_over_three(self, label) -> float:
        """Per-state susceptibility numerator S(S+1)/3 (or S_z²), the same for every component."""
        return self.levels(label)[0].spin_square

    def mirror(self, label):
        """The block related to ``label`` by particle-hole symmetry (charges reversed), or None when
        the symmetry holds exactly within the label (nothing to symmetrize)."""
        return None

    @abc.abstractmethod
    def combine(self, label, site_label) -> list:
        """Labels of the new blocks obtained by adding a site multiplet to a block."""

    @abc.abstractmethod
    def f_targets(self, comp, label) -> list:
        """Labels that the last site's operator component ``comp`` connects ``label`` to."""

    # ------------------------------------------------------------------ site
    @property
    @abc.abstractmethod
    def components(self) -> tuple:
        """Components of the last site's operator carried by the engine (one matrix set each)."""

    @abc.abstractmethod
    def component_channel(self, comp) -> int:
        """Channel whose hopping multiplies component ``comp``."""

    @property
    def component_names(self) -> tuple:
        return tuple(str(c) for c in self.components)

    def site_occupation(self, a) -> np.ndarray:
        """Electrons per channel of site multiplet ``a`` (averaged over its components), shape (channels,)."""
        s = self.site[a]
        return np.array([self.levels(s.label)[0].channel_charge[k] + 1 for k in range(self.n_channels)],
                        dtype=float)

    def hop_connects(self, a, b) -> bool:
        """Whether the site part of the hopping can take site multiplet ``a`` to ``b``."""
        return self.site[b].n_fermions == self.site[a].n_fermions - 1

    @abc.abstractmethod
    def _site_multiplets(self) -> list:
        """The site multiplets (called once by the constructor)."""

    # ------------------------------------------------------------------ explicit blocks
    @abc.abstractmethod
    def from_explicit(self, block: ExplicitBlock) -> BlockSet:
        """Resolve a model's explicit block into labelled blocks (energies in the block's units).

        Raises
        ------
        NrgInputError
            When the block does not have the symmetry (e.g. isospin without particle-hole symmetry).
        """

    # ------------------------------------------------------------------ recoupling
    @abc.abstractmethod
    def hop_coef(self, comp, L_in, a, L_out, b, L_new, index: int = 0) -> float:
        """Coefficient of ⟨L_out‖F_comp‖L_in⟩ in the element ⟨(L_out, b) L_new|H_hop|(L_in, a) L_new⟩
        of the part of the hopping to chain site ``index`` that the engine builds (it adds the transpose)."""

    @abc.abstractmethod
    def site_coef(self, comp, L, a, L_in, b, L_out, index: int = 0) -> float:
        """Reduced element ⟨(L, b) L_out‖f†_{comp}‖(L, a) L_in⟩ of the operator of the new site ``index``."""

    @abc.abstractmethod
    def block_op_coef(self, comp, L_old_in, a, L_in, L_old_out, L_out, twice_rank: int = 1) -> float:
        """⟨(L_old_out, a) L_out‖O‖(L_old_in, a) L_in⟩ / ⟨L_old_out‖O‖L_old_in⟩ for an operator O acting on
        the old block (site multiplet a spectator): of the same tensor type as the last site's creator
        (``twice_rank`` = 1, a spinor) or a charge-neutral spin vector such as the impurity spin
        (``twice_rank`` = 2; bosonic: no sign from the site)."""

    def operator_targets(self, comp, label, twice_rank: int = 1) -> list:
        """Block labels an operator takes ``label`` to: the creator of channel ``comp`` (spinor), or the
        spin vector (``twice_rank`` = 2, ``comp`` ignored)."""
        if twice_rank == 1:
            return self.f_targets(comp, label)
        return self._vector_targets(label)

    @abc.abstractmethod
    def _vector_targets(self, label) -> list:
        """Labels the spin vector connects ``label`` to."""

    @abc.abstractmethod
    def spin_vector(self, block: ExplicitBlock, sz) -> dict:
        """(Reduced) matrices {(L_out, L_in): ndarray} of the spin vector whose z component is the explicit
        matrix ``sz`` on ``block.space``, between the multiplets of ``block`` (as resolved by
        :meth:`from_explicit`)."""

    # ------------------------------------------------------------------ weights
    def operator_components(self, twice_rank: int = 1) -> int:
        """Number of operator components each reduced matrix stands for (2 for a spin-½ spinor)."""
        return 1

    def spectral_weight_factor(self, label, twice_rank: int = 1) -> float:
        """Factor turning |reduced element|² into the weight of one operator component summed over the
        components of the upper state: multiplicity / operator components (Wigner–Eckart)."""
        return self.multiplicity(label) / self.operator_components(twice_rank)

    def describe(self) -> str:
        """One line for run summaries."""
        return f"{self.name} (labels {', '.join(self.label_names)})"


def sector_index(space: FockSpace):
    """Per basis state of an explicit space: channel charges (lists) and 2S_z."""
    charges = [np.rint(np.diag(q)).astype(int).tolist() for q in space.channel_charges()]
    twice_sz = np.rint(2 * np.diag(space.total_sz())).astype(int).tolist()
    return charges, twice_sz


def highest_weights(dim: int, idx, raising, H):
    """Highest-weight vectors of one sector and their energies.

    Parameters
    ----------
    dim : int
        Dimension of the explicit space.
    idx : ndarray of int
        Basis states of the sector (fixed charges and S_z, or I_z).
    raising : ndarray (r, len(idx))
        The raising operators restricted to the sector's columns, stacked; their common null space is
        spanned by the highest-weight states.
    H : ndarray (dim, dim) or None
        Hamiltonian to diagonalize within that space (None: energies 0).

    Returns
    -------
    (ndarray, ndarray) or None
        Energies (ascending) and the vectors (dim, n) as columns; None when there is none.
    """
    import scipy.linalg as sla
    ns = sla.null_space(raising, rcond=1e-10) if np.abs(raising).max(initial=0) > 0 else np.eye(len(idx))
    if ns.shape[1] == 0:
        return None
    hw = np.zeros((dim, ns.shape[1]))
    hw[idx] = ns
    if H is None:
        return np.zeros(hw.shape[1]), hw
    h = hw.T @ H @ hw
    e, w = np.linalg.eigh(0.5 * (h + h.T))
    return e, hw @ w


def reduced_spin_vector(comps, vector_of, sz, targets) -> dict:
    """Reduced elements of the spin vector from its z component, for labels whose last part is 2S.

    ⟨L'‖S‖L⟩ = ⟨L' M|S_z|L M⟩ / ⟨S M; 1 0|S' M⟩ with M = min(S, S'): a non-zero Clebsch–Gordan coefficient
    for every allowed pair (S = S' = 0 excluded); any other group of the label is a spectator (rank 0).

    Parameters
    ----------
    comps : collection of labels
        The multiplets of the explicit block.
    vector_of : callable (label, 2M) -> ndarray (dim, n)
        The multiplets' component vectors with spin projection M (the same spectator components on both sides).
    sz : ndarray (dim, dim)
        The z component.
    targets : callable label -> list of labels
        Labels the spin vector connects a label to.
    """
    from ..clebsch import cg
    out = {}
    for L in comps:
        for Lp in targets(L):
            if Lp not in comps:
                continue
            S2, Sp2 = L[-1], Lp[-1]
            M2 = min(S2, Sp2)
            c = cg(S2, M2, 2, 0, Sp2, M2)
            if c == 0.0:
                continue
            red = vector_of(Lp, M2).T @ sz @ vector_of(L, M2) / c
            if np.abs(red).max(initial=0) > 1e-12:
                out[(Lp, L)] = red
    return out
