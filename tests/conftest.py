"""Shared helpers for the tests: Wilson's closed-form chain and exact free-fermion spectra."""


import numpy as np


def wilson_hopping(n, Lam, D=1.0):
    """Flat band, Wilson's discretization, z = 1 (Wilson 1975; Bulla, Costi, Pruschke RMP 80, 395 (2008))."""
    n = np.asarray(n, dtype=float)
    return (D * 0.5 * (1 + 1 / Lam) * (1 - Lam ** (-n - 1))
            / np.sqrt((1 - Lam ** (-2 * n - 1)) * (1 - Lam ** (-2 * n - 3))) * Lam ** (-n / 2))


def omega(N, Lam, D=1.0):
    """Our energy unit of iteration N at z = 1: D (1+1/Λ)/2 Λ^{-(N-1)/2}."""
    return D * 0.5 * (1 + 1 / Lam) * Lam ** (-(N - 1) / 2)


def merged(om, w, tol=1e-8):
    """Discrete spectral poles with the weights of coinciding poles (within ``tol``) summed; empty groups
    dropped."""
    o = np.argsort(om, kind="stable")
    om, w = np.asarray(om)[o], np.asarray(w)[o]
    group = np.concatenate([[0], np.cumsum(np.diff(om) > tol)])
    W = np.bincount(group, weights=w)
    O = np.bincount(group, weights=om) / np.bincount(group)
    keep = np.abs(W) > 1e-12
    return O[keep], W[keep]


def many_body_levels(single_particle, n_lowest=None, spinful=True):
    """Exact many-body excitation energies of free fermions from single-particle energies.

    Enumerates every occupation of the given levels (both spins when ``spinful``)
    and returns the sorted excitation energies (ground state at 0), one entry per
    many-body state.
    """
    eps = np.asarray(single_particle, float)
    if spinful:
        eps = np.repeat(eps, 2)
    m = len(eps)
    assert m <= 22, "too many levels to enumerate"
    occ = (np.arange(2 ** m)[:, None] >> np.arange(m)[None, :]) & 1
    E = occ @ eps
    E = np.sort(E)
    E -= E[0]
    return E if n_lowest is None else E[:n_lowest]


def expand_multiplets(energies, multiplicity):
    """Repeat every multiplet energy 2S+1 times, sorted."""
    return np.sort(np.repeat(np.asarray(energies), np.asarray(multiplicity, dtype=int)))


def assert_same_levels(su2_result, abelian_result, n_max):
    """Iteration by iteration: su2 multiplets expanded by 2S+1 equal the abelian levels (lowest n_max, 1e-8),
    and both modes keep the same number of states."""
    for a, b in zip(su2_result.records, abelian_result.records):
        lev_a = expand_multiplets(a.energies, a.multiplicity)
        lev_b = np.sort(b.energies)
        n = min(len(lev_a), len(lev_b), n_max)
        np.testing.assert_allclose(lev_a[:n], lev_b[:n], atol=1e-8)
        assert a.kept_states == b.kept_states


import os as _os

import pytest as _pytest


@_pytest.fixture(scope="session", autouse=True)
def _private_exact_cache(tmp_path_factory):
    """The exact (Bethe-ansatz) curves are cached in a temporary folder shared by the whole test
    session, subprocesses included, never in the user's cache folder."""
    folder = tmp_path_factory.mktemp("exact_cache")
    old = _os.environ.get("NRGSOLVE_CACHE_DIR")
    _os.environ["NRGSOLVE_CACHE_DIR"] = str(folder)
    yield folder
    if old is None:
        _os.environ.pop("NRGSOLVE_CACHE_DIR", None)
    else:
        _os.environ["NRGSOLVE_CACHE_DIR"] = old
