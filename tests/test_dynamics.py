"""Dynamics of every model: the T-matrix (also of Kondo models, through the composite operator), the
dynamical impurity spin susceptibility, and the transport of a dilute magnetic alloy.

Exact checks on short chains against dense diagonalization written here; physics checks against
published fixed-point values (sources named in each test)."""

import math

import numpy as np
import pytest
from scipy.linalg import eigh

from nrgsolve.engine import make_symmetry, EngineSettings
from nrgsolve.engine.backward import spectral_run
from nrgsolve.engine.fock import FockSpace
from nrgsolve.engine.iterate import Step
from nrgsolve.models import kondo_block, anderson_block
from nrgsolve.observables.dynamics import backward_operators

from conftest import wilson_hopping, omega, merged


# ---------------------------------------------------------------------------------------------
# exact checks on short chains

def dense_kondo(J, K, hop, T, spin):
    """Lehmann weights of the composite operator O_σ = [f_0σ, H_imp] (anticommutator) and of the
    impurity S_z (commutator) for a spin-½ Kondo impurity on the chain 0..n by dense diagonalization
    (built here from the Hamiltonian J S·s_0 + K(n_0 − 1) + Σ t_n (f†_n f_{n+1} + h.c.))."""
    n = len(hop) + 1
    sp = FockSpace([(0, s) for _ in range(n) for s in (1, -1)], local_spin_twice=1)
    c = [sp.annihilator(j) for j in range(2 * n)]
    nu, nd = c[0].T @ c[0], c[1].T @ c[1]
    Sz, Sp = sp.local_sz, sp.local_splus
    spin_dot = Sz @ (0.5 * (nu - nd)) + 0.5 * (Sp @ (c[1].T @ c[0]) + Sp.T @ (c[0].T @ c[1]))
    H_imp = J * spin_dot + K * (nu + nd - sp.identity)
    H = H_imp.copy()
    for k in range(n - 1):
        for s in range(2):
            h = c[2 * k + s].T @ c[2 * k + 2 + s]
            H += hop[k] * (h + h.T)
    E, W = eigh(H)
    mode = 0 if spin > 0 else 1
    O = c[mode] @ H_imp - H_imp @ c[mode]                  # [f_0σ, H_imp]
    A = W.T @ O.T @ W                                      # ⟨b|O†|a⟩
    S = W.T @ Sz @ W
    x = (E - E[0]) / T if T > 0 else np.where(E - E[0] < 1e-10, 0.0, np.inf)
    rho = np.exp(-x)
    rho /= rho.sum()
    om = (E[:, None] - E[None, :]).ravel()
    return om, (A * A * (rho[None, :] + rho[:, None])).ravel(), (S * S * (rho[None, :] - rho[:, None])).ravel()


@pytest.mark.parametrize("symmetry,K", [("su2", 0.1), ("abelian", 0.1), ("isospin", 0.0)])
@pytest.mark.parametrize("T", [0.0, 0.1])
def test_kondo_composite_operator_and_spin_weights_match_dense_diagonalization(symmetry, K, T):
    """Without truncation the full-density-matrix weights of the T-matrix operator O_σ = [f_0σ, H_imp]
    of a Kondo impurity (Costi 2000, from memory) and of the commutator ⟨⟨S_z; S_z⟩⟩ equal the
    Lehmann sums of dense exact diagonalization of the same chain (common practice, no source).
    In su2 and isospin mode this checks the rank-1 recoupling of the spin vector through the sites
    (isospin needs particle-hole symmetry: K = 0)."""
    J, Lam, N = 0.4, 2.0, 2
    hop = wilson_hopping(np.arange(N), Lam)
    sym = make_symmetry(symmetry)
    blk = kondo_block(J, K)
    steps = [Step(n, (0.0,), (hop[n - 1],), omega(n, Lam)) for n in range(1, N + 1)]
    ops, corr = backward_operators(sym, blk, ("t-matrix", "spin-susceptibility"), impurity_level=False)
    _res, ds = spectral_run(sym.from_explicit(blk), 0, omega(0, Lam), sym, steps, EngineSettings(kept_states=10 ** 6),
                            ops, [T], corr, bins_per_decade=None)
    names = list(ds.correlators)
    om, wT, wS = dense_kondo(J, K, hop, T, +1)
    for x, w in ((names.index("T"), wT), (names.index("chi"), wS)):
        o1, w1 = merged(ds.omega[x, 0, 0], ds.weight[x, 0, 0])
        o2, w2 = merged(om, w)
        assert o1.shape == o2.shape
        np.testing.assert_allclose(o1, o2, atol=1e-10)
        np.testing.assert_allclose(w1, w2, atol=1e-11)
    # Kramers–Kronig static limit from the discrete poles: Σ w/ω of the dense weights
    apart = np.abs(om) > 1e-9
    chi = float(np.sum(wS[apart] / om[apart]))
    assert ds.inverse_moment[names.index("chi"), 0, 0] == pytest.approx(chi, rel=1e-9, abs=1e-12)


def test_composite_operator_route_gives_pi_gamma_a_d_for_the_resonant_level():
    """The two routes to −πρ Im T agree: for a resonant level written as a block of the level and
    chain site 0 (H_imp = ε_d n_d + V Σ_σ (d†_σ f_0σ + h.c.)), the composite operator
    O_σ = [f_0σ, H_imp] = V d_σ with the Kondo-model prefactor π²ρ (ρ = 1/(2D)) gives the same
    weights as πΓ A_d from the d level on the same chain (T = V² G_d, Γ = πρV²; textbook).  No
    truncation, raw poles."""
    from nrgsolve.engine.fock import ExplicitBlock
    from nrgsolve.observables.dynamics import t_matrix_prefactor
    eps_d, Gamma, Lam, N = 0.05, 0.03, 2.0, 3
    V = math.sqrt(2 * Gamma / math.pi)
    hop = wilson_hopping(np.arange(N), Lam)
    sym = make_symmetry("su2")
    # route 1: the d level (Anderson block), site 0 added by the engine
    blk = anderson_block(eps_d, 0.0, V)
    steps = [Step(n, (0.0,), ((V if n == 0 else hop[n - 1]),), omega(n, Lam)) for n in range(N + 1)]
    ops, corr = backward_operators(sym, blk, ("t-matrix",), impurity_level=True)
    _r, d1 = spectral_run(sym.from_explicit(blk), -1, omega(-1, Lam), sym, steps, EngineSettings(kept_states=10 ** 6),
                          ops, [0.0], corr, bins_per_decade=None)
    # route 2: level + site 0 in one block, the composite operator of site 0
    sp = FockSpace([(0, 1), (0, -1), (0, 1), (0, -1)])
    n_d = sp.number(0) + sp.number(1)
    H = eps_d * n_d
    for s in range(2):
        h = sp.creator(s) @ sp.annihilator(2 + s)
        H = H + V * (h + h.T)
    blk2 = ExplicitBlock(space=sp, hamiltonian=H, last_site={0: (sp.creator(2), sp.creator(3))},
                         first_site=1, sz_ops={"impurity_sz": 0.5 * (sp.number(0) - sp.number(1))})
    ops2, corr2 = backward_operators(sym, blk2, ("t-matrix",), impurity_level=False)
    _r, d2 = spectral_run(sym.from_explicit(blk2), 0, omega(0, Lam), sym, steps[1:], EngineSettings(kept_states=10 ** 6),
                          ops2, [0.0], corr2, bins_per_decade=None)
    o1, w1 = merged(d1.omega[0, 0, 0], d1.weight[0, 0, 0] * t_matrix_prefactor(True, hybridization=Gamma))
    o2, w2 = merged(d2.omega[0, 0, 0], d2.weight[0, 0, 0] * t_matrix_prefactor(False, density=0.5))
    np.testing.assert_allclose(o1, o2, atol=1e-10)
    np.testing.assert_allclose(w1, w2, atol=1e-10)


# ---------------------------------------------------------------------------------------------
# physics of whole runs (shared module fixtures: Λ = 3, two twists, a few hundred kept states)

TRANSPORT = "transport_temperatures = { start = 1e-6, stop = 0.1, points = 16 }"


def run_text(impurity: str, quantities, kept=200, extra="", Lam=3.0, twists=2, lowest=1e-9, symmetry="su2"):
    q = ", ".join(f'"{x}"' for x in quantities)
    return f"""
[impurity]
{impurity}
[discretization]
Lambda = {Lam}
twists = {twists}
[run]
kept_states = {kept}
lowest_temperature = {lowest}
symmetry = "{symmetry}"
[spectral]
temperatures = [0.0]
quantities = [{q}]
{extra}
"""


def solved(text):
    from nrgsolve.config import parse_config
    from nrgsolve.solve import solve
    return solve(parse_config(text), workers=1)


@pytest.fixture(scope="module")
def kondo20():
    """Kondo model ρJ = 0.2: T-matrix at T = 0 and the alloy transport."""
    return solved(run_text('model = "kondo"\nexchange = 0.2', ["t-matrix"], extra=TRANSPORT))


@pytest.fixture(scope="module")
def kondo15():
    """Kondo model ρJ = 0.15: the alloy transport only."""
    return solved(run_text('model = "kondo"\nexchange = 0.15', ["t-matrix"], extra=TRANSPORT))


@pytest.fixture(scope="module")
def symmetric_anderson():
    """Symmetric Anderson model U = 0.1, Γ = 0.01 (Kondo regime, U/πΓ = 3.2): every quantity at T = 0
    and the alloy transport."""
    return solved(run_text('model = "anderson"\ninteraction = 0.1\nhybridization = 0.01',
                           ["impurity", "t-matrix", "spin-susceptibility"], kept=250, extra=TRANSPORT))


def value_at(result, quantity, w, t=0, c=0):
    sp = result.spectral
    return float(np.interp(w, sp.omega, sp.dynamics.curves[quantity][t, c]))


def test_kondo_t_matrix_reaches_the_unitary_limit(kondo20):
    """Spin-½ Kondo model, ρJ = 0.2, T = 0: −πρ Im T(0) = 1 within 2 % (unitarity of the screened
    singlet, phase shift π/2; Nozières 1974, from memory), through the composite operator of the
    impurity spin and site 0 (Costi 2000, from memory; measured 0.994 with 200 states); it stays within
    4 % of 1 for |ω| ≤ T_K/10 (measured ≥ 0.972: dips of the last iterations) and falls to half near ω ≈ T_K and far
    below at the band edge."""
    tk = kondo20.summary.kondo_temperature_crossover
    assert value_at(kondo20, "t-matrix", 0.0) == pytest.approx(1.0, abs=0.02)
    for w in np.geomspace(1e-8, tk / 10, 9):
        assert value_at(kondo20, "t-matrix", w) == pytest.approx(1.0, abs=0.04)
        assert value_at(kondo20, "t-matrix", -w) == pytest.approx(1.0, abs=0.04)
    assert 0.1 < value_at(kondo20, "t-matrix", 3 * tk) < 0.9
    assert value_at(kondo20, "t-matrix", 0.9) < 0.1


def test_anderson_t_matrix_is_pi_gamma_times_a_d_and_obeys_friedel(symmetric_anderson):
    """Anderson model: −πρ Im T = πΓ A_d (T = V² G_d), and at T = 0 and the symmetric point it is
    1 at ω = 0 (Friedel sum rule, sin²(π⟨n_d⟩/2) = 1; Langreth 1966)."""
    sp = symmetric_anderson.spectral
    np.testing.assert_allclose(sp.dynamics.curves["t-matrix"], math.pi * 0.01 * sp.spectral, rtol=1e-12)
    assert value_at(symmetric_anderson, "t-matrix", 0.0) == pytest.approx(1.0, abs=0.01)


def test_spin_susceptibility_obeys_korringa_shiba_and_kramers_kronig(symmetric_anderson):
    """Symmetric Anderson model at T = 0: (i) the Kramers–Kronig static limit (1/π)∫χ''(ω)/ω dω
    equals the thermodynamic χ_imp(T → 0) within 3 % (measured 1.5 %; the local and the impurity
    susceptibility differ slightly in the Kondo regime; measured 1.7 %); (ii) the Korringa–Shiba
    relation lim χ''(ω)/ω = 2π χ_s² (Shiba 1975, from memory) within 5 % for ω = T_K/300 … T_K/30,
    with χ_s the static limit of the same run (measured −2.5 %; the plain log-Gaussian kernel gives
    +19 %, its e^{b²/2} bias on a linear spectrum)."""
    r = symmetric_anderson
    chi_kk = float(r.spectral.dynamics.static_susceptibility[0])
    assert chi_kk == pytest.approx(r.summary.chi_zero, rel=0.03)
    tk = r.summary.kondo_temperature_crossover
    for w in np.geomspace(tk / 300, tk / 30, 4):
        slope = value_at(r, "spin-susceptibility", w) / w
        assert slope == pytest.approx(2 * math.pi * chi_kk ** 2, rel=0.05)
        # χ'' is odd in ω
        assert value_at(r, "spin-susceptibility", -w) == pytest.approx(-slope * w, rel=0.02)


def test_dilute_alloy_resistivity_is_unitary_and_fermi_liquid(kondo20, symmetric_anderson):
    """ρ(T → 0)/ρ_unitary = sin²(π⟨n_d⟩/2) = 1 at the symmetric point (Friedel; Langreth 1966) and
    = 1 for the Kondo model (unitary scattering; Nozières 1974, from memory) within 2 %; below T_K the
    deviation grows as T² (Fermi liquid; Nozières 1974, from memory): fitted exponent of
    ρ(0) − ρ(T) for T/T_K ∈ [0.03, 0.3] within 2 ± 0.4 (measured 2.04 and 1.91); the Lorenz ratio
    tends to 1 (Wiedemann–Franz) within 2 % (measured ρ(T_min) = 0.993 and 0.998, Lorenz 1.001)."""
    for r in (kondo20, symmetric_anderson):
        tr = r.alloy_transport
        assert tr.resistivity[0] == pytest.approx(1.0, abs=0.02)
        assert tr.lorenz_ratio[0] == pytest.approx(1.0, abs=0.02)
        tk = r.summary.kondo_temperature_crossover
        x = tr.temperature / tk
        win = (x >= 0.03) & (x <= 0.3)
        assert np.count_nonzero(win) >= 3
        drop = tr.resistivity[0] - tr.resistivity[win]
        assert np.all(drop > 0)
        exponent = np.polyfit(np.log(x[win]), np.log(drop), 1)[0]
        assert exponent == pytest.approx(2.0, abs=0.4)


def test_resistivity_against_t_over_tk_is_universal(kondo20, kondo15, symmetric_anderson):
    """ρ(T)/ρ(0) against T/T_K is one universal curve (Kondo scaling; Costi, Hewson & Zlatić 1994,
    from memory): the Kondo model at ρJ = 0.15 and 0.2 and the symmetric Anderson model in the Kondo
    regime agree within 3 % for T/T_K ∈ [0.05, 20] (T_K the crossover scale of each run; measured at
    most 2.7 %, the Anderson model at T/T_K = 20, i.e. T = 4e-3 D; the transport integrals run over the
    band |ω| ≤ D only)."""
    x = np.geomspace(0.05, 20, 14)
    curves = []
    for r in (kondo20, kondo15, symmetric_anderson):
        tr = r.alloy_transport
        t = tr.temperature / r.summary.kondo_temperature_crossover
        curves.append(np.interp(np.log(x), np.log(t), tr.resistivity / tr.resistivity[0]))
    for c in curves[1:]:
        np.testing.assert_allclose(c, curves[0], rtol=0.03)
    assert curves[0][0] > 0.95 and curves[0][-1] < 0.35      # the curve spans the crossover


def test_thermopower_vanishes_at_particle_hole_symmetry_and_changes_sign(kondo20, symmetric_anderson):
    """S(T) = 0 at particle-hole symmetry (t(ω) even in ω, L_1 = 0; fact of the trade) to numerical
    precision, and it changes sign with ε_d + U/2 (the resonance moves across the Fermi level; Costi,
    Hewson & Zlatić 1994, from memory)."""
    for r in (kondo20, symmetric_anderson):
        assert np.max(np.abs(r.alloy_transport.thermopower)) < 1e-9
    signs = []
    for level in (-0.03, -0.07):
        r = solved(run_text(f'model = "anderson"\ninteraction = 0.1\nhybridization = 0.01\nlevel = {level}',
                            ["t-matrix"], kept=120, lowest=1e-5, extra="transport_temperatures = [1e-4, 1e-3]"))
        s = r.alloy_transport.thermopower
        assert np.all(np.abs(s) > 1e-3)
        signs.append(np.sign(s))
    assert np.all(signs[0] == -signs[1])


@pytest.mark.slow
def test_two_channel_kondo_t_matrix_is_one_half():
    """Two-channel Kondo model (ρJ = 0.5 in both channels, overscreened) at T = 0: −πρ Im T = ½ per
    channel and spin at low frequency (Affleck & Ludwig 1993, from memory) within 3 % for
    ω = 1e-8 … 1e-6 D and at ω = 0, both channels alike.  The non-Fermi-liquid spectrum needs many
    states: measured with Λ = 4, two twists, 800 states (0.498 at 1e-9…1e-7; with 400 states the
    curve drifts to 0.6–0.8, unconverged)."""
    r = solved(run_text('model = "two-channel-kondo"\nexchange = 0.5', ["t-matrix"], kept=800, Lam=4.0,
                        lowest=1e-8))
    assert r.spectral.dynamics.components["t-matrix"] == ("spin0", "spin1")      # one component per channel
    for c in (0, 1):
        for w in (0.0, 1e-8, 1e-7, 1e-6):
            assert value_at(r, "t-matrix", w, c=c) == pytest.approx(0.5, rel=0.03)


def test_stored_dynamics_transport_and_plot_commands(kondo20, kondo15, tmp_path):
    """/spectral/t-matrix (dimensionless) and /transport/resistivity are stored with units and read back
    bit for bit; the T = 0 values are summary numbers (index.csv columns); `nrgsolve plot spectral
    --quantity t-matrix` and `nrgsolve plot transport` (two files, --scale kondo) write figures; asking
    a Kondo file for the impurity spectral function is one clear error with exit code 2."""
    import h5py
    from nrgsolve.cli import main
    from nrgsolve.result import result_from_run
    from nrgsolve.store import read_result, write_result
    from nrgsolve.sweep import SUMMARY_COLUMNS

    paths = []
    for name, run in (("k20", kondo20), ("k15", kondo15)):
        paths.append(write_result(result_from_run(run), tmp_path / f"{name}.h5"))
    st = read_result(paths[0])
    om = kondo20.spectral.omega
    np.testing.assert_array_equal(st.spectral["t_matrix"], kondo20.spectral.dynamics.curves["t-matrix"][:, 0])
    np.testing.assert_array_equal(st.transport["resistivity"], kondo20.alloy_transport.resistivity)
    assert st.summary["t_matrix_zero"] == pytest.approx(float(np.interp(0, om, st.spectral["t_matrix"][0])))
    assert st.summary["resistivity_zero"] == pytest.approx(st.summary["t_matrix_zero"])   # one component
    assert math.isnan(st.summary["static_susceptibility_zero"])                            # not asked for
    assert {"t_matrix_zero", "resistivity_zero", "static_susceptibility_zero"} <= set(SUMMARY_COLUMNS)
    with h5py.File(paths[0]) as h:
        assert h["spectral/t-matrix"].attrs["units"] == "1"
        assert h["transport/resistivity"].attrs["units"] == "rho_unitary"
        assert "A" not in h["spectral"]
    out = tmp_path / "t.png"
    assert main(["plot", "spectral", str(paths[0]), "--quantity", "t-matrix", "-o", str(out), "-q"]) == 0
    assert out.stat().st_size > 1000
    out = tmp_path / "rho.png"
    assert main(["plot", "transport", *map(str, paths), "--scale", "kondo", "--normalized", "-o", str(out),
                 "-q"]) == 0
    assert out.stat().st_size > 1000 and out.with_suffix(".pdf").exists()
    assert main(["plot", "spectral", str(paths[0]), "-o", str(tmp_path / "a.png"), "-q"]) == 2
    assert not (tmp_path / "a.png").exists()


@pytest.mark.parametrize("symmetry", ["su2", "abelian"])
def test_two_channel_composite_operators_match_dense_diagonalization(symmetry):
    """Two-channel Kondo impurity (J_1 ≠ J_2) on sites 0…1 of both channels: the T-matrix operator of
    each channel, O_kσ = [f_0kσ, H_imp], has the full-density-matrix weights of dense exact
    diagonalization (built here), component by component (common practice, no source)."""
    from nrgsolve.models import two_channel_kondo_block
    J1, J2, Lam, N = 0.4, 0.3, 2.0, 1
    hop = wilson_hopping(np.arange(N), Lam)
    modes = [(k, s) for _n in range(N + 1) for k in range(2) for s in (1, -1)]
    sp = FockSpace(modes, local_spin_twice=1, n_channels=2)
    c = [sp.annihilator(j) for j in range(len(modes))]

    def mode(n, k, s):
        return 4 * n + 2 * k + (0 if s > 0 else 1)

    def spin_dot(k):
        u, d = c[mode(0, k, 1)], c[mode(0, k, -1)]
        return (sp.local_sz @ (0.5 * (u.T @ u - d.T @ d))
                + 0.5 * (sp.local_splus @ (d.T @ u) + sp.local_splus.T @ (u.T @ d)))

    H_imp = J1 * spin_dot(0) + J2 * spin_dot(1)
    H = H_imp.copy()
    for n in range(N):
        for k in range(2):
            for s in (1, -1):
                h = c[mode(n, k, s)].T @ c[mode(n + 1, k, s)]
                H += hop[n] * (h + h.T)
    E, W = eigh(H)
    rho = np.where(E - E[0] < 1e-10, 1.0, 0.0)
    rho /= rho.sum()
    om = (E[:, None] - E[None, :]).ravel()
    sym = make_symmetry(symmetry, 2)
    blk = two_channel_kondo_block(J1, J2)
    steps = [Step(n, (0.0, 0.0), (hop[n - 1], hop[n - 1]), omega(n, Lam)) for n in range(1, N + 1)]
    ops, corr = backward_operators(sym, blk, ("t-matrix",), impurity_level=False)
    _r, ds = spectral_run(sym.from_explicit(blk), 0, omega(0, Lam), sym, steps, EngineSettings(kept_states=10 ** 6),
                          ops, [0.0], corr, bins_per_decade=None)
    comps = [(0, 1), (1, 1)] if symmetry == "su2" else [(0, 1), (0, -1), (1, 1), (1, -1)]
    assert len(ds.components) == len(comps)
    for ci, (k, s) in enumerate(comps):
        O = c[mode(0, k, s)] @ H_imp - H_imp @ c[mode(0, k, s)]
        A = W.T @ O.T @ W
        o1, w1 = merged(ds.omega[0, 0, ci], ds.weight[0, 0, ci])
        o2, w2 = merged(om, (A * A * (rho[None, :] + rho[:, None])).ravel())
        assert o1.shape == o2.shape
        np.testing.assert_allclose(o1, o2, atol=1e-9)
        np.testing.assert_allclose(w1, w2, atol=1e-10)


@pytest.mark.parametrize("text,message", [
    ('[impurity]\nmodel = "kondo"\n[spectral]\ntemperatures = [0.0]\nquantities = ["chi"]\n',
     "spectral.quantities: expected list of distinct names from: impurity, t-matrix, spin-susceptibility"),
    ('[impurity]\nmodel = "kondo"\n[spectral]\ntemperatures = [0.0]\nquantities = ["t-matrix", "t-matrix"]\n',
     "spectral.quantities: expected list of distinct names"),
    ('[impurity]\nmodel = "kondo"\n[spectral]\ntemperatures = [0.0]\nquantities = "t-matrix"\n',
     "spectral.quantities: expected a list of names, got str"),
    ('[impurity]\nmodel = "kondo"\n[spectral]\ntemperatures = [0.0]\nquantities = ["impurity"]\n',
     'spectral.quantities: expected impurity.model = "anderson" or "resonant-level"'),
    ('[impurity]\nmodel = "two-channel-kondo"\n[spectral]\ntemperatures = [0.0]\nself_energy = true\n',
     "spectral.self_energy: expected impurity.model"),
    ('[impurity]\nmodel = "kondo"\n[spectral]\ntransport_temperatures = [0.5, 2.0]\n',
     "spectral.transport_temperatures: expected temperatures < half_bandwidth"),
    ('[impurity]\nmodel = "kondo"\n[spectral]\ntransport_temperatures = [0.0]\n',
     "spectral.transport_temperatures: expected list of 1 to 64 numbers > 0"),
])
def test_bad_dynamics_requests_are_one_clear_error(text, message):
    """Bad spectral requests name the key, what was received and what is allowed (common practice)."""
    from nrgsolve.config import parse_config
    from nrgsolve.errors import ConfigError
    with pytest.raises(ConfigError) as err:
        parse_config(text)
    assert message in str(err.value)
