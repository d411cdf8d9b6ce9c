"""Figures drawn from stored result files: level flow, thermodynamics, legends, saving."""

import math

import numpy as np
import pytest

from nrgsolve.config import parse_config
from nrgsolve.errors import NrgInputError
from nrgsolve.plots import differing_parameters, new_figure, plot_flow, plot_thermo, run_labels, save_figure
from nrgsolve.solve import solve
from nrgsolve.store import read_result, write_result

from cli_helpers import tiny_kondo


def _store(folder, name, text):
    path = folder / f"{name}.h5"
    write_result(solve(parse_config(text, f"{name}.toml"), workers=1), path)
    return read_result(path)


@pytest.fixture(scope="module")
def stored(tmp_path_factory):
    d = tmp_path_factory.mktemp("plots")
    abelian = tiny_kondo(0.2).replace("[run]\n", "[run]\nsymmetry = \"abelian\"\n")
    return {
        "k20": _store(d, "k20", tiny_kondo(0.2)),
        "k15": _store(d, "k15", tiny_kondo(0.15)),
        "k20_again": _store(d, "k20_again", tiny_kondo(0.2)),
        "ferro": _store(d, "ferro", tiny_kondo(-0.2)),
        "abelian": _store(d, "abelian", abelian),
        "lam25": _store(d, "lam25", tiny_kondo(0.15).replace("Lambda = 3.0", "Lambda = 2.5")),
    }


def _texts(ax):
    return [t.get_text() for t in ax.texts]


def test_flow_has_even_and_odd_panels_with_one_line_per_level(stored):
    r = stored["k20"]
    fig = plot_flow(r, levels=6)
    even, odd = fig.axes[:2]
    N = r.flow["iteration"]
    for ax, parity in ((even, 0), (odd, 1)):
        lines = ax.get_lines()
        assert len(lines) == 6
        xs = lines[0].get_xdata()
        assert set(np.asarray(xs) % 2) == {parity}
        np.testing.assert_array_equal(xs, N[N % 2 == parity])
        # the lowest line is the ground state at 0 in units of ω_N
        assert np.allclose(lines[0].get_ydata(), 0.0, atol=1e-9)


def test_flow_labels_are_the_quantum_numbers_of_the_last_iteration(stored):
    r = stored["k20"]
    fig = plot_flow(r, levels=6, labelled=4)
    N = r.flow["iteration"]
    for ax, parity in zip(fig.axes[:2], (0, 1)):
        last = np.flatnonzero(N % 2 == parity)[-1]
        labels = " ".join(_texts(ax))
        half = lambda t: str(t // 2) if t % 2 == 0 else f"{t}/2"
        for k in range(4):
            s2 = int(r.flow["twice_spin"][last, k])
            # (Q, S), or (I, S) when the run used the isospin symmetry (the default for this symmetric model)
            first = (",".join(half(int(i)) for i in r.flow["twice_isospin"][last, k]) if "twice_isospin" in r.flow
                     else str(int(r.flow["charge"][last, k])))
            assert f"({first}, {half(s2)})" in labels


def test_flow_of_the_strong_coupling_fixed_point_even_ground_state_is_a_singlet(stored):
    """Screened Kondo impurity: the even-N ground state is a charge-neutral spin singlet (Wilson 1975)."""
    fig = plot_flow(stored["k20"], levels=4, labelled=1)
    assert _texts(fig.axes[0])[0].startswith("(0, 0)")


def test_flow_abelian_labels_name_s_z(stored):
    r = stored["abelian"]
    fig = plot_flow(r, levels=5)
    assert "S_z" in fig._suptitle.get_text()
    labels = " ".join(_texts(fig.axes[1]))
    assert "(0, 1/2)" in labels and "(0, -1/2)" in labels       # odd N: doublet ground state, both S_z


def test_flow_draws_into_given_axes(stored):
    fig, axes = new_figure(1, 2)
    out = plot_flow(stored["k15"], levels=3, ax=axes)
    assert out is fig and all(len(a.get_lines()) == 3 for a in axes)
    with pytest.raises(NrgInputError, match="levels: got 0"):
        plot_flow(stored["k15"], levels=0)


def test_thermo_draws_the_stored_curves(stored):
    runs = [stored["k20"], stored["k15"]]
    fig = plot_thermo(runs, quantity="entropy")
    ax = fig.axes[0]
    assert ax.get_xscale() == "log"
    assert "k_B" in ax.get_ylabel() and "D" in ax.get_xlabel()
    for line, r in zip(ax.get_lines(), runs):
        np.testing.assert_allclose(line.get_xdata(), r.thermo["temperature"])
        np.testing.assert_allclose(line.get_ydata(), r.thermo["entropy"])


def test_thermo_on_the_kondo_scale_divides_by_the_stored_kondo_temperature(stored):
    runs = [stored["k20"], stored["k15"]]
    fig = plot_thermo(runs, quantity="T_chi", scale="kondo")
    ax = fig.axes[0]
    assert "T_K" in ax.get_xlabel()
    for line, r in zip(ax.get_lines(), runs):
        tk = r.summary["kondo_temperature_crossover"]
        np.testing.assert_allclose(np.asarray(line.get_xdata()) * tk, r.thermo["temperature"])
        # by the definition of the crossover scale, T·χ passes 0.07 at T/T_K = 1
        x, y = np.asarray(line.get_xdata()), np.asarray(line.get_ydata())
        assert np.interp(0.0, np.log(x), y) == pytest.approx(0.07, abs=2e-3)


def test_thermo_on_the_kondo_scale_needs_a_kondo_temperature(stored):
    assert math.isnan(stored["ferro"].summary["kondo_temperature_crossover"])
    with pytest.raises(NrgInputError, match="ferro.h5.*no Kondo temperature"):
        plot_thermo([stored["k20"], stored["ferro"]], scale="kondo")
    with pytest.raises(NrgInputError, match="quantity: got"):
        plot_thermo([stored["k20"]], quantity="susceptibility")


def test_legend_names_the_parameter_that_differs(stored):
    runs = [stored["k20"], stored["k15"]]
    assert differing_parameters(runs) == ["impurity.exchange"]
    assert run_labels(runs) == ["ρJ = 0.2", "ρJ = 0.15"]
    fig = plot_thermo(runs)
    assert [t.get_text() for t in fig.axes[0].get_legend().get_texts()] == ["ρJ = 0.2", "ρJ = 0.15"]


def test_legend_with_two_differing_parameters(stored):
    runs = [stored["k20"], stored["lam25"]]
    assert differing_parameters(runs) == ["impurity.exchange", "discretization.Lambda"]
    assert run_labels(runs) == ["ρJ = 0.2, Λ = 3", "ρJ = 0.15, Λ = 2.5"]


def test_legend_falls_back_to_file_names_when_configs_agree(stored):
    runs = [stored["k20"], stored["k20_again"]]
    assert differing_parameters(runs) == []
    assert run_labels(runs) == ["k20", "k20_again"]


def test_save_figure_writes_png_and_pdf_and_refuses_to_overwrite(stored, tmp_path):
    fig = plot_flow(stored["k20"], levels=4)
    written = save_figure(fig, tmp_path / "f.png")
    assert [p.name for p in written] == ["f.png", "f.pdf"]
    assert (tmp_path / "f.png").stat().st_size > 5000
    assert (tmp_path / "f.pdf").read_bytes()[:5] == b"%PDF-"
    before = (tmp_path / "f.png").read_bytes()
    with pytest.raises(NrgInputError, match="already exists"):
        save_figure(fig, tmp_path / "f.png")
    assert (tmp_path / "f.png").read_bytes() == before
    with pytest.raises(NrgInputError, match=".png"):
        save_figure(fig, tmp_path / "f.svg")
    save_figure(fig, tmp_path / "f.png", force=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["f.pdf", "f.png"]


def test_legend_uses_file_names_when_too_many_parameters_differ(stored, tmp_path):
    other = tiny_kondo(0.15).replace("Lambda = 3.0", "Lambda = 2.5").replace("kept_states = 80", "kept_states = 70")
    other = other.replace("[run]\n", "[run]\nbeta_bar = 0.6\n")
    r = _store(tmp_path, "many", other)
    assert len(differing_parameters([stored["k20"], r])) == 4
    assert run_labels([stored["k20"], r]) == ["k20", "many"]


def test_thermo_draws_impurity_magnetization_of_a_field_run(tmp_path):
    """An abelian run with a field stores M = ⟨S_z,imp⟩; `plot thermo --quantity magnetization` draws it
    (positive for h > 0 with H = −h S_z), and a run without it is refused with a one-line error."""
    text = """
[impurity]
model = "anderson"
interaction = 0.1
hybridization = 0.01
field = 0.001
[run]
symmetry = "abelian"
kept_states = 150
lowest_temperature = 1e-5
"""
    stored = read_result(write_result(solve(parse_config(text), workers=1), tmp_path / "field.h5"))
    fig = plot_thermo([stored], quantity="magnetization")
    y = fig.axes[0].lines[0].get_ydata()
    assert len(y) > 10 and y.min() > 0 and y.max() < 0.5
    np.testing.assert_allclose(y, stored.thermo["impurity_sz"][np.isfinite(stored.thermo["impurity_sz"])])
    no_field = read_result(write_result(solve(parse_config(text.replace('symmetry = "abelian"\n', '').replace(
        "field = 0.001\n", "")), workers=1), tmp_path / "plain.h5"))
    with pytest.raises(NrgInputError, match="impurity_sz"):
        plot_thermo([no_field], quantity="magnetization")
