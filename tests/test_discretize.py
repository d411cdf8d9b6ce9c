"""Tests of nrgsolve.discretize: logarithmic discretization into a star."""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from nrgsolve.bath import make_bath
from nrgsolve.discretize import Star, discretize, twists, wilson_correction_factor
from nrgsolve.errors import NrgInputError

ASYM_E = [-1.0, -0.6, -0.25, -0.05, 0.0, 0.1, 0.3, 0.55, 0.7]
ASYM_G = [0.2, 1.0, 0.6, 0.9, 0.8, 0.4, 1.1, 0.5, 0.0]
SIGMA = 0.25          # width of the log-Gaussian broadening, in ln ε


def _kernel(eps, energy):
    """Log-Gaussian of unit weight in ε, centred (in ln ε) on `energy`."""
    return np.exp(-np.log(eps / energy) ** 2 / (2 * SIGMA ** 2)) / (math.sqrt(2 * math.pi) * SIGMA * eps)


def _z_averaged(bath, Lambda, n_z, n_intervals, scheme, grid, correction=False):
    """π × z-averaged, broadened discrete hybridization on `grid` (one sign)."""
    acc = np.zeros(grid.size)
    for z in twists(n_z):
        star = discretize(bath, Lambda, z, n_intervals, scheme, correction)
        side = star.energies * np.sign(grid[0]) > 0
        acc += (star.weights[side][None, :] * _kernel(np.abs(grid)[:, None], np.abs(star.energies[side])[None, :])).sum(1)
    return np.pi * acc / n_z


def _broadened_reference(g, grid):
    """∫ g(E) K(ε, E) dE by scipy.integrate.quad (in ln E), same kernel."""
    out = []
    for e in np.abs(grid):
        sign = math.copysign(1.0, grid[0])
        f = lambda t: g(sign * math.exp(t)) * math.exp(t) * _kernel(e, math.exp(t))  # noqa: E731
        lo, hi = math.log(e) - 10 * SIGMA, min(0.0, math.log(e) + 10 * SIGMA)
        out.append(quad(f, lo, hi, epsabs=0, epsrel=1e-11, limit=200)[0])
    return np.array(out)


@pytest.mark.parametrize("Lambda", [2.0, 3.0])
def test_wilson_levels_flat_band_z1(Lambda):
    """Flat band, z = 1: E_m = ±D(1+Λ⁻¹)/2 Λ^{-m}, w_m = D(1−Λ⁻¹)Λ^{-m}/π.

    Source: Wilson, Rev. Mod. Phys. 47, 773 (1975); Krishna-murthy, Wilkins,
    Wilson, Phys. Rev. B 21, 1003 (1980).
    """
    n = 8
    star = discretize(make_bath("flat"), Lambda, 1.0, n)
    m = np.arange(n)
    e_pos = (1 + 1 / Lambda) / 2 * Lambda ** (-m.astype(float))
    w_pos = (1 - 1 / Lambda) * Lambda ** (-m.astype(float)) / math.pi
    np.testing.assert_allclose(star.energies, np.concatenate([-e_pos, e_pos[::-1]]), rtol=1e-15)
    np.testing.assert_allclose(star.weights, np.concatenate([w_pos, w_pos[::-1]]), rtol=1e-14)
    assert star.Lambda == Lambda and star.z == 1.0 and star.scheme == "wilson"


@pytest.mark.parametrize("z", [0.2, 0.5, 0.9])
def test_twisted_interval_boundaries(z):
    """Boundaries D, DΛ^{-z}, DΛ^{-1-z}, …: Wilson levels are their midpoints and
    the weights of the flat band their lengths/π (brief's definition; Oliveira &
    Oliveira, Phys. Rev. B 49, 11986 (1994) for the twist, from memory)."""
    lam, n, d = 2.5, 6, 2.0
    bounds = np.concatenate([[d], d * lam ** (-z - np.arange(n))])
    star = discretize(make_bath("flat", half_bandwidth=d), lam, z, n)
    pos = star.energies > 0
    np.testing.assert_allclose(star.energies[pos][::-1], 0.5 * (bounds[:-1] + bounds[1:]), rtol=1e-15)
    np.testing.assert_allclose(star.weights[pos][::-1], (bounds[:-1] - bounds[1:]) / math.pi, rtol=1e-14)
    assert star.total_weight == pytest.approx(2 * (d - bounds[-1]) / math.pi, rel=1e-14)


def test_weights_are_interval_integrals_of_semicircle():
    """w_j = (1/π)∫ g over the interval, against scipy.integrate.quad of √(1−ε²)."""
    lam, z, n = 2.0, 0.35, 10
    bounds = np.concatenate([[1.0], lam ** (-z - np.arange(n))])
    ref = [quad(lambda e: math.sqrt(1 - e * e), b, a, epsabs=0, epsrel=1e-13)[0] / math.pi
           for a, b in zip(bounds[:-1], bounds[1:])]
    for scheme in ("wilson", "adaptive"):
        star = discretize(make_bath("semicircular"), lam, z, n, scheme)
        np.testing.assert_allclose(star.weights[star.energies > 0][::-1], ref, rtol=1e-12)


@pytest.mark.parametrize("z", [0.25, 0.6, 1.0])
def test_adaptive_flat_band_closed_form(z):
    """Adaptive energies, flat band: E(x) = ε(x)(1−Λ⁻¹)/ln Λ for x = j+z ≥ 2, and on
    the first interval E = (1−z)D + D(1−Λ^{-z})/ln Λ.

    Source: Campo & Oliveira, Phys. Rev. B 72, 104432 (2005); Žitko & Pruschke,
    Phys. Rev. B 79, 085106 (2009); the first-interval value follows from
    F(E(x)) = ∫_x^{x+1} F(ε(x')) dx' with F(ε) = ε (derived in the module).
    """
    lam, n = 2.0, 12
    star = discretize(make_bath("flat"), lam, z, n, "adaptive")
    e = star.energies[star.energies > 0][::-1]
    x = np.arange(1, n + 1) + z
    expect = lam ** (2 - x) * (1 - 1 / lam) / math.log(lam)
    expect[0] = (1 - z) + (1 - lam ** (-z)) / math.log(lam) if z < 1 else expect[0]
    np.testing.assert_allclose(e, expect, rtol=1e-14)


def test_adaptive_power_law_closed_form():
    """g = |ε|^r: F = ε^{r+1}/(r+1), so E(x) = ε(x)[(1−Λ^{−r−1})/((r+1) ln Λ)]^{1/(r+1)}
    for x ≥ 2.  Source: same derivation as the flat band (Campo & Oliveira 2005)."""
    lam, r, z, n = 3.0, 0.5, 0.4, 15
    star = discretize(make_bath("power-law", exponent=r), lam, z, n, "adaptive")
    e = star.energies[star.energies > 0][::-1]
    x = np.arange(1, n + 1) + z
    factor = ((1 - lam ** (-r - 1)) / ((r + 1) * math.log(lam))) ** (1 / (r + 1))
    np.testing.assert_allclose(e[1:], (lam ** (2 - x) * factor)[1:], rtol=1e-14)


@pytest.mark.parametrize("shape", ["flat", "semicircular", "power-law", "table"])
def test_adaptive_energies_lie_inside_their_intervals(shape):
    """Every representative energy lies inside its interval (mean-value property of
    F(E) = ⟨F(ε(x'))⟩; common practice, no source)."""
    bath = make_bath(shape, exponent=1.5, table=(ASYM_E, ASYM_G) if shape == "table" else None)
    lam, z, n = 2.0, 0.3, 20
    star = discretize(bath, lam, z, n, "adaptive")
    bounds = np.concatenate([[1.0], lam ** (-z - np.arange(n))])
    for e in star.energies:
        j = np.searchsorted(-bounds, -abs(e))          # boundary above |e|
        assert bounds[j] <= abs(e) <= bounds[j - 1]


@pytest.mark.parametrize("name", ["semicircular", "power-law", "table"])
@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_adaptive_z_average_reproduces_hybridization(name, sign):
    """z-averaged adaptive discretization reproduces g(ε) (1e-3, bulk of the band).

    The z-average of Σ_j w_j δ(ε − E_j) over 64 twists, broadened with a
    log-Gaussian, is compared with the same broadening of the continuous g,
    integrated by scipy.integrate.quad from the closed form (semicircle,
    |ε|^0.5) or from numpy.interp of the table (an asymmetric table, both
    sides).  Source: Campo & Oliveira, Phys. Rev. B 72, 104432 (2005); Žitko &
    Pruschke, Phys. Rev. B 79, 085106 (2009).
    """
    closed = {
        "semicircular": lambda e: math.sqrt(max(1.0 - e * e, 0.0)),
        "power-law": lambda e: abs(e) ** 0.5,
        "table": lambda e: float(np.interp(e, ASYM_E, ASYM_G, left=0.0, right=0.0)),
    }[name]
    bath = make_bath(name, exponent=0.5, table=(ASYM_E, ASYM_G) if name == "table" else None)
    grid = sign * np.geomspace(1e-3, 0.8 if name != "table" else 0.6, 21)
    got = _z_averaged(bath, 2.0, 64, 30, "adaptive", grid)
    ref = _broadened_reference(closed, grid)
    np.testing.assert_allclose(got, ref, rtol=1e-3)
    # The same check fails for Wilson's scheme (next test explains by how much).
    wilson = _z_averaged(bath, 2.0, 64, 30, "wilson", grid)
    assert np.max(np.abs(wilson / ref - 1)) > 0.02


@pytest.mark.parametrize("Lambda", [2.0, 3.0])
def test_wilson_z_average_is_reduced_by_A_Lambda(Lambda):
    """Wilson scheme, flat band: z-averaged hybridization = g/A_Λ below D(1+Λ⁻¹)/2.

    Derivation: for x ≥ 2, E(x) = ε(x)(1+Λ⁻¹)/2 and πw(x) = ε(x)(1−Λ⁻¹), so
    π w/|dE/dx| = 2(1−Λ⁻¹)/((1+Λ⁻¹) ln Λ) = 1/A_Λ.  With Wilson's correction
    (weights × A_Λ) the low-energy hybridization is restored to g.  Source:
    Wilson 1975; Krishna-murthy, Wilkins, Wilson 1980 (A_Λ).
    """
    grid = np.geomspace(1e-4, 0.1, 15)
    ref = _broadened_reference(lambda e: 1.0, grid)
    plain = _z_averaged(make_bath("flat"), Lambda, 64, 40, "wilson", grid)
    np.testing.assert_allclose(plain / ref, 1 / wilson_correction_factor(Lambda), rtol=1e-4)
    fixed = _z_averaged(make_bath("flat"), Lambda, 64, 40, "wilson", grid, correction=True)
    np.testing.assert_allclose(fixed / ref, 1.0, rtol=1e-4)


def test_wilson_z_average_power_law_factor():
    """Wilson scheme, g = |ε|^r: z-average = g·(1−Λ^{−r−1})/[(r+1) ln Λ ((1+Λ⁻¹)/2)^{r+1}].

    Derivation as for the flat band (r = 0 gives 1/A_Λ); reference by quad.
    """
    lam, r = 2.0, 0.5
    grid = np.geomspace(1e-4, 0.1, 12)
    got = _z_averaged(make_bath("power-law", exponent=r), lam, 64, 40, "wilson", grid)
    ref = _broadened_reference(lambda e: abs(e) ** r, grid)
    factor = (1 - lam ** (-r - 1)) / ((r + 1) * math.log(lam) * ((1 + 1 / lam) / 2) ** (r + 1))
    np.testing.assert_allclose(got / ref, factor, rtol=1e-4)


def test_wilson_correction_factor_identity_and_limit():
    """A_Λ = (L/2) coth(L/2), L = ln Λ, hence A_Λ = 1 + L²/12 + O(L⁴) → 1 as Λ → 1.

    Source: algebra on Wilson's A_Λ (Wilson 1975); A_2 ≈ 1.0397 (from memory).
    """
    for lam in (1.01, 1.5, 2.0, 3.0, 10.0):
        L = math.log(lam)
        assert wilson_correction_factor(lam) == pytest.approx(L / 2 / math.tanh(L / 2), rel=1e-14)
    L = math.log(1.001)
    assert wilson_correction_factor(1.001) - 1 == pytest.approx(L * L / 12, rel=1e-3)
    assert wilson_correction_factor(2.0) == pytest.approx(1.0397, abs=1e-4)
    star = discretize(make_bath("flat"), 2.0, 1.0, 5, wilson_correction=True)
    plain = discretize(make_bath("flat"), 2.0, 1.0, 5)
    np.testing.assert_allclose(star.weights, plain.weights * wilson_correction_factor(2.0), rtol=1e-15)


@pytest.mark.parametrize("shape", ["flat", "semicircular", "power-law"])
@pytest.mark.parametrize("scheme", ["wilson", "adaptive"])
def test_symmetric_bath_gives_mirror_symmetric_star(shape, scheme):
    """g(−ε) = g(ε) ⇒ E_{−i} = −E_i and equal weights, exactly (common practice)."""
    star = discretize(make_bath(shape, exponent=0.7), 2.0, 0.45, 25, scheme)
    np.testing.assert_array_equal(star.energies, -star.energies[::-1])
    np.testing.assert_array_equal(star.weights, star.weights[::-1])


def test_zero_weight_intervals_are_dropped():
    """A table ending at ε = 0.1: the intervals above it carry no weight and are left out."""
    bath = make_bath("table", table=([-1, -0.5, 0.0, 0.05, 0.1], [1, 1, 1, 1, 1]))
    star = discretize(bath, 2.0, 1.0, 10, "adaptive")
    assert np.all(star.weights > 0)
    assert np.sum(star.energies > 0) == 10 - 3          # [1, .5], [.5, .25], [.25, .125] are empty
    assert star.total_weight == pytest.approx((1.0 + 0.1 - 2 * 2 ** -10) / math.pi, rel=1e-13)   # both sides stop at 2^-10


def test_twists():
    """z_k = k/n, k = 1..n (brief)."""
    np.testing.assert_array_equal(twists(1), [1.0])
    np.testing.assert_allclose(twists(4), [0.25, 0.5, 0.75, 1.0], rtol=0, atol=0)
    for bad in (0, -2, 1.5, True):
        with pytest.raises(NrgInputError, match="twists"):
            twists(bad)


@pytest.mark.parametrize("kwargs,key,allowed", [
    (dict(Lambda=1.0), "discretization.Lambda", "> 1"),
    (dict(Lambda=0.5), "discretization.Lambda", "> 1"),
    (dict(Lambda=float("nan")), "discretization.Lambda", "> 1"),
    (dict(z=0.0), "discretization.z", "(0, 1]"),
    (dict(z=1.2), "discretization.z", "(0, 1]"),
    (dict(z=float("nan")), "discretization.z", "(0, 1]"),
    (dict(n_intervals=0), "discretization.n_intervals", ">= 1"),
    (dict(n_intervals=2.5), "discretization.n_intervals", ">= 1"),
    (dict(scheme="logarithmic"), "discretization.scheme", '"wilson", "adaptive"'),
    (dict(scheme="adaptive", wilson_correction=True), "wilson_correction", "wilson"),
])
def test_discretize_rejects_bad_input(kwargs, key, allowed):
    """Bad discretization parameters raise NrgInputError naming the key and range."""
    args = dict(Lambda=2.0, z=1.0, n_intervals=5, scheme="wilson", wilson_correction=False)
    args.update(kwargs)
    with pytest.raises(NrgInputError, match=key) as info:
        discretize(make_bath("flat"), **args)
    assert allowed in str(info.value)


def test_star_validates_its_arrays():
    """A Star refuses unsorted energies and negative weights; its arrays are read-only."""
    with pytest.raises(NrgInputError, match="ascending"):
        Star(np.array([0.1, -0.1]), np.array([1.0, 1.0]), 2.0, 1.0, "custom")
    with pytest.raises(NrgInputError, match=">= 0"):
        Star(np.array([-0.1, 0.1]), np.array([1.0, -1.0]), 2.0, 1.0, "custom")
    star = Star(np.array([-0.1, 0.1]), np.array([1.0, 1.0]), 2.0, 1.0, "custom")
    with pytest.raises(ValueError):
        star.energies[0] = 3.0
