"""The backward (spectral) pass of the complete basis and the full density matrix.

Physics
-------
The complete basis of discarded states (Anders & Schiller 2005): the states
discarded at iteration N, times every state of the rest of the chain, for all
N (at the last iteration every state counts as discarded), span the whole Fock
space; each is an approximate eigenstate with energy E_s^N.  The full density
matrix (Weichselbaum & von Delft 2007)

.. math::

    ρ = \\sum_N \\sum_{s∈D_N,e} \\frac{e^{-E^N_s/T}}{Z} |s e⟩_N⟨s e|_N ,
    \\qquad Z = \\sum_N d^{N_{last}-N} \\sum_{s∈D_N} (2S_s+1) e^{-E_s^N/T},

with absolute energies E = ground_energy + ω_N·energies (units of D) and
d = 4^K states per added site (K channels).  Its reduced form on iteration N
is block-diagonal, ρ^N = ρ^N_{KK} ⊕ ρ^N_{DD}: the discarded part is diagonal
(the Boltzmann weights times d^{N_last−N}) and the kept part is obtained by
tracing the next iteration's reduced density matrix over the added site.

The correlator of B = O_1^† and C = O_2 (operators of the initial block,
carried through the iterations by :func:`~nrgsolve.engine.operators.transform_block_operator`)
has the discrete spectral weights

.. math::

    A_{BC}(ω) = \\sum_N \\sum_{(r,s) ∉ KK} (O_1)_{sr}
        \\left[(O_2 ρ^N)_{sr} ± (ρ^N O_2)_{sr}\\right] δ(ω - E^N_s + E^N_r),

summed over the pairs of states of iteration N of which at least one is
discarded (pairs whose density-matrix factor vanishes are skipped: at T = 0 every
discarded–discarded pair but those of the last iteration, since only its ground
state carries weight): + for fermionic operators (anticommutator: the weights of d† sum
to Tr ρ{d, d†} = 1 at every temperature), − for bosonic ones (commutator: the
spectral function of the dynamical susceptibility).  The first term is the
greater, the second the lesser part.

Operators are tensor operators of the spin symmetry: spinors (creation-type,
spin ½: d†_σ, the composite operator of a Kondo T-matrix) or the spin vector
(rank 1: the impurity spin).  In su2 mode they are stored as reduced matrix
elements and the weight of a pair carries the factor (2S_s + 1)/(2k + 1)
(k the rank: the sum of the squared Clebsch–Gordan coefficients over the
multiplets, per component); in abelian mode the spinor components (channel,
σ) are resolved and the vector is represented by its S_z component.

The eigenvectors of every iteration are kept in memory up to a budget and
spilled to a temporary HDF5 file beyond it (deleted afterwards).  The
discrete weights are binned on a fine logarithmic grid (weight and mean
frequency per bin); the observables turn them into curves.
"""

from __future__ import annotations

import math
import os
import tempfile
import time
from dataclasses import dataclass, replace

import numpy as np

from ..errors import NrgInputError
from .iterate import run_chain
from .operators import transform_block_operator, SPINOR, VECTOR

__all__ = ["DiscreteSpectrum", "TensorOperator", "spectral_run", "impurity_operators", "spinor_operator",
           "spin_vector_operator", "component_names", "DEFAULT_MEMORY_BUDGET", "DEFAULT_BINS_PER_DECADE"]

DEFAULT_MEMORY_BUDGET = 1.0e9     # bytes of eigenvectors kept in memory before spilling to disk
DEFAULT_BINS_PER_DECADE = 100
_HUGE = 1.0e4                      # largest |ω| binned separately (units of D)
_SKIP = 1e-18                      # density-matrix weight (this shell and later) below which a shell is skipped


# ---------------------------------------------------------------------------------------------
# operators of the initial block

@dataclass(frozen=True)
class TensorOperator:
    """An operator of the initial block, as a tensor operator of the spin symmetry.

    Attributes
    ----------
    twice_rank : int
        1: spinor (fermionic, creation-type, spin ½; one component per channel in su2 mode and per
        (channel, σ) in abelian mode); 2: spin vector (bosonic, charge-neutral; one component ``"z"``).
    matrices : dict component -> dict (L_out, L_in) -> ndarray
        (Reduced, in su2 mode) matrix elements between the states of the initial block.
    """

    twice_rank: int
    matrices: dict

    @property
    def fermionic(self) -> bool:
        return self.twice_rank % 2 == 1

    @property
    def components(self) -> tuple:
        return tuple(self.matrices)


def spinor_operator(sym, block, creators: dict) -> TensorOperator:
    """A spinor operator given by its explicit creation-type components.

    Parameters
    ----------
    sym : Su2Symmetry or AbelianSymmetry
    block : ExplicitBlock
        The initial block (its space and Hamiltonian fix the multiplets).
    creators : dict channel -> (ndarray, ndarray)
        The σ = ↑ and σ = ↓ components, with the phases of f†_σ (e.g. (d†_↑, d†_↓)), matrices on
        ``block.space``.
    """
    return TensorOperator(SPINOR, sym.from_explicit(replace(block, last_site=dict(creators))).F)


def spin_vector_operator(sym, block, sz) -> TensorOperator:
    """The spin-vector operator whose z component is ``sz`` (explicit matrix on ``block.space``).

    The symmetry resolves it (:meth:`Symmetry.spin_vector`): with spin SU(2) the reduced element follows
    from the z component alone, ⟨S'‖S‖S⟩ = ⟨S' M|S_z|S M⟩ / ⟨S M; 1 0|S' M⟩ with M = min(S, S').
    """
    return TensorOperator(VECTOR, {"z": sym.spin_vector(block, sz)})


def impurity_operators(sym, block, self_energy: bool = False) -> dict:
    """The spinor operators of the d level: ``"d"`` (d†) and, with ``self_energy``, ``"dn"`` (d†_σ n_{d,−σ}).

    ``block.last_site[0]`` holds (d†_↑, d†_↓) of the impurity level (Anderson model).
    Returns dict name -> dict component -> dict (L_out, L_in) -> ndarray (the plain matrices of
    :class:`TensorOperator`, spinors).
    """
    up, dn = block.last_site[0]
    ops = {"d": sym.from_explicit(block).F}
    if self_energy:
        n_up, n_dn = up @ up.T, dn @ dn.T
        # d†_σ n_{−σ} = d†_σ n_d is a spin-½ tensor with the phases of d†_σ
        ops["dn"] = spinor_operator(sym, block, {0: (up @ n_dn, dn @ n_up)}).matrices
    return ops


def component_names(sym, op: TensorOperator) -> tuple:
    """Names of the stored components, as the symmetry names them: ``"spin"`` (su2, isospin; with two
    channels ``"spin0"``, ``"spin1"``), ``"up"``/``"down"`` (abelian; ``"up1"``/``"down1"`` for the
    second channel); ``"z"`` for the spin vector."""
    if not op.fermionic:
        return ("z",)
    names = dict(zip(sym.components, sym.component_names))
    return tuple(names[c] for c in op.components)


# ---------------------------------------------------------------------------------------------
# results

@dataclass(frozen=True)
class DiscreteSpectrum:
    """Discrete (binned or raw) spectral weights of impurity correlators at several temperatures.

    Attributes
    ----------
    temperatures : ndarray, shape (n_T,)
        Temperatures (units of D; 0 means the ground state).
    components : tuple of str
        ``("spin",)`` in su2 mode (either spin, A_↑ = A_↓) or ``("up", "down")`` (abelian).
    correlators : tuple of str
        ``"G"`` (⟨⟨d_σ; d†_σ⟩⟩) and optionally ``"F"`` (⟨⟨d_σ n_{d,−σ}; d†_σ⟩⟩).
    omega : ndarray, shape (n_corr, n_T, n_comp, P)
        Pole positions (units of D): bin centres of weight, or the raw poles.
    weight : ndarray, shape (n_corr, n_T, n_comp, P)
        Pole weights (dimensionless; the G weights of each spin sum to 1).
    total : ndarray, shape (n_corr, n_T, n_comp)
        Sum of all weights (before binning).
    lesser : ndarray, shape (n_corr, n_T, n_comp)
        Sum of the hole (lesser) part; for G this is ⟨n_dσ⟩.
    lowest_scale : float
        ω of the last iteration (units of D).
    forward_seconds, spectral_seconds : float
        Wall time of the plain engine iteration and the extra time of the spectral pass.
    spilled_bytes : int
        Bytes of eigenvectors written to the temporary file (0: all in memory).
    correlator_components : tuple of tuple of str
        The component names of each correlator (a spin-vector correlator has the one component
        ``"z"`` and uses index 0 of the component axis); empty: all as ``components``.
    inverse_moment : ndarray, shape (n_corr, n_T, n_comp), optional
        Σ_p w_p/ω_p over the poles farther than the degeneracy tolerance from ω = 0 (units of 1/D):
        for a commutator (bosonic) correlator its Kramers–Kronig static limit; only computed for
        those (zero for fermionic correlators).
    """

    temperatures: np.ndarray
    components: tuple
    correlators: tuple
    omega: np.ndarray
    weight: np.ndarray
    total: np.ndarray
    lesser: np.ndarray
    lowest_scale: float
    forward_seconds: float = 0.0
    spectral_seconds: float = 0.0
    spilled_bytes: int = 0
    correlator_components: tuple = ()
    inverse_moment: np.ndarray | None = None

    @property
    def occupation(self) -> np.ndarray:
        """⟨n_d⟩ (both spins) at each temperature, shape (n_T,)."""
        lesser = self.lesser[self.correlators.index("G")]
        return lesser.sum(axis=1) * (2.0 if len(self.components) == 1 else 1.0)



# ---------------------------------------------------------------------------------------------
# storage of the eigenvectors between the forward and the backward pass

class _VectorStore:
    """Eigenvectors of every iteration: in memory up to ``budget`` bytes, then in a temporary HDF5 file."""

    def __init__(self, budget: float, folder: str | None):
        self.budget = float(budget)
        self.folder = folder
        self.in_memory = 0
        self.spilled = 0
        self._items = []
        self._file = None
        self._path = None

    def add(self, vectors: dict):
        size = sum(U.nbytes for U in vectors.values())
        if self.in_memory + size <= self.budget:
            self._items.append(("mem", vectors))
            self.in_memory += size
            return
        if self._file is None:
            import h5py
            fd, path = tempfile.mkstemp(prefix="nrgsolve_vectors_", suffix=".h5", dir=self.folder)
            os.close(fd)
            self._path = path
            self._file = h5py.File(path, "w")
        k = len(self._items)
        g = self._file.create_group(str(k))
        labels = list(vectors)
        for j, L in enumerate(labels):
            g.create_dataset(str(j), data=vectors[L])
        self._file.flush()
        self._items.append(("disk", labels))
        self.spilled += size

    def get(self, k: int) -> dict:
        kind, item = self._items[k]
        if kind == "mem":
            return item
        g = self._file[str(k)]
        return {L: g[str(j)][()] for j, L in enumerate(item)}

    def release(self, k: int):
        self._items[k] = ("gone", None)

    def close(self):
        if self._file is not None:
            self._file.close()
            self._file = None
        if self._path is not None:
            try:
                os.unlink(self._path)
            except OSError:
                pass
            self._path = None
        self._items = []


# ---------------------------------------------------------------------------------------------
# the backward pass

def _restrict(F, rows, cols):
    out = {}
    for (Lo, Li), M in F.items():
        r, c = rows.get(Lo, 0), cols.get(Li, 0)
        if r and c:
            out[(Lo, Li)] = M[:r, :c]
    return out


def _log_weights(shells, temperatures, n_last, d_site, tol):
    """Per shell and block, the logarithm of the density-matrix weight (per component) of every
    discarded state, for each temperature; −inf for kept states.  Returns (logw, logZ)."""
    e_min = min(float(np.min(sh["ground"] + sh["scale"] * E[sh["kept"][L]:]))
                for sh in shells for L, E in sh["energies"].items() if len(E) > sh["kept"][L])
    out, logz = [], []
    for T in temperatures:
        per_shell, terms = [], []
        for sh in shells:
            blocks = {}
            env = (n_last - sh["index"]) * math.log(d_site)
            for L, E in sh["energies"].items():
                k = sh["kept"][L]
                lw = np.full(len(E), -np.inf)
                ex = sh["ground"] + sh["scale"] * E[k:] - e_min
                if T > 0:
                    lw[k:] = env - ex / T
                else:
                    lw[k:] = np.where(ex <= tol, env, -np.inf)
                blocks[L] = lw
                if len(E) > k:
                    terms.append(lw[k:] + math.log(sh["mult"][L]))
            per_shell.append(blocks)
        allt = np.concatenate(terms)
        m = float(np.max(allt))
        lz = m + math.log(float(np.sum(np.exp(allt - m))))
        out.append(per_shell)
        logz.append(lz)
    return out, logz


class _Bins:
    """Accumulates weights on a logarithmic grid of |ω| (both signs, plus a zero bin)."""

    def __init__(self, shape, lowest, per_decade):
        self.raw = per_decade is None
        self.shape = shape
        if self.raw:
            self.omega = [[] for _ in range(int(np.prod(shape)))]
            self.weight = [[] for _ in range(int(np.prod(shape)))]
            return
        self.tiny = lowest * 1e-4
        self._log_tiny = math.log10(self.tiny)
        self.per_decade = per_decade
        self.nb = int(math.ceil(math.log10(_HUGE / self.tiny) * per_decade))
        n = 2 * self.nb + 1
        self.w = np.zeros(shape + (n,))
        self.wom = np.zeros(shape + (n,))
        j = np.arange(self.nb)
        lo = self.tiny * 10.0 ** (j / per_decade)
        hi = self.tiny * 10.0 ** ((j + 1) / per_decade)
        hi[-1] = np.inf                                   # the top bin takes everything above
        mid = np.sqrt(lo * np.minimum(hi, 10 * lo))
        self.centre = np.concatenate([-mid[::-1], [0.0], mid])
        self.lower = np.concatenate([-hi[::-1], [-self.tiny], lo])
        self.upper = np.concatenate([-lo[::-1], [self.tiny], hi])

    def keys(self, omega):
        if self.raw:
            return omega
        a = np.abs(omega)
        j = ((np.log10(np.maximum(a, self.tiny)) - self._log_tiny) * self.per_decade).astype(np.int64)
        np.minimum(j, self.nb - 1, out=j)              # j ≥ 0 since a ≥ tiny; truncation = floor here
        return np.where(a < self.tiny, self.nb, np.where(omega > 0, self.nb + 1 + j, self.nb - 1 - j))

    def add(self, index, keys, omega, weight):
        if self.raw:
            flat = int(np.ravel_multi_index(index, self.shape))
            self.omega[flat].append(omega)
            self.weight[flat].append(weight)
            return
        if keys.size == 0:
            return
        lo, hi = int(keys.min()), int(keys.max()) + 1        # only the bins this block pair reaches
        local = keys - lo
        self.w[index][lo:hi] += np.bincount(local, weights=weight, minlength=hi - lo)
        self.wom[index][lo:hi] += np.bincount(local, weights=weight * omega, minlength=hi - lo)

    def result(self):
        if self.raw:
            flat_o = [np.concatenate(o) if o else np.zeros(0) for o in self.omega]
            flat_w = [np.concatenate(w) if w else np.zeros(0) for w in self.weight]
            P = max(len(o) for o in flat_o)
            om = np.zeros((len(flat_o), P))
            we = np.zeros((len(flat_o), P))
            for i, (o, w) in enumerate(zip(flat_o, flat_w)):
                om[i, :len(o)] = o
                we[i, :len(w)] = w
            return om.reshape(self.shape + (P,)), we.reshape(self.shape + (P,))
        # weighted mean frequency of each bin; the bin centre where the weights nearly cancel
        ok = self.w != 0
        mean = np.where(ok, self.wom / np.where(ok, self.w, 1.0), 0.0)
        inside = ok & (mean >= self.lower) & (mean <= self.upper)
        om = np.where(inside, mean, np.broadcast_to(self.centre, self.w.shape))
        return om, self.w.copy()


def _as_tensor(op) -> TensorOperator:
    return op if isinstance(op, TensorOperator) else TensorOperator(SPINOR, op)


def spectral_run(initial, initial_index, initial_scale, sym, steps, settings, operators,
                 temperatures, correlators=(("G", "d", "d"),), memory_budget=DEFAULT_MEMORY_BUDGET,
                 bins_per_decade=DEFAULT_BINS_PER_DECADE, spill_folder=None, progress=None):
    """Run the engine and the spectral (backward) pass of the full density matrix.

    Parameters
    ----------
    initial, initial_index, initial_scale, sym, steps, settings, progress
        As for :func:`nrgsolve.engine.run_chain` (``initial`` from ``sym.from_explicit``).
    operators : dict name -> TensorOperator (or dict component -> dict (L_out, L_in) -> ndarray: a spinor)
        Operators of the initial block (:func:`impurity_operators`, :func:`spinor_operator`,
        :func:`spin_vector_operator`).
    temperatures : sequence of float
        Temperatures ≥ 0 (units of D); 0 is the ground state of the last iteration.
    correlators : sequence of (name, op1, op2)
        Correlator ``name`` of B = op1† with C = op2 (e.g. ("G", "d", "d"), ("F", "dn", "d"));
        both operators of one correlator must have the same rank.  Fermionic: anticommutator
        weights; bosonic: commutator weights.
    memory_budget : float
        Bytes of eigenvectors kept in memory; beyond it they go to a temporary
        HDF5 file in ``spill_folder`` (default: the system's temporary folder),
        deleted before returning.
    bins_per_decade : int or None
        Logarithmic bins per decade of |ω| for the discrete weights; None keeps
        every pole (short chains and tests only).

    Returns
    -------
    (EngineResult, DiscreteSpectrum)

    Raises
    ------
    NrgInputError
        A negative or non-finite temperature, an unknown operator name, or operators of different
        rank in one correlator.
    """
    temps = np.asarray(temperatures, dtype=float).ravel()
    if temps.size == 0 or not np.all(np.isfinite(temps)) or np.any(temps < 0):
        raise NrgInputError(f"spectral.temperatures: got {list(temps)}; allowed: one or more numbers >= 0 (units of D)")
    for name, o1, o2 in correlators:
        for o in (o1, o2):
            if o not in operators:
                raise NrgInputError(f"spectral correlator {name}: unknown operator {o!r}; allowed: {', '.join(operators)}")
    ops = {nm: _as_tensor(op) for nm, op in operators.items()}
    for name, o1, o2 in correlators:
        if ops[o1].twice_rank != ops[o2].twice_rank:
            raise NrgInputError(f"spectral correlator {name}: operators {o1!r} and {o2!r} differ in rank")
    if not steps:
        raise NrgInputError("spectral pass: the chain has no site to add; allowed: at least one step")
    names = list(ops)
    store = _VectorStore(memory_budget, spill_folder)
    shells = []
    state = {"F": None, "sink": 0.0}
    last_index = steps[-1].index

    def sink(index, energies, vectors, layout, kept):
        t0 = time.perf_counter()
        if state["F"] is None:       # first call: the kept states of the initial block
            kept0 = {L: 0 for L in initial.energies}
            for subs in layout.values():
                for (Lo, _a), _off, n in subs:
                    kept0[Lo] = n
            shells.append({"index": initial_index, "energies": dict(initial.energies), "kept": kept0,
                           "ground": 0.0, "scale": 1.0, "layout": None, "F_old": None})
            state["F"] = {nm: {c: _restrict(ops[nm].matrices[c], kept0, kept0) for c in ops[nm].components}
                          for nm in names}
        F_old = state["F"]
        store.add(vectors)
        shells.append({"index": index, "energies": energies, "kept": dict(kept), "layout": layout,
                       "F_old": F_old})
        if index != last_index:
            state["F"] = {nm: {c: transform_block_operator(sym, c, F_old[nm][c], vectors, layout, kept, kept,
                                                           ops[nm].twice_rank)
                               for c in ops[nm].components} for nm in names}
        state["sink"] += time.perf_counter() - t0

    try:
        t_start = time.perf_counter()
        res = run_chain(initial, initial_index, initial_scale, sym, steps, settings, progress, vector_sink=sink)
        t_forward = time.perf_counter() - t_start - state["sink"]
        t1 = time.perf_counter()
        rec = {r.index: r for r in res.records}
        for sh in shells[1:]:
            sh["ground"] = rec[sh["index"]].ground_energy
            sh["scale"] = rec[sh["index"]].scale
        shells[-1]["kept"] = {L: 0 for L in shells[-1]["kept"]}      # everything is discarded at the end
        for sh in shells:
            sh["mult"] = {L: sym.multiplicity(L) for L in sh["energies"]}
        d_site = sum(sym.multiplicity(s.label) for s in sym.site)
        lowest = float(shells[-1]["scale"])
        logw, logz = _log_weights(shells, temps, last_index, d_site, settings.degeneracy_tol * lowest)
        spectrum = _backward(shells, store, sym, ops, correlators, temps, logw, logz, lowest, bins_per_decade,
                             settings.degeneracy_tol * lowest)
        t_spec = time.perf_counter() - t1 + state["sink"]
    finally:
        store.close()
    om, we, total, lesser, inverse = spectrum
    first = ops[correlators[0][2]]
    return res, DiscreteSpectrum(temperatures=temps, components=component_names(sym, first),
                                 correlators=tuple(c[0] for c in correlators), omega=om, weight=we,
                                 total=total, lesser=lesser, lowest_scale=lowest,
                                 forward_seconds=t_forward, spectral_seconds=t_spec,
                                 spilled_bytes=int(store.spilled), inverse_moment=inverse,
                                 correlator_components=tuple(component_names(sym, ops[c[2]]) for c in correlators))


def _reduce_density_matrix(sh, vectors, rhoD_i, rhoK_t, prev_kept, prev_mult):
    """ρ of the kept states of the previous iteration: the trace of this iteration's ρ over the added site."""
    new = {}
    kept = sh["kept"]
    for Ln, subs in sh["layout"].items():
        U = vectors[Ln]
        k = kept[Ln]
        rD = rhoD_i[Ln]
        rK = rhoK_t.get(Ln)
        if not np.any(rD) and (rK is None or not np.any(rK)):
            continue
        Z = np.empty_like(U)
        Z[:, k:] = U[:, k:] * rD[None, :]
        if k:
            Z[:, :k] = U[:, :k] @ rK if rK is not None else 0.0
        cn = sh["mult"][Ln]
        for (Lo, _a), off, n in subs:
            R = Z[off:off + n] @ U[off:off + n].T
            R *= cn / prev_mult[Lo]
            if Lo in new:
                new[Lo] += R
            else:
                new[Lo] = R
    return {L: 0.5 * (R + R.T) for L, R in new.items() if prev_kept.get(L, 0)}



def _weightless_blocks(rD, mult) -> set:
    """Blocks whose discarded states carry no density-matrix weight (at most the skip threshold) at this
    shell and temperature: at T = 0 every shell but the last, at T > 0 the shells far from T."""
    return {L for L, w in rD.items() if not w.size or float(w.sum()) * mult[L] <= _SKIP}


class _Regions:
    """The frequency differences of one block pair, split by whether the upper state s and the lower
    state r are kept (K) or discarded (D): "KD", "DK", "DD" (KK pairs belong to a later shell).
    Each region's frequencies, bin keys and 1/ω are computed when first asked for."""

    def __init__(self, Es, Er, ks, kr, scale, bins, tol):
        ns, nr = len(Es), len(Er)
        self.slices = {}
        if ks and kr < nr:
            self.slices["KD"] = (slice(0, ks), slice(kr, nr))
        if ks < ns and kr:
            self.slices["DK"] = (slice(ks, ns), slice(0, kr))
        if ks < ns and kr < nr:
            self.slices["DD"] = (slice(ks, ns), slice(kr, nr))
        self.Es, self.Er, self.scale, self.bins, self.tol = Es, Er, scale, bins, tol
        self._done = {}

    def get(self, name):
        """(bin keys, ω) of a region, both flat."""
        if name not in self._done:
            a, b = self.slices[name]
            om = (self.scale * (self.Es[a][:, None] - self.Er[b][None, :])).ravel()
            self._done[name] = (self.bins.keys(om), om)
        return self._done[name]

    def inverse(self, name):
        """1/ω of a region (0 within the degeneracy tolerance of ω = 0), flat."""
        key = ("inverse", name)
        if key not in self._done:
            om = self.get(name)[1]
            apart = np.abs(om) > self.tol
            self._done[key] = np.where(apart, 1.0 / np.where(apart, om, 1.0), 0.0)
        return self._done[key]


def _backward(shells, store, sym, ops, correlators, temps, logw, logz, lowest, per_decade, tol):
    nT, nX = len(temps), len(correlators)
    comps_of = [ops[o2].components for _n, _o1, o2 in correlators]
    nC = max(len(c) for c in comps_of)
    bins = _Bins((nX, nT, nC), lowest, per_decade)
    total = np.zeros((nX, nT, nC))
    lesser = np.zeros((nX, nT, nC))
    inverse = np.zeros((nX, nT, nC))
    # correlators grouped by (rank, component): one pass over the block pairs per group
    groups = {}
    for xi, (_name, o1, o2) in enumerate(correlators):
        rank = ops[o2].twice_rank
        for ci, c in enumerate(ops[o2].components):
            groups.setdefault((rank, c), []).append((xi, ci, o1, o2))
    # discarded weights per shell/block/temperature, and the weight carried by each shell and later ones
    rhoD = [[{L: np.exp(lw[L][sh["kept"][L]:] - logz[t]) for L in sh["energies"]}
             for sh, lw in zip(shells, logw[t])] for t in range(nT)]
    later = np.zeros((nT, len(shells) + 1))
    for t in range(nT):
        for i in range(len(shells) - 1, -1, -1):
            sh = shells[i]
            later[t, i] = later[t, i + 1] + sum(float(rhoD[t][i][L].sum()) * sh["mult"][L] for L in sh["energies"])
    rhoK = [dict() for _ in range(nT)]
    for i in range(len(shells) - 1, -1, -1):
        sh = shells[i]
        active = [t for t in range(nT) if later[t, i] > _SKIP]
        if not active:
            if i > 0:
                store.release(i - 1)
            continue
        E, kept, scale = sh["energies"], sh["kept"], sh["scale"]
        if i == 0:
            vectors = None
            F = {nm: op.matrices for nm, op in ops.items()}
        else:
            vectors = store.get(i - 1)
            F = {nm: {c: transform_block_operator(sym, c, sh["F_old"][nm][c], vectors, sh["layout"],
                                                  twice_rank=op.twice_rank)
                      for c in op.components} for nm, op in ops.items()}
        weightless = {t: _weightless_blocks(rhoD[t][i], sh["mult"]) for t in active}
        for (rank, c), members in groups.items():
            pm = 1.0 if rank % 2 else -1.0           # anticommutator (fermions) or commutator (bosons)
            pairs = sorted(set().union(*(F[o2][c].keys() for _x, _c, _o1, o2 in members)))
            for (Ls, Lr) in pairs:
                ks, kr = kept[Ls], kept[Lr]
                ns, nr = len(E[Ls]), len(E[Lr])
                if ks == ns and kr == nr:
                    continue
                regions = _Regions(E[Ls], E[Lr], ks, kr, scale, bins, tol)
                fac = sym.spectral_weight_factor(Ls, rank)
                for t in active:
                    dead_D = weightless[t]
                    rK_s, rK_r = rhoK[t].get(Ls), rhoK[t].get(Lr)
                    rD_s, rD_r = rhoD[t][i][Ls], rhoD[t][i][Lr]
                    # which factor of each region carries density-matrix weight: O2 ρ puts ρ on the lower
                    # state r (g, greater part), ρ O2 on the upper state s (h, lesser part)
                    need = {"KD": (Lr not in dead_D, rK_s is not None),
                            "DK": (rK_r is not None, Ls not in dead_D),
                            "DD": (Lr not in dead_D, Ls not in dead_D)}
                    cache = {}
                    for xi, ci, o1, o2 in members:
                        M1 = F[o1][c].get((Ls, Lr))
                        M = F[o2][c].get((Ls, Lr))
                        if M1 is None or M is None:
                            continue
                        parts_w, parts_k, parts_o = [], [], []
                        for name, (a, b) in regions.slices.items():
                            use_g, use_h = need[name]
                            if not (use_g or use_h):
                                continue
                            key = (o2, name)
                            if key not in cache:
                                Mr = M[a, b]
                                if name == "KD":
                                    cache[key] = (Mr * rD_r[None, :] if use_g else None,
                                                  rK_s @ Mr if use_h else None)
                                elif name == "DK":
                                    cache[key] = (Mr @ rK_r if use_g else None,
                                                  Mr * rD_s[:, None] if use_h else None)
                                else:
                                    cache[key] = (Mr * rD_r[None, :] if use_g else None,
                                                  Mr * rD_s[:, None] if use_h else None)
                            Fr, Fs = cache[key]
                            M1r = M1[a, b]
                            g = (M1r * Fr).ravel() * fac if Fr is not None else 0.0
                            h = (M1r * Fs).ravel() * fac if Fs is not None else 0.0
                            h_sum = float(np.sum(h))
                            w = g + pm * h          # an array: the region is used for g or h
                            total[xi, t, ci] += float(w.sum())
                            lesser[xi, t, ci] += h_sum
                            keys, om_flat = regions.get(name)
                            if pm < 0:
                                inverse[xi, t, ci] += float(w @ regions.inverse(name))
                            parts_w.append(w)
                            parts_k.append(keys)
                            parts_o.append(om_flat)
                        if parts_w:
                            if len(parts_w) == 1:
                                bins.add((xi, t, ci), parts_k[0], parts_o[0], parts_w[0])
                            else:
                                bins.add((xi, t, ci), np.concatenate(parts_k), np.concatenate(parts_o),
                                         np.concatenate(parts_w))
        if i == 0:
            break
        prev = shells[i - 1]
        for t in active:
            rhoK[t] = _reduce_density_matrix(sh, vectors, rhoD[t][i], rhoK[t], prev["kept"], prev["mult"])
        store.release(i - 1)
    om, we = bins.result()
    return om, we, total, lesser, inverse
