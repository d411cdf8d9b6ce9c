"""Iterative diagonalization: checks against exact diagonalization, exact free-fermion
spectra and the known fixed points of the Kondo and Anderson models."""

import numpy as np
import pytest
from scipy.linalg import eigvalsh_tridiagonal

from nrgsolve.engine.reference import kondo_dense_spectrum, anderson_dense_spectrum
from nrgsolve.errors import NrgInputError, NrgNumericalError
from nrgsolve.engine import make_symmetry
from conftest import many_body_levels, expand_multiplets, omega, assert_same_levels
from engine_helpers import run_kondo, run_anderson, closed_chain


def absolute_levels(rec):
    """All states of an iteration record in units of D, one entry per state."""
    return expand_multiplets(rec.ground_energy + rec.scale * rec.energies, rec.multiplicity)


@pytest.mark.parametrize("symmetry", ["su2", "abelian"])
def test_kondo_matches_dense_exact_diagonalization(symmetry):
    """Without truncation the engine reproduces dense exact diagonalization of the
    same short chain (slow reference; common practice, no source)."""
    res, onsite, hop = run_kondo(0.2, 3, kept=10 ** 6, symmetry=symmetry, rhoK=0.05)
    ref = kondo_dense_spectrum(0.4, 0.1, 1, 0.0, onsite[:4], hop[:3])
    got = absolute_levels(res.records[-1])
    assert got.shape == ref.shape
    np.testing.assert_allclose(got, ref, atol=1e-11)


@pytest.mark.parametrize("symmetry", ["su2", "abelian"])
def test_spin_one_kondo_matches_dense_exact_diagonalization(symmetry):
    """Spin-1 impurity: recoupling with a larger impurity spin (reference ED; common practice)."""
    res, onsite, hop = run_kondo(-0.15, 3, kept=10 ** 6, symmetry=symmetry, twice_spin=2)
    ref = kondo_dense_spectrum(-0.3, 0.0, 2, 0.0, onsite[:4], hop[:3])
    np.testing.assert_allclose(absolute_levels(res.records[-1]), ref, atol=1e-11)


@pytest.mark.parametrize("symmetry", ["su2", "abelian"])
def test_asymmetric_anderson_matches_dense_exact_diagonalization(symmetry):
    """Asymmetric Anderson model on three chain sites (reference ED; common practice)."""
    res, onsite, hop, V = run_anderson(-0.3, 0.5, 0.05, 2, kept=10 ** 6, symmetry=symmetry)
    ref = anderson_dense_spectrum(-0.3, 0.5, V, 0.0, onsite[:3], hop[:2])
    np.testing.assert_allclose(absolute_levels(res.records[-1]), ref, atol=1e-11)


def test_anderson_in_a_field_matches_dense_exact_diagonalization():
    """Abelian mode with a Zeeman field on the level (reference ED; common practice)."""
    res, onsite, hop, V = run_anderson(-0.2, 0.3, 0.05, 2, kept=10 ** 6, symmetry="abelian", field=0.07)
    ref = anderson_dense_spectrum(-0.2, 0.3, V, 0.07, onsite[:3], hop[:2])
    np.testing.assert_allclose(absolute_levels(res.records[-1]), ref, atol=1e-11)


def resonant_level_exact(V, onsite, hopping, N):
    """Single-particle levels of the d level coupled to chain sites 0..N (scipy.linalg)."""
    diag = np.concatenate([[0.0], onsite[:N + 1]])
    off = np.concatenate([[V], hopping[:N]])
    return eigvalsh_tridiagonal(diag, off)


def test_resonant_level_matches_exact_single_particle_without_truncation():
    """U = 0: the many-body NRG spectrum equals the one built from the exact
    single-particle eigenvalues of the same finite chain, to 1e-9 relative
    (exact free-fermion solution, computed here with scipy)."""
    N = 4
    res, onsite, hop, V = run_anderson(0.0, 0.0, 0.02, N, kept=10 ** 6)
    rec = res.records[-1]
    eps = resonant_level_exact(V, onsite, hop, N)
    exact = many_body_levels(eps)
    got = absolute_levels(rec) - (rec.ground_energy)
    assert got.shape == exact.shape
    np.testing.assert_allclose(got, exact, rtol=1e-9, atol=1e-12)
    # the absolute ground-state energy is the filled Fermi sea
    assert rec.ground_energy == pytest.approx(2 * eps[eps < 0].sum(), rel=1e-10)


def test_resonant_level_low_levels_survive_truncation():
    """U = 0 with truncation (300 kept states): the lowest many-body levels at N = 30 still agree
    with the exact single-particle construction (exact free-fermion solution)."""
    N = 30
    res, onsite, hop, V = run_anderson(0.0, 0.0, 0.02, N, kept=300)
    rec = res.records[-1]
    eps = resonant_level_exact(V, onsite, hop, N) / rec.scale
    near = eps[np.argsort(np.abs(eps))[:9]]          # the 9 levels closest to the Fermi energy
    exact = many_body_levels(near, n_lowest=60)
    got = expand_multiplets(rec.energies, rec.multiplicity)[:60]
    # truncation errors of a few 1e-5 relative are expected at 300 kept states
    np.testing.assert_allclose(got[:40], exact[:40], rtol=1e-4, atol=1e-6)


@pytest.mark.parametrize("model", ["kondo", "anderson"])
def test_su2_and_abelian_give_the_same_levels(model):
    """The same truncated flow in both symmetry modes, with 2S+1 degeneracies (common practice, no source)."""
    runs = {}
    for sym in ("su2", "abelian"):
        if model == "kondo":
            runs[sym] = run_kondo(0.15, 12, kept=200, symmetry=sym)[0]
        else:
            runs[sym] = run_anderson(-0.1, 0.2, 0.02, 12, kept=200, symmetry=sym)[0]
    assert_same_levels(runs["su2"], runs["abelian"], 150)


def free_chain_levels(N, Lam, first_site=0, n_lowest=40):
    """Many-body levels (units of ω_N) of the free chain sites first_site..N, from its exact single-particle levels."""
    onsite, hop = closed_chain(N + 1, Lam)
    eps = eigvalsh_tridiagonal(onsite[first_site:], hop[first_site:N]) / omega(N, Lam)
    near = eps[np.argsort(np.abs(eps))[:9]]
    return many_body_levels(near, n_lowest=n_lowest)


def test_decoupled_impurity_repeats_the_free_chain_structure():
    """J = 0: the spectrum is the bare chain's many-body spectrum (built from its single-particle
    levels) times a free spin-1/2, and the even-N and odd-N spectra each repeat
    (free-chain fixed point; Wilson 1975)."""
    res, _, _ = run_kondo(0.0, 41, kept=400)
    recs = {r.index: r for r in res.records}
    for N in (40, 41):
        got = expand_multiplets(recs[N].energies, recs[N].multiplicity)[:60]
        want = np.sort(np.repeat(free_chain_levels(N, 2.0, n_lowest=30), 2))
        # 400 kept states at Λ = 2: truncation shifts these levels by ~1e-4 relative
        np.testing.assert_allclose(got[:50], want[:50], rtol=5e-4, atol=1e-6)
    # fixed point: N and N+2 agree, N and N+1 differ
    e = lambda N: expand_multiplets(recs[N].energies, recs[N].multiplicity)[:30]
    np.testing.assert_allclose(e(39), e(41), atol=1e-6)
    np.testing.assert_allclose(e(38), e(40), atol=1e-6)
    assert np.max(np.abs(e(40) - e(41))) > 0.1


@pytest.mark.slow
def test_antiferromagnetic_kondo_flows_to_strong_coupling():
    """ρJ > 0: at large N the low levels equal the free chain with site 0 removed
    (no impurity degeneracy), so the even/odd pattern is swapped relative to the free
    chain (strong-coupling fixed point; Wilson 1975)."""
    res, _, _ = run_kondo(0.3, 50, kept=500)
    recs = {r.index: r for r in res.records}
    for N in (49, 50):
        got = expand_multiplets(recs[N].energies, recs[N].multiplicity)[:30]
        want = free_chain_levels(N, 2.0, first_site=1, n_lowest=30)
        np.testing.assert_allclose(got[:20], want[:20], atol=2e-3)
        # swapped pattern: the Kondo spectrum at N looks like the free chain at N ± 1
        free_same_parity = free_chain_levels(N, 2.0, n_lowest=30)
        assert np.max(np.abs(got[:20] - free_same_parity[:20])) > 0.1
    # ground state of the screened impurity is a singlet at every N at the fixed point
    assert recs[50].twice_spin[0] == 0 and recs[50].multiplicity[0] == 1


@pytest.mark.slow
def test_ferromagnetic_kondo_flows_to_free_spin():
    """ρJ < 0: the low-lying spectrum flows (logarithmically slowly) to the free chain times a
    free spin-1/2: every level doubled in spin content (Anderson 1970; Wilson 1975)."""
    res, _, _ = run_kondo(-0.1, 60, kept=400)
    recs = {r.index: r for r in res.records}
    N = 60
    got = expand_multiplets(recs[N].energies, recs[N].multiplicity)[:200]
    want = np.sort(np.repeat(free_chain_levels(N, 2.0, n_lowest=20), 2))
    # the residual coupling flows to zero only like 1/ln(1/T): at N = 60 it still splits
    # the doubled levels by a few percent of ω_N
    np.testing.assert_allclose(got[:40], want[:40], atol=0.08)
    free = free_chain_levels(N, 2.0, n_lowest=200)
    for window in (0.5, 1.0):
        assert np.count_nonzero(got < window) == 2 * np.count_nonzero(free < window)
    # the splitting caused by the residual coupling shrinks along the flow
    dev = lambda n: np.max(np.abs(expand_multiplets(recs[n].energies, recs[n].multiplicity)[:40]
                                  - np.sort(np.repeat(free_chain_levels(n, 2.0, n_lowest=20), 2))[:40]))
    assert dev(60) < dev(30) < dev(10)


def test_symmetric_anderson_spectrum_is_symmetric_under_charge_conjugation():
    """ε_d = −U/2: at every iteration the levels of block (Q, S) equal those of (−Q, S)
    (particle-hole symmetry; Krishna-murthy, Wilkins, Wilson 1980).  No symmetrization is applied."""
    res, *_ = run_anderson(-0.05, 0.1, 0.01, 40, kept=300, ph=False)
    for rec in res.records:
        for q in np.unique(rec.charge[:80]):
            for s in np.unique(rec.twice_spin[:80]):
                a = np.sort(rec.energies[(rec.charge == q) & (rec.twice_spin == s) & (rec.energies < 5)])
                b = np.sort(rec.energies[(rec.charge == -q) & (rec.twice_spin == s) & (rec.energies < 5)])
                n = min(len(a), len(b))
                assert abs(len(a) - len(b)) <= 1  # at most a level at the truncation edge
                np.testing.assert_allclose(a[:n - 1], b[:n - 1], atol=1e-8)


def test_kept_states_too_small_is_an_error():
    """A kept_states that leaves only the ground multiplet after the first step is refused."""
    with pytest.raises(NrgInputError, match="kept_states"):
        run_kondo(0.2, 5, kept=1)


def test_nan_in_the_chain_is_an_error():
    from nrgsolve.engine import make_symmetry, run_chain, EngineSettings
    from nrgsolve.engine.iterate import Step
    from nrgsolve.models import kondo_block
    sym = make_symmetry("su2")
    blk = sym.from_explicit(kondo_block(0.2))
    steps = [Step(1, (0.0,), (float("nan"),), 1.0)]
    with pytest.raises(NrgNumericalError, match="site 1"):
        run_chain(blk, 0, 1.0, sym, steps, EngineSettings(kept_states=100))


def test_truncation_never_cuts_a_degenerate_group():
    """The kept set always ends at a gap (common practice, no source)."""
    res, *_ = run_kondo(0.2, 15, kept=37)
    for rec in res.records[1:]:
        E = rec.energies
        kept = E[E < rec.truncation_energy]
        rest = E[E > rec.truncation_energy]
        if len(rest):
            assert rest.min() - kept.max() > 1e-6
        assert rec.kept_states >= min(37, int(rec.multiplicity.sum()))


def test_long_odd_chain_keeps_the_symmetric_ground_multiplet_degenerate():
    """Symmetric Anderson model on the production chain (nrgsolve.chain, flat band, Λ = 2.5) for 120
    iterations, without the particle-hole protection: roundoff offsets between the charge sectors would
    grow like Λ^{N/2} in units of ω_N and split the four-fold ground multiplet (Q = 0, S = 1/2;
    Q = ±1, S = 0) of odd chains after some 60–70 iterations (common practice, no source).  The chain's
    ε_n vanish to ~1e-50 and the mirror blocks are built alike, so it stays degenerate to 1e-8."""
    from nrgsolve.bath import make_bath
    from nrgsolve.chain import build_chain
    from nrgsolve.engine import make_symmetry, run_chain, EngineSettings
    from nrgsolve.engine.iterate import Step
    from nrgsolve.models import anderson_block
    from nrgsolve.chain import energy_scale
    Lam, N = 2.5, 120
    c = build_chain(make_bath("flat"), Lam, 1.0, N + 1)
    V = np.sqrt(0.01 * c.coupling_sq)
    sym = make_symmetry("su2")
    steps = [Step(n, (float(c.onsite[n]),), ((V if n == 0 else float(c.hopping[n - 1])),), energy_scale(n, Lam))
             for n in range(N + 1)]
    res = run_chain(sym.from_explicit(anderson_block(-0.05, 0.1, V)), -1, energy_scale(-1, Lam), sym, steps,
                    EngineSettings(kept_states=150, particle_hole_symmetric=False))
    odd = [r for r in res.records if r.index % 2 == 1 and r.index > 60]
    for rec in odd:
        assert rec.energies[2] - rec.energies[0] < 1e-8
        assert rec.energies[3] > 0.5
        assert sorted(zip(rec.charge[:3].tolist(), rec.twice_spin[:3].tolist())) == [(-1, 0), (0, 1), (1, 0)]


def test_charge_symmetrization_averages_mirror_blocks():
    """The particle-hole protection replaces the spectra of (Q, S) and (−Q, S) by their mean and leaves
    self-mirrored blocks alone (common practice, no source)."""
    from nrgsolve.engine.iterate import _symmetrize_charge
    E = {(1, 0): np.array([0.0, 1.0 + 3e-9]), (-1, 0): np.array([2e-9, 1.0]), (0, 1): np.array([0.5])}
    _symmetrize_charge(E, make_symmetry("su2"))
    np.testing.assert_allclose(E[(1, 0)], [1e-9, 1.0 + 1.5e-9], rtol=0, atol=1e-15)
    np.testing.assert_array_equal(E[(1, 0)], E[(-1, 0)])
    np.testing.assert_array_equal(E[(0, 1)], [0.5])
