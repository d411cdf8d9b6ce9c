"""Tests of nrgsolve.chain: star → Wilson chain in extended precision."""

import math

import mpmath
import numpy as np
import pytest
from scipy.linalg import eigh_tridiagonal

from nrgsolve.bath import make_bath
from nrgsolve.chain import (Chain, _tridiagonalize_fixed, build_chain, energy_scale, sites_needed, intervals_for_chain,
                            tridiagonalize)
from nrgsolve.discretize import Star, discretize
from nrgsolve.errors import NrgInputError, NrgNumericalError

ASYM_E = [-1.0, -0.6, -0.25, -0.05, 0.0, 0.1, 0.3, 0.55, 0.7]
ASYM_G = [0.2, 1.0, 0.6, 0.9, 0.8, 0.4, 1.1, 0.5, 0.0]


def wilson_closed_form(Lambda, n, d=1.0):
    """t_n of the flat band, Wilson scheme, z = 1 (Wilson 1975; Bulla, Costi, Pruschke 2008)."""
    n = np.asarray(n, dtype=float)
    return (d * (1 + 1 / Lambda) / 2 * (1 - Lambda ** (-n - 1))
            / np.sqrt((1 - Lambda ** (-2 * n - 1)) * (1 - Lambda ** (-2 * n - 3))) * Lambda ** (-n / 2))


def lanczos_reference(star, n_sites, dps):
    """Slow, obvious reference: mpmath Lanczos with full (double) reorthogonalization."""
    with mpmath.workdps(dps):
        e = [mpmath.mpf(float(x)) for x in star.energies]
        q = [mpmath.sqrt(mpmath.mpf(float(w))) for w in star.weights]
        norm = mpmath.sqrt(mpmath.fdot(q, q))
        q = [x / norm for x in q]
        basis, onsite, hopping = [q], [], []
        for n in range(n_sites):
            v = [a * b for a, b in zip(e, q)]
            onsite.append(mpmath.fdot(q, v))
            if n == n_sites - 1:
                break
            for _ in range(2):
                for b in basis:
                    c = mpmath.fdot(b, v)
                    v = [x - c * y for x, y in zip(v, b)]
            t = mpmath.sqrt(mpmath.fdot(v, v))
            hopping.append(t)
            q = [x / t for x in v]
            basis.append(q)
        return np.array([float(x) for x in onsite]), np.array([float(x) for x in hopping])


@pytest.mark.parametrize("Lambda", [2.0, 3.0])
def test_flat_band_wilson_chain_matches_closed_form(Lambda):
    """Flat band, Wilson scheme, z = 1: t_n closed form to 1e-12 for n ≤ 80, ε_n = 0,
    coupling_sq = 2D/π.

    Source: Wilson, Rev. Mod. Phys. 47, 773 (1975); Bulla, Costi, Pruschke,
    Rev. Mod. Phys. 80, 395 (2008).
    """
    chain = build_chain(make_bath("flat"), Lambda, 1.0, 81)
    np.testing.assert_allclose(chain.hopping, wilson_closed_form(Lambda, np.arange(80)), rtol=1e-12, atol=0)
    assert np.max(np.abs(chain.onsite)) < 1e-14 * chain.hopping[-1]
    assert chain.coupling_sq == pytest.approx(2 / math.pi, rel=1e-14)
    assert chain.n_sites == 81 and chain.Lambda == Lambda and chain.z == 1.0


def test_chain_scales_with_half_bandwidth():
    """All chain energies are proportional to D (closed form carries a factor D)."""
    chain = build_chain(make_bath("flat", half_bandwidth=2.5), 2.0, 1.0, 30)
    np.testing.assert_allclose(chain.hopping, wilson_closed_form(2.0, np.arange(29), d=2.5), rtol=1e-13)
    assert chain.coupling_sq == pytest.approx(2 * 2.5 / math.pi, rel=1e-14)


@pytest.mark.parametrize("z", [0.25, 0.5, 0.75, 1.0])
@pytest.mark.parametrize("scheme,limit", [("wilson", lambda L: (1 + 1 / L) / 2),
                                          ("adaptive", lambda L: (1 - 1 / L) / math.log(L))])
def test_hopping_asymptotics(z, scheme, limit):
    """t_n Λ^{n/2} → Λ^{1−z} · c for the flat band (and the semicircle, same g near 0).

    Wilson: c = D(1+Λ⁻¹)/2 (Wilson 1975; the Λ^{1−z} scaling of a twisted
    star: Oliveira & Oliveira, Phys. Rev. B 49, 11986 (1994), from memory — it
    follows since the low-energy star at twist z is the z = 1 star scaled by
    Λ^{1−z}).  Adaptive: below x = 2 the levels are Wilson's times 1/A_Λ
    (Campo & Oliveira 2005), so c = D(1−Λ⁻¹)/ln Λ.  Corrections fall like Λ^{-n}.
    """
    lam = 2.0
    n = np.arange(50, 70)
    expect = lam ** (1 - z) * limit(lam)
    for shape in ("flat", "semicircular"):
        chain = build_chain(make_bath(shape), lam, z, 71, scheme=scheme)
        np.testing.assert_allclose(chain.hopping[n] * lam ** (n / 2), expect, rtol=1e-12)


def test_power_law_chain_is_self_similar():
    """g = |ε|^r is scale invariant, so the star is self-similar and t_{n+2}/t_n → 1/Λ.

    Common practice, no source (follows from the scaling of the star).
    """
    lam = 2.0
    chain = build_chain(make_bath("power-law", exponent=0.5), lam, 0.7, 61, scheme="adaptive")
    ratio = chain.hopping[2:] / chain.hopping[:-2]
    np.testing.assert_allclose(ratio[40:], 1 / lam, rtol=1e-12)
    even_odd = chain.hopping[51] / chain.hopping[50] * math.sqrt(lam)
    assert abs(even_odd - 1) > 1e-3          # pseudogap chains alternate (not a flat-band chain)


@pytest.mark.parametrize("shape", ["flat", "semicircular", "power-law", "table"])
@pytest.mark.parametrize("scheme", ["wilson", "adaptive"])
@pytest.mark.parametrize("z", [0.3, 1.0])
def test_onsite_energies_vanish_for_particle_hole_symmetric_bath(shape, scheme, z):
    """g(−ε) = g(ε) ⇒ ε_n = 0 (here |ε_n| < 1e-14 t_n) — common practice, no source."""
    table = ([-1, -0.6, -0.2, 0, 0.2, 0.6, 1], [0.3, 0.9, 1.2, 1.0, 1.2, 0.9, 0.3])
    bath = make_bath(shape, exponent=0.5, table=table if shape == "table" else None)
    chain = build_chain(bath, 2.0, z, 60, scheme=scheme)
    scale = np.minimum(np.concatenate([chain.hopping, [np.inf]]), np.concatenate([[np.inf], chain.hopping]))
    assert np.all(np.abs(chain.onsite) < 1e-14 * scale)


def test_onsite_energies_nonzero_for_asymmetric_bath():
    """An asymmetric table gives ε_n ≠ 0 (contrast to the symmetric case)."""
    chain = build_chain(make_bath("table", table=(ASYM_E, ASYM_G)), 2.0, 0.5, 40, scheme="adaptive")
    assert np.max(np.abs(chain.onsite[:10]) / chain.hopping[:10]) > 1e-2


def _asymmetric_star(n_intervals, z=0.6):
    return discretize(make_bath("table", table=(ASYM_E, ASYM_G)), 2.0, z, n_intervals, "adaptive")


def test_full_length_chain_reproduces_the_star():
    """A chain as long as the star is exact: its eigenvalues are the levels E_i and the
    squared first eigenvector components times coupling_sq are the weights w_i.

    Checked in float64 (eigh_tridiagonal, absolute accuracy) and in mpmath
    (eigsy of the extended-precision chain, relative accuracy for the tiny
    levels as well).  Common practice, no source (Lanczos closure).
    """
    star = _asymmetric_star(12)
    m = star.energies.size
    chain = tridiagonalize(star, m)
    vals, vecs = eigh_tridiagonal(chain.onsite, chain.hopping)
    np.testing.assert_allclose(vals, star.energies, rtol=0, atol=2e-15)
    np.testing.assert_allclose(chain.coupling_sq * vecs[0] ** 2, star.weights, rtol=0, atol=2e-15)
    diag, off, bits = _tridiagonalize_fixed(star, m, bits=400)
    with mpmath.workdps(100):
        scale = mpmath.mpf(2) ** bits
        mat = mpmath.zeros(m, m)
        for i in range(m):
            mat[i, i] = mpmath.mpf(diag[i]) / scale
            if i + 1 < m:
                mat[i, i + 1] = mat[i + 1, i] = mpmath.mpf(off[i + 1]) / scale
        ev, q = mpmath.eigsy(mat)
        order = sorted(range(m), key=lambda i: ev[i])
        e_mp = np.array([float(ev[i]) for i in order])
        w_mp = np.array([float((mpmath.mpf(off[0]) / scale) ** 2 * q[0, i] ** 2) for i in order])
    np.testing.assert_allclose(e_mp, star.energies, rtol=1e-15)
    np.testing.assert_allclose(w_mp, star.weights, rtol=1e-14)


@pytest.mark.parametrize("n_sites", [4, 6, 10])
def test_short_chain_reproduces_low_moments(n_sites):
    """Gauss quadrature property: a chain of n sites reproduces the moments
    Σ_i w_i E_i^k for k ≤ 2n − 1 exactly; for k = 2n it misses by exactly
    coupling_sq · (t_0 t_1 … t_{n−1})², the norm of the monic orthogonal
    polynomial of degree n (t_{n−1} taken from a longer chain).

    Common practice, no source (Gauss quadrature / Lanczos).
    """
    star = _asymmetric_star(30)
    chain = tridiagonalize(star, n_sites)
    longer = tridiagonalize(star, n_sites + 1)
    jac = np.diag(chain.onsite) + np.diag(chain.hopping, 1) + np.diag(chain.hopping, -1)
    vec = np.zeros(n_sites)
    vec[0] = 1.0
    power = vec.copy()
    for k in range(2 * n_sites + 1):
        from_chain = chain.coupling_sq * (vec @ power)
        exact = math.fsum((star.weights * star.energies ** k).tolist())
        size = math.fsum((star.weights * np.abs(star.energies) ** k).tolist())
        if k <= 2 * n_sites - 1:
            assert abs(from_chain - exact) < 1e-13 * size, k
        elif n_sites <= 6:          # the miss is resolvable in float64
            miss = chain.coupling_sq * np.prod(longer.hopping ** 2)
            assert miss > 1e-8 * size
            assert exact - from_chain == pytest.approx(miss, rel=1e-8)
        power = jac @ power


def test_tail_of_long_chain_matches_much_higher_precision():
    """120 sites at Λ = 2: default precision against 300 digits, to 1e-13 relative
    (flat Wilson z = 0.5, semicircle adaptive z = 0.3, asymmetric table).

    Also the z = 1 flat chain against Wilson's closed form (Wilson 1975).
    """
    cases = [(make_bath("flat"), 0.5, "wilson"), (make_bath("semicircular"), 0.3, "adaptive"),
             (make_bath("table", table=(ASYM_E, ASYM_G)), 0.8, "adaptive")]
    for bath, z, scheme in cases:
        star = discretize(bath, 2.0, z, intervals_for_chain(bath, 2.0, 120), scheme)
        fast = tridiagonalize(star, 120)
        slow = tridiagonalize(star, 120, digits=300)
        np.testing.assert_allclose(fast.hopping, slow.hopping, rtol=1e-13, atol=0)
        scale = np.concatenate([slow.hopping, slow.hopping[-1:]])
        assert np.all(np.abs(fast.onsite - slow.onsite) < 1e-13 * scale)
    flat = build_chain(make_bath("flat"), 2.0, 1.0, 120)
    np.testing.assert_allclose(flat.hopping, wilson_closed_form(2.0, np.arange(119)), rtol=1e-13)


def test_agrees_with_independent_mpmath_lanczos():
    """Rotation method (Gragg & Harrod 1984) against a plain mpmath Lanczos with full
    reorthogonalization at 60 digits, asymmetric star, 30 sites (STYLE rule 12)."""
    star = _asymmetric_star(22, z=0.35)
    onsite, hopping = lanczos_reference(star, 30, dps=60)
    chain = tridiagonalize(star, 30)
    np.testing.assert_allclose(chain.hopping, hopping, rtol=1e-13)
    assert np.all(np.abs(chain.onsite - onsite) < 1e-13 * np.concatenate([hopping, hopping[-1:]]))


def test_too_low_precision_is_detected():
    """Asking for 16 digits on a 120-site chain (t_n ~ 1e-18) is refused, not silently wrong."""
    star = discretize(make_bath("flat"), 2.0, 1.0, 60)
    with pytest.raises(NrgNumericalError, match="bits are too few"):
        tridiagonalize(star, 110, digits=16)


def test_breakdown_when_star_has_too_few_levels():
    """Lanczos closes after M steps: more sites than star levels is a breakdown."""
    star = Star(np.array([-0.5, -0.1, 0.0, 0.2, 0.7]), np.full(5, 0.1), 2.0, 1.0, "custom")
    with pytest.raises(NrgNumericalError, match=r"5 levels.*t_4"):
        tridiagonalize(star, 8)
    assert tridiagonalize(star, 5).hopping.size == 4


def test_breakdown_for_gapped_bath():
    """A table with a gap around ε = 0 has only a few nonzero-weight levels."""
    bath = make_bath("table", table=([-1, -0.1, -0.0999, 0.0999, 0.1, 1], [1, 1, 0, 0, 1, 1]))
    with pytest.raises(NrgNumericalError, match="Lanczos breakdown"):
        build_chain(bath, 2.0, 1.0, 30)


@pytest.mark.parametrize("scheme", ["wilson", "adaptive"])
def test_sites_needed_matches_definition(scheme):
    """n_sites = N + 2 for the smallest N ≥ 1 with T_N = ω_N/β̄ ≤ T, ω_N = D c_Λ Λ^{-(N-1)/2} Λ^{1-z}
    (project convention, DESIGN.md), by direct search."""
    def brute(t, lam, z, bb, d):
        c = (1 + 1 / lam) / 2 if scheme == "wilson" else (1 - 1 / lam) / math.log(lam)
        n = 1
        while d * c * lam ** (-(n - 1) / 2) * lam ** (1 - z) / bb > t:
            n += 1
        return n + 2

    for t, lam, z, bb, d in [(1e-10, 2.0, 1.0, 0.75, 1.0), (1e-6, 3.0, 0.5, 0.5, 1.0), (0.3, 2.5, 1.0, 1.0, 2.0),
                             (1e-14, 1.7, 0.25, 1.2, 1.0)]:
        assert sites_needed(t, lam, z, bb, d, scheme) == brute(t, lam, z, bb, d)


@pytest.mark.parametrize("scheme", ["wilson", "adaptive"])
def test_energy_scale_is_the_limit_of_the_hoppings(scheme):
    """t_{N−1}/ω_N → 1 along the flat-band chain at z = 1: ω_N is defined so that the hopping that adds
    site N is one in its units (Wilson 1975 for his scheme; Žitko & Pruschke 2009 for the adaptive one)."""
    lam = 2.5
    chain = build_chain(make_bath("flat"), lam, 1.0, 40, scheme=scheme)
    ratio = [chain.hopping[n - 1] / energy_scale(n, lam, 1.0, 1.0, scheme) for n in (30, 35, 38)]
    assert ratio == pytest.approx([1.0] * 3, rel=1e-9)


def test_tridiagonalize_rejects_bad_input():
    """n_sites < 1 and digits < 16 are input errors; Chain arrays are read-only."""
    star = discretize(make_bath("flat"), 2.0, 1.0, 10)
    with pytest.raises(NrgInputError, match="n_sites"):
        tridiagonalize(star, 0)
    with pytest.raises(NrgInputError, match="digits"):
        tridiagonalize(star, 5, digits=8)
    with pytest.raises(NrgInputError, match="discretization.Lambda"):
        build_chain(make_bath("flat"), 0.9, 1.0, 10)
    chain = tridiagonalize(star, 5)
    assert isinstance(chain, Chain)
    with pytest.raises(ValueError):
        chain.hopping[0] = 1.0
