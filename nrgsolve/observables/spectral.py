"""Impurity spectral functions at any temperature: complete basis and full density matrix.

Physics
-------
For the Anderson model the spectral function of the d level, per spin, is

.. math::

    A_σ(ω, T) = -\\frac1π \\mathrm{Im}\\, G_{dσ}(ω + i0),\\qquad
    G_{dσ}(t) = -iθ(t)\\,⟨\\{d_σ(t), d_σ^†\\}⟩_T ,

normalized to ∫A_σ dω = 1 (energies and ω in units of the half-bandwidth D,
A in 1/D).  It is computed from the NRG iterations with

* the complete basis of discarded states (Anders & Schiller 2005): the states
  discarded at iteration N, times every state of the rest of the chain, for
  all N (at the last iteration every state counts as discarded), span the
  whole Fock space, and each such state is an approximate eigenstate with
  energy E_s^N;
* the full density matrix (Weichselbaum & von Delft 2007)

  .. math::

      ρ = \\sum_N \\sum_{s∈D_N,e} \\frac{e^{-E^N_s/T}}{Z} |s e⟩_N⟨s e|_N ,
      \\qquad Z = \\sum_N d^{N_{last}-N} \\sum_{s∈D_N} (2S_s+1) e^{-E_s^N/T},

  with absolute energies E = ground_energy + ω_N·energies (units of D) and
  d = 4 states per added site.  Its reduced form on iteration N is
  block-diagonal, ρ^N = ρ^N_{KK} ⊕ ρ^N_{DD}: the discarded part is diagonal
  (the Boltzmann weights times d^{N_last−N}) and the kept part is obtained by
  tracing the next iteration's reduced density matrix over the added site
  (backward pass).

The correlator of B = O_1^† and C = O_2 (O_1, O_2 creation-type operators,
e.g. both d†_σ) then has the discrete spectral weights

.. math::

    A_{BC}(ω) = \\sum_N \\sum_{(r,s) ∉ KK} (O_1)_{sr}
        \\left[(O_2 ρ^N)_{sr} + (ρ^N O_2)_{sr}\\right] δ(ω - E^N_s + E^N_r),

summed over the pairs of states of iteration N of which at least one is
discarded; the first term is the particle (greater) part, the second the hole
(lesser) part.  Because the complete basis resolves the identity exactly, the
weights of the d-level function sum to Tr ρ{d, d†} = 1 by construction, at
every temperature, and the hole part sums to ⟨n_dσ⟩.

In the su2 mode the operators are stored as reduced matrix elements and ρ is
a spin scalar (one value per multiplet component); the weight of a pair then
carries the factor (2S_s + 1)/2 per spin (the sum of the squared
Clebsch–Gordan coefficients), and A_↑ = A_↓.  In the abelian mode the two
spins are resolved (needed in a field).

The discrete weights are binned on a fine logarithmic grid (weight and mean
frequency per bin) and broadened (:func:`broaden`) with a log-Gaussian kernel
(Bulla, Costi & Pruschke 2008) that crosses over smoothly to a plain Gaussian
for poles near ω = 0, in the spirit of Weichselbaum & von Delft (2007);
spectra of several twists are averaged on one common grid.

The optional improved estimate uses the self-energy Σ = U F/G (Bulla, Hewson
& Pruschke 1998), F the correlator of d_σ n_{d,−σ} with d†_σ.

Layering
--------
:func:`spectral_run` drives the engine's kernel with a ``vector_sink``; the
eigenvectors of every iteration are kept in memory up to a budget and spilled
to a temporary HDF5 file beyond it (deleted afterwards).  Everything else
here is a pure function of arrays.
"""

from __future__ import annotations

import math
import os
import tempfile
import time
from dataclasses import dataclass, replace

import numpy as np

from ..errors import NrgInputError
from ..engine.iterate import run_chain
from ..engine.operators import transform_block_operator

__all__ = ["DiscreteSpectrum", "SpectralCurves", "impurity_operators", "spectral_run", "frequency_grid",
           "broaden", "gaussian_width", "hilbert_transform", "hybridization_function",
           "improved_spectral_function", "average_spectra", "spectral_weight", "DEFAULT_BROADENING", "DEFAULT_MEMORY_BUDGET"]

DEFAULT_BROADENING = 0.6
DEFAULT_MEMORY_BUDGET = 1.0e9     # bytes of eigenvectors kept in memory before spilling to disk
DEFAULT_BINS_PER_DECADE = 100
_HUGE = 1.0e4                      # largest |ω| binned separately (units of D)
_SKIP = 1e-18                      # density-matrix weight (this shell and later) below which a shell is skipped


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

    @property
    def occupation(self) -> np.ndarray:
        """⟨n_d⟩ (both spins) at each temperature, shape (n_T,)."""
        lesser = self.lesser[self.correlators.index("G")]
        return lesser.sum(axis=1) * (2.0 if len(self.components) == 1 else 1.0)


@dataclass(frozen=True)
class SpectralCurves:
    """Broadened (and z-averaged) spectral functions on one frequency grid.

    Attributes
    ----------
    omega : ndarray, shape (n_ω,)
        Frequencies (units of D), ascending, symmetric, including 0.
    temperatures : ndarray, shape (n_T,)
        Units of D.
    components : tuple of str
        As in :class:`DiscreteSpectrum`.
    spectral : ndarray, shape (n_T, n_comp, n_ω)
        A_σ(ω, T) (units of 1/D), from the discrete weights.
    occupation : ndarray, shape (n_T,)
        ⟨n_d⟩ (both spins), averaged over the twists.
    broadening : float
        Log-Gaussian width b.
    gaussian_widths : ndarray, shape (n_T,)
        Width ω_0 of the Gaussian near ω = 0 (units of D).
    correlator_f : ndarray or None, shape (n_T, n_comp, n_ω)
        Spectral function of F = ⟨⟨d_σ n_{d,−σ}; d†_σ⟩⟩ (when the self-energy was asked for).
    improved : ndarray or None, shape (n_T, n_comp, n_ω)
        A_σ from G = 1/(ω − ε_dσ − Δ(ω) − Σ(ω)), Σ = U F/G (Bulla, Hewson, Pruschke 1998).
    self_energy : ndarray (complex) or None, shape (n_T, n_comp, n_ω)
        Σ_σ(ω) (units of D).
    """

    omega: np.ndarray
    temperatures: np.ndarray
    components: tuple
    spectral: np.ndarray
    occupation: np.ndarray
    broadening: float
    gaussian_widths: np.ndarray
    correlator_f: np.ndarray | None = None
    improved: np.ndarray | None = None
    self_energy: np.ndarray | None = None

    @property
    def best(self) -> np.ndarray:
        """The improved estimate when present, else the plain one, shape (n_T, n_comp, n_ω)."""
        return self.improved if self.improved is not None else self.spectral


# ---------------------------------------------------------------------------------------------
# operators of the impurity block

def impurity_operators(sym, block, self_energy: bool = False) -> dict:
    """Initial matrices of the spinor operators whose correlators are wanted.

    Parameters
    ----------
    sym : Su2Symmetry or AbelianSymmetry
    block : ExplicitBlock
        The model's initial block; ``block.last_site[0]`` holds (d†_↑, d†_↓)
        of the impurity level (Anderson model).
    self_energy : bool
        Also build d†_σ n_{d,−σ} (for Σ = U F/G).

    Returns
    -------
    dict name -> dict component -> dict (L_out, L_in) -> ndarray
        ``"d"``: d†; ``"dn"``: d†_σ n_{d,−σ} (reduced elements in su2 mode).
        Matrices run over all states of the initial block.
    """
    up, dn = block.last_site[0]
    ops = {"d": sym.from_explicit(block).F}
    if self_energy:
        n_up, n_dn = up @ up.T, dn @ dn.T
        # d†_σ n_{−σ} = d†_σ n_d is a spin-½ tensor with the phases of d†_σ
        other = replace(block, last_site={0: (up @ n_dn, dn @ n_up)})
        ops["dn"] = sym.from_explicit(other).F
    return ops


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
# the spectral pass

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
        j = np.floor(np.log10(np.maximum(a, self.tiny) / self.tiny) * self.per_decade).astype(np.int64)
        j = np.clip(j, 0, self.nb - 1)
        return np.where(a < self.tiny, self.nb, np.where(omega > 0, self.nb + 1 + j, self.nb - 1 - j))

    def add(self, index, keys, omega, weight):
        if self.raw:
            flat = int(np.ravel_multi_index(index, self.shape))
            self.omega[flat].append(omega)
            self.weight[flat].append(weight)
            return
        n = self.w.shape[-1]
        self.w[index] += np.bincount(keys, weights=weight, minlength=n)
        self.wom[index] += np.bincount(keys, weights=weight * omega, minlength=n)

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


def spectral_run(initial, initial_index, initial_scale, sym, steps, settings, operators,
                 temperatures, correlators=(("G", "d", "d"),), memory_budget=DEFAULT_MEMORY_BUDGET,
                 bins_per_decade=DEFAULT_BINS_PER_DECADE, spill_folder=None, progress=None):
    """Run the engine and the spectral (backward) pass of the full density matrix.

    Parameters
    ----------
    initial, initial_index, initial_scale, sym, steps, settings, progress
        As for :func:`nrgsolve.engine.run_chain` (``initial`` from ``sym.from_explicit``).
    operators : dict name -> dict component -> dict (L_out, L_in) -> ndarray
        Creation-type spinor operators of the initial block (:func:`impurity_operators`).
    temperatures : sequence of float
        Temperatures ≥ 0 (units of D); 0 is the ground state of the last iteration.
    correlators : sequence of (name, op1, op2)
        Correlator ``name`` of B = op1† with C = op2 (e.g. ("G", "d", "d"), ("F", "dn", "d")).
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
        A negative or non-finite temperature, or an unknown operator name.
    """
    temps = np.asarray(temperatures, dtype=float).ravel()
    if temps.size == 0 or not np.all(np.isfinite(temps)) or np.any(temps < 0):
        raise NrgInputError(f"spectral.temperatures: got {list(temps)}; allowed: one or more numbers >= 0 (units of D)")
    for name, o1, o2 in correlators:
        for o in (o1, o2):
            if o not in operators:
                raise NrgInputError(f"spectral correlator {name}: unknown operator {o!r}; allowed: {', '.join(operators)}")
    if not steps:
        raise NrgInputError("spectral pass: the chain has no site to add; allowed: at least one step")
    comps = tuple(sym.components)
    names = list(operators)
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
            state["F"] = {nm: {c: _restrict(operators[nm][c], kept0, kept0) for c in comps} for nm in names}
        F_old = state["F"]
        store.add(vectors)
        shells.append({"index": index, "energies": energies, "kept": dict(kept), "layout": layout,
                       "F_old": F_old})
        if index != last_index:
            state["F"] = {nm: {c: transform_block_operator(sym, c, F_old[nm][c], vectors, layout, kept, kept)
                               for c in comps} for nm in names}
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
        spectrum = _backward(shells, store, sym, comps, operators, correlators, temps, logw, logz,
                             lowest, bins_per_decade)
        t_spec = time.perf_counter() - t1 + state["sink"]
    finally:
        store.close()
    comp_names = sym.component_names
    om, we, total, lesser = spectrum
    return res, DiscreteSpectrum(temperatures=temps, components=comp_names,
                                 correlators=tuple(c[0] for c in correlators), omega=om, weight=we,
                                 total=total, lesser=lesser, lowest_scale=lowest,
                                 forward_seconds=t_forward, spectral_seconds=t_spec,
                                 spilled_bytes=int(store.spilled))


def _backward(shells, store, sym, comps, operators, correlators, temps, logw, logz, lowest, per_decade):
    nT, nC, nX = len(temps), len(comps), len(correlators)
    bins = _Bins((nX, nT, nC), lowest, per_decade)
    total = np.zeros((nX, nT, nC))
    lesser = np.zeros((nX, nT, nC))
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
            F = {nm: operators[nm] for nm in operators}
        else:
            vectors = store.get(i - 1)
            F = {nm: {c: transform_block_operator(sym, c, sh["F_old"][nm][c], vectors, sh["layout"])
                      for c in comps} for nm in operators}
        for ci, c in enumerate(comps):
            pairs = sorted(set().union(*(F[o2][c].keys() for _n, _o1, o2 in correlators)))
            for (Ls, Lr) in pairs:
                ks, kr = kept[Ls], kept[Lr]
                ns, nr = len(E[Ls]), len(E[Lr])
                if ks == ns and kr == nr:
                    continue
                om = scale * (E[Ls][:, None] - E[Lr][None, :])
                regions = [(slice(0, ks), slice(kr, nr)), (slice(ks, ns), slice(0, nr))]
                om_flat = np.concatenate([om[a, b].ravel() for a, b in regions])
                keys = bins.keys(om_flat)
                fac = sym.spectral_weight_factor(Ls)
                for t in active:
                    rK_s, rK_r = rhoK[t].get(Ls), rhoK[t].get(Lr)
                    rD_s, rD_r = rhoD[t][i][Ls], rhoD[t][i][Lr]
                    # O2 ρ (ρ on the lower state r) and ρ O2 (ρ on the upper state s)
                    cache = {}
                    for xi, (_name, o1, o2) in enumerate(correlators):
                        if o2 not in cache:
                            M = F[o2][c].get((Ls, Lr))
                            if M is None:
                                cache[o2] = None
                                continue
                            Fr = np.empty_like(M)
                            Fr[:, kr:] = M[:, kr:] * rD_r[None, :]
                            if kr:
                                Fr[:, :kr] = M[:, :kr] @ rK_r if rK_r is not None else 0.0
                            Fs = np.empty_like(M)
                            Fs[ks:] = M[ks:] * rD_s[:, None]
                            if ks:
                                Fs[:ks] = rK_s @ M[:ks] if rK_s is not None else 0.0
                            cache[o2] = (Fr, Fs)
                        M1 = F[o1][c].get((Ls, Lr))
                        if M1 is None or cache[o2] is None:
                            continue
                        Fr, Fs = cache[o2]
                        g = np.concatenate([(M1[a, b] * Fr[a, b]).ravel() for a, b in regions])
                        h = np.concatenate([(M1[a, b] * Fs[a, b]).ravel() for a, b in regions])
                        g *= fac
                        h *= fac
                        total[xi, t, ci] += g.sum() + h.sum()
                        lesser[xi, t, ci] += h.sum()
                        bins.add((xi, t, ci), keys, om_flat, g + h)
        if i == 0:
            break
        # reduce ρ to the kept states of the previous iteration (trace over the added site)
        layout = sh["layout"]
        prev_kept = shells[i - 1]["kept"]
        prev_mult = shells[i - 1]["mult"]
        for t in active:
            new = {}
            for Ln, subs in layout.items():
                U = vectors[Ln]
                k = kept[Ln]
                rD = rhoD[t][i][Ln]
                rK = rhoK[t].get(Ln)
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
            rhoK[t] = {L: 0.5 * (R + R.T) for L, R in new.items() if prev_kept.get(L, 0)}
        store.release(i - 1)
    om, we = bins.result()
    return om, we, total, lesser


# ---------------------------------------------------------------------------------------------
# broadening and averaging

def frequency_grid(lowest: float, highest: float, points_per_decade: int) -> np.ndarray:
    """Symmetric logarithmic grid ±[lowest, highest] plus ω = 0.

    Parameters
    ----------
    lowest, highest : float
        Smallest and largest |ω| (units of D), 0 < lowest < highest.
    points_per_decade : int
        Points per decade of |ω| (≥ 1).

    Returns
    -------
    ndarray, shape (2 n + 1,)
        Ascending frequencies (units of D).

    Raises
    ------
    NrgInputError
        For a non-positive or inverted range, or fewer than one point per decade.
    """
    if not (0 < lowest < highest and np.isfinite(highest)):
        raise NrgInputError(f"frequency grid: got lowest = {lowest}, highest = {highest}; allowed: 0 < lowest < highest")
    if points_per_decade < 1:
        raise NrgInputError(f"spectral.points_per_decade: got {points_per_decade}; allowed range: >= 1")
    n = int(math.ceil(math.log10(highest / lowest) * points_per_decade)) + 1
    pos = np.logspace(math.log10(lowest), math.log10(highest), n)
    return np.concatenate([-pos[::-1], [0.0], pos])


def gaussian_width(temperature: float, lowest_scale: float) -> float:
    """Width ω_0 (units of D) of the Gaussian that replaces the log-Gaussian near ω = 0.

    max(T/2, 2 ω_last): at T = 0 the poles of the last iterations lie about
    ω_last apart and there are none below, so the Gaussian must bridge a few
    ω_last; at T > 0 the thermal spectrum has no structure finer than T.
    (Common practice, no source; the factors were chosen by checking the
    Friedel sum rule at ω = 0 against the plateau just above it, and the
    smoothness and total weight of finite-T spectra.)
    """
    return float(max(0.5 * temperature, 2.0 * lowest_scale))


def broaden(omega_p, weight_p, grid, broadening: float = DEFAULT_BROADENING, width0: float = 0.0,
            chunk: int = 4096) -> np.ndarray:
    """Broaden discrete weights into a smooth function on ``grid``.

    Each pole (ω_p, w_p) contributes w_p K(ω | ω_p) with

    .. math::

        K = h(ω)\\,\\frac{θ(ω ω_p)}{b |ω| \\sqrt{π}}
              \\exp\\left[-\\left(\\frac{\\ln|ω/ω_p|}{b} - \\frac b4\\right)^2\\right]
            + \\bigl(1-h(ω)\\bigr)\\,\\frac{1}{ω_0\\sqrt{π}} e^{-(ω-ω_p)^2/ω_0^2},
        \\qquad h(ω) = 1 - e^{-(ω/2ω_0)^2}:

    a log-Gaussian of width b (Bulla, Costi & Pruschke 2008) away from
    ω = 0, crossing over smoothly to a Gaussian of width ω_0 for |ω| ≲ 2ω_0,
    where the logarithmic discretization has no poles to broaden (below the
    temperature or the last iteration's scale).  The log-Gaussian is written
    with the 1/|ω| prefactor and the shift b/4 of Weichselbaum & von Delft
    (2007): it is normalized in ω for every pole *and* maps a smooth density
    of poles onto itself (the form with 1/|ω_p| and a factor e^{−b²/4} is
    normalized too, but lowers a flat spectrum by e^{−b²/4}, 9 % at b = 0.6).
    Both parts reproduce a smooth density, so mixing them with a weight that
    depends on ω keeps the spectrum right near ω = 0 (a mixture that depends
    on ω_p would lower a flat spectrum at ω = 0 by 1/√2); the total weight is
    then conserved up to the curvature of the spectrum on the scale ω_0
    (common practice, no source).

    Parameters
    ----------
    omega_p, weight_p : array_like, shape (P,)
        Pole positions (units of D) and weights.
    grid : ndarray, shape (n_ω,)
        Frequencies (units of D).
    broadening : float
        b > 0.
    width0 : float
        ω_0 ≥ 0 (units of D); 0 means a pure log-Gaussian (poles at exactly 0 are then dropped).

    Returns
    -------
    ndarray, shape (n_ω,)
        The broadened function (units of 1/D for dimensionless weights).

    Raises
    ------
    NrgInputError
        For b ≤ 0 or ω_0 < 0.
    """
    if not (broadening > 0 and np.isfinite(broadening)):
        raise NrgInputError(f"spectral.broadening: got {broadening}; allowed range: > 0")
    if not (width0 >= 0 and np.isfinite(width0)):
        raise NrgInputError(f"gaussian width: got {width0}; allowed range: >= 0")
    op = np.asarray(omega_p, dtype=float).ravel()
    wp = np.asarray(weight_p, dtype=float).ravel()
    keep = wp != 0
    op, wp = op[keep], wp[keep]
    x = np.asarray(grid, dtype=float)
    b = float(broadening)
    ax = np.abs(x)
    lx = np.log(np.where(ax > 0, ax, 1.0))
    inv = np.where(ax > 0, 1.0 / (b * math.sqrt(math.pi) * np.where(ax > 0, ax, 1.0)), 0.0)
    log_part = np.zeros(len(x))
    gauss_part = np.zeros(len(x))
    for s in range(0, len(op), chunk):
        o, w = op[s:s + chunk], wp[s:s + chunk]
        ao = np.abs(o)
        lo = np.log(np.where(ao > 0, ao, 1.0))
        same = (x[:, None] * o[None, :] > 0)
        arg = (lx[:, None] - lo[None, :]) / b - b / 4
        log_part += (np.where(same, np.exp(-arg * arg), 0.0) * inv[:, None]) @ w
        if width0 > 0:
            gauss_part += (np.exp(-((x[:, None] - o[None, :]) / width0) ** 2) / (width0 * math.sqrt(math.pi))) @ w
    if width0 == 0:
        return log_part
    h = -np.expm1(-(x / (2.0 * width0)) ** 2)
    return h * log_part + (1.0 - h) * gauss_part


def spectral_weight(omega, values) -> np.ndarray:
    """∫ values dω on a grid from :func:`frequency_grid` (trapezoid rule in ln|ω| on each side).

    On the logarithmic grid the trapezoid rule in ln|ω| is far more accurate
    for log-Gaussian tails than the plain rule in ω (common practice, no
    source); the interval between −ω_min and ω_min is taken linearly.

    Parameters
    ----------
    omega : ndarray, shape (n_ω,)
        Ascending grid (units of D) containing 0, symmetric.
    values : ndarray, shape (..., n_ω)

    Returns
    -------
    ndarray, shape (...)
    """
    om = np.asarray(omega, dtype=float)
    v = np.asarray(values, dtype=float)
    pos, neg = om > 0, om < 0
    core = (om >= om[neg][-1]) & (om <= om[pos][0])
    out = np.trapezoid(v[..., pos] * om[pos], np.log(om[pos]), axis=-1)
    out += np.trapezoid(v[..., neg][..., ::-1] * (-om[neg][::-1]), np.log(-om[neg][::-1]), axis=-1)
    out += np.trapezoid(v[..., core], om[core], axis=-1)
    return out


def average_spectra(discrete: list, broadening: float = DEFAULT_BROADENING, points_per_decade: int = 25,
                    grid: np.ndarray | None = None) -> SpectralCurves:
    """Broaden the discrete spectra of several twists on one grid and average them (z-averaging).

    Parameters
    ----------
    discrete : list of DiscreteSpectrum
        One per twist, same temperatures and components.
    broadening : float
        Log-Gaussian width b.
    points_per_decade : int
        Density of the common logarithmic grid.
    grid : ndarray, optional
        Use this grid instead (units of D).

    Returns
    -------
    SpectralCurves
        Without the improved estimate (see :func:`improved_spectral_function`).

    Raises
    ------
    NrgInputError
        If the list is empty or the twists disagree in temperatures or components.
    """
    if not discrete:
        raise NrgInputError("average_spectra: got no spectra; allowed: one DiscreteSpectrum per twist")
    first = discrete[0]
    for d in discrete[1:]:
        if d.components != first.components or not np.array_equal(d.temperatures, first.temperatures):
            raise NrgInputError("average_spectra: twists disagree in temperatures or spin components")
    temps = first.temperatures
    lowest = max(d.lowest_scale for d in discrete)
    widths = np.array([gaussian_width(T, lowest) for T in temps])
    if grid is None:
        big = max(float(np.max(np.abs(d.omega[d.weight != 0]), initial=1.0)) for d in discrete)
        grid = frequency_grid(0.01 * float(widths.min()), 10.0 * max(big, 1.0), points_per_decade)
    nT, nC = len(temps), len(first.components)
    xs = list(first.correlators)
    acc = np.zeros((len(xs), nT, nC, len(grid)))
    for d in discrete:
        for xi in range(len(xs)):
            for t in range(nT):
                for c in range(nC):
                    acc[xi, t, c] += broaden(d.omega[xi, t, c], d.weight[xi, t, c], grid, broadening, widths[t])
    acc /= len(discrete)
    occ = np.mean([d.occupation for d in discrete], axis=0)
    return SpectralCurves(omega=grid, temperatures=temps, components=first.components, spectral=acc[xs.index("G")],
                          occupation=occ, broadening=float(broadening), gaussian_widths=widths,
                          correlator_f=acc[xs.index("F")] if "F" in xs else None)


# ---------------------------------------------------------------------------------------------
# Kramers–Kronig and the self-energy

def hilbert_transform(x, a, omega) -> np.ndarray:
    """Principal value P∫ a(x')/(ω − x') dx' of a piecewise-linear function.

    The function is linear between the nodes ``x`` and zero outside; each
    segment is integrated in closed form, so the result is exact for the
    interpolant and finite at the nodes:

    .. math::

        \\sum_k Δs_k\\, φ(ω - x_k) + a_0 \\ln|ω - x_0| - a_M \\ln|ω - x_M| - (a_M - a_0),

    φ(y) = y ln|y| (φ(0) = 0), Δs_k the jump of the slope at node k.

    Parameters
    ----------
    x : ndarray, shape (M+1,)
        Ascending nodes (units of D).
    a : ndarray, shape (..., M+1)
        Values at the nodes (the last axis runs over x).
    omega : ndarray, shape (n,)
        Where to evaluate (units of D).

    Returns
    -------
    ndarray, shape (..., n)
    """
    x = np.asarray(x, dtype=float)
    a = np.asarray(a, dtype=float)
    om = np.asarray(omega, dtype=float)
    s = np.diff(a, axis=-1) / np.diff(x)
    ds = np.concatenate([s[..., :1], np.diff(s, axis=-1), -s[..., -1:]], axis=-1)
    y = om[:, None] - x[None, :]
    ay = np.abs(y)
    phi = np.where(ay > 0, y * np.log(np.where(ay > 0, ay, 1.0)), 0.0)
    out = ds @ phi.T
    for idx, sign in ((0, 1.0), (-1, -1.0)):
        ai = a[..., idx]
        d = np.abs(om - x[idx])
        lg = np.log(np.where(d > 0, d, 1.0))
        out += sign * ai[..., None] * np.where(d > 0, lg, 0.0)
    return out - (a[..., -1:] - a[..., :1])


def hybridization_function(bath, gamma: float, omega) -> np.ndarray:
    """Δ(ω + i0) = ∫ dε Γ(ε)/π / (ω − ε + i0), Γ(ε) = Γ g(ε) (units of D).

    Flat band: (Γ/π) ln|(ω + D)/(ω − D)| − iΓ θ(D − |ω|) in closed form; other
    shapes: the real part is the principal-value integral of the linear
    interpolant of g on a dense grid (:func:`hilbert_transform`).

    Parameters
    ----------
    bath : Bath
        Shape g(ε) and half-bandwidth D.
    gamma : float
        Γ = πρV² at the Fermi level (units of D).
    omega : ndarray, shape (n,)

    Returns
    -------
    ndarray (complex), shape (n,)
    """
    om = np.asarray(omega, dtype=float)
    D = bath.half_bandwidth
    im = -gamma * bath.shape_function(om)
    if bath.shape == "flat":
        num, den = np.abs(om + D), np.abs(om - D)
        ok = (num > 0) & (den > 0)
        re = np.where(ok, (gamma / math.pi) * np.log(np.where(ok, num, 1.0) / np.where(ok, den, 1.0)), 0.0)
        return re + 1j * im
    inner = np.linspace(-D, D, 4001)
    fine = np.concatenate([-D * np.logspace(-8, -3, 200)[::-1], D * np.logspace(-8, -3, 200)])
    nodes = np.unique(np.concatenate([inner, fine]))
    re = (gamma / math.pi) * hilbert_transform(nodes, bath.shape_function(nodes), om)
    return re + 1j * im


def improved_spectral_function(omega, spectral_g, spectral_f, levels, interaction, delta):
    """A_σ from the self-energy Σ = U F/G (Bulla, Hewson & Pruschke 1998).

    .. math::

        G_σ = \\int \\frac{A_σ(x)}{ω - x + i0} dx ,\\quad
        F_σ = \\int \\frac{A^F_σ(x)}{ω - x + i0} dx ,\\quad
        Σ_σ = U F_σ/G_σ ,\\quad
        A_σ^{impr} = -\\frac1π \\mathrm{Im} \\frac{1}{ω - ε_{dσ} - Δ(ω) - Σ_σ(ω)} .

    Parameters
    ----------
    omega : ndarray, shape (n_ω,)
        Frequency grid (units of D).
    spectral_g, spectral_f : ndarray, shape (..., n_comp, n_ω)
        Broadened spectral functions of G and F (units of 1/D).
    levels : sequence of float, length n_comp
        ε_dσ of each component (units of D): ε_d − σh/2.
    interaction : float
        U (units of D).
    delta : ndarray (complex), shape (n_ω,)
        Hybridization function Δ(ω + i0) (:func:`hybridization_function`).

    Returns
    -------
    (improved, sigma) : ndarray (..., n_comp, n_ω) and complex ndarray of the same shape
    """
    om = np.asarray(omega, dtype=float)
    Ag, Af = np.asarray(spectral_g, float), np.asarray(spectral_f, float)
    G = hilbert_transform(om, Ag, om) - 1j * math.pi * Ag
    F = hilbert_transform(om, Af, om) - 1j * math.pi * Af
    tiny = np.finfo(float).tiny
    sigma = interaction * F / np.where(np.abs(G) > tiny, G, tiny)
    sigma = sigma.real + 1j * np.minimum(sigma.imag, 0.0)       # causality: Im Σ ≤ 0
    eps = np.asarray(levels, dtype=float)[:, None]
    Gi = 1.0 / (om[None, :] - eps - delta[None, :] - sigma)
    return -Gi.imag / math.pi, sigma
