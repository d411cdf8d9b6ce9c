"""Impurity spectral functions (complete basis, full density matrix) and the linear conductance:
exact diagonalization, su2 against abelian, sum rules, the exact U = 0 answer, the Friedel sum
rule, the Kondo resonance, symmetries, the self-energy estimate, storage, plots and the command line."""

import math
import os
import tempfile

import numpy as np
import pytest
from scipy import integrate
from scipy.linalg import eigh

from nrgsolve.config import parse_config
from nrgsolve.engine import make_symmetry, EngineSettings
from nrgsolve.engine.fock import FockSpace
from nrgsolve.engine.iterate import Step
from nrgsolve.engine.operators import block_operator_coef
from nrgsolve.engine.reference import anderson_dense_spectrum
from nrgsolve.errors import ConfigError, NrgInputError
from nrgsolve.models import anderson_block
from nrgsolve.observables.spectral import (spectral_run, impurity_operators, broaden, frequency_grid,
                                           hilbert_transform)
from nrgsolve.observables.transport import linear_conductance
from nrgsolve.solve import solve

from conftest import wilson_hopping, omega, merged


# ---------------------------------------------------------------------------------------------
# helpers

def chain_spectra(eps_d, U, Gamma, N, kept, symmetry, temps, field=0.0, Lam=2.0, self_energy=False, **kw):
    """Spectral pass on Wilson's closed-form chain (impurity + sites 0..N), raw poles."""
    onsite = np.zeros(N + 1)
    hop = wilson_hopping(np.arange(N), Lam)
    V = math.sqrt(2 * Gamma / math.pi)
    sym = make_symmetry(symmetry)
    blk = anderson_block(eps_d, U, V, field)
    steps = [Step(n, (0.0,), ((V if n == 0 else hop[n - 1]),), omega(n, Lam)) for n in range(N + 1)]
    corr = (("G", "d", "d"), ("F", "dn", "d")) if self_energy else (("G", "d", "d"),)
    res, ds = spectral_run(sym.from_explicit(blk), -1, omega(-1, Lam), sym, steps, EngineSettings(kept_states=kept),
                           impurity_operators(sym, blk, self_energy), temps, corr, bins_per_decade=None, **kw)
    return res, ds, onsite, hop, V


def dense_weights(eps_d, U, V, field, onsite, hop, T, spin):
    """Exact poles of ⟨⟨d_σ; d†_σ⟩⟩ and ⟨⟨d_σ n_{-σ}; d†_σ⟩⟩ by dense diagonalization (built here)."""
    n = len(onsite)
    sp = FockSpace([(0, s) for _ in range(n + 1) for s in (1, -1)])
    nu, nd = sp.number(0), sp.number(1)
    H = eps_d * (nu + nd) + U * nu @ nd - 0.5 * field * (nu - nd)
    for s in range(2):
        h = sp.creator(s) @ sp.annihilator(2 + s)
        H += V * (h + h.T)
    for k in range(n - 1):
        for s in range(2):
            h = sp.creator(2 + 2 * k + s) @ sp.annihilator(4 + 2 * k + s)
            H += hop[k] * (h + h.T)
    E, W = eigh(H)
    np.testing.assert_allclose(E, anderson_dense_spectrum(eps_d, U, V, field, onsite, hop[:n - 1]), atol=1e-12)
    mode = 0 if spin > 0 else 1
    cdag = sp.creator(mode)
    F = W.T @ cdag @ W                                     # F[b, a] = ⟨b|d†_σ|a⟩
    Fn = W.T @ (cdag @ sp.number(1 - mode)) @ W           # ⟨b|d†_σ n_{-σ}|a⟩
    x = (E - E[0]) / T if T > 0 else np.where(E - E[0] < 1e-10, 0.0, np.inf)
    rho = np.exp(-x)
    rho /= rho.sum()
    both = rho[None, :] + rho[:, None]
    om = E[:, None] - E[None, :]
    return om.ravel(), (F * F * both).ravel(), (Fn * F * both).ravel()


def log_integral(om, A):
    """∫A dω by the trapezoid rule in ln|ω| on both sides plus the linear middle piece (written here)."""
    pos, neg = om > 0, om < 0
    total = np.trapezoid(A[pos] * om[pos], np.log(om[pos]))
    total += np.trapezoid((A[neg] * -om[neg])[::-1], np.log(-om[neg])[::-1])
    i = np.flatnonzero(om == 0)[0]
    return total + np.trapezoid(A[i - 1:i + 2], om[i - 1:i + 2])


def config(U, Gamma, level=None, kept=300, twists=2, Lam=3.0, lowest=1e-9, symmetry="su2", field=0.0,
           spectral="temperatures = [0.0]"):
    lev = "" if level is None else f"level = {level}"
    return f"""
[impurity]
model = "anderson"
interaction = {U}
hybridization = {Gamma}
field = {field}
{lev}
[discretization]
Lambda = {Lam}
twists = {twists}
scheme = "adaptive"
[run]
kept_states = {kept}
lowest_temperature = {lowest}
symmetry = "{symmetry}"
[spectral]
{spectral}
"""


def at(curves, w, t=0, c=0, improved=False):
    A = curves.improved if improved else curves.spectral
    return float(np.interp(w, curves.omega, A[t, c]))


def exact_resonant_level(om, eps_d, Gamma, D=1.0):
    """A = −(1/π) Im 1/(ω − ε_d − Σ), Σ = (Γ/π) ln|(ω+D)/(ω−D)| − iΓ θ(D − |ω|) (flat band, exact)."""
    re = (Gamma / math.pi) * np.log(np.abs((om + D) / (om - D)))
    im = np.where(np.abs(om) < D, -Gamma, 0.0)
    return -np.imag(1.0 / (om - eps_d - re - 1j * im)) / math.pi


@pytest.fixture(scope="module")
def symmetric():
    """Symmetric Anderson model U = 0.1, Γ = 0.01 (U/Γ = 10), T = 0 and 1e-5, self-energy, G(T)."""
    text = config(0.1, 0.01, spectral="temperatures = [0.0, 1e-5]\nself_energy = true\n"
                                      "conductance_temperatures = [1e-9, 1e-6, 1e-4, 1e-3, 1e-2]")
    return solve(parse_config(text), workers=1)


@pytest.fixture(scope="module")
def asymmetric():
    """Asymmetric Anderson model ε_d = −0.03, U = 0.1, Γ = 0.01, T = 0 and 1e-4."""
    text = config(0.1, 0.01, level=-0.03, spectral="temperatures = [0.0, 1e-4]\nconductance_temperatures = [1e-9]")
    return solve(parse_config(text), workers=1)


# ---------------------------------------------------------------------------------------------
# exact checks on short chains

@pytest.mark.parametrize("symmetry,field", [("su2", 0.0), ("abelian", 0.0), ("abelian", 0.04)])
@pytest.mark.parametrize("T", [0.0, 0.05])
def test_discrete_weights_match_dense_exact_diagonalization(symmetry, field, T):
    """Without truncation the full-density-matrix weights of ⟨⟨d; d†⟩⟩ and ⟨⟨d n; d†⟩⟩ equal the
    Lehmann sums of dense exact diagonalization of the same chain (slow reference; common practice,
    no source).  This checks the recoupling of d† through the site (sign (−1)^{n_site}, 6j factor)."""
    res, ds, onsite, hop, V = chain_spectra(-0.3, 0.5, 0.05, 2, 10 ** 6, symmetry, [T], field=field,
                                            self_energy=True)
    spins = [1] if symmetry == "su2" else [1, -1]
    for c, spin in enumerate(spins):
        om, wG, wF = dense_weights(-0.3, 0.5, V, field, onsite, hop, T, spin)
        for x, w in ((0, wG), (1, wF)):
            o1, w1 = merged(ds.omega[x, 0, c], ds.weight[x, 0, c])
            o2, w2 = merged(om, w)
            assert o1.shape == o2.shape
            np.testing.assert_allclose(o1, o2, atol=1e-10)
            np.testing.assert_allclose(w1, w2, atol=1e-11)


def test_su2_block_operator_coefficient_is_a_recoupling_with_the_site_sign():
    """Reduced-element coefficient of d† acting on the old block of |(S1, site) S⟩, checked
    against values worked out by hand from Clebsch–Gordan coefficients (common practice, no source):

    * spin-0 site (empty or doubly occupied, an even number of fermions): exactly +1;
    * singly occupied site (one fermion, sign −1): S1 = 0 → ½ with S = ½ → S' = 1 gives −1
      (d†_↑|0⟩|↑⟩ = −|↑⟩|↑⟩) and S' = 0 gives +1; S1 = ½ → 0 with S = 0 → ½ gives −½;
    * the strength sum rule Σ_{S'} (2S'+1) c² = (2S+1)(2S1'+1)/(2S1+1) (from Σ_q T_q†T_q)."""
    sym = make_symmetry("su2")
    doublet = [a for a, s in enumerate(sym.site) if s.label[-1] == 1][0]
    for a, site in enumerate(sym.site):
        if site.label[-1] == 0:
            for S1, S1p in ((0, 1), (1, 0), (1, 2), (2, 1), (3, 2)):
                assert block_operator_coef(sym, 0, (0, S1), a, (0, S1), (1, S1p), (1, S1p)) == pytest.approx(1.0)
    c = lambda S1, S, S1p, Sp: block_operator_coef(sym, 0, (0, S1), doublet, (0, S), (1, S1p), (1, Sp))
    assert c(0, 1, 1, 2) == pytest.approx(-1.0)
    assert c(0, 1, 1, 0) == pytest.approx(1.0)
    assert c(1, 0, 0, 1) == pytest.approx(-0.5)
    for S1, S, S1p in ((0, 1, 1), (1, 0, 0), (1, 2, 0), (1, 0, 2), (1, 2, 2), (2, 1, 1), (2, 3, 3), (3, 2, 2)):
        total = sum((Sp + 1) * c(S1, S, S1p, Sp) ** 2 for Sp in (S1p - 1, S1p + 1) if Sp >= 0)
        assert total == pytest.approx((S + 1) * (S1p + 1) / (S1 + 1))


def test_su2_and_abelian_agree_with_truncation():
    """At zero field the su2 and abelian passes keep the same states and give the same discrete
    weights, also with truncation and at finite temperature (common practice, no source)."""
    kw = dict(eps_d=-0.25, U=0.4, Gamma=0.04, N=12, kept=120, temps=[0.0, 2e-3])
    _, a, _, _, _ = chain_spectra(symmetry="su2", **kw)
    _, b, _, _, _ = chain_spectra(symmetry="abelian", **kw)
    for t in range(2):
        o1, w1 = merged(a.omega[0, t, 0], a.weight[0, t, 0], 1e-9)
        for c in range(2):
            o2, w2 = merged(b.omega[0, t, c], b.weight[0, t, c], 1e-9)
            assert o1.shape == o2.shape
            np.testing.assert_allclose(o1, o2, atol=1e-9)
            np.testing.assert_allclose(w1, w2, atol=1e-10)


@pytest.mark.parametrize("symmetry", ["su2", "abelian"])
def test_discrete_weights_sum_to_one_at_every_temperature(symmetry):
    """Σ weights = Tr ρ{d, d†} = 1 to 1e-10 with truncation, at T = 0 and at finite T; the hole
    part is ⟨n_dσ⟩ and the F weights sum to ⟨{d_σ n_{-σ}, d†_σ}⟩ = ⟨n_{d,-σ}⟩
    (common practice, no source)."""
    temps = [0.0, 1e-6, 1e-3, 0.3]
    _, ds, _, _, _ = chain_spectra(-0.2, 0.3, 0.03, 16, 150, symmetry, temps, field=0.0, self_energy=True)
    np.testing.assert_allclose(ds.total[0], 1.0, atol=1e-10)
    assert np.all(np.abs(ds.weight[0].sum(axis=-1) - 1.0) < 1e-10)
    n_sigma = ds.lesser[0]                                   # (T, comp)
    assert np.all((n_sigma > 0.5) & (n_sigma < 1.0))         # level below the Fermi energy
    other = n_sigma if symmetry == "su2" else n_sigma[:, ::-1]
    np.testing.assert_allclose(ds.total[1], other, atol=1e-10)
    np.testing.assert_allclose(ds.occupation, 2 * n_sigma.mean(axis=1), atol=1e-12)


def test_spilled_vectors_give_the_same_spectrum_and_are_deleted():
    """Eigenvectors spilled to a temporary HDF5 file (memory budget 0) give the same weights (up to
    roundoff: the arrays come back in another memory order), and the file is gone afterwards
    (common practice, no source)."""
    folder = tempfile.mkdtemp(prefix="nrgsolve_spill_test_")
    kw = dict(eps_d=-0.15, U=0.3, Gamma=0.03, N=10, kept=80, symmetry="su2", temps=[0.0, 1e-3])
    _, mem, _, _, _ = chain_spectra(**kw)
    _, disk, _, _, _ = chain_spectra(memory_budget=0.0, spill_folder=folder, **kw)
    assert disk.spilled_bytes > 0 and mem.spilled_bytes == 0
    np.testing.assert_allclose(mem.weight, disk.weight, rtol=1e-12, atol=1e-16)
    assert os.listdir(folder) == []
    os.rmdir(folder)


# ---------------------------------------------------------------------------------------------
# physics of whole runs

def test_broadened_spectrum_is_normalized(symmetric, asymmetric):
    """After log-Gaussian broadening and z-averaging ∫A dω = 1 within 1e-3, at T = 0 and T > 0
    (spectral sum rule; common practice, no source)."""
    for res in (symmetric, asymmetric):
        c = res.spectral
        for t in range(len(c.temperatures)):
            assert log_integral(c.omega, c.spectral[t, 0]) == pytest.approx(1.0, abs=1e-3)
        for tw in res.twists:
            np.testing.assert_allclose(tw.spectral.total[0], 1.0, atol=1e-10)


@pytest.mark.slow
def test_resonant_level_matches_exact_finite_band_spectral_function():
    """U = 0, ε_d = 0.005, Γ = 0.01: the z-averaged A(ω) follows the exact finite-band
    A = −(1/π) Im 1/(ω − ε_d − Σ), Σ = (Γ/π) ln|(ω+D)/(ω−D)| − iΓ (computed here; textbook) within 3 %
    for 1e-4 ≤ |ω| ≤ 0.5 D at T = 0, 1e-4, 1e-3, 3e-3 and Γ, as A does not depend on T at U = 0.
    Settings: Λ = 3, 8 twists, 800 states, b = 0.4 (measured 2.5 %, 1.5 %, 1.3 %, 1.1 %, 2.5 %; the
    largest errors sit near ω ≈ 2.5e-3 at T = 0 and just below |ω| ≈ T at T = Γ).  At Λ = 2 with
    4 twists and 800 states the NRG weights themselves were off by 3.4–3.6 % (against the exact poles
    of the same chains, broadened alike: 1 %), so Λ = 3 with more twists is the better use of the time.
    The total weight is 1 within 1e-3 (measured ~1e-6), also at the default b = 0.5, where A is
    within 3 % too (measured 2.6 %).  The linear conductance is within 1 % of the exact integral
    ∫(−f')πΓA for every T ≤ Γ, and the T-matrix is πΓ A_d against the exact one."""
    from scipy.special import expit
    from nrgsolve.observables.spectral import DEFAULT_BROADENING, average_spectra
    text = config(0.0, 0.01, level=0.005, kept=800, twists=8, Lam=3.0, lowest=1e-6,
                  spectral="temperatures = [0.0, 1e-4, 1e-3, 3e-3, 1e-2]\nbroadening = 0.4\n"
                           "quantities = [\"impurity\", \"t-matrix\"]\n"
                           "conductance_temperatures = [1e-4, 1e-3, 3e-3, 1e-2]")
    # the spectral part of the driver only (the flow's fixed-point labels are not needed here)
    from nrgsolve.solve import solve_twist, bath_from_spec, _spectral_outputs
    from nrgsolve.discretize import twists as twist_values
    spec = parse_config(text)
    bath = bath_from_spec(spec)
    twists = [solve_twist(spec, float(z), None, bath) for z in twist_values(8)]
    c, transport, _alloy = _spectral_outputs(spec, twists, bath)
    om = c.omega
    sel = (np.abs(om) >= 1e-4) & (np.abs(om) <= 0.5)
    ex = exact_resonant_level(om, 0.005, 0.01)
    for i in range(len(c.temperatures)):
        np.testing.assert_allclose(c.spectral[i, 0][sel], ex[sel], rtol=0.03)
        np.testing.assert_allclose(c.dynamics.curves["t-matrix"][i, 0][sel], math.pi * 0.01 * ex[sel], rtol=0.03)
        assert log_integral(om, c.spectral[i, 0]) == pytest.approx(1.0, abs=1e-3)
    default = average_spectra([t.spectral for t in twists], DEFAULT_BROADENING)
    assert default.broadening == 0.5
    ex = exact_resonant_level(default.omega, 0.005, 0.01)
    sel = (np.abs(default.omega) >= 1e-4) & (np.abs(default.omega) <= 0.5)
    for i in range(len(default.temperatures)):
        assert log_integral(default.omega, default.spectral[i, 0]) == pytest.approx(1.0, abs=1e-3)
        np.testing.assert_allclose(default.spectral[i, 0][sel], ex[sel], rtol=0.03)
    for T, g in zip(transport.temperature, transport.conductance):
        f = lambda w: math.pi * 0.01 * exact_resonant_level(np.array([w]), 0.005, 0.01)[0] * expit(w / T) * expit(-w / T) / T
        exact = integrate.quad(f, -1, 1, points=[0.005, 0.0], limit=400)[0]
        assert g == pytest.approx(exact, rel=0.01)


def test_friedel_sum_rule_and_zero_temperature_conductance(symmetric, asymmetric):
    """T = 0 (T ≪ T_K): πΓA(0) = sin²(π⟨n_d⟩/2) within 3 % for the symmetric and an asymmetric
    model (Langreth, Phys. Rev. 150, 516 (1966)), and hence G(T→0) = (2e²/h) sin²(π⟨n_d⟩/2)
    (Meir & Wingreen, PRL 68, 2512 (1992))."""
    for res, n_expect in ((symmetric, 1.0), (asymmetric, None)):
        c = res.spectral
        n = float(c.occupation[0])
        if n_expect is not None:
            assert n == pytest.approx(n_expect, abs=1e-8)
        else:
            assert 0.8 < n < 0.97
        friedel = math.sin(math.pi * n / 2) ** 2
        assert math.pi * 0.01 * at(c, 0.0) == pytest.approx(friedel, rel=0.03)
        tk = res.summary.kondo_temperature_crossover
        assert math.pi * 0.01 * at(c, tk / 100) == pytest.approx(friedel, rel=0.03)   # the plateau
        g0 = res.transport.conductance[0]
        assert res.transport.temperature[0] == 1e-9
        assert g0 == pytest.approx(friedel, rel=0.03)


def test_conductance_falls_with_temperature_through_kondo_scale(symmetric):
    """G(T) of the symmetric model: unitary for T ≪ T_K, about half near T_K, small far above it
    (Kondo effect in a dot; Meir & Wingreen 1992 for the formula; values: common practice)."""
    tr = symmetric.transport
    tk = symmetric.summary.kondo_temperature_crossover
    g = dict(zip(tr.temperature, tr.conductance))
    assert g[1e-9] > 0.97 and g[1e-6] > 0.97
    assert np.all(np.diff(tr.conductance) < 0)
    assert 0.3 < float(np.interp(math.log(tk), np.log(tr.temperature), tr.conductance)) < 0.9
    assert g[1e-2] < 0.3


def test_symmetric_spectrum_is_even(symmetric):
    """At the particle-hole symmetric point A(ω) = A(−ω) (symmetry; common practice, no source)."""
    c = symmetric.spectral
    for t in range(len(c.temperatures)):
        A = c.spectral[t, 0]
        np.testing.assert_allclose(A, A[::-1], rtol=1e-6, atol=1e-9 * A.max())


def test_field_splits_spins_into_mirror_images():
    """Symmetric model in a field h (abelian mode): A_↑(ω) = A_↓(−ω), the spins differ, and the
    Friedel sum rule holds per spin, πΓA_σ(0) = sin²(π⟨n_dσ⟩) (particle-hole symmetry; Langreth 1966)."""
    text = config(0.1, 0.01, kept=200, twists=2, lowest=1e-8, symmetry="abelian", field=0.002)
    res = solve(parse_config(text), workers=1)
    c = res.spectral
    assert c.components == ("up", "down")
    up, dn = c.spectral[0, 0], c.spectral[0, 1]
    np.testing.assert_allclose(up, dn[::-1], rtol=1e-5, atol=1e-8 * up.max())
    assert np.max(np.abs(up - dn)) > 0.2 * up.max()
    lesser = np.mean([t.spectral.lesser[0, 0] for t in res.twists], axis=0)     # ⟨n_dσ⟩ per spin
    assert lesser[0] > 0.6 and lesser[1] == pytest.approx(1 - lesser[0], abs=1e-6)
    for s in range(2):
        assert math.pi * 0.01 * at(c, 0.0, c=s) == pytest.approx(math.sin(math.pi * lesser[s]) ** 2, rel=0.03)


def test_self_energy_estimate(symmetric, asymmetric):
    """Σ = U F/G (Bulla, Hewson, Pruschke 1998): at the symmetric point Re Σ(0) = U/2 (Hartree
    term) and Im Σ(0) ≈ 0 with −Im Σ growing away from ω = 0 (Fermi liquid); the improved A obeys
    the Friedel sum rule; the F function carries weight ⟨n_{d,−σ}⟩ = 1/2 (common practice, no source)."""
    c = symmetric.spectral
    om = c.omega
    i0 = int(np.flatnonzero(om == 0)[0])
    assert c.self_energy[0, 0, i0].real == pytest.approx(0.05, rel=1e-3)
    # the raw ratio (before the library clips Im Σ > 0 noise): Fermi liquid, −Im Σ rises from ≈ 0
    G = hilbert_transform(om, c.spectral[0, 0], om) - 1j * math.pi * c.spectral[0, 0]
    F = hilbert_transform(om, c.correlator_f[0, 0], om) - 1j * math.pi * c.correlator_f[0, 0]
    sigma = 0.1 * F / G
    tk = symmetric.summary.kondo_temperature_crossover
    im = lambda w: float(np.interp(w, om, sigma.imag))
    assert abs(sigma[i0].imag) < 0.01 * 0.01
    # (−Im Σ ∝ ω² is raised by e^{6 b²/4} = 1.7 by the uncorrected log-Gaussian; corrected it is
    # 4.2e-4 at T_K, 9 × the noise at ω = 0)
    assert im(3 * tk) < im(tk) < -5 * abs(sigma[i0].imag)
    assert math.pi * 0.01 * at(c, 0.0, improved=True) == pytest.approx(1.0, rel=0.01)
    assert log_integral(om, c.correlator_f[0, 0]) == pytest.approx(0.5, abs=1e-3)
    assert log_integral(om, c.improved[0, 0]) == pytest.approx(1.0, abs=3e-3)
    # asymmetric model has no self-energy request: the plain estimate only
    assert asymmetric.spectral.improved is None


def test_spectral_occupation_matches_thermodynamics(asymmetric):
    """⟨n_d⟩ from the spectral pass (full density matrix) agrees with the conventional iteration
    average at the same temperature (two independent NRG estimates; common practice, no source)."""
    th = asymmetric.thermo
    c = asymmetric.spectral
    n_thermo = float(np.interp(math.log(1e-4), np.log(th.temperature), th.extra["occupation"]))
    assert c.temperatures[1] == 1e-4
    assert c.occupation[1] == pytest.approx(n_thermo, abs=5e-3)


def test_kondo_resonance_width_scales_with_kondo_temperature(symmetric):
    """Half width at half maximum of the Kondo resonance / T_K (crossover definition from the
    thermodynamics) is the same for U/Γ = 6, 10, 14 within 20 % (universality of the Kondo
    resonance; Krishna-murthy, Wilkins, Wilson 1980 for T_K; common practice)."""
    def hwhm(c):
        x, y = c.omega[c.omega >= 0], c.spectral[0, 0][c.omega >= 0]
        k = int(np.flatnonzero(y < 0.5 * y[0])[0])
        return math.exp(np.interp(0.5 * y[0], [y[k], y[k - 1]], [math.log(x[k]), math.log(x[k - 1])]))

    ratios, tks = [], []
    for U in (0.06, 0.1, 0.14):
        res = symmetric if U == 0.1 else solve(parse_config(config(U, 0.01, lowest=1e-10)), workers=1)
        tk = res.summary.kondo_temperature_crossover
        tks.append(tk)
        ratios.append(hwhm(res.spectral) / tk)
    assert tks[0] > 3 * tks[1] and tks[1] > 3 * tks[2]   # T_K falls exponentially with U/Γ
    assert max(ratios) / min(ratios) < 1.2


# ---------------------------------------------------------------------------------------------
# kernels

def test_broadening_conserves_weight_and_a_flat_density():
    """Poles away from the Gaussian region keep their weight, and a logarithmic comb with weights
    ∝ dω (both signs, 8 poles per decade) broadens to the flat density it samples,
    also through the crossover to the Gaussian at ω = 0 (log-Gaussian of Weichselbaum & von Delft
    2007; the e^{−b²/4} form would give 0.91 instead; common practice, no source)."""
    grid = frequency_grid(1e-10, 1e3, 40)
    for w0, poles in ((0.0, (3e-3, -0.2, 1e-5)), (1e-6, (3e-3, -0.2, 1e-4))):
        for p in poles:
            A = broaden([p], [1.0], grid, 0.6, w0)
            assert log_integral(grid, A) == pytest.approx(1.0, abs=1e-3)
    edges = np.logspace(-8, 0, 8 * 8 + 1)
    centres = np.sqrt(edges[1:] * edges[:-1])
    poles = np.concatenate([-centres, centres])
    weights = np.concatenate([np.diff(edges)] * 2)
    flat = broaden(poles, weights, grid, 0.6, 0.0)
    sel = (np.abs(grid) > 1e-6) & (np.abs(grid) < 1e-2)
    np.testing.assert_allclose(flat[sel], 1.0, rtol=0.01)
    low = broaden(poles, weights, grid, 0.6, 1e-6)           # Gaussian bridging the empty |ω| < 1e-8
    sel = np.abs(grid) < 1e-2
    np.testing.assert_allclose(low[sel], 1.0, rtol=0.02)
    assert log_integral(grid, low) == pytest.approx(log_integral(grid, flat), abs=1e-3)
    with pytest.raises(NrgInputError, match="spectral.broadening"):
        broaden([1.0], [1.0], grid, 0.0)


@pytest.mark.parametrize("b", [0.4, 0.6])
def test_every_pole_keeps_its_weight_through_the_crossover_at_zero_frequency(b):
    """Poles at and around the crossover to the linear broadening (ω_p/ω_0 = 0 … 6, both signs) each
    keep weight 1 within 1e-4, and a flat density of poles on both sides stays flat within 0.5 %
    through ω = 0, with the bias correction too (spectral sum rule, common practice, no source;
    the former mixture h L + (1 − h) G gave 0.89 for a pole at ω = 0 and 1.08 at 1.5 ω_0)."""
    w0 = 1e-3
    grid = frequency_grid(1e-8, 1e2, 60)
    for p in (0.0, 0.3, -0.7, 1.0, 1.5, -2.0, 3.0, 6.0):
        A = broaden([p * w0], [1.0], grid, b, w0)
        assert log_integral(grid, A) == pytest.approx(1.0, abs=1e-4)
    edges = np.logspace(-9, 1, 10 * 40 + 1)
    centres = np.sqrt(edges[1:] * edges[:-1])
    for corrected in (False, True):
        flat = broaden(np.concatenate([-centres, centres]), np.concatenate([np.diff(edges)] * 2), grid, b, w0,
                       corrected=corrected)
        sel = np.abs(grid) < 1e-1
        np.testing.assert_allclose(flat[sel], 1.0, rtol=5e-3)


def test_z_average_clips_only_the_average():
    """Twists broadened with b well below ln Λ are spiky, and the bias correction of a single twist then
    dips below zero.  A Lorentzian (width 1e-3) sampled by 8 twists at Λ = 3 (one pole per interval,
    carrying the interval's exact weight) and broadened with b = 0.2: averaging the twists before
    correcting and clipping keeps ∫A dω equal to the discrete weight within 1e-3, where clipping one
    twist alone adds 7 % (spectral sum rule, common practice, no source)."""
    from nrgsolve.observables.spectral import DiscreteSpectrum, average_spectra
    lam, twists, g = 3.0, 8, 1e-3
    grid = frequency_grid(1e-10, 1e3, 100)
    spectra = []
    for z in (np.arange(twists) + 1) / twists:
        edges = lam ** (2 - (np.arange(40) + z))
        om = np.sqrt(edges[1:] * edges[:-1])
        w = (np.arctan(edges[:-1] / g) - np.arctan(edges[1:] / g)) / math.pi
        pole = np.concatenate([-om, om])[None, None, None, :]
        weight = np.concatenate([w, w])[None, None, None, :]
        spectra.append(DiscreteSpectrum(temperatures=np.array([0.0]), components=("up",), correlators=("G",),
                                        omega=pole, weight=weight, total=weight.sum(axis=-1),
                                        lesser=0.5 * weight.sum(axis=-1), lowest_scale=edges[-1]))
    total = float(spectra[0].weight.sum())
    c = average_spectra(spectra, broadening=0.2, grid=grid)
    assert log_integral(grid, c.spectral[0, 0]) == pytest.approx(total, abs=1e-3)
    one = spectra[0]
    single = broaden(one.omega[0, 0, 0], one.weight[0, 0, 0], grid, 0.2, 2 * one.lowest_scale, corrected=True)
    assert log_integral(grid, single) > total + 0.05           # what clipping one twist alone does


def test_hilbert_transform_of_a_lorentzian():
    """P∫ A(x)/(ω − x) dx for A = (γ/π)/(x² + γ²) is ω/(ω² + γ²) (textbook); the tails beyond the
    grid (|x| > 10³) change it by less than (γ/π)·2/10³."""
    grid = frequency_grid(1e-6, 1e3, 60)
    g = 0.01
    A = (g / math.pi) / (grid ** 2 + g ** 2)
    om = np.array([-0.05, -0.01, -1e-3, 0.0, 2e-3, 0.01, 0.1])
    got = hilbert_transform(grid, A, om)
    L = grid[-1]
    tails = (g / math.pi) * (2 / L)
    exact = om / (om ** 2 + g ** 2)
    np.testing.assert_allclose(got, exact, rtol=2e-3, atol=10 * tails)


def test_conductance_kernel_matches_direct_quadrature():
    """G(T)/(2e²/h) = ∫(−∂f/∂ω) πΓ A dω for a Lorentzian A of width Γ, against scipy.integrate.quad
    (Meir & Wingreen 1992; quadrature computed independently here)."""
    g = 0.01
    grid = frequency_grid(1e-9, 10.0, 40)
    A = (g / math.pi) / (grid ** 2 + g ** 2)
    temps = np.array([0.0, 1e-4, 3e-3, 0.02])
    got = linear_conductance(grid, np.tile(A, (len(temps), 1)), temps, g)

    def direct(T):
        if T == 0:
            return 1.0
        f = lambda w: (1 / (4 * T * math.cosh(w / (2 * T)) ** 2)) * g * g / (w * w + g * g)
        return integrate.quad(f, -60 * T, 60 * T, points=[0.0], limit=200)[0]

    np.testing.assert_allclose(got, [direct(T) for T in temps], rtol=2e-3)


# ---------------------------------------------------------------------------------------------
# config, storage, plots and command line

@pytest.mark.parametrize("text,key", [
    ("temperatures = [-1.0]", "spectral.temperatures"),
    ("temperatures = [0.0]\nbroadening = 0.0", "spectral.broadening"),
    ("temperatures = [0.0]\npoints_per_decade = 1", "spectral.points_per_decade"),
    ("temperatures = [0.0]\nmemory_budget = 0", "spectral.memory_budget"),
    ("conductance_temperatures = [0.0]", "spectral.conductance_temperatures"),
    ("conductance_temperatures = { start = 1e-3, stop = 1e-5, points = 4 }", "spectral.conductance_temperatures"),
    ("temperatures = [2.0]", "spectral.temperatures"),
    ("temperatures = [0.0]\nbroadning = 0.5", "broadening"),
])
def test_spectral_config_errors_name_the_key(text, key):
    """Bad [spectral] input is one line naming the key and the allowed range (project rule)."""
    with pytest.raises(ConfigError) as err:
        parse_config(f'[impurity]\nmodel = "anderson"\n[spectral]\n{text}\n')
    msg = str(err.value)
    assert key in msg and "\n" not in msg


def test_spectral_table_is_optional_and_kondo_models_are_refused():
    """No [spectral] table (or one without temperatures): no spectral pass; a Kondo model cannot
    ask for d-level spectra (it gets the T-matrix by default)."""
    assert not parse_config('[impurity]\nmodel = "anderson"\n').spectral.requested
    assert not parse_config('[impurity]\nmodel = "anderson"\n[spectral]\nbroadening = 0.4\n').spectral.requested
    spec = parse_config('[impurity]\nmodel = "anderson"\n[spectral]\nconductance_temperatures = '
                        '{ start = 1e-6, stop = 1e-2, points = 5 }\n')
    assert spec.spectral.requested and len(spec.spectral.conductance_temperatures) == 5
    with pytest.raises(ConfigError, match="spectral.quantities.*impurity.model"):
        parse_config('[impurity]\nmodel = "kondo"\n[spectral]\ntemperatures = [0.0]\nquantities = ["impurity"]\n')
    with pytest.raises(ConfigError, match="spectral.conductance_temperatures.*impurity.model"):
        parse_config('[impurity]\nmodel = "kondo"\n[spectral]\nconductance_temperatures = [0.01]\n')
    kondo = parse_config('[impurity]\nmodel = "kondo"\n[spectral]\ntemperatures = [0.0]\n').spectral
    assert kondo.requested and kondo.quantities_for(False) == ("t-matrix",)


def test_stored_spectra_and_plot_commands(symmetric, tmp_path):
    """/spectral and /transport datasets with units; `nrgsolve plot spectral|conductance` write PNGs."""
    from nrgsolve.cli import main
    from nrgsolve.store import read_result, write_result

    path = write_result(symmetric, tmp_path / "run.h5")
    st = read_result(path)
    c = symmetric.spectral
    np.testing.assert_array_equal(st.spectral["omega"], c.omega)
    assert st.spectral["A"].shape == (2, len(c.omega))
    np.testing.assert_array_equal(st.spectral["A"], c.spectral[:, 0])
    np.testing.assert_array_equal(st.spectral["temperature"], [0.0, 1e-5])
    np.testing.assert_allclose(st.spectral["occupation"], 1.0, atol=1e-8)
    assert "A_improved" in st.spectral and "self_energy_imag" in st.spectral
    np.testing.assert_array_equal(st.transport["conductance"], symmetric.transport.conductance)
    import h5py
    with h5py.File(path) as h:
        assert h["spectral/A"].attrs["units"] == "1/D"
        assert h["transport/conductance"].attrs["units"] == "2e^2/h"
    for kind, name in (("spectral", "a.png"), ("conductance", "g.png")):
        out = tmp_path / name
        assert main(["plot", kind, str(path), "-o", str(out), "-q"]) == 0
        assert out.stat().st_size > 1000 and out.with_suffix(".pdf").exists()
    assert main(["plot", "spectral", str(tmp_path / "missing.h5"), "-o", str(tmp_path / "x.png"), "-q"]) == 2
