"""The thermodynamic Bethe-ansatz solver (nrgsolve.exact) against the known limits of Kondo models.

Sources: Andrei, Furuya & Lowenstein, RMP 55, 331 (1983) and Tsvelick & Wiegmann, Adv. Phys. 32, 453
(1983) for the equations; the limits as cited in each test.  The kernel weights are checked against
scipy quadrature, an independent method.
"""

import math
import sys

import numpy as np
import pytest
from scipy.integrate import quad

from nrgsolve.errors import NrgInputError
from nrgsolve.exact import WILSON_NUMBER_EXACT, kondo_thermodynamics
from nrgsolve.exact import bethe_ansatz as ba


def _curves(channels, spin, t):
    r = kondo_thermodynamics(np.asarray(t, float), channels=channels, spin=spin)
    return r.t_chi, r.entropy, r.heat_capacity


def test_kernel_weights_integrate_piecewise_linear_functions_like_quadrature():
    """∫ s(X − x) f(x) dx and its first two X-derivatives, f piecewise linear and constant beyond
    the ends, agree with scipy's adaptive quadrature (an independent method) to 1e-7."""
    x = ba.make_grid(0.2, core_left=-3, core_right=3, far_left=-60, far_right=20)
    fj = np.tanh(0.3 * x) + 0.1 * np.sin(x)

    def smeared(X):
        pts = list(x[(x > X - 12) & (x < X + 12)]) + [X]
        return quad(lambda t: ba._kernel(X - t) * np.interp(t, x, fj), -300, 300, points=pts, limit=4000)[0]

    h = 1e-3
    for X in (-70.0, -2.9, 0.05, 2.3, 25.0):
        w = [ba._hat_weights([X], x, order) @ fj for order in (0, 1, 2)]
        ref = [smeared(X + d) for d in (-h, 0.0, h)]
        assert w[0][0] == pytest.approx(ref[1], abs=1e-9)
        assert w[1][0] == pytest.approx((ref[2] - ref[0]) / (2 * h), abs=1e-7)
        assert w[2][0] == pytest.approx((ref[2] - 2 * ref[1] + ref[0]) / h ** 2, abs=1e-5)


def test_lorentzian_closure_weights_integrate_like_quadrature():
    """The Lorentzian (1/2π)/(u² + 1/4) weights of the closure against scipy quadrature."""
    x = ba.make_grid(0.2, core_left=-3, core_right=3, far_left=-40, far_right=20)
    fj = np.tanh(0.3 * x)
    lor = lambda u: 0.5 / math.pi / (u * u + 0.25)   # noqa: E731
    for X in (-2.0, 0.3, 5.0):
        tails = np.tanh(0.3 * x[0]) * quad(lambda t: lor(X - t), -np.inf, x[0])[0] \
            + np.tanh(0.3 * x[-1]) * quad(lambda t: lor(X - t), x[-1], np.inf)[0]
        inner = quad(lambda t: lor(X - t) * np.interp(t, x, fj), x[0], x[-1], points=list(x[1:-1]),
                     limit=4000)[0]
        assert (ba._hat_weights([X], x, 0, "lorentz") @ fj)[0] == pytest.approx(inner + tails, abs=1e-9)


@pytest.mark.parametrize("channels, spin", [(1, 0.5), (2, 0.5), (1, 1.0)])
def test_free_spin_is_approached_logarithmically_at_high_temperature(channels, spin):
    """T ≫ T_K: S_imp → ln(2S+1) and T·χ_imp → S(S+1)/3 (Curie law; common practice, no source).
    The approach is logarithmic (the coupling runs like 1/ln(T/T_K); Wilson 1975, Andrei et al. 1983),
    with k channels screening in parallel, 1 − T·χ/(S(S+1)/3) ≈ k/ln(T/T_K) to leading order (from
    memory).  At T = 10⁵ T_0 the deviation is still several per cent: we check that it shrinks
    monotonically and stays below (k+1)/ln(T/T_0), and that S is within 1e-2 of ln(2S+1)."""
    t = np.array([1e2, 1e3, 1e4, 1e5])
    tchi, ent, _ = _curves(channels, spin, t)
    curie = spin * (spin + 1) / 3
    dev = 1 - tchi / curie
    assert np.all(dev > 0) and np.all(np.diff(dev) < 0)
    assert dev[-1] < (channels + 1) / math.log(1e5)
    assert np.all(np.diff(ent) > 0)
    assert abs(ent[-1] - math.log(2 * spin + 1)) < 1e-2


def test_one_channel_high_temperature_follows_the_leading_logarithm():
    """k = 1, S = ½: T·χ_imp ≈ ¼ [1 − 1/ln(T/T_K) − ln ln(T/T_K)/(2 ln²(T/T_K))] for T ≫ T_K
    (Andrei, Furuya & Lowenstein 1983, from memory; the scale inside the logarithm is fixed only up
    to a factor, so we allow 1 % of ¼)."""
    t = np.array([1e3, 1e4, 1e5])
    tchi, _, _ = _curves(1, 0.5, t)
    L = np.log(t)
    approx = 0.25 * (1 - 1 / L - np.log(L) / (2 * L ** 2))
    assert np.all(np.abs(tchi - approx) < 0.01 * 0.25)


@pytest.mark.parametrize("channels, spin", [(1, 0.5), (2, 1.0)])
def test_exactly_screened_impurity_loses_its_entropy_and_moment(channels, spin):
    """k = 2S: the impurity is screened, S_imp → 0 and T·χ_imp → 0 linearly in T (Fermi liquid;
    Nozières 1974; Nozières & Blandin 1980, from memory)."""
    t = np.array([1e-4, 1e-3])
    tchi, ent, heat = _curves(channels, spin, t)
    assert np.all(ent < 2e-2) and np.all(tchi < 2e-2)
    # linear in T: ten times the temperature, ten times S and T·χ (within 1 %)
    assert ent[1] / ent[0] == pytest.approx(10, rel=1e-2)
    assert tchi[1] / tchi[0] == pytest.approx(10, rel=1e-2)
    # Fermi liquid: C = S = γT at low T
    assert heat[0] == pytest.approx(ent[0], rel=1e-3)


def test_two_channel_residual_entropy_is_half_ln2_and_chi_grows_logarithmically():
    """k = 2, S = ½: S_imp(T → 0) = ½ ln 2 (Affleck & Ludwig 1991, from memory); χ_imp and C_imp/T
    grow like ln(1/T), with the universal ratio of the logarithmic terms
    (4π²/3) (dχ/d ln T)/(d(C/T)/d ln T) = 8/3 (Sengupta & Georges 1994, from memory)."""
    t = np.array([1e-5, 1e-4, 1e-3])
    tchi, ent, heat = _curves(2, 0.5, t)
    assert abs(ent[0] - 0.5 * math.log(2)) < 1e-4
    chi, gamma = tchi / t, heat / t
    steps_chi, steps_gamma = -np.diff(chi), -np.diff(gamma)
    assert np.all(steps_chi > 0) and np.all(steps_gamma > 0)
    # χ = a ln(1/T) + b: equal steps per decade
    assert steps_chi[0] / steps_chi[1] == pytest.approx(1.0, rel=1e-2)
    ratio = (4 * math.pi ** 2 / 3) * steps_chi / steps_gamma
    np.testing.assert_allclose(ratio, 8 / 3, rtol=1e-3)


@pytest.mark.slow
def test_overscreened_residual_entropy_follows_the_general_formula():
    """k > 2S: S_imp(0) = ln[sin(π(2S+1)/(k+2)) / sin(π/(k+2))] (Affleck & Ludwig 1991; Tsvelick &
    Wiegmann 1983; from memory).  k = 3, S = 1 here; the approach is like T^{2/(k+2)}, slow."""
    _, ent, _ = _curves(3, 1.0, [1e-5])
    want = math.log(math.sin(3 * math.pi / 5) / math.sin(math.pi / 5))
    assert ent[0] == pytest.approx(want, abs=5e-3)


@pytest.mark.parametrize("spin", [1.0, 1.5])
def test_underscreened_spin_keeps_residual_entropy_ln_2S(spin):
    """k = 1, S > ½: a spin S − ½ is left, S_imp → ln(2S) and T·χ_imp → (S−½)(S+½)/3 (Nozières &
    Blandin 1980, from memory).  The residual spin is coupled ferromagnetically, so the approach is
    logarithmic: within 1e-2 of ln(2S) at T = 10⁻⁵ T_0 and approaching from above, T·χ within
    2/ln(T_0/T) of the residual Curie value."""
    t = np.array([1e-5, 1e-4, 1e-3])
    tchi, ent, _ = _curves(1, spin, t)
    assert np.all(np.diff(ent) > 0)
    assert 0 < ent[0] - math.log(2 * spin) < 1e-2
    residual = (spin - 0.5) * (spin + 0.5) / 3
    assert np.all(np.diff(tchi) > 0)
    assert 0 < tchi[0] / residual - 1 < 2 / math.log(1e5)


def test_one_channel_wilson_ratio_is_two():
    """k = 1, S = ½: R = (4π²/3) χ_imp(0)/γ_imp = 2 (Wilson 1975; Andrei & Lowenstein 1981, from memory)."""
    t = np.array([1e-4])
    tchi, _, heat = _curves(1, 0.5, t)
    chi0, gamma = tchi[0] / t[0], heat[0] / t[0]
    assert (4 * math.pi ** 2 / 3) * chi0 / gamma == pytest.approx(2.0, abs=1e-3)


def test_one_channel_temperature_axis_is_wilsons_kondo_temperature():
    """In units of Wilson's T_K, χ_imp(0) = w/(4 T_K) with w = e^{C+1/4}/π^{3/2} ≈ 0.4107 (Andrei &
    Lowenstein 1981, from memory), and T_K χ_imp(T_K) ≈ 0.07 (Krishna-murthy, Wilkins & Wilson 1980,
    from memory; the two definitions agree only to a few %)."""
    assert WILSON_NUMBER_EXACT == pytest.approx(0.4107, abs=1e-4)
    r = kondo_thermodynamics([1e-4, 1.0])
    assert r.scale == "T_K"
    assert r.t_chi[0] / 1e-4 == pytest.approx(WILSON_NUMBER_EXACT / 4, rel=1e-6)
    assert r.t_chi[1] == pytest.approx(0.07, abs=0.003)


def test_specific_heat_and_entropy_are_consistent_derivatives():
    """S(T₂) − S(T₁) = ∫ C/T dT (thermodynamics; common practice, no source), with C and S from
    independent analytic kernel derivatives, integrated by scipy quadrature; and C = T dS/dT against
    a finite difference."""
    for k, spin in ((1, 0.5), (2, 0.5)):
        f = lambda lnT: _curves(k, spin, [math.exp(lnT)])[2][0]   # noqa: E731  C/T dT = C dlnT
        lo, hi = math.log(0.02), math.log(50.0)
        integral = quad(f, lo, hi, epsabs=1e-10)[0]
        _, ent, heat = _curves(k, spin, [math.exp(lo), math.exp(hi), 1.0 * math.exp(-1e-4), math.exp(1e-4)])
        assert ent[1] - ent[0] == pytest.approx(integral, abs=1e-7)
        assert (ent[3] - ent[2]) / 2e-4 == pytest.approx(heat[2], abs=1e-5)


def test_solution_is_converged_in_the_grid_spacing():
    """Halving the spacing changes the raw curves by O(spacing²) (a factor ≈ 4), and the
    Richardson-extrapolated curves of (0.2, 0.1) and (0.1, 0.05) agree far better than either raw
    curve (common practice for second-order product integration, no source)."""
    levels = 8
    grids = [ba.make_grid(h, core_left=-6, core_right=6, far_left=-100, far_right=26) for h in (0.2, 0.1, 0.05)]
    sols = [ba.solve_tower(1, levels, g) for g in grids]
    t = np.array([0.01, 1.0, 100.0])
    c = [ba.curves_from_tower(s, 1, t) for s in sols]
    d1, d2 = np.abs(c[1] - c[0]), np.abs(c[2] - c[1])
    assert np.all(d2 < d1 / 3) and np.all(d2 > d1 / 5)
    r1 = c[1] + (c[1] - c[0]) / 3
    r2 = c[2] + (c[2] - c[1]) / 3
    assert np.max(np.abs(r2 - r1)) < 0.05 * np.max(d2)


def test_solution_is_converged_in_the_tower_truncation():
    """Cutting the tower at 12, 20 or the default 32 levels: entropy and specific heat do not
    change beyond 1e-5, T·χ converges monotonically and the change from 20 to 32 levels is below
    1e-3 of T·χ for T ≤ 10 T_0 (common practice, no source)."""
    t = np.array([0.01, 1.0, 10.0])
    default = ba.tower_solutions(1)[0]
    settings = ba.numerical_settings(1)
    grid = default.nodes
    c = [ba.curves_from_tower(ba.solve_tower(1, n, grid), 1, t) for n in (12, 20)]
    c.append(ba.curves_from_tower(default, 1, t))
    assert settings["levels"] == 32
    assert np.max(np.abs(c[2][1:] - c[1][1:])) < 1e-5
    assert np.all(np.abs(c[2][0] - c[1][0]) < np.abs(c[1][0] - c[0][0]))
    assert np.all(np.abs(c[2][0] / c[1][0] - 1) < 1e-3)


def test_cache_is_keyed_by_settings_and_a_corrupt_entry_is_recomputed(tmp_path, monkeypatch):
    """A cache entry is written atomically under a name holding a hash of the settings; a corrupt
    file is recomputed, not trusted; use_cache=False writes nothing (common practice, no source)."""
    small = dict(ba.numerical_settings(1), levels=6, spacings=[0.2, 0.1], far_right=20.0, far_left=-100.0)
    monkeypatch.setattr(ba, "numerical_settings", lambda channels: dict(small, channels=channels))
    monkeypatch.setattr(ba, "_MEMORY", {})
    first = kondo_thermodynamics([0.5, 2.0], cache_dir=tmp_path)
    files = list(tmp_path.glob("bethe_ansatz_k1_*.npz"))
    assert len(files) == 1 and not list(tmp_path.glob("*.tmp"))
    files[0].write_bytes(b"not an npz file")
    monkeypatch.setattr(ba, "_MEMORY", {})
    again = kondo_thermodynamics([0.5, 2.0], cache_dir=tmp_path)
    np.testing.assert_allclose(again.t_chi, first.t_chi, rtol=1e-12)
    with np.load(files[0]) as z:                        # rewritten with a valid entry
        assert "nodes_0" in z
    other = tmp_path / "other"
    monkeypatch.setattr(ba, "_MEMORY", {})
    kondo_thermodynamics([1.0], channels=2, cache_dir=other, use_cache=False)
    assert not other.exists()


@pytest.mark.parametrize("kwargs, name", [
    ({"channels": 0}, "channels"), ({"channels": 1.5}, "channels"), ({"channels": 9}, "channels"),
    ({"spin": 0.3}, "spin"), ({"spin": 0}, "spin"), ({"spin": "a"}, "spin"),
])
def test_bad_model_parameters_are_named_in_one_clear_error(kwargs, name):
    """Bad input gets an NrgInputError naming the argument and the allowed range."""
    with pytest.raises(NrgInputError, match=name + ": got .*allowed"):
        kondo_thermodynamics([1.0], **kwargs)


@pytest.mark.parametrize("t", [[], [0.0], [-1.0], [np.nan], [[1.0, 2.0]], "x"])
def test_bad_temperatures_are_named_in_one_clear_error(t):
    with pytest.raises(NrgInputError, match="t_over_tk: got"):
        kondo_thermodynamics(t)


def test_has_exact_curve_names_the_covered_models():
    assert ba.has_exact_curve(1, 0.5) and ba.has_exact_curve(2, 0.5) and ba.has_exact_curve(1, 2.0)
    assert not ba.has_exact_curve(0, 0.5) and not ba.has_exact_curve(1, 0.25) and not ba.has_exact_curve(9, 0.5)


def test_cache_folder_is_the_users_cache_unless_overridden(monkeypatch, tmp_path):
    """$NRGSOLVE_CACHE_DIR wins; otherwise the platform's user cache folder (XDG on Linux)."""
    monkeypatch.setenv("NRGSOLVE_CACHE_DIR", str(tmp_path / "mine"))
    assert ba.default_cache_dir() == tmp_path / "mine"
    monkeypatch.delenv("NRGSOLVE_CACHE_DIR")
    monkeypatch.setattr(sys, "platform", "linux")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert ba.default_cache_dir() == tmp_path / "xdg" / "nrgsolve"
