"""Spin SU(2) × charge SU(2) (isospin) mode against the su2 mode and against dense exact diagonalization.

At particle-hole symmetry the charge of each channel is an SU(2) (I⁺_n = (−1)^n f†_{n↑} f†_{n↓};
Jones, Varma & Wilkins 1988, from memory): the engine's levels, expanded by their (2I+1)(2S+1)
degeneracy, must be the levels of the su2 mode and of the dense Hamiltonian.
"""

import numpy as np
import pytest

from nrgsolve.engine import make_symmetry, run_chain, EngineSettings
from nrgsolve.engine.iterate import chain_steps
from nrgsolve.engine.reference import kondo_dense_spectrum, anderson_dense_spectrum
from nrgsolve.errors import NrgInputError
from nrgsolve.models import anderson_block, kondo_block, two_channel_kondo_block
from conftest import expand_multiplets, omega, wilson_hopping

LAM = 2.0


def _run(symmetry, block, first, n_sites, kept, channels=1, first_hop=None):
    sym = make_symmetry(symmetry, channels)
    hop = wilson_hopping(np.arange(n_sites), LAM)
    steps = chain_steps(np.zeros(n_sites), hop, lambda n: omega(n, LAM), first, n_sites, channels, first_hop)
    return run_chain(sym.from_explicit(block), first - 1, omega(first - 1, LAM), sym, steps,
                     EngineSettings(kept_states=kept))


@pytest.fixture(scope="module")
def symmetric_anderson():
    V = np.sqrt(2 * 0.02 / np.pi)
    blk = anderson_block(-0.15, 0.3, V)
    return {s: _run(s, blk, 0, 10, 300, first_hop=[V]) for s in ("su2", "isospin")}, V


@pytest.fixture(scope="module")
def kondo_runs():
    blk = kondo_block(0.3, 0.0, 1)
    return {s: _run(s, blk, 1, 10, 300) for s in ("su2", "isospin")}


@pytest.fixture(scope="module")
def two_channel_runs():
    blk = two_channel_kondo_block(0.4, 0.4)
    return {s: _run(s, blk, 1, 7, 400, channels=2) for s in ("su2", "isospin")}


def _all_levels(rec):
    return expand_multiplets(rec.ground_energy + rec.scale * rec.energies, rec.multiplicity)


def test_isospin_anderson_matches_dense_diagonalization():
    """Symmetric Anderson model (U = 0.3, ε_d = −U/2) on 4 chain sites without truncation: every level
    of the isospin engine, with its (2I+1)(2S+1) degeneracy, is a level of the dense Hamiltonian
    (independent exact method: nrgsolve.engine.reference)."""
    V = 0.2
    res = _run("isospin", anderson_block(-0.15, 0.3, V), 0, 4, 10 ** 6, first_hop=[V])
    hop = wilson_hopping(np.arange(4), LAM)
    for rec in res.records:
        n = rec.index + 1
        dense = anderson_dense_spectrum(-0.15, 0.3, V, 0.0, np.zeros(n), hop[:n])
        np.testing.assert_allclose(_all_levels(rec), dense, atol=1e-10)


def test_isospin_spin_one_kondo_matches_dense_diagonalization():
    """Spin-1 Kondo model (ρJ = 0.15, no potential scattering) on 4 sites, no truncation: the isospin
    levels equal the dense spectrum (nrgsolve.engine.reference)."""
    res = _run("isospin", kondo_block(0.3, 0.0, 2), 1, 4, 10 ** 6)
    hop = wilson_hopping(np.arange(4), LAM)
    for rec in res.records:
        n = rec.index + 1
        dense = kondo_dense_spectrum(0.3, 0.0, 2, 0.0, np.zeros(n), hop[:n])
        np.testing.assert_allclose(_all_levels(rec), dense, atol=1e-10)


@pytest.mark.parametrize("case", ["anderson", "kondo", "two-channel"])
def test_isospin_and_su2_give_the_same_levels(case, symmetric_anderson, kondo_runs, two_channel_runs):
    """With truncation (300–400 kept states) the isospin mode keeps the same states as su2 and its
    levels, expanded into charge multiplets, equal the su2 levels with their 2S+1 degeneracies
    (the symmetry only regroups the same eigenstates; common practice, no source)."""
    runs = {"anderson": symmetric_anderson[0], "kondo": kondo_runs, "two-channel": two_channel_runs}[case]
    assert_same_levels_with_labels(runs["su2"], runs["isospin"])


def assert_same_levels_with_labels(a, b):
    for ra, rb in zip(a.records, b.records):
        assert ra.kept_states == rb.kept_states
        ka = sorted(zip(np.round(ra.energies, 7), ra.charge, ra.twice_spin))
        kb = sorted(zip(np.round(rb.energies, 7), rb.charge, rb.twice_spin))
        n = min(len(ka), 200)
        assert ka[:n] == kb[:n]
        assert np.all(rb.twice_isospin >= 0)


def test_isospin_blocks_are_smaller(symmetric_anderson):
    """The point of the symmetry: the largest block shrinks (here at least 1.5×) for the same states."""
    runs, _ = symmetric_anderson
    assert max(runs["isospin"].records[-1].block_dims) * 1.5 <= max(runs["su2"].records[-1].block_dims)


def test_ground_multiplet_of_the_symmetric_anderson_model_labels(symmetric_anderson):
    """An even number of orbitals (d level + chain sites 0..N, N even) at half filling: the ground state is
    unique and a spin singlet on this bipartite system (Lieb, Phys. Rev. Lett. 62, 1201 (1989), from
    memory), hence also an isospin singlet with charge 0."""
    runs, _ = symmetric_anderson
    rec = [r for r in runs["isospin"].records if (r.index + 2) % 2 == 0][-1]   # even number of orbitals
    assert rec.twice_spin[0] == 0 and rec.charge[0] == 0 and rec.twice_isospin[0, 0] == 0


def test_isospin_refuses_an_asymmetric_impurity():
    """ε_d ≠ −U/2 breaks particle-hole symmetry: the isospin mode refuses the block with a clear message."""
    with pytest.raises(NrgInputError, match="not particle-hole symmetric"):
        make_symmetry("isospin").from_explicit(anderson_block(-0.05, 0.3, 0.1))
    with pytest.raises(NrgInputError, match="not particle-hole symmetric"):
        make_symmetry("isospin").from_explicit(kondo_block(0.3, 0.1, 1))


def test_isospin_refuses_a_chain_with_onsite_energies():
    """A chain with ε_n ≠ 0 (asymmetric bath) is refused before any diagonalization."""
    sym = make_symmetry("isospin")
    hop = wilson_hopping(np.arange(4), LAM)
    steps = chain_steps(np.full(4, 0.01), hop, lambda n: omega(n, LAM), 1, 4)
    with pytest.raises(NrgInputError, match="on-site"):
        run_chain(sym.from_explicit(kondo_block(0.3, 0.0, 1)), 0, omega(0, LAM), sym, steps,
                  EngineSettings(kept_states=100))


# --------------------------------------------------------------------------------------------
# The driver: same thermodynamics as su2, "auto", refusals
# --------------------------------------------------------------------------------------------

from nrgsolve.api import as_spec                       # noqa: E402
from nrgsolve.errors import ConfigError                # noqa: E402
from nrgsolve.solve import solve, bath_from_spec       # noqa: E402
from nrgsolve.symmetry_choice import choose_symmetry   # noqa: E402

DRIVER_CASES = {
    "anderson": {"impurity": {"model": "anderson", "interaction": 0.1, "hybridization": 0.01}},
    "kondo": {"impurity": {"model": "kondo", "exchange": 0.25}},
    "two-channel": {"impurity": {"model": "two-channel-kondo", "exchange": 0.3}},
    "pseudogap": {"impurity": {"model": "anderson", "interaction": 0.1, "hybridization": 0.05},
                  "bath": {"shape": "power-law", "exponent": 0.3}},
}


def _config(case, symmetry):
    cfg = {k: dict(v) for k, v in DRIVER_CASES[case].items()}
    kept = 300 if case == "two-channel" else 200
    cfg["run"] = {"kept_states": kept, "lowest_temperature": 1e-5, "symmetry": symmetry}
    cfg["discretization"] = {"twists": 1}
    return cfg


@pytest.fixture(scope="module")
def driver_runs():
    return {(case, s): solve(as_spec(_config(case, s)), workers=1)
            for case in DRIVER_CASES for s in ("su2", "auto")}


@pytest.mark.parametrize("case", list(DRIVER_CASES))
def test_isospin_and_su2_give_the_same_thermodynamics(case, driver_runs):
    """Symmetric Anderson model, Kondo model, two-channel Kondo model and a symmetric pseudogap bath
    (g ∝ |ε|^0.3): "auto" picks isospin, and T·χ_imp, S_imp, C_imp and the impurity averages (full
    density matrix, with the bath run) equal those of su2 — the symmetry only regroups the same states (common practice, no source)."""
    su2, iso = driver_runs[(case, "su2")], driver_runs[(case, "auto")]
    assert iso.spec.run.symmetry == "isospin" and su2.spec.run.symmetry == "su2"
    np.testing.assert_allclose(iso.thermo.temperature, su2.thermo.temperature)
    for q in ("T_chi", "entropy", "heat"):
        np.testing.assert_allclose(getattr(iso.thermo, q), getattr(su2.thermo, q), atol=1e-7, err_msg=q)
    assert set(iso.thermo.extra) == set(su2.thermo.extra)
    for q in iso.thermo.extra:           # impurity averages (⟨n_d⟩, ⟨n_d↑n_d↓⟩), free energy
        np.testing.assert_allclose(iso.thermo.extra[q], su2.thermo.extra[q], atol=1e-7, err_msg=q)
    a, b = iso.twists[0].flow, su2.twists[0].flow
    np.testing.assert_allclose(a.energy[:, :10], b.energy[:, :10], atol=1e-7)


@pytest.mark.parametrize("cfg,breaker,fallback", [
    ({"impurity": {"model": "anderson", "interaction": 0.1, "level": -0.02, "hybridization": 0.01}},
     "impurity.level", "su2"),
    ({"impurity": {"model": "kondo", "exchange": 0.2, "potential_scattering": 0.05}},
     "impurity.potential_scattering", "su2"),
    ({"impurity": {"model": "kondo", "exchange": 0.2, "field": 1e-3}}, "impurity.field", "abelian"),
    ({"impurity": {"model": "kondo", "exchange": 0.2}, "bath": {"shape": "table", "table": "TABLE"}},
     "the bath", "su2"),
])
def test_isospin_refuses_what_breaks_particle_hole_symmetry_and_auto_falls_back(cfg, breaker, fallback, tmp_path):
    """ε_d ≠ −U/2, potential scattering, a field, an asymmetric table bath: "isospin" is refused with one
    line naming the cause, "auto" falls back to su2 (abelian in a field)."""
    if "bath" in cfg:
        table = tmp_path / "asymmetric.txt"
        table.write_text("-1.0 0.5\n-0.2 0.6\n0.0 0.8\n0.3 1.0\n1.0 1.0\n")
        cfg = {**cfg, "bath": {"shape": "table", "table": str(table)}}
    spec = as_spec({**cfg, "run": {"symmetry": "auto"}})
    assert choose_symmetry(spec, bath_from_spec(spec)) == fallback
    with pytest.raises(ConfigError, match=breaker):
        spec = as_spec({**cfg, "run": {"symmetry": "isospin"}})
        choose_symmetry(spec, bath_from_spec(spec))


def test_isospin_spectra_equal_su2_spectra():
    """The backward (spectral) pass in the isospin mode: the discrete weights of ⟨⟨d; d†⟩⟩ and of the
    self-energy correlator ⟨⟨d n; d†⟩⟩ (symmetric Anderson model, 10 sites, 150 kept states, T = 0 and
    T = 1e-3 D), summed in half-decade bins of ω, equal those of the su2 mode (common practice, no source)."""
    from nrgsolve.observables.spectral import spectral_run, impurity_operators
    V = np.sqrt(2 * 0.02 / np.pi)
    blk = anderson_block(-0.15, 0.3, V)
    hop = wilson_hopping(np.arange(10), LAM)
    steps = chain_steps(np.zeros(10), hop, lambda n: omega(n, LAM), 0, 10, 1, [V])
    out = {}
    for s in ("su2", "isospin"):
        sym = make_symmetry(s)
        _, out[s] = spectral_run(sym.from_explicit(blk), -1, omega(-1, LAM), sym, steps,
                                 EngineSettings(kept_states=150), impurity_operators(sym, blk, True), (0.0, 1e-3),
                                 (("G", "d", "d"), ("F", "dn", "d")), bins_per_decade=None)
    a, b = out["su2"], out["isospin"]
    np.testing.assert_allclose(b.total, a.total, atol=1e-12)
    np.testing.assert_allclose(b.lesser, a.lesser, atol=1e-12)
    edges = np.arange(-9, 1.01, 0.5)
    for x in range(2):
        for t in range(2):
            for sign in (1, -1):
                h = []
                for d in (a, b):
                    om, w = d.omega[x, t, 0], d.weight[x, t, 0]
                    sel = (np.sign(om) == sign) & (w != 0)
                    h.append(np.histogram(np.log10(np.abs(om[sel])), bins=edges, weights=w[sel])[0])
                np.testing.assert_allclose(h[1], h[0], atol=1e-10)
