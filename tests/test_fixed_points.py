"""Fixed points read off the level flow (nrgsolve.observables.fixed_points and its driver/storage/CLI side).

Small runs: Λ = 3, one twist, a few hundred kept states, explicit discretization settings.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from nrgsolve.config import parse_config
from nrgsolve.observables.fixed_points import (chain_multiplets, fixed_point_sequence, format_sequence,
                                               single_particle_flow)
from nrgsolve.solve import solve


def _run(text):
    return solve(parse_config(text, "test.toml"), workers=1)


def _toml(impurity: str, lowest: float, kept: int = 300, scheme: str = "wilson", bath: str = "",
          extra_run: str = "", correction: bool = True) -> str:
    corr = f"wilson_correction = {'true' if correction else 'false'}\n" if scheme == "wilson" else ""
    return (f"[impurity]\n{impurity}\n{bath}\n[discretization]\nLambda = 3.0\ntwists = 1\nscheme = \"{scheme}\"\n"
            f"{corr}\n[run]\nkept_states = {kept}\nlowest_temperature = {lowest}\n{extra_run}")


def _labels(result):
    return [lab for lab, _, _ in result.fixed_points[1].sequence]


# --------------------------------------------------------------------------- #
# the candidate spectra themselves

def _fock_levels(h):
    """Many-body levels (E, Q, 2S_z) of a spinful quadratic chain h (n×n) by brute force in Fock space."""
    n = h.shape[0]
    modes = 2 * n
    dim = 1 << modes
    H = np.zeros((dim, dim))
    for state in range(dim):
        for a in range(modes):
            for b in range(modes):
                if a % 2 != b % 2 or h[a // 2, b // 2] == 0.0:
                    continue
                # c†_a c_b |state>
                if not (state >> b) & 1:
                    continue
                s1 = state ^ (1 << b)
                sign = (-1) ** bin(state & ((1 << b) - 1)).count("1")
                if (s1 >> a) & 1:
                    continue
                sign *= (-1) ** bin(s1 & ((1 << a) - 1)).count("1")
                H[s1 | (1 << a), state] += sign * h[a // 2, b // 2]
    out = []
    occ = np.array([[(s >> a) & 1 for a in range(modes)] for s in range(dim)])
    q = occ.sum(1) - n
    sz = occ[:, 0::2].sum(1) - occ[:, 1::2].sum(1)
    for qq, ss in set(zip(q.tolist(), sz.tolist())):
        idx = np.flatnonzero((q == qq) & (sz == ss))
        for e in np.linalg.eigvalsh(H[np.ix_(idx, idx)]):
            out.append((e, qq, ss))
    return out


def test_free_chain_multiplets_match_brute_force_fock_space_diagonalization():
    """The filled single-particle levels of a short chain, grouped into (Q, S) multiplets, reproduce the
    many-body spectrum of the same chain diagonalized in its full Fock space (exact, computed
    independently here with numpy; common practice, no source)."""
    onsite = np.array([0.05, -0.02, 0.01])
    hopping = np.array([0.4, 0.25])
    scales = np.array([1.0, 0.5, 0.3])
    sp = single_particle_flow(onsite, hopping, scales, 0, 2, potential=0.1)
    E, Q, S = chain_multiplets(sp[2], ecut=50.0)
    h = np.diag(onsite) + np.diag(hopping, 1) + np.diag(hopping, -1)
    h[0, 0] += 0.1
    ref = _fock_levels(h / scales[2])
    e0 = min(r[0] for r in ref)
    # multiplet content of the reference: count states with 2S_z = 2S minus those with 2S + 2
    got = sorted((round(e, 4), int(q), int(s)) for e, q, s in zip(E, Q, S))
    keyed = {}
    for e, q, s in ref:
        keyed.setdefault((round(e - e0, 4), q), []).append(s)
    want = []
    for (e, q), szs in keyed.items():
        for m in range(max(szs), -1, -1):
            want += [(e, q, m)] * (szs.count(m) - szs.count(m + 2))
    assert sum(s + 1 for _, _, s in got) == 4 ** 3          # every state of three spinful sites
    assert got == sorted(want)


def test_sequence_text_names_ranges():
    """The summary line reads like a practitioner's description of a flow (format of the issue)."""
    it = np.arange(0, 50)
    lab = ["free-orbital"] * 9 + [""] * 5 + ["local-moment"] * 17 + [""] * 11 + ["strong-coupling"] * 8
    seq = fixed_point_sequence(it, lab)
    assert seq == [("free-orbital", 0, 8), ("local-moment", 14, 30), ("strong-coupling", 42, 49)]
    assert format_sequence(seq, 0, 49) == "free-orbital (N ≤ 8) → local-moment (14–30) → strong-coupling (N ≥ 42)"


# --------------------------------------------------------------------------- #
# physics of whole runs

@pytest.mark.parametrize("scheme", ["wilson", "adaptive"])
def test_antiferromagnetic_kondo_goes_from_local_moment_to_strong_coupling(scheme):
    """J > 0: the free spin is screened; the spectrum goes from a free spin times the chain to the chain
    without site 0 (phase shift π/2) (Wilson, Rev. Mod. Phys. 47, 773 (1975))."""
    r = _run(_toml('model = "kondo"\nexchange = 0.12', 1e-12, scheme=scheme))
    summ = r.fixed_points[1]
    assert _labels(r) == ["local-moment", "strong-coupling"]
    assert summ.final == "strong-coupling"
    assert summ.phase_shift == pytest.approx(0.5, abs=0.01)
    # the crossover between them is the Kondo scale seen in the thermodynamics of the same run
    tk = r.summary.kondo_temperature_crossover
    assert tk / 3 < summ.crossover_temperatures[0] < 3 * tk


def test_ferromagnetic_kondo_stays_a_local_moment():
    """J < 0 scales to zero: the impurity stays a free spin down to T → 0 (Anderson, J. Phys. C 3, 2436
    (1970); Wilson 1975)."""
    r = _run(_toml('model = "kondo"\nexchange = -0.2', 1e-12))
    assert _labels(r) == ["local-moment"]
    assert r.fixed_points[1].final == "local-moment"
    assert r.fixed_points[1].sequence[0][1] <= 2


def test_symmetric_anderson_model_passes_free_orbital_local_moment_strong_coupling():
    """U ≫ Γ: free orbital for T ≫ U, local moment for T_K ≪ T ≪ U, strong coupling below T_K, with
    the crossovers near U and near T_K (Krishna-murthy, Wilkins & Wilson, Phys. Rev. B 21, 1003 (1980)).
    T_K is compared with the estimate T_K = 0.182 U √(ρJ) exp(−1/ρJ), ρJ = 8Γ/(πU), of the same paper
    (from memory, hence a factor 2) and with the thermodynamic T_K of the run; "near U" is taken as
    within a factor 10 (the crossover is broad)."""
    U, G = 1.5e-3, 1e-4
    r = _run(_toml(f'model = "anderson"\ninteraction = {U}\nhybridization = {G}', 1e-11))
    summ = r.fixed_points[1]
    assert _labels(r) == ["free-orbital", "local-moment", "strong-coupling"]
    t_fo, t_k = summ.crossover_temperatures
    assert U / 10 < t_fo < 10 * U
    rho_j = 8 * G / (math.pi * U)
    estimate = 0.182 * U * math.sqrt(rho_j) * math.exp(-1 / rho_j)
    assert estimate / 2 < t_k < 2 * estimate
    tk = r.summary.kondo_temperature_crossover
    assert tk / 2 < t_k < 2 * tk
    assert summ.phase_shift == pytest.approx(0.5, abs=0.01)


@pytest.mark.slow
@pytest.mark.parametrize("scheme, correction", [("adaptive", False), ("wilson", False)])
def test_asymmetric_anderson_phase_shift_obeys_the_friedel_sum_rule(scheme, correction):
    """At T = 0 the phase shift per spin is δ = π⟨n_d⟩/2 (Friedel sum rule; Langreth, Phys. Rev. 150,
    516 (1966)): the fitted phase shift of the final Fermi liquid against ⟨n_d⟩ of the same run, 2 %.
    Wilson's scheme without the A_Λ correction checks that the phase shift is read with the chain's own
    density of states (g/A_Λ), not the continuum's."""
    r = _run(_toml('model = "anderson"\ninteraction = 1.5e-3\nhybridization = 1e-4\nlevel = -4e-4', 1e-11,
                   scheme=scheme, correction=correction))
    summ = r.fixed_points[1]
    assert summ.final == "strong-coupling"
    n_d = float(r.thermo.extra["occupation"][0])
    assert 0.8 < n_d < 0.97                      # genuinely away from half filling
    assert summ.phase_shift == pytest.approx(n_d / 2, rel=0.02)


def test_resonant_level_phase_shift_is_the_exact_one():
    """U = 0: the level ε_d > 0 hybridized with a flat band has the exact Fermi-level phase shift
    δ = arctan(Γ/ε_d) (the real part of the flat-band self-energy vanishes at ω = 0; textbook,
    exact).  The run goes from the free orbital to a generic phase-shifted Fermi liquid."""
    G, eps = 1e-4, 2e-4
    r = _run(_toml(f'model = "resonant-level"\nhybridization = {G}\nlevel = {eps}', 1e-9, scheme="adaptive"))
    summ = r.fixed_points[1]
    assert _labels(r) == ["free-orbital", "fermi-liquid"]
    assert summ.phase_shift == pytest.approx(math.atan(G / eps) / math.pi, rel=0.01)


def test_mixed_valence_anderson_model_passes_the_valence_fluctuation_fixed_point():
    """ε_d = 0, U ≫ T ≫ Γ: the empty and singly occupied impurity states are degenerate and decoupled
    (valence fluctuation); below Γ a Fermi liquid with δ/π = ⟨n_d⟩/2 (Krishna-murthy, Wilkins &
    Wilson 1980; Langreth 1966).  Here ⟨n_d⟩ ≈ 0.19, so δ/π ≈ 0.09: the frozen-impurity end of the line."""
    r = _run(_toml('model = "anderson"\ninteraction = 0.3\nhybridization = 1e-5\nlevel = 0.0', 1e-9,
                   scheme="adaptive"))
    summ = r.fixed_points[1]
    assert _labels(r) == ["valence-fluctuation", "frozen-impurity"]
    n_d = float(r.thermo.extra["occupation"][0])
    assert summ.phase_shift == pytest.approx(n_d / 2, rel=0.02)


@pytest.mark.slow
def test_two_channel_kondo_ends_at_the_two_channel_fixed_point():
    """Equal couplings: overscreened non-Fermi-liquid fixed point with the conformal levels
    0, 1/8, 1/2, 5/8, 1 (Affleck & Ludwig, Nucl. Phys. B 360, 641 (1991), from memory)."""
    r = _run(_toml('model = "two-channel-kondo"\nexchange = 0.3', 1e-7, kept=250))
    assert r.fixed_points[1].final == "two-channel"
    assert _labels(r)[-2:] == ["local-moment", "two-channel"]


@pytest.mark.slow
@pytest.mark.parametrize("j1, j2, channel", [(0.3, 0.2, 1), (0.2, 0.3, 2)])
def test_unequal_two_channel_kondo_ends_at_strong_coupling_in_the_stronger_channel(j1, j2, channel):
    """J_1 ≠ J_2: the channel asymmetry is relevant and the more strongly coupled channel screens the
    spin alone, a Fermi liquid: that channel's chain loses site 0, the other stays free (Nozières &
    Blandin, J. Phys. (Paris) 41, 193 (1980); Affleck, Ludwig, Pang & Cox, Phys. Rev. B 45, 7918 (1992);
    both from memory)."""
    r = _run(_toml(f'model = "two-channel-kondo"\nexchange = {j1}\nexchange_second_channel = {j2}', 1e-7,
                   kept=250))
    summ = r.fixed_points[1]
    assert summ.final == "strong-coupling"
    assert summ.screening_channel == channel
    assert "two-channel" not in _labels(r)


def test_spin_one_kondo_is_underscreened():
    """One channel screens half of a spin 1: a spin ½ times the strong-coupling chain remains
    (Nozières & Blandin 1980, from memory)."""
    r = _run(_toml('model = "spin-kondo"\nspin = 1\nexchange = 0.15', 1e-12))
    assert r.fixed_points[1].final == "underscreened"
    assert _labels(r) == ["local-moment", "underscreened"]


@pytest.mark.slow
def test_shipped_pseudogap_sweep_brackets_the_transition_from_the_labels_alone():
    """Γ(ε) ∝ |ε|^r, r = 0.25: below the critical coupling the spin stays free (local moment), above it
    the impurity flows to the particle-hole symmetric strong-coupling fixed point of the pseudogap chain
    (Withoff & Fradkin, Phys. Rev. Lett. 64, 1835 (1990); Gonzalez-Buxton & Ingersent, Phys. Rev. B 57,
    14254 (1998), from memory).  The shipped sweep's comment puts the critical ρJ between 0.23 and 0.24
    (from its thermodynamics); the final labels of those two points of the shipped sweep must say the same.
    (Adaptive scheme; run by hand: local-moment for ρJ ≤ 0.23, strong-coupling for ρJ ≥ 0.24.)"""
    from pathlib import Path
    from nrgsolve.config import load_config
    from nrgsolve.sweep import sweep_points
    shipped = Path(__file__).resolve().parents[1] / "configs" / "pseudogap_sweep.toml"
    points = {dict(p.values)["impurity.exchange"]: p.spec for p in sweep_points(load_config(shipped))}
    below, above = solve(points[0.23], workers=1), solve(points[0.24], workers=1)
    assert below.fixed_points[1].final == "local-moment"
    assert above.fixed_points[1].final == "strong-coupling"
    assert math.isnan(above.fixed_points[1].phase_shift)     # no density of states at ε = 0: no phase shift


# --------------------------------------------------------------------------- #
# storage, command line, plots

def _write(tmp_path, text, name="run.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_fixed_points_are_stored_printed_and_plotted(tmp_path, capsys):
    """The stored labels and summary round-trip; run and inspect print the sequence; plot flow shades it
    (common practice, no source)."""
    from nrgsolve.cli import main
    from nrgsolve.store import read_result, stored_fixed_points
    cfg = _write(tmp_path, _toml('model = "kondo"\nexchange = 0.12', 1e-12))
    out = tmp_path / "k.h5"
    assert main(["run", str(cfg), "--output", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "fixed points: local-moment (N ≤" in printed and "→ strong-coupling (N ≥" in printed
    stored = read_result(out)
    fp = stored_fixed_points(stored)
    assert fp["final"] == "strong-coupling"
    assert [s[0] for s in fp["sequence"]] == ["local-moment", "strong-coupling"]
    assert len(fp["labels"]) == len(stored.flow["iteration"])
    assert fp["labels"][-1] == "strong-coupling"
    assert fp["phase_shift"] == pytest.approx(0.5, abs=0.01)
    assert main(["inspect", str(out)]) == 0
    text = capsys.readouterr().out
    assert "fixed points: local-moment" in text and "crossover temperatures: local-moment → strong-coupling" in text
    png = tmp_path / "f.png"
    assert main(["plot", "flow", str(out), str(out), "--output", str(png)]) == 0
    assert png.is_file()


def test_old_files_without_fixed_points_still_open(tmp_path, capsys):
    """A file written before the fixed-point analysis (no /flow/fixed_point, no summary attributes) is
    still inspected and plotted (common practice, no source)."""
    import h5py
    from nrgsolve.cli import main
    from nrgsolve.store import write_result, read_result, stored_fixed_points
    r = _run(_toml('model = "kondo"\nexchange = 0.12', 1e-6))
    out = write_result(r, tmp_path / "old.h5")
    with h5py.File(out, "a") as h:
        for name in ("fixed_point", "fixed_point_error", "phase_shift"):
            del h["flow"][name]
        for name in ("fixed_points", "fixed_point_first_iteration", "fixed_point_last_iteration",
                     "crossover_temperatures", "final_fixed_point", "phase_shift", "screening_channel",
                     "fixed_point_text"):
            del h["summary"].attrs[name]
    assert stored_fixed_points(read_result(out)) is None
    assert main(["inspect", str(out)]) == 0
    assert "fixed points: not stored" in capsys.readouterr().out
    assert main(["plot", "flow", str(out), "--output", str(tmp_path / "old.png")]) == 0
