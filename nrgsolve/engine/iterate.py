"""Wilson's iterative diagonalization, resolved by symmetry (the kernel).

At iteration N the Hamiltonian of the impurity and chain sites 0..N is held
in units of the energy scale ω_N (see :func:`nrgsolve.chain` for its
definition), measured from its ground state:

.. math::

    H_{N+1}/ω_{N+1} = \\sqrt{Λ}\\, H_N/ω_N
        + \\sum_k \\frac{ε_{N+1,k}}{ω_{N+1}} n_{N+1,k}
        + \\sum_{kσ} \\frac{t_{N,k}}{ω_{N+1}} (f^†_{Nkσ} f_{N+1,kσ} + \\mathrm{h.c.})

(Wilson 1975; Krishna-murthy, Wilkins & Wilson 1980).  Each block of good
quantum numbers is built from the kept states of the previous iteration with
numpy block copies and diagonalized with LAPACK (scipy.linalg.eigh).  The
kernel is a pure function of arrays: no files, no printing.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np
import scipy.linalg as sla

from ..errors import NrgNumericalError, NrgInputError
from .symmetry import BlockSet

__all__ = ["chain_steps", "EngineSettings", "IterationRecord", "EngineResult", "Step", "run_chain", "cut_energy"]


@dataclass(frozen=True)
class EngineSettings:
    """Numerical settings of the iteration.

    Attributes
    ----------
    kept_states : int
        States kept after each iteration, counting the 2S+1 components of a multiplet.
    energy_cutoff : float or None
        If given, keep every state below this energy (units of ω_N) instead.
    beta_bar : float
        T_N = ω_N/β̄; used here only for the discarded-weight estimate.
    flow_levels : int
        Number of lowest multiplets recorded for the flow diagram.
    degeneracy_tol : float
        Levels closer than this (units of ω_N) count as degenerate; the kept set
        is never cut inside such a group.
    driver : str
        LAPACK driver for scipy.linalg.eigh ("evd", "evr", "ev").
    particle_hole_symmetric : bool
        Protect particle-hole symmetry: the spectra of the blocks Q and −Q
        (same spin) are replaced by their mean after every diagonalization.
        Roundoff offsets between charge sectors grow like Λ^{N/2} in units of
        ω_N and would otherwise split the symmetric ground multiplet of long
        odd chains.
    cutoffs : dict, optional
        Iteration index → energy (units of ω_N, from the ground state) below which every state is
        kept at that iteration, overriding ``kept_states``/``energy_cutoff`` there (infinite: keep
        all).  A bath-only run given the impurity run's truncation energies discards the same
        part of the spectrum, so the errors of full-density-matrix thermodynamics cancel in the
        impurity contribution.
    cutoff_window : float
        With ``cutoffs``: the cut is placed in the widest gap of the spectrum within this distance
        (units of ω_N) of the given energy, so that it does not switch from one iteration to the next
        across a level that happens to lie near the given energy.
    """

    kept_states: int
    energy_cutoff: float | None = None
    beta_bar: float = 1.0
    flow_levels: int = 40
    degeneracy_tol: float = 1e-6
    driver: str = "evd"
    particle_hole_symmetric: bool = False
    cutoffs: dict | None = None
    cutoff_window: float = 0.5


@dataclass(frozen=True)
class Step:
    """One site to add: its index n, on-site energies ε_n,k and the hopping from the previous orbital, per channel (units of D), and the new scale ω_n."""

    index: int
    onsite: tuple
    hopping: tuple
    scale: float


def chain_steps(onsite, hopping, scale, first: int, stop: int, channels: int = 1, first_hopping=None) -> list:
    """The steps that add chain sites ``first`` .. ``stop − 1`` (the one helper that builds them).

    Parameters
    ----------
    onsite, hopping : sequence of float
        ε_n and t_n of the chain (units of D); channels share them unless an entry is itself a sequence
        with one value per channel.
    scale : callable
        n → ω_n, the energy unit of iteration n (units of D).
    first, stop : int
        First site to add and one past the last.
    channels : int
        Conduction channels.
    first_hopping : sequence of float, optional
        The hopping onto site ``first`` per channel (e.g. V_0 from the impurity level onto site 0);
        default ``hopping[first − 1]``.

    Returns
    -------
    list of Step
    """
    def per_channel(x):
        return tuple(float(v) for v in x) if np.ndim(x) else (float(x),) * channels

    steps = []
    for n in range(first, stop):
        hop = per_channel(first_hopping) if (n == first and first_hopping is not None) else per_channel(hopping[n - 1])
        steps.append(Step(n, per_channel(onsite[n]), hop, float(scale(n))))
    return steps


@dataclass
class IterationRecord:
    """Everything later stages need from one iteration (all states, before truncation).

    Energies are in units of ``scale`` (= ω_N, in D) measured from the ground
    state, whose absolute energy (units of D) is ``ground_energy``.
    Per-state arrays have one entry per block eigenstate (one per multiplet in su2 mode).
    """

    index: int
    scale: float
    ground_energy: float
    energies: np.ndarray
    multiplicity: np.ndarray
    charge: np.ndarray
    twice_spin: np.ndarray
    spin_sq: np.ndarray
    scalars: dict
    kept_states: int
    truncation_energy: float
    discarded_weight: float
    block_dims: np.ndarray
    diag_seconds: float = 0.0
    channel_charge: np.ndarray | None = None     # (states, channels) charge of each channel, several channels only
    twice_isospin: np.ndarray | None = None      # (states, channels) 2I of each channel, isospin mode only
    twice_sz: np.ndarray | None = None           # 2S_z of each state when the labels resolve it (abelian mode)


@dataclass
class EngineResult:
    symmetry: str
    records: list = field(default_factory=list)
    diag_seconds: float = 0.0
    total_seconds: float = 0.0


def _truncate(energies_by_block, sym, settings: EngineSettings, first: bool, index: int | None = None):
    """Choose the kept number of states per block; returns (kept dict, E_trunc, kept count)."""
    cutoff = settings.energy_cutoff
    snap = False
    if settings.cutoffs is not None and index in settings.cutoffs:
        cutoff = settings.cutoffs[index]
        first = False
        snap = settings.cutoff_window > 0 and np.isfinite(cutoff)
    labels = list(energies_by_block)
    allE = np.concatenate([energies_by_block[L] for L in labels])
    mult = np.concatenate([np.full(len(energies_by_block[L]), sym.multiplicity(L)) for L in labels])
    order = np.argsort(allE, kind="stable")
    Es = allE[order]
    cum = np.cumsum(mult[order])
    total = int(cum[-1])
    if snap:
        lo = int(np.searchsorted(Es, cutoff - settings.cutoff_window, side="left"))
        hi = int(np.searchsorted(Es, cutoff + settings.cutoff_window, side="right"))
        lo, hi = max(lo, 1), min(hi, len(Es) - 1)
        if hi > lo:
            gaps = Es[lo:hi + 1] - Es[lo - 1:hi]          # gap below each candidate first-discarded level
            # equal gaps (equally spaced levels) are common: roundoff must not decide between them, so
            # among the widest (within degeneracy_tol) take the cut nearest to the given energy
            best = np.flatnonzero(gaps >= gaps.max() - settings.degeneracy_tol)
            mids = 0.5 * (Es[lo + best] + Es[lo + best - 1])
            n_keep = lo + int(best[np.argmin(np.abs(mids - cutoff))])
        else:
            n_keep = int(np.searchsorted(Es, cutoff, side="right"))
    elif cutoff is not None:
        n_keep = int(np.searchsorted(Es, cutoff, side="right"))
    else:
        n_keep = int(np.searchsorted(cum, settings.kept_states, side="left")) + 1
    n_keep = min(max(n_keep, 1), len(Es))
    # never cut inside a degenerate group: widen to the next gap
    while n_keep < len(Es) and Es[n_keep] - Es[n_keep - 1] < settings.degeneracy_tol:
        n_keep += 1
    if n_keep >= len(Es):
        return {L: len(energies_by_block[L]) for L in labels}, float("inf"), total
    ecut = 0.5 * (Es[n_keep - 1] + Es[n_keep])
    if first and Es[n_keep - 1] - Es[0] < settings.degeneracy_tol:
        if settings.energy_cutoff is not None:
            raise NrgInputError(
                f"run.energy_cutoff: got {settings.energy_cutoff:g}; keeps only the ground multiplet after the first "
                f"iteration (the first excited level lies at {Es[n_keep]:.3g} ω_N; the cutoff must exceed it)")
        raise NrgInputError(
            f"run.kept_states: got {settings.kept_states}; too small to keep more than the ground "
            f"multiplet after the first iteration (need at least {int(cum[n_keep - 1]) + 1})")
    kept = {L: int(np.count_nonzero(energies_by_block[L] < ecut)) for L in labels}
    return kept, float(ecut), int(cum[n_keep - 1])


class _SingleStates:
    """A stand-in symmetry whose labels hold one state each (for :func:`cut_energy`)."""

    @staticmethod
    def multiplicity(label) -> int:
        return 1


def cut_energy(energies, settings: EngineSettings, cutoff: float) -> float:
    """The truncation energy the engine chooses for ``energies`` (units of ω_N, from the ground state)
    when it is asked to follow ``cutoff`` (see ``EngineSettings.cutoffs``; inf: nothing discarded).

    The same rule as inside :func:`run_chain`; used to check whether a stored run followed the same
    truncation.  Multiplicities do not enter this rule.
    """
    from dataclasses import replace
    _, ecut, _ = _truncate({0: np.asarray(energies, dtype=float)}, _SingleStates,
                           replace(settings, cutoffs={0: float(cutoff)}), first=False, index=0)
    return ecut


def _record(index, scale, ground, energies, sym, kept_info, scalars_diag, settings, dims, dsec):
    """One record per iteration; every block eigenstate appears once per charge multiplet of its label
    (:meth:`Symmetry.levels`), so the observables see (charge, spin) multiplets in every mode."""
    labels = list(energies)
    views = {L: sym.levels(L) for L in labels}
    rep = lambda f, L: np.repeat(np.asarray([f(v) for v in views[L]]), len(energies[L]), axis=0)
    E = np.concatenate([np.tile(energies[L], len(views[L])) for L in labels])
    mult = np.concatenate([rep(lambda v: v.multiplicity, L) for L in labels]).astype(int)
    charge = np.concatenate([rep(lambda v: v.charge, L) for L in labels]).astype(int)
    tws = np.concatenate([rep(lambda v: v.twice_spin, L) for L in labels]).astype(int)
    ssq = np.concatenate([rep(lambda v: v.spin_square, L) for L in labels]).astype(float)
    sc = {name: np.concatenate([np.tile(d[L], len(views[L])) for L in labels]) for name, d in scalars_diag.items()}
    chq = None
    if sym.n_channels > 1:
        chq = np.concatenate([np.asarray(rep(lambda v: v.channel_charge, L), dtype=int).reshape(-1, sym.n_channels)
                              for L in labels])
    iso = None
    if views[labels[0]][0].twice_isospin is not None:
        iso = np.concatenate([np.asarray(rep(lambda v: v.twice_isospin, L), dtype=int).reshape(-1, sym.n_channels)
                              for L in labels])
    order = np.argsort(E, kind="stable")
    kept, ecut, nkept = kept_info
    w = mult * np.exp(-settings.beta_bar * E)
    disc = float(w[E > ecut].sum() / w.sum()) if np.isfinite(ecut) else 0.0
    return IterationRecord(
        index=index, scale=scale, ground_energy=ground, energies=E[order], multiplicity=mult[order],
        charge=charge[order], twice_spin=tws[order], spin_sq=ssq[order],
        scalars={k: v[order] for k, v in sc.items()}, kept_states=nkept, truncation_energy=ecut,
        discarded_weight=disc, block_dims=np.asarray(sorted(dims, reverse=True), dtype=int), diag_seconds=dsec,
        channel_charge=None if chq is None else chq[order], twice_isospin=None if iso is None else iso[order],
        twice_sz=tws[order] if sym.resolves_sz else None)


def _symmetrize_charge(energies, sym):
    """Average the spectra of mirror blocks (charges reversed, :meth:`Symmetry.mirror`) in place."""
    for L in list(energies):
        M = sym.mirror(L)
        if M is not None and M != L and M in energies and L < M and len(energies[M]) == len(energies[L]):
            avg = 0.5 * (energies[L] + energies[M])
            energies[L] = avg
            energies[M] = avg.copy()


def run_chain(initial: BlockSet, initial_index: int, initial_scale: float, sym, steps: Sequence[Step],
              settings: EngineSettings, progress: Callable[[int], None] | None = None,
              vector_sink: Callable | None = None) -> EngineResult:
    """Iterate the impurity block along the chain.

    Parameters
    ----------
    initial : BlockSet
        The initial block (from ``sym.from_explicit``), energies in units of D.
    initial_index : int
        Chain index N of the initial block (−1 if it holds no chain site).
    initial_scale : float
        ω of the initial block (units of D).
    sym : Symmetry
    steps : sequence of Step
        The sites to add, in order.
    settings : EngineSettings
    progress : callable, optional
        Called with the iteration index after each iteration.
    vector_sink : callable, optional
        Called after every added site as ``vector_sink(index, energies, vectors, layout, kept)``:
        ``energies[L]`` (all eigenvalues of block L, units of ω_N, from the ground state),
        ``vectors[L]`` (eigenvectors as columns, rows in the product basis),
        ``layout[L]`` (list of ``((L_old, site_index), row_offset, rows)``: which kept
        states of the previous iteration and which site multiplet each row range holds), and
        ``kept[L]`` (number of lowest states kept).  Used by the spectral (backward) pass,
        which may keep the vectors in memory or spill them to disk.

    Returns
    -------
    EngineResult
        One :class:`IterationRecord` per iteration with index N ≥ 0 (and the
        initial block if its index is ≥ 0).

    Raises
    ------
    NrgNumericalError
        Non-finite chain coefficients or eigenvalues.
    NrgInputError
        kept_states too small for a sensible first truncation.
    """
    t_start = time.perf_counter()
    for st in steps:
        if not (np.all(np.isfinite(st.onsite)) and np.all(np.isfinite(st.hopping)) and np.isfinite(st.scale)):
            raise NrgNumericalError(f"chain site {st.index}: non-finite on-site energy or hopping")
    result = EngineResult(symmetry=sym.name)
    # initial block in units of its scale, measured from its ground state
    e0 = min(float(e.min()) for e in initial.energies.values())
    energies = {L: (e - e0) / initial_scale for L, e in initial.energies.items()}
    ground = e0
    F = initial.F
    scalars = initial.scalars
    kept_info = _truncate(energies, sym, settings, first=True, index=initial_index)
    if initial_index >= 0:
        sd = {name: {L: np.diag(m) for L, m in d.items()} for name, d in scalars.items()}
        result.records.append(_record(initial_index, initial_scale, ground, energies, sym, kept_info, sd,
                                      settings, [len(e) for e in energies.values()], 0.0))
    kept = kept_info[0]
    # vectors of the previous iteration are implicit: F and scalars are already in the kept basis
    F = {c: {k: v[:kept[k[0]], :kept[k[1]]] for k, v in Fc.items()} for c, Fc in F.items()}
    scalars = {n: {L: m[:kept[L], :kept[L]] for L, m in d.items()} for n, d in scalars.items()}
    prev_scale = initial_scale
    first = initial_index < 0
    site = sym.site
    n_site = [sym.site_occupation(a) for a in range(len(site))]
    hop_pairs = {(b, a) for a in range(len(site)) for b in range(len(site)) if sym.hop_connects(a, b)}
    if sym.particle_hole_only:
        for st in steps:
            if np.max(np.abs(st.onsite)) > 1e-10 * st.scale:
                raise NrgInputError(f"run.symmetry: got \"{sym.name}\"; chain site {st.index} has the on-site "
                                    f"energy {np.max(np.abs(st.onsite)):.3g} D ≠ 0 (the bath is not particle-hole "
                                    f"symmetric)")
    for st in steps:
        ratio = prev_scale / st.scale
        eps = np.asarray(st.onsite, dtype=float) / st.scale
        hop = np.asarray(st.hopping, dtype=float) / st.scale
        # layout of every new block: sub-blocks (old label, site multiplet)
        layout: dict = {}
        for L, nk in kept.items():
            if nk == 0:
                continue
            for a, s in enumerate(site):
                for Ln in sym.combine(L, s.label):
                    layout.setdefault(Ln, []).append((L, a))
        new_E, new_U, offsets, dims = {}, {}, {}, []
        dsec = 0.0
        for Ln, subs in layout.items():
            offs, pos = {}, 0
            for (L, a) in subs:
                offs[(L, a)] = (pos, kept[L])
                pos += kept[L]
            offsets[Ln] = offs
            H = np.zeros((pos, pos))
            diag = np.concatenate([ratio * energies[L][:kept[L]] + float(eps @ n_site[a]) for (L, a) in subs])
            for (Lo, b) in subs:
                ro, no = offs[(Lo, b)]
                for (Li, a) in subs:
                    if (b, a) not in hop_pairs:
                        continue
                    ri, ni = offs[(Li, a)]
                    for comp in sym.components:
                        M = F[comp].get((Lo, Li))
                        if M is None:
                            continue
                        c = sym.hop_coef(comp, Li, a, Lo, b, Ln, st.index)
                        if c != 0.0:
                            H[ro:ro + no, ri:ri + ni] += (hop[sym.component_channel(comp)] * c) * M
            H += H.T
            H[np.diag_indices(pos)] += diag
            t0 = time.perf_counter()
            e, U = sla.eigh(H, driver=settings.driver, overwrite_a=True, check_finite=False)
            dsec += time.perf_counter() - t0
            if not np.all(np.isfinite(e)):
                raise NrgNumericalError(f"iteration {st.index}: non-finite eigenvalues in block {Ln}")
            new_E[Ln], new_U[Ln] = e, U
            dims.append(pos)
        if settings.particle_hole_symmetric:
            _symmetrize_charge(new_E, sym)
        e0 = min(float(e.min()) for e in new_E.values())
        for Ln in new_E:
            new_E[Ln] = new_E[Ln] - e0
        ground = ground + st.scale * e0
        first_trunc = first
        kinfo = _truncate(new_E, sym, settings, first=first_trunc, index=st.index)
        first = False
        new_kept = kinfo[0]
        # scalar operators: thermal diagonals over all states, kept matrices for the next step
        sdiag, new_scalars = {}, {}
        for name, d in scalars.items():
            sdiag[name], new_scalars[name] = {}, {}
            for Ln, subs in layout.items():
                U = new_U[Ln]
                OU = np.zeros_like(U)
                for (L, a) in subs:
                    r, n = offsets[Ln][(L, a)]
                    OU[r:r + n] = d[L] @ U[r:r + n]
                sdiag[name][Ln] = np.einsum("ij,ij->j", U, OU)
                k = new_kept[Ln]
                new_scalars[name][Ln] = U[:, :k].T @ OU[:, :k]
        result.records.append(_record(st.index, st.scale, ground, new_E, sym, kinfo, sdiag, settings, dims, dsec))
        result.diag_seconds += dsec
        if vector_sink is not None:
            lay = {Ln: [(key, off, n) for key, (off, n) in offsets[Ln].items()] for Ln in layout}
            vector_sink(st.index, new_E, new_U, lay, new_kept)
        # creation operator of the new last site, in the kept basis
        new_F = {}
        for comp in sym.components:
            Fc = {}
            for Li, subs in layout.items():
                ki = new_kept[Li]
                if ki == 0:
                    continue
                targets = set(sym.f_targets(comp, Li))
                X = {}
                for (L, a) in subs:
                    ri, ni = offsets[Li][(L, a)]
                    for b, s in enumerate(site):
                        if (a, b) not in hop_pairs:
                            continue
                        for Lo in sym.combine(L, s.label):
                            if Lo not in targets or new_kept.get(Lo, 0) == 0 or (L, b) not in offsets[Lo]:
                                continue
                            c = sym.site_coef(comp, L, a, Li, b, Lo, st.index)
                            if c == 0.0:
                                continue
                            if Lo not in X:
                                X[Lo] = np.zeros((new_U[Lo].shape[0], ki))
                            ro, no = offsets[Lo][(L, b)]
                            X[Lo][ro:ro + no] += c * new_U[Li][ri:ri + ni, :ki]
                for Lo, Xm in X.items():
                    Fc[(Lo, Li)] = new_U[Lo][:, :new_kept[Lo]].T @ Xm
            new_F[comp] = Fc
        F = new_F
        scalars = new_scalars
        energies = new_E
        kept = new_kept
        prev_scale = st.scale
        if progress is not None:
            progress(st.index)
    result.total_seconds = time.perf_counter() - t_start
    return result
