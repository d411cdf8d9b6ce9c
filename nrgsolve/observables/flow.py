"""Energy-level flow: the lowest multiplets of every iteration (Wilson 1975)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["FlowSpectrum", "flow_spectrum"]


@dataclass(frozen=True)
class FlowSpectrum:
    """Lowest levels per iteration, zero-padded (energy NaN where a level is missing).

    Attributes
    ----------
    iteration : ndarray (I,)
        Chain index N of each iteration.
    energy : ndarray (I, K)
        Levels in units of ω_N, ground state at 0.
    charge : ndarray (I, K)
        Total charge Q from half filling.
    twice_spin : ndarray (I, K)
        2S (su2) or 2S_z (abelian).
    degeneracy : ndarray (I, K)
        2S+1 (su2) or 1 (abelian).
    kept_states, truncation_energy, discarded_weight : ndarray (I,)
        Truncation diagnostics (kept states counting 2S+1; energy in ω_N; weight fraction).
    block_dimensions : ndarray (I, B)
        Dimensions of every block, descending, zero-padded.
    channel_charge : ndarray (I, K, C) or None
        Charge of each of the C channels of each level (several channels only).
    twice_isospin : ndarray (I, K, C) or None
        2I of each channel's isospin multiplet the level belongs to (isospin mode only; the levels
        are still listed as charge multiplets, 2I+1 of them per isospin multiplet).
    """

    iteration: np.ndarray
    energy: np.ndarray
    charge: np.ndarray
    twice_spin: np.ndarray
    degeneracy: np.ndarray
    kept_states: np.ndarray
    truncation_energy: np.ndarray
    discarded_weight: np.ndarray
    block_dimensions: np.ndarray
    channel_charge: np.ndarray | None = None
    twice_isospin: np.ndarray | None = None


def flow_spectrum(records, levels: int) -> FlowSpectrum:
    """Collect the lowest ``levels`` multiplets of every iteration record."""
    I = len(records)
    E = np.full((I, levels), np.nan)
    Q = np.zeros((I, levels), dtype=int)
    S = np.zeros((I, levels), dtype=int)
    D = np.zeros((I, levels), dtype=int)
    B = max((len(r.block_dims) for r in records), default=0)
    dims = np.zeros((I, B), dtype=int)
    C = records[0].channel_charge.shape[1] if records and records[0].channel_charge is not None else 0
    chq = np.zeros((I, levels, C), dtype=int) if C else None
    iso_c = records[0].twice_isospin.shape[1] if records and records[0].twice_isospin is not None else 0
    iso = np.zeros((I, levels, iso_c), dtype=int) if iso_c else None
    for i, r in enumerate(records):
        k = min(levels, len(r.energies))
        E[i, :k] = r.energies[:k]
        Q[i, :k] = r.charge[:k]
        S[i, :k] = r.twice_spin[:k]
        D[i, :k] = r.multiplicity[:k]
        dims[i, :len(r.block_dims)] = r.block_dims
        if chq is not None:
            chq[i, :k] = r.channel_charge[:k]
        if iso is not None:
            iso[i, :k] = r.twice_isospin[:k]
    return FlowSpectrum(
        iteration=np.array([r.index for r in records], dtype=int), energy=E, charge=Q, twice_spin=S,
        degeneracy=D, kept_states=np.array([r.kept_states for r in records], dtype=int),
        truncation_energy=np.array([r.truncation_energy for r in records], dtype=float),
        discarded_weight=np.array([r.discarded_weight for r in records], dtype=float),
        block_dimensions=dims, channel_charge=chq, twice_isospin=iso)
