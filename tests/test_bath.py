"""Tests of nrgsolve.bath: hybridization shapes, integrals, table files."""

import dataclasses
import math

import numpy as np
import pytest
from scipy.integrate import quad

from nrgsolve.bath import Bath, make_bath, read_table
from nrgsolve.errors import NrgInputError, TableError

# Independent definitions of the shapes (closed forms, written out again here).
CLOSED = {
    "flat": lambda e, d, r: 1.0 if abs(e) <= d else 0.0,
    "semicircular": lambda e, d, r: math.sqrt(1.0 - (e / d) ** 2) if abs(e) <= d else 0.0,
    "power-law": lambda e, d, r: abs(e / d) ** r if abs(e) <= d else 0.0,
}
ASYM_E = [-1.0, -0.6, -0.25, -0.05, 0.0, 0.1, 0.3, 0.55, 0.7]
ASYM_G = [0.2, 1.0, 0.6, 0.9, 0.8, 0.4, 1.1, 0.5, 0.0]


def _write(tmp_path, text, name="hyb.dat"):
    path = tmp_path / name
    path.write_text(text)
    return path


@pytest.mark.parametrize("shape,d,r", [("flat", 1.0, 0.0), ("semicircular", 1.0, 0.0), ("semicircular", 2.5, 0.0),
                                       ("power-law", 1.0, 0.5), ("power-law", 3.0, 1.0)])
def test_shape_function_matches_closed_form_and_vanishes_outside_band(shape, d, r):
    """g(ε) of each analytic shape against its closed form, 0 outside [−D, D].

    Source: definitions of the shapes (flat band; Bethe-lattice semicircle
    normalised to g(0) = 1; pseudogap power law) — common practice, no source.
    """
    bath = make_bath(shape, half_bandwidth=d, exponent=r)
    eps = np.linspace(-1.3 * d, 1.3 * d, 53)
    expect = np.array([CLOSED[shape](e, d, r) for e in eps])
    np.testing.assert_allclose(bath.shape_function(eps), expect, rtol=1e-14, atol=1e-15)
    assert bath.shape_function(np.array([0.0]))[0] == (0.0 if r > 0 else 1.0)


@pytest.mark.parametrize("shape,d,r", [("flat", 1.0, 0.0), ("semicircular", 1.0, 0.0), ("semicircular", 2.0, 0.0),
                                       ("power-law", 1.0, 0.5), ("power-law", 1.5, 2.0)])
@pytest.mark.parametrize("a,b", [(-1.5, 1.5), (-0.7, 0.2), (0.1, 0.9), (-0.95, -0.3), (0.3, 2.0)])
def test_integral_matches_scipy_quad(shape, d, r, a, b):
    """∫_a^b g against scipy.integrate.quad of the independent closed-form g.

    Source: exact answer computed independently with scipy (common practice).
    """
    bath = make_bath(shape, half_bandwidth=d, exponent=r)
    pts = [p for p in (-d, 0.0, d) if a < p < b]
    ref = quad(lambda e: CLOSED[shape](e, d, r), a, b, points=pts or None, epsabs=1e-15, epsrel=1e-13, limit=200)[0]
    assert bath.integral(a, b) == pytest.approx(ref, rel=1e-11, abs=1e-14)


def test_total_weights_closed_forms():
    """∫ g over the band: flat 2D, semicircle πD/2, power law 2D/(r+1).

    Source: elementary integrals (textbook).
    """
    assert make_bath("flat", half_bandwidth=2.0).integral(-5, 5) == pytest.approx(4.0, rel=1e-15)
    assert make_bath("semicircular", half_bandwidth=3.0).integral(-3, 3) == pytest.approx(1.5 * math.pi, rel=1e-15)
    assert make_bath("power-law", exponent=0.5).integral(-1, 1) == pytest.approx(4.0 / 3.0, rel=1e-15)


@pytest.mark.parametrize("eps", [1e-30, 1e-12, 1e-6])
def test_cumulative_keeps_relative_accuracy_near_fermi_level(eps):
    """F(ε) = ∫_0^ε g for tiny ε: g(0)·ε (flat, semicircle, table), ε^{r+1}/(r+1) (power law).

    Source: Taylor expansion of the closed forms (semicircle: ε − ε³/6 + …;
    table: g(0)ε + s ε²/2 on its first segment) — common practice, no source.
    The logarithmic discretization needs these to full relative precision.
    """
    semi = make_bath("semicircular").cumulative(np.array([eps, -eps]))
    np.testing.assert_allclose(semi, [eps - eps ** 3 / 6, -eps + eps ** 3 / 6], rtol=1e-15)
    p = make_bath("power-law", exponent=0.5).cumulative(np.array([eps]))[0]
    assert p == pytest.approx(eps ** 1.5 / 1.5, rel=1e-14)
    table = make_bath("table", table=(ASYM_E, ASYM_G))
    slope_pos = (0.4 - 0.8) / 0.1
    slope_neg = (0.8 - 0.9) / 0.05
    got = table.cumulative(np.array([eps, -eps]))
    expect = [0.8 * eps + 0.5 * slope_pos * eps ** 2, -(0.8 * eps - 0.5 * slope_neg * eps ** 2)]
    np.testing.assert_allclose(got, expect, rtol=1e-14)


def test_table_is_piecewise_linear_zero_outside_and_integrates_exactly(tmp_path):
    """Table shape = linear interpolation of the points, 0 outside; ∫ exact.

    Source: definition (piecewise-linear interpolation); reference integral
    from scipy.integrate.quad with break points at the nodes.
    """
    text = "# energy  g\n\n" + "\n".join(f"{e!r} {g!r}   # point" for e, g in zip(ASYM_E, ASYM_G)) + "\n\n"
    bath = read_table(_write(tmp_path, text))
    assert bath.shape == "table" and bath.source.endswith("hyb.dat")
    assert bath.half_bandwidth == 1.0
    eps = np.linspace(-1.2, 1.2, 97)
    expect = np.interp(eps, ASYM_E, ASYM_G, left=0.0, right=0.0)
    np.testing.assert_allclose(bath.shape_function(eps), expect, rtol=0, atol=1e-15)
    for a, b in [(-1.1, 1.1), (-0.4, 0.2), (0.05, 0.65), (-0.8, -0.1)]:
        ref = quad(lambda e: np.interp(e, ASYM_E, ASYM_G, left=0.0, right=0.0), a, b,
                   points=[p for p in ASYM_E if a < p < b], epsabs=1e-15, epsrel=1e-13)[0]
        assert bath.integral(a, b) == pytest.approx(ref, rel=1e-12)


def test_table_band_is_largest_absolute_energy():
    """For a table, D = max(|ε_min|, |ε_max|) (project convention, DESIGN)."""
    bath = make_bath("table", table=([-0.5, -0.2, 0.0, 0.4, 1.5], [1, 1, 1, 1, 1]))
    assert bath.half_bandwidth == 1.5
    assert bath.integral(-2, 2) == pytest.approx(2.0, rel=1e-15)


def test_particle_hole_symmetry_flags():
    """g(−ε) = g(ε): analytic shapes yes; mirror table yes; asymmetric table no.

    Source: definitions — common practice, no source.
    """
    for shape in ("flat", "semicircular", "power-law"):
        assert make_bath(shape, exponent=0.5).is_particle_hole_symmetric()
    sym = make_bath("table", table=([-1, -0.5, 0, 0.5, 1], [0.1, 0.7, 1.0, 0.7, 0.1]))
    assert sym.is_particle_hole_symmetric()
    assert not make_bath("table", table=(ASYM_E, ASYM_G)).is_particle_hole_symmetric()
    assert not make_bath("table", table=([-1, -0.5, 0, 0.5, 1], [0.1, 0.7, 1.0, 0.7, 0.2])).is_particle_hole_symmetric()


def test_bath_is_frozen():
    """Inputs are immutable (STYLE rule 4)."""
    bath = make_bath("flat")
    with pytest.raises(dataclasses.FrozenInstanceError):
        bath.half_bandwidth = 2.0


GOOD = ["-1 0.5", "-0.5 1", "0 1", "0.5 1", "1 0.5"]


@pytest.mark.parametrize("lines,line_no,pattern", [
    (["-1 0.5", "-0.5 1", "-0.7 1", "0.5 1", "1 0.5"], 3, "strictly increasing"),
    (["-1 0.5", "-0.5 1", "-0.5 1", "0.5 1", "1 0.5"], 3, "strictly increasing"),
    (["-1 0.5", "-0.5 -1", "0 1", "0.5 1", "1 0.5"], 2, ">= 0"),
    (["-1 0.5", "-0.5 nan", "0 1", "0.5 1", "1 0.5"], 2, "finite"),
    (["-1 0.5", "-0.5 1", "inf 1", "0.5 1", "1 0.5"], 3, "finite"),
    (["-1 0.5", "-0.5 one", "0 1", "0.5 1", "1 0.5"], 2, "two numbers"),
    (["-1 0.5", "-0.5 1 2", "0 1", "0.5 1", "1 0.5"], 2, "two numbers"),
    (["-1 0.5", "-0.5", "0 1", "0.5 1", "1 0.5"], 2, "two numbers"),
    (["-1 0.5", "0 1", "1 0.5"], 3, "at least 5"),
])
def test_bad_table_files_name_file_and_line(tmp_path, lines, line_no, pattern):
    """Malformed tables raise TableError naming the file and the offending line.

    Source: project input rules (brief) — common practice, no source.
    """
    path = _write(tmp_path, "# header\n" + "\n".join(lines) + "\n")
    with pytest.raises(TableError, match=pattern) as info:
        read_table(path)
    msg = str(info.value)
    assert str(path) in msg and f"line {line_no + 1}" in msg     # +1 for the header line
    assert "\n" not in msg


def test_table_must_contain_fermi_level_inside(tmp_path):
    """ε_min < 0 < ε_max is required (project rule)."""
    path = _write(tmp_path, "\n".join(["0 1", "0.2 1", "0.4 1", "0.6 1", "1 1"]))
    with pytest.raises(TableError, match="Fermi level") as info:
        read_table(path)
    assert str(path) in str(info.value)


def test_table_with_only_zero_values_rejected(tmp_path):
    """A table without weight cannot be a bath (project rule)."""
    with pytest.raises(TableError, match="all hybridization values are 0"):
        read_table(_write(tmp_path, "\n".join(f"{e} 0" for e in (-1, -0.5, 0, 0.5, 1))))


def test_missing_or_unreadable_table_file(tmp_path):
    """Missing file or a directory: TableError naming the path."""
    missing = tmp_path / "nothere.dat"
    with pytest.raises(TableError, match="cannot read") as info:
        read_table(missing)
    assert str(missing) in str(info.value)
    with pytest.raises(TableError, match="cannot read"):
        read_table(tmp_path)
    with pytest.raises(TableError, match="cannot read"):
        make_bath("table", table=str(missing))


def test_good_table_file_via_make_bath(tmp_path):
    """make_bath("table", table=path) reads the file."""
    bath = make_bath("table", table=_write(tmp_path, "\n".join(GOOD)))
    assert bath.integral(-1, 1) == pytest.approx(0.25 * 2 * 1.5 + 1.0, rel=1e-15)


@pytest.mark.parametrize("kwargs,key,allowed", [
    (dict(shape="lorentzian"), "bath.shape", '"flat"'),
    (dict(shape="flat", half_bandwidth=0.0), "bath.half_bandwidth", "> 0"),
    (dict(shape="semicircular", half_bandwidth=-1.0), "bath.half_bandwidth", "> 0"),
    (dict(shape="flat", half_bandwidth=float("inf")), "bath.half_bandwidth", "> 0"),
    (dict(shape="power-law", exponent=-0.5), "bath.exponent", ">= 0"),
    (dict(shape="power-law", exponent=float("nan")), "bath.exponent", ">= 0"),
    (dict(shape="table"), "bath.table", "table"),
    (dict(shape="flat", table=([-1, 0, 1], [1, 1, 1])), "bath.table", "only allowed"),
    (dict(shape="table", table=([-1, -0.5, 0.5, 1], [1, 1, 1, 1])), "bath.table", "at least 5"),
    (dict(shape="table", table=([-1, -0.5, 0, 0.5, 1], [1, -1, 1, 1, 1])), r"bath.table\[1\]", ">= 0"),
])
def test_make_bath_rejects_bad_input(kwargs, key, allowed):
    """Bad bath parameters raise NrgInputError naming the key and the allowed range."""
    with pytest.raises(NrgInputError, match=key) as info:
        make_bath(**kwargs)
    assert allowed in str(info.value)


def test_exponent_ignored_for_other_shapes():
    """The exponent only matters for the power law (brief)."""
    assert make_bath("flat", exponent=-3.0).exponent == 0.0
    assert isinstance(make_bath("semicircular", exponent=2.0), Bath)
