"""The NRG against the exact Bethe-ansatz thermodynamics (nrgsolve.exact) of Kondo models.

Exact curves: thermodynamic Bethe ansatz (Andrei, Furuya & Lowenstein 1983; Tsvelick & Wiegmann
1983), solved independently of the NRG.  One channel: the default full-density-matrix thermodynamics
(at Λ = 2.5); two channels: the conventional one at T_N = ω_N/β̄ (Λ = 4, β̄ = 1.5), because the full
density matrix misses ½ ln 2 by 3 % with 1000 states there (measured).  The tolerances are what these
settings measurably reach (see each docstring).
"""

import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from nrgsolve.config import parse_config
from nrgsolve.exact import WILSON_NUMBER_EXACT, kondo_thermodynamics
from nrgsolve.observables.kondo_scale import kondo_summary
from nrgsolve.solve import solve

ONE_CHANNEL = """\
[impurity]
model = "kondo"
exchange = 0.15

[discretization]
scheme = "adaptive"
Lambda = 2.5
twists = 2

[run]
kept_states = 1000
lowest_temperature = 1e-9
bath_reference = "nrg"
"""

TWO_CHANNEL = """\
[impurity]
model = "two-channel-kondo"
exchange = 0.15

[discretization]
scheme = "adaptive"
Lambda = 4.0
twists = 2

[run]
kept_states = 1000
beta_bar = 1.5
lowest_temperature = 1e-9
bath_reference = "nrg"
thermodynamics = "conventional"
"""


def _curves(text):
    r = solve(parse_config(text, "test.toml"), workers=1)
    c = r.thermo
    return (np.asarray(c.temperature, float), np.asarray(c.T_chi, float), np.asarray(c.entropy, float),
            np.asarray(c.heat, float))


@pytest.fixture(scope="module")
def one_channel():
    return _curves(ONE_CHANNEL)


@pytest.mark.slow
def test_one_channel_kondo_thermodynamics_match_the_exact_curves(one_channel):
    """One-channel spin-½ Kondo, 0.01 ≤ T/T_K ≤ 10 with Wilson's T_K from the run's own χ_imp(0)
    (w = 0.4107, Andrei & Lowenstein 1981, from memory): T·χ_imp within 0.5 % of ¼ and S_imp within
    0.5 % of ln 2 (full density matrix, Λ = 2.5: measured 0.07 % and 0.22 %); C_imp within 2 % of its
    exact peak (measured 1.6 %; 0.9 % at Λ = 3; the conventional T_N thermodynamics rounds the peak:
    β̄ = 1 gave 2.7 %, Λ = 3 3.1 %, β̄ = 0.7 3.7 %)."""
    T, tchi, ent, heat = one_channel
    chi0 = kondo_summary(T, tchi, heat).chi_zero
    assert chi0 is not None
    tk = WILSON_NUMBER_EXACT / (4 * chi0)
    sel = (T / tk >= 0.01) & (T / tk <= 10)
    assert sel.sum() > 20
    ex = kondo_thermodynamics(T[sel] / tk)
    peak = kondo_thermodynamics(np.logspace(-0.5, 0.5, 41)).heat_capacity.max()
    assert np.max(np.abs(tchi[sel] - ex.t_chi)) < 0.005 * 0.25
    assert np.max(np.abs(ent[sel] - ex.entropy)) < 0.005 * math.log(2)
    assert np.max(np.abs(heat[sel] - ex.heat_capacity)) < 0.02 * peak


@pytest.mark.slow
def test_one_channel_wilson_ratio_of_the_run_is_the_exact_two(one_channel):
    """The run's Wilson ratio against the exact R = 2 (Wilson 1975; the exact solver gives 2.0001): within
    1 % (full density matrix at Λ = 2.5, 1000 states: measured 2.015)."""
    T, tchi, _, heat = one_channel
    assert kondo_summary(T, tchi, heat).wilson_ratio == pytest.approx(2.0, rel=0.01)


@pytest.mark.slow
def test_two_channel_entropy_matches_the_exact_curve_with_one_fitted_scale():
    """Two-channel spin-½ Kondo: with one fitted scale T_0, S_imp(T) of the run lies within 0.3 % of
    ln 2 of the exact curve wherever the exact T/T_0 is between 10⁻³ and 10, and its residual entropy
    is ½ ln 2 (Affleck & Ludwig 1991, from memory).  Measured: 0.17 % (T_0 = 6.4e-4 D); ρJ = 0.25
    (T_0 = 0.045 D) is outside the universal regime and misses by 4.7 %."""
    T, _, ent, _ = _curves(TWO_CHANNEL)
    ok = np.isfinite(ent) & (T > 0)
    T, ent = T[ok], ent[ok]

    def misfit(log_t0):
        t = T / math.exp(log_t0)
        sel = (t >= 1e-3) & (t <= 10)
        return float(np.max(np.abs(ent[sel] - kondo_thermodynamics(t[sel], channels=2).entropy)))

    # the scale where the run's entropy passes the exact S(T_0) = S at T/T_0 = 1 starts the search
    s1 = kondo_thermodynamics([1.0], channels=2).entropy[0]
    guess = math.log(T[np.argmin(np.abs(ent - s1))])
    best = minimize_scalar(misfit, bounds=(guess - 1.0, guess + 1.0), method="bounded",
                           options={"xatol": 1e-4})
    assert best.fun < 0.003 * math.log(2)
    assert abs(ent[0] - 0.5 * math.log(2)) < 0.003 * math.log(2)
