"""Up-front estimate of what a run needs: chain length, block sizes, memory and time.

Used by the command line before any numerics start, so that a run that
cannot fit into the machine's memory is refused in one line (instead of
dying in LAPACK after minutes), and a run that will take hours says so.

The estimate follows the iteration: before truncation, iteration n holds
``4^channels`` times the states kept at iteration n−1 (each added Wilson
site has four states per channel); the engine splits them into symmetry
blocks and diagonalizes each.  The block sizes relative to the kept states
were measured with this engine (Kondo, Λ = 3, 1000 kept states,
``nrgsolve.engine.iterate``'s ``block_dimensions`` diagnostic):

============  ========  ====================  ======================
symmetry      channels  largest block / kept  sum of blocks / kept
============  ========  ====================  ======================
su2           1         0.21                  1.64
abelian       1         0.38                  4.06
su2           2         0.29                  6.35
isospin       1         0.13                  0.65
isospin       2         0.14                  1.60
============  ========  ====================  ======================

(isospin: the Kondo and two-channel Kondo models, Λ = 3, 1000 kept.)
``run.symmetry = "auto"`` is estimated with the symmetry the run will use
when the bath is known, otherwise with su2 (abelian in a field).

With more kept states the states spread over more blocks, so the largest
block grows slower than the kept count and the estimate errs on the large
side.  The largest-block fraction of the abelian two-channel case (not
measured) is taken as that of the abelian one-channel case.

With ``run.energy_cutoff`` the kept count is not fixed; it is estimated as
the number of many-body states below the cutoff of a free Wilson chain
(single-particle levels of the chain with hoppings Λ^{−n/2}, in units of
ω_N; each level gives a particle and a hole excitation per spin and
channel) times the impurity degeneracy (2, or 2S+1).  This counted 60·2,
216·2 and 140·2 states against the 126, 512 and 280 kept by the engine at
(Λ, cutoff) = (3, 5), (3, 10) and (2, 5).

A spectral pass keeps the eigenvectors of every iteration in memory up to
``spectral.memory_budget`` (the rest goes to a temporary file); the estimate
adds the smaller of the budget and the eigenvectors' size.

The time is a rough figure: the dense diagonalizations dominate and cost
about ``SECONDS_PER_UNIT`` · (largest block)² · (sum of blocks) per
iteration (measured here: 1.4 s for a 1000-state su2 Kondo run of 20
iterations with its bath reference run, 5 s for the abelian one).
Energies are in units of the half-bandwidth D.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np

from .errors import NrgInputError

__all__ = ["ResourceEstimate", "estimate", "check_resources", "machine_memory", "kept_below_cutoff",
           "concurrent_workers", "note",
           "SECONDS_PER_UNIT", "MAX_SITES", "MAX_SECONDS", "NOTE_SECONDS"]

#: Seconds per unit of (largest block)² × (sum of blocks) per iteration (see module docstring).
SECONDS_PER_UNIT = 5e-10
#: Chains longer than this are refused (Λ = 1.2 down to 1e-30 D needs 760 sites).
MAX_SITES = 1000
#: Runs estimated to take longer than this are refused (30 days on one process).
MAX_SECONDS = 30 * 86400.0
#: Runs estimated to take longer than this get a note before they start.
NOTE_SECONDS = 3600.0
#: Memory of the interpreter and the libraries, besides the matrices (bytes).
BASELINE_BYTES = 300e6

# (largest block / kept, sum of blocks / kept) by (symmetry, channels); see the module docstring.
_BLOCKS = {("su2", 1): (0.21, 1.64), ("abelian", 1): (0.38, 4.06), ("su2", 2): (0.29, 6.35),
           ("abelian", 2): (0.38, 16.0),
           # isospin, one channel: symmetric Anderson model, 2000 kept, Λ = 2 (largest block 195, sum 1210),
           # and the Kondo model, 1000 kept, Λ = 3 (0.127, 0.645); two channels: two-channel Kondo model,
           # ρJ = 0.3, 1000 kept, Λ = 3, mean of the last five iterations (largest 137, sum 1602)
           ("isospin", 1): (0.13, 0.65), ("isospin", 2): (0.14, 1.60)}


@dataclass(frozen=True)
class ResourceEstimate:
    """What a run is expected to need.

    Attributes
    ----------
    sites : int
        Longest Wilson chain over the twists (sites).
    iterations : int
        Engine iterations of the whole run (all twists, bath reference runs included).
    kept_states : int
        Estimated largest number of kept states (counting 2S+1).
    largest_block : int
        Estimated dimension of the largest block diagonalized.
    memory_bytes : float
        Estimated peak memory of one process (bytes).
    seconds : float
        Rough wall time on one process (seconds).
    """

    sites: int
    iterations: int
    kept_states: int
    largest_block: int
    memory_bytes: float
    seconds: float


def machine_memory() -> int | None:
    """Physical memory of the machine in bytes (None when unknown)."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return None


def kept_below_cutoff(cutoff: float, Lambda: float, channels: int = 1) -> float:
    """Number of many-body states of a free Wilson chain below ``cutoff`` (units of ω_N).

    The larger of an even and an odd chain of about 40 sites; hoppings Λ^{−n/2}
    scaled so that the last one is 1.  Counted on an energy grid of cutoff/4000.
    """
    from scipy.linalg import eigh_tridiagonal

    best = 0.0
    grid = 4000
    h = cutoff / grid
    for n_sites in (40, 41):
        n = np.arange(n_sites - 1)
        e = eigh_tridiagonal(np.zeros(n_sites), Lambda ** (-n / 2), eigvals_only=True)
        e = e / Lambda ** (-(n_sites - 2) / 2)
        zero = int(np.sum(np.abs(e) <= 1e-9))
        ways = np.zeros(grid + 1)
        ways[0] = 1.0
        for x in e[e > 1e-9]:
            if x > cutoff:
                continue
            k = max(1, int(math.ceil(x / h)))
            for _ in range(4 * channels):          # particle and hole, two spins, per channel
                ways[k:] = ways[k:] + ways[:-k]
        best = max(best, float(ways.sum()) * 4.0 ** (channels * zero))
    return best


def estimate(spec, bath=None) -> ResourceEstimate:
    """Estimate chain length, block sizes, peak memory and time of a run.

    Parameters
    ----------
    spec : RunSpec
    bath : Bath, optional
        Its half-bandwidth (default: ``spec.bath.half_bandwidth``) and whether it is particle-hole
        symmetric, which with ``run.symmetry = "auto"`` decides the symmetry (and so the block sizes);
        without it "auto" is estimated with su2 (abelian in a field), an upper bound.

    Returns
    -------
    ResourceEstimate
    """
    from .discretize import twists as twist_values
    from .chain import sites_needed

    d, r, imp = spec.discretization, spec.run, spec.impurity
    D = bath.half_bandwidth if bath is not None else spec.bath.half_bandwidth
    sites = [sites_needed(r.lowest_temperature, d.Lambda, float(z), r.beta_bar, D, d.scheme)
             for z in twist_values(d.twists)]
    channels = imp.declaration.channels(imp)
    per_site = 4 ** channels
    if r.energy_cutoff is not None:
        kept = 1.2 * imp.declaration.impurity_states(imp) * kept_below_cutoff(r.energy_cutoff, d.Lambda, channels)
    else:
        kept = float(r.kept_states)
    name = r.symmetry
    if name == "auto":
        if bath is not None:                   # the symmetry the run will use
            from .symmetry_choice import choose_symmetry
            name = choose_symmetry(spec, bath)
        else:                                  # without the bath: su2 (abelian in a field), an upper bound
            name = "abelian" if imp.field != 0.0 else "su2"
    largest_frac, sum_frac = _BLOCKS[(name, channels)]
    runs = 2 if r.bath_reference == "nrg" else 1
    seconds, largest, peak_kept, peak_bytes, vectors = 0.0, 0.0, 0.0, 0.0, 0.0
    for n_sites in sites:
        states = float(imp.declaration.impurity_states(imp))
        twist_vectors = 0.0
        for i in range(n_sites):
            before = states * per_site                      # states before truncation
            states = min(kept, before)
            k = min(kept, before / per_site)                # states carried into this iteration
            block_sum = sum_frac * k
            block_max = min(largest_frac * k, block_sum)
            seconds += runs * SECONDS_PER_UNIT * block_max ** 2 * block_sum
            largest = max(largest, block_max)
            peak_kept = max(peak_kept, states)
            # all eigenvectors of the iteration, plus H, U, workspace and an operator product of the largest
            peak_bytes = max(peak_bytes, 8.0 * (block_max * block_sum + 4 * block_max ** 2))
            twist_vectors += 8.0 * block_max * block_sum
            if states >= kept and k >= kept:
                # the kept count no longer changes: the remaining iterations cost the same
                rest = n_sites - 1 - i
                seconds += rest * runs * SECONDS_PER_UNIT * block_max ** 2 * block_sum
                twist_vectors += rest * 8.0 * block_max * block_sum
                break
        vectors = max(vectors, twist_vectors)
    memory = BASELINE_BYTES + 1.5 * peak_bytes
    sp = getattr(spec, "spectral", None)
    if sp is not None and sp.requested:
        # the spectral pass keeps every iteration's eigenvectors, up to its budget (the rest goes to a file)
        memory += min(sp.memory_budget * 1e9, vectors)
    return ResourceEstimate(sites=max(sites), iterations=runs * sum(sites), kept_states=int(min(peak_kept, 1e18)),
                            largest_block=int(min(largest, 1e18)), memory_bytes=memory, seconds=seconds)


def concurrent_workers(spec) -> int:
    """Processes a run uses at the same time (as :func:`nrgsolve.solve.solve` chooses them)."""
    twists = spec.discretization.twists
    workers = spec.run.workers or min(twists, os.cpu_count() or 1)
    return max(1, min(workers, twists))


def _size(nbytes: float) -> str:
    return f"{nbytes / 1e9:.3g} GB" if nbytes < 1e15 else f"{nbytes:.2g} bytes"


def _duration(s: float) -> str:
    if s < 120:
        return f"{s:.0f} s"
    if s < 7200:
        return f"{s / 60:.0f} min"
    if s < 3 * 86400:
        return f"{s / 3600:.1f} h"
    return f"{s / 86400:.3g} days"


def check_resources(spec, bath=None, workers: int = 1, memory: int | None = None) -> ResourceEstimate:
    """Refuse a run that cannot fit into memory or cannot finish; return the estimate otherwise.

    Parameters
    ----------
    spec : RunSpec
    bath : Bath, optional
    workers : int
        Processes running at the same time (each needs the estimated memory).
    memory : int, optional
        Bytes available (default: the machine's physical memory).

    Raises
    ------
    NrgInputError
        Naming the key to change (``run.kept_states`` or ``run.energy_cutoff``,
        ``run.lowest_temperature``/``discretization.Lambda``), the estimate and the limit.
    """
    est = estimate(spec, bath)
    r = spec.run
    size_key = "run.energy_cutoff" if r.energy_cutoff is not None else "run.kept_states"
    size_val = r.energy_cutoff if r.energy_cutoff is not None else r.kept_states
    if est.sites > MAX_SITES:
        raise NrgInputError(f"run.lowest_temperature: got {r.lowest_temperature:g} with discretization.Lambda = "
                            f"{spec.discretization.Lambda:g}, which needs a chain of {est.sites} sites; allowed: at "
                            f"most {MAX_SITES} (raise the lowest temperature or Λ)")
    memory = machine_memory() if memory is None else memory
    need = est.memory_bytes * max(1, workers)
    if memory is not None and need > memory:
        per = f" ({max(1, workers)} processes)" if workers > 1 else ""
        raise NrgInputError(f"{size_key}: got {size_val:g}; the run would need about {_size(need)} of memory{per} "
                            f"(largest block about {est.largest_block} states) but the machine has "
                            f"{_size(memory)}; lower {size_key}")
    if est.seconds / max(1, workers) > MAX_SECONDS:
        raise NrgInputError(f"{size_key}: got {size_val:g}; the run would take about "
                            f"{_duration(est.seconds / max(1, workers))} (chain of {est.sites} sites, "
                            f"{spec.discretization.twists} twist(s)); lower {size_key}, discretization.twists or "
                            f"raise run.lowest_temperature")
    return est


def note(est: ResourceEstimate, workers: int = 1) -> str | None:
    """A one-line note for long runs (None when the run is estimated below NOTE_SECONDS)."""
    s = est.seconds / max(1, workers)
    if s < NOTE_SECONDS:
        return None
    return (f"this run is estimated to take about {_duration(s)} and up to {_size(est.memory_bytes)} of memory "
            f"per process (chain of {est.sites} sites, up to {est.kept_states} kept states)")
