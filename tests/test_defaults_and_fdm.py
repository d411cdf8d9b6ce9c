"""Right by default: the default discretization reproduces the continuum, full-density-matrix
thermodynamics (the default) against exact answers and the conventional method, the exact Wilson number."""

import math

import numpy as np
import pytest

from nrgsolve.config import parse_config, SCHEMA
from nrgsolve.solve import solve
from nrgsolve.observables.kondo_scale import WILSON_NUMBER, WILSON_NUMBER_NUMERICAL
from nrgsolve.observables.thermo_fdm import chain_thermodynamics, shell_states
from nrgsolve.observables.thermo import free_chain_thermodynamics

from test_thermodynamics import resonant_level_exact

LN2, LN4 = math.log(2), math.log(4)


def run(text, workers=2):
    return solve(parse_config(text), workers=workers)


def kondo(rhoJ=0.15, extra_disc="", extra_run="", lowest=1e-8):
    return f"""
[impurity]
model = "kondo"
exchange = {rhoJ}
[discretization]
{extra_disc}
[run]
lowest_temperature = {lowest}
{extra_run}
"""


def anderson(extra_disc="", extra_run="", lowest=1e-10, level=None, spectral=""):
    lev = "" if level is None else f"level = {level}"
    return f"""
[impurity]
model = "anderson"
interaction = 0.1
hybridization = 0.005
{lev}
[discretization]
{extra_disc}
[run]
lowest_temperature = {lowest}
{extra_run}
{spectral}
"""


def test_defaults_are_the_continuum_faithful_choices():
    """The defaults a new user gets: adaptive discretization (Campo & Oliveira 2005; Žitko & Pruschke
    2009), Wilson's A_Λ correction on should the Wilson scheme be chosen (Wilson 1975),
    full-density-matrix thermodynamics (Weichselbaum & von Delft 2007; Merker & Costi 2012)."""
    spec = parse_config("")
    assert spec.discretization.scheme == "adaptive"
    assert spec.discretization.wilson_correction is True
    assert spec.run.thermodynamics == "full-density-matrix"
    assert SCHEMA["discretization"]["scheme"].default == "adaptive"


def test_wilson_number_is_the_exact_bethe_ansatz_value():
    """w = e^{C+1/4}/π^{3/2} = 0.4107 (Andrei & Lowenstein 1981, from memory), not Wilson's numerical
    0.4128 (Wilson 1975)."""
    assert WILSON_NUMBER == pytest.approx(0.41071, abs=1e-5)
    assert WILSON_NUMBER_NUMERICAL == 0.4128


def test_full_density_matrix_of_a_free_chain_matches_its_exact_thermodynamics():
    """The complete basis of discarded states of a bare Wilson chain reproduces the exact
    single-particle entropy, T·χ and C of the whole chain (free fermions, scipy) within 5e-3 k_B at
    every temperature, although the total entropy grows to ~50 k_B (Anders & Schiller 2005;
    Weichselbaum & von Delft 2007)."""
    from nrgsolve.chain import energy_scale
    from nrgsolve.solve import bath_from_spec, chain_sites
    from nrgsolve.chain import build_chain
    from nrgsolve.engine import make_symmetry, run_chain, EngineSettings
    from nrgsolve.engine.iterate import chain_steps
    from nrgsolve.models import bare_chain_block
    spec = parse_config("[run]\nlowest_temperature = 1e-7\n")
    Lam = spec.discretization.Lambda
    n = chain_sites(spec, 1.0, 1.0)
    ch = build_chain(bath_from_spec(spec), Lam, 1.0, n, scheme="adaptive")
    sym = make_symmetry("su2", 1)
    steps = chain_steps(ch.onsite, ch.hopping, lambda k: energy_scale(k, Lam, 1.0, 1.0, "adaptive"), 1, n)
    res = run_chain(sym.from_explicit(bare_chain_block(float(ch.onsite[0]), 1)), 0,
                    energy_scale(0, Lam, 1.0, 1.0, "adaptive"), sym, steps, EngineSettings(kept_states=1000))
    N = res.records[-1].index
    T = np.geomspace(1e-6, 0.3, 12)
    th = chain_thermodynamics(shell_states(res.records), T)
    for i, t in enumerate(T):
        ex = free_chain_thermodynamics(ch.onsite[:N + 1], ch.hopping[:N], float(t))
        assert ex["entropy"] > 10
        assert th["entropy"][i] == pytest.approx(ex["entropy"], abs=5e-3)
        assert th["T_chi"][i] == pytest.approx(ex["T_chi"], abs=2e-4)
        assert th["heat"][i] == pytest.approx(ex["heat"], abs=1e-2)


@pytest.fixture(scope="module")
def resonant_level():
    """U = 0, ε_d = 0.003 D, Γ = 0.01 D, defaults (Λ = 3, adaptive, full density matrix), 2 twists."""
    return run("""
[impurity]
model = "resonant-level"
level = 0.003
hybridization = 0.01
[discretization]
twists = 2
[run]
lowest_temperature = 1e-13
""")


@pytest.mark.slow
def test_full_density_matrix_resonant_level_matches_the_exact_answer_over_ten_decades(resonant_level):
    """U = 0: T·χ_imp and S_imp from the full density matrix agree with the exact finite-band answer
    (numerical integration, independent of the NRG) within 0.3 % of their plateaus 1/8 and ln 4 over
    ten decades, 1e-13 … 1e-3 D; above ~T = Γ/3 the full-density-matrix error rises to 0.5 % of ln 4
    (measured; Oliveira & Oliveira 1994 for z-averaging).  U = 0 is a Fermi liquid with R = 1
    (Wilson 1975; Yamada 1975, from memory): within 1 %."""
    th = resonant_level.thermo
    sel = (th.temperature >= 1e-13 * 0.999) & (th.temperature <= 1e-3 * 1.001)
    assert np.log10(th.temperature[sel][-1] / th.temperature[sel][0]) >= 9.99
    exact = np.array([resonant_level_exact(T, 0.003, 0.01) for T in th.temperature[sel]])
    np.testing.assert_allclose(th.T_chi[sel], exact[:, 0], atol=0.003 * 0.125)
    np.testing.assert_allclose(th.entropy[sel], exact[:, 1], atol=0.003 * LN4)
    assert resonant_level.summary.wilson_ratio == pytest.approx(1.0, rel=0.01)


def test_beta_bar_plays_no_role_in_full_density_matrix_thermodynamics():
    """Full-density-matrix thermodynamics has no β̄: two values give identical curves (by construction
    of the method; Weichselbaum & von Delft 2007), while the conventional curves differ."""
    base = kondo(0.2, extra_run="kept_states = 200", lowest=1e-5)
    a = run(base.replace("[run]", "[run]\nbeta_bar = 0.6"), workers=1)
    b = run(base.replace("[run]", "[run]\nbeta_bar = 1.4"), workers=1)
    np.testing.assert_array_equal(a.thermo.temperature, b.thermo.temperature)
    np.testing.assert_array_equal(a.thermo.T_chi, b.thermo.T_chi)
    np.testing.assert_array_equal(a.thermo.entropy, b.thermo.entropy)
    conv = base.replace("[run]", '[run]\nthermodynamics = "conventional"')
    c = run(conv.replace("[run]", "[run]\nbeta_bar = 0.6"), workers=1)
    d = run(conv.replace("[run]", "[run]\nbeta_bar = 1.4"), workers=1)
    assert not np.array_equal(c.thermo.temperature, d.thermo.temperature)


def test_temperatures_are_the_ones_asked_for():
    """run.temperatures = { start, stop, points } gives exactly that log grid (common practice, no
    source: a curve at the temperatures an experiment measured)."""
    res = run(kondo(0.2, extra_run="kept_states = 200\ntemperatures = { start = 1e-4, stop = 1e-1, points = 7 }",
                    lowest=1e-4), workers=1)
    np.testing.assert_allclose(res.thermo.temperature, np.geomspace(1e-4, 1e-1, 7), rtol=1e-12)


@pytest.mark.slow
@pytest.mark.parametrize("model", ["kondo", "anderson"])
def test_kondo_temperature_does_not_depend_on_lambda_with_defaults(model):
    """With the default discretization and thermodynamics, T_K of the Kondo model (ρJ = 0.15) and of the
    symmetric Anderson model (U = 0.1 D, Γ = 0.005 D) agree within 3 % between Λ = 2, 2.5, 3 and 4 in the
    crossover definition, and between Λ = 2.5, 3 and 4 in Wilson's (common practice, no source: physical
    results do not depend on a faithful discretization).  At Λ = 2 Wilson's T_K is not reached even with
    2000 kept states: the full-density-matrix T·χ_imp keeps an offset of 1e-4 far below T_K there, so
    χ_imp(0) does not come out flat (measured; a known limit, see the README); the Λ = 2 run therefore
    stops a decade or two below T_K."""
    tks = {"wilson": [], "crossover": []}
    for lam in (2.0, 2.5, 3.0, 4.0):
        if model == "kondo":
            text = kondo(0.15, f"Lambda = {lam}", "", lowest=1e-5 if lam == 2.0 else 1e-8)
        else:
            text = anderson(f"Lambda = {lam}", "", lowest=1e-7 if lam == 2.0 else 1e-10)
        s = run(text).summary
        if lam > 2.0:
            tks["wilson"].append(s.kondo_temperature_wilson)
        tks["crossover"].append(s.kondo_temperature_crossover)
    for name, vals in tks.items():
        assert None not in vals, name
        assert max(vals) / min(vals) < 1.03, (name, vals)


@pytest.mark.slow
def test_friedel_sum_rule_holds_with_defaults():
    """Asymmetric Anderson model (ε_d = −0.03 D, U = 0.1 D, Γ = 0.005 D) with the default
    discretization at Λ = 3: πΓA(0) = sin²(π⟨n_d⟩/2) within 1 % (Langreth, Phys. Rev. 150, 516 (1966)).
    The former default (Wilson's scheme without A_Λ) gave A_Λ = 1.040 times too much."""
    res = run(anderson(level=-0.03, spectral="[spectral]\ntemperatures = [0.0]"), workers=1)
    c = res.spectral
    n = float(c.occupation[0])
    A0 = float(np.interp(0.0, c.omega, c.spectral[0, 0]))
    assert math.pi * 0.005 * A0 == pytest.approx(math.sin(math.pi * n / 2) ** 2, rel=0.01)


@pytest.fixture(scope="module")
def kondo_runs():
    """Kondo model ρJ = 0.1, 0.15, 0.2 with the default scheme and thermodynamics, 2000 kept states and
    4 twists (the default 1000 and 2 leave 0.8 % between the C_imp curves of ρJ = 0.1 and 0.15, 2000
    and 4 twists 0.4 %), down to T_K/10⁴."""
    out = {}
    for rhoJ, low in ((0.1, 1e-10), (0.15, 1e-8), (0.2, 1e-7)):
        out[rhoJ] = run(kondo(rhoJ, "twists = 4", "kept_states = 2000", lowest=low))
    return out


@pytest.mark.slow
def test_full_density_matrix_kondo_wilson_ratio_is_two(kondo_runs):
    """One-channel Kondo model: Wilson ratio R = 2 within 1 % (Wilson 1975; Yamada 1975, from memory),
    and the two definitions of T_K agree within 3 % (Krishna-murthy, Wilkins & Wilson 1980, from memory)."""
    for res in kondo_runs.values():
        s = res.summary
        assert s.wilson_ratio == pytest.approx(2.0, rel=0.01)
        assert s.kondo_temperature_wilson == pytest.approx(s.kondo_temperature_crossover, rel=0.03)


@pytest.mark.slow
def test_full_density_matrix_curves_collapse_on_t_over_tk(kondo_runs):
    """T·χ_imp, S_imp and C_imp of ρJ = 0.1, 0.15, 0.2 against T/T_K (Wilson's T_K) fall on one curve
    (one-parameter scaling; Wilson 1975) over T/T_K ∈ [0.01, 10]: T·χ_imp and S_imp within 0.5 % of ¼
    and ln 2 for all three (measured 0.05 % and 0.37 %), C_imp within 0.5 % of its peak for ρJ = 0.1 and
    0.15 (measured 0.41 %).  ρJ = 0.2 is not in the scaling regime to that accuracy: its own C_imp is
    0.82–0.85 % (below T_K) and 1.4 % (up to 10 T_K, T = 0.03 D) of the peak away from the exact universal
    curve (Bethe ansatz, nrgsolve.exact, an independent method), against 0.58–0.66 % for the other two,
    the same with 4 or 8 twists (and a three-run spread of 1.41 % also with 4000 states): a correction to
    scaling, not a numerical error.
    So for ρJ = 0.2 the test asserts that it departs from the exact curve more than ρJ = 0.1 and 0.15 do
    (corrections to scaling grow with the coupling; common practice, no source) and stays within 1.5 %."""
    from nrgsolve.exact import kondo_thermodynamics
    x = np.geomspace(0.01, 10, 31)
    curves = {"T_chi": [], "entropy": [], "heat": []}
    for res in kondo_runs.values():
        tk = res.summary.kondo_temperature_wilson
        lt = np.log(res.thermo.temperature)
        for q in curves:
            curves[q].append(np.interp(np.log(x * tk), lt, getattr(res.thermo, q)))
    exact = kondo_thermodynamics(x)
    peak = float(np.max(exact.heat_capacity))
    for q, scale in (("T_chi", 0.25), ("entropy", LN2)):
        spread = np.ptp(curves[q], axis=0) / scale
        assert np.max(spread) < 0.005, (q, np.max(spread))
    spread = np.ptp(curves["heat"][:2], axis=0) / peak
    assert np.max(spread) < 0.005, np.max(spread)
    off = [np.max(np.abs(c - exact.heat_capacity)) / peak for c in curves["heat"]]
    assert off[2] > max(off[:2]), off
    assert np.max(np.ptp(curves["heat"], axis=0)) / peak < 0.015


@pytest.mark.slow
def test_conventional_and_full_density_matrix_agree(kondo_runs):
    """ρJ = 0.2: the conventional curves (T_N = ω_N/β̄, even/odd and z averaged) and the
    full-density-matrix ones agree within the conventional method's accuracy, 1 % of 1/4 and ln 2
    (common practice, no source), and their Kondo temperatures within 2 %."""
    fdm = kondo_runs[0.2]
    conv = run(kondo(0.2, "twists = 2", 'thermodynamics = "conventional"', lowest=1e-7))
    lt = np.log(fdm.thermo.temperature)
    T = conv.thermo.temperature
    sel = (T > fdm.thermo.temperature[0]) & (T < 0.1)
    for q, scale in (("T_chi", 0.25), ("entropy", LN2)):
        f = np.interp(np.log(T[sel]), lt, getattr(fdm.thermo, q))
        assert np.max(np.abs(f - getattr(conv.thermo, q)[sel])) < 0.01 * scale, q
    assert conv.summary.kondo_temperature_wilson == pytest.approx(fdm.summary.kondo_temperature_wilson, rel=0.02)


@pytest.mark.slow
def test_two_channel_residual_entropy_with_full_density_matrix():
    """Two-channel spin-½ Kondo model (ρJ = 0.3 in both channels), full density matrix at Λ = 4 with 1000
    states: S_imp(T → 0) has a flat plateau at ½ ln 2 (Affleck & Ludwig 1991, from memory) within 4 %
    (measured 2.7–2.9 %).  This falls short of the 0.3 % the conventional method reaches with Λ = 4,
    β̄ = 1.5 (test_models.py): with 16 states per site, 1000 kept states cut the spectrum low, and the
    full density matrix's error does not cancel between the non-Fermi-liquid fixed point and the bath
    (measured at Λ = 3: 4.8 % with 1000 states, 2.0 % with 2000).  The run's error estimate is honest
    about it: the stated uncertainty of S_imp at the lowest temperature covers the difference from the
    exact ½ ln 2 and is at most ten times it (measured 0.043 against 0.010)."""
    res = run("""
[impurity]
model = "two-channel-kondo"
exchange = 0.3
[discretization]
Lambda = 4.0
[run]
lowest_temperature = 1e-8
error_estimate = true
""")
    th = res.thermo
    low = th.temperature < 1e-6
    plateau = th.entropy[low]
    assert np.ptp(plateau) < 0.005 * 0.5 * LN2
    assert np.all(np.abs(plateau - 0.5 * LN2) < 0.04 * 0.5 * LN2), plateau
    assert _check_honest(res, {"entropy_lowest": 0.5 * LN2}, {}) == 1


# ---------------------------------------------------------------------------------------------
# error estimates

def test_uncertainties_print_in_compact_form():
    """The compact notation of the trade: value with the uncertainty of its last digits in
    parentheses (common practice, no source)."""
    from nrgsolve.uncertainty import format_with_error
    assert format_with_error(4.1193e-4, 3.1e-7, "D") == "4.119(3)e-4 D"
    assert format_with_error(2.0031, 0.0123) == "2.003(12)"
    assert format_with_error(0.25010, 4e-5) == "0.25010(4)"
    assert format_with_error(1.5, None) == "1.5"
    assert format_with_error(0.0031013443, None, "D") == "0.00310134 D"
    assert format_with_error(None, 0.1) == "not reached"


def _u0_exact_headline():
    """Exact U = 0 (ε_d = 0.003 D, Γ = 0.01 D) χ_imp(0) = Δρ(0)/2, γ_imp = (2π²/3)Δρ(0), R = 1, with the
    impurity's change of the density of states Δρ per spin (textbook free fermions)."""
    D, eps_d, gamma = 1.0, 0.003, 0.01
    sig = -1j * gamma                                   # ln|(ω+D)/(ω−D)| = 0 at ω = 0
    dsig = gamma / math.pi * 2 / D
    drho0 = -((1 - dsig) / (0.0 - eps_d - sig)).imag / math.pi
    return {"chi_zero": drho0 / 2, "gamma_zero": 2 * math.pi ** 2 / 3 * drho0, "wilson_ratio": 1.0}


def _check_honest(res, truth, floor):
    """Every uncertainty covers |value − truth|; where that difference is above the noise floor
    (absolute), the uncertainty is at most ten times it.  Returns the number of quantities checked."""
    from nrgsolve.uncertainty import headline_values
    got = headline_values(res)
    checked = 0
    for name, x in truth.items():
        err, value = res.uncertainties.get(name), got[name]
        if err is None or value is None or x is None:
            continue
        diff = abs(value - x)
        assert diff <= err, (name, value, x, err)
        if diff > floor.get(name, 0.0):
            assert err <= 10 * diff, (name, value, x, err)
        checked += 1
    return checked


@pytest.mark.slow
def test_error_estimate_covers_the_exact_resonant_level_answer():
    """U = 0 with deliberately few states (400) at Λ = 3: each stated uncertainty covers the difference
    from the exact answer (computed independently: χ_imp(0), γ_imp and R from Δρ(0), T·χ_imp and S_imp
    at the lowest temperature by numerical integration) and, where that difference is above the
    numerical noise (1e-4 for the values at the lowest temperature), is at most ten times it
    (the uncertainty must be honest and useful)."""
    res = run("""
[impurity]
model = "resonant-level"
level = 0.003
hybridization = 0.01
[run]
kept_states = 400
lowest_temperature = 1e-9
error_estimate = true
""")
    truth = _u0_exact_headline()
    T0 = float(res.thermo.temperature[0])
    truth["T_chi_lowest"], truth["entropy_lowest"] = resonant_level_exact(T0, 0.003, 0.01)
    assert _check_honest(res, truth, {"T_chi_lowest": 1e-4, "entropy_lowest": 1e-4}) >= 3


@pytest.mark.slow
def test_error_estimate_covers_a_much_better_converged_kondo_run():
    """Kondo model ρJ = 0.2 with 600 states at Λ = 3 (2 twists) against a much better converged run
    (1500 states, Λ = 2.5, 4 twists): every stated uncertainty covers the difference and, above the
    noise floor, is at most ten times it (common practice, no source: convergence in the numerical
    parameters)."""
    from nrgsolve.uncertainty import headline_values
    res = run(kondo(0.2, "", "kept_states = 600\nerror_estimate = true", lowest=1e-7))
    ref = run(kondo(0.2, "Lambda = 2.5\ntwists = 4", "kept_states = 1500", lowest=1e-7))
    truth = headline_values(ref, float(res.thermo.temperature[0]))
    assert _check_honest(res, truth, {"T_chi_lowest": 1e-4, "entropy_lowest": 1e-3}) >= 4


@pytest.mark.slow
def test_error_estimate_covers_a_much_better_converged_anderson_run():
    """Symmetric Anderson model (U = 0.1 D, Γ = 0.01 D) with 600 states at Λ = 3 (2 twists) against a much
    better converged run (1500 states, Λ = 2.5, 4 twists): every stated uncertainty covers the
    difference and, above the noise floor, is at most ten times it (measured ratios 1.5 to 8.9; common
    practice, no source)."""
    from nrgsolve.uncertainty import headline_values
    res = run(anderson(extra_run="kept_states = 600\nerror_estimate = true", lowest=1e-9).replace(
        "hybridization = 0.005", "hybridization = 0.01"))
    ref = run(anderson("Lambda = 2.5\ntwists = 4", "kept_states = 1500", lowest=1e-9).replace(
        "hybridization = 0.005", "hybridization = 0.01"))
    truth = headline_values(ref, float(res.thermo.temperature[0]))
    assert _check_honest(res, truth, {"T_chi_lowest": 1e-4, "entropy_lowest": 1e-3}) >= 5
