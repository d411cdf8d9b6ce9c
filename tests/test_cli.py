"""The real command line (``python -m nrgsolve`` in a subprocess): run, plot, inspect and every
kind of bad input (exit code 2, one line on stderr, nothing written)."""

import math
import re
import shutil

import h5py
import numpy as np
import pytest

from nrgsolve.health import DISCARDED_WEIGHT_LIMIT
from hypothesis import HealthCheck, given, settings, strategies as st

from cli_helpers import assert_one_line_error, listing, run_cli, tiny_kondo


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    """Two small Kondo runs (ρJ = 0.2 and 0.15) and a ferromagnetic one (no Kondo temperature)."""
    d = tmp_path_factory.mktemp("runs")
    (d / "k20.toml").write_text(tiny_kondo(0.2))
    (d / "k15.toml").write_text(tiny_kondo(0.15))
    (d / "ferro.toml").write_text(tiny_kondo(-0.2))
    for name in ("k20", "k15", "ferro"):
        proc = run_cli("run", f"{name}.toml", "--quiet", cwd=d)
        assert proc.returncode == 0, proc.stderr
        assert proc.stderr == ""
    return d


def _png_ok(path):
    import matplotlib.image as mpimg
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    img = mpimg.imread(str(path))
    assert img.shape[0] > 200 and img.shape[1] > 200
    assert float(np.std(img[..., :3])) > 0.01          # not a blank canvas
    pdf = path.with_suffix(".pdf")
    assert pdf.read_bytes()[:5] == b"%PDF-"


# --- run and inspect ----------------------------------------------------------------------------------

def test_run_writes_a_result_and_reports_the_summary(tmp_path):
    (tmp_path / "k.toml").write_text(tiny_kondo(0.2))
    proc = run_cli("run", "k.toml", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "k.h5").is_file()
    assert "wrote" in proc.stdout and "Kondo temperature" in proc.stdout
    assert not list(tmp_path.glob("*.part"))


def _inspect_value(text, label):
    m = re.search(rf"^\s*{re.escape(label)}: (.*)$", text, flags=re.M)
    assert m, (label, text)
    return m.group(1).strip()


def _as_float(s):
    return math.nan if s == "not reached" else float(s.split()[0])


def test_inspect_prints_what_the_run_stored(results):
    """The numbers printed by inspect are the numbers in the file (read with h5py)."""
    path = results / "k20.h5"
    proc = run_cli("inspect", path, cwd=results)
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout
    with h5py.File(path, "r") as h:
        summ = dict(h["summary"].attrs)
        kept = np.concatenate([h[f"twists/{k}/diagnostics/kept_states"][()] for k in h["twists"]])
        weight = max(float(np.max(h[f"twists/{k}/diagnostics/discarded_weight"][()])) for k in h["twists"])
        z = [float(h[f"twists/{k}"].attrs["z"]) for k in h["twists"]]
        n_iter = len(h["twists/0/diagnostics/iteration"][()])
        config_text = h.attrs["config_text"]
        version = h.attrs["nrgsolve_version"]
        commit = h.attrs["git_commit"]
    for label, name in [("Kondo temperature (Wilson)", "kondo_temperature_wilson"),
                        ("Kondo temperature (crossover)", "kondo_temperature_crossover"),
                        ("Wilson ratio", "wilson_ratio"),
                        ("lowest temperature reached", "lowest_temperature_reached")]:
        got, want = _as_float(_inspect_value(out, label)), float(summ[name])
        if math.isnan(want):
            assert math.isnan(got), label
        else:
            assert got == pytest.approx(want, rel=1e-5), label
    assert math.isfinite(float(summ["kondo_temperature_crossover"]))       # an antiferromagnetic run screens
    assert _inspect_value(out, "kept states") == f"{kept.min()} to {kept.max()}"
    assert float(_inspect_value(out, "max discarded weight")) == pytest.approx(weight, rel=1e-2)
    assert f"z = {z[0]:.6g}: {n_iter} iterations" in out
    for line in config_text.strip().splitlines():
        assert line.strip() in out
    assert version in out
    if commit:
        assert commit in out
    # inspect derives the truncation warning from the stored weights, exactly when they pass the limit
    assert ("truncation too aggressive" in out) == (weight > DISCARDED_WEIGHT_LIMIT)


def test_inspect_derives_unreached_kondo_temperature(results):
    proc = run_cli("inspect", results / "ferro.h5", cwd=results)
    assert proc.returncode == 0, proc.stderr
    assert _inspect_value(proc.stdout, "Kondo temperature (crossover)") == "not reached"
    assert "Kondo temperature not reached" in proc.stdout


# --- plots ----------------------------------------------------------------------------------------------

def test_plot_flow_writes_png_and_pdf_with_default_name(results, tmp_path):
    proc = run_cli("plot", "flow", results / "k20.h5", "--levels", "8", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    _png_ok(tmp_path / "k20_flow.png")
    again = run_cli("plot", "flow", results / "k20.h5", cwd=tmp_path)
    assert_one_line_error(again, "k20_flow.png", "--force")
    forced = run_cli("plot", "flow", results / "k20.h5", "--force", "--quiet", cwd=tmp_path)
    assert forced.returncode == 0 and forced.stdout == ""


@pytest.mark.parametrize("quantity", ["T_chi", "entropy", "heat"])
def test_plot_thermo_of_several_runs(results, tmp_path, quantity):
    files = [results / "k20.h5", results / "k15.h5", results / "ferro.h5"]
    proc = run_cli("plot", "thermo", *files, "--quantity", quantity, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    _png_ok(tmp_path / f"thermo_{quantity}.png")


def test_plot_thermo_on_kondo_scale(results, tmp_path):
    out = tmp_path / "sub" / "scaled.png"
    proc = run_cli("plot", "thermo", results / "k20.h5", results / "k15.h5", "--scale", "kondo",
                   "--output", out, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    _png_ok(out)


def test_plot_thermo_kondo_scale_without_kondo_temperature_is_refused(results, tmp_path):
    before = listing(tmp_path)
    proc = run_cli("plot", "thermo", results / "k20.h5", results / "ferro.h5", "--scale", "kondo", cwd=tmp_path)
    assert_one_line_error(proc, "ferro.h5", "Kondo temperature")
    assert listing(tmp_path) == before


def test_plot_refuses_existing_pdf_too(results, tmp_path):
    (tmp_path / "thermo_T_chi.pdf").write_text("mine")
    proc = run_cli("plot", "thermo", results / "k20.h5", cwd=tmp_path)
    assert_one_line_error(proc, "thermo_T_chi.pdf")
    assert not (tmp_path / "thermo_T_chi.png").exists()
    assert (tmp_path / "thermo_T_chi.pdf").read_text() == "mine"


# --- bad input ------------------------------------------------------------------------------------------

BAD_CONFIGS = [
    ("[run]\nkept_state = 10\n", ["run.kept_state", "did you mean 'kept_states'"]),
    ("[discretization]\nLambda = \"three\"\n", ["discretization.Lambda", "a number"]),
    ("[discretization]\nLambda = 1.0\n", ["discretization.Lambda", ">= 1.2"]),
    ("[discretization]\ntwists = 0\n", ["discretization.twists", ">= 1"]),
    ("[impurity]\nmodel = \"anderson\"\nhybridization = -0.02\n", ["impurity.hybridization", "> 0"]),
    ("[run]\nkept_states = 0\n", ["run.kept_states", ">= 1"]),
    ("[run]\nlowest_temperature = 0\n", ["run.lowest_temperature", "> 0"]),
    ("[run]\nlowest_temperature = -0.001\n", ["run.lowest_temperature", "> 0"]),
    ("[runn]\nkept_states = 10\n", ["[runn]", "did you mean 'run'"]),
    ("[run\n", ["bad.toml", "not valid TOML"]),
    ("[bath]\nshape = \"table\"\ntable = \"missing_table.txt\"\n", ["missing_table.txt"]),
    ("[bath]\nshape = \"table\"\ntable = \"broken_table.txt\"\n", ["broken_table.txt", "line 2"]),
]


@pytest.mark.parametrize("text,names", BAD_CONFIGS, ids=[b[1][0] for b in BAD_CONFIGS])
@pytest.mark.parametrize("command", ["run", "sweep"])
def test_bad_config_exits_2_with_one_line_and_writes_nothing(tmp_path, text, names, command):
    (tmp_path / "broken_table.txt").write_text("-1.0 1.0\n0.0 oops\n1.0 1.0\n")
    body = text if command == "run" else text + "\n[sweep]\n\"impurity.exchange\" = [0.1, 0.2]\n"
    if text.startswith("[run\n"):
        body = text
    (tmp_path / "bad.toml").write_text(body)
    before = listing(tmp_path)
    proc = run_cli(command, "bad.toml", cwd=tmp_path)
    assert_one_line_error(proc, *names)
    assert listing(tmp_path) == before, "an input error must not write anything"


def test_missing_config_file(tmp_path):
    proc = run_cli("run", "no_such.toml", cwd=tmp_path)
    assert_one_line_error(proc, "no_such.toml")
    assert listing(tmp_path) == {}


def test_run_refuses_to_overwrite_without_force(tmp_path):
    (tmp_path / "k.toml").write_text(tiny_kondo(0.2))
    (tmp_path / "k.h5").write_bytes(b"precious")
    proc = run_cli("run", "k.toml", cwd=tmp_path)
    assert_one_line_error(proc, "k.h5", "--force")
    assert (tmp_path / "k.h5").read_bytes() == b"precious"
    assert sorted(listing(tmp_path)) == ["k.h5", "k.toml"]


@pytest.mark.parametrize("args,names", [
    (["inspect", "missing.h5"], ["missing.h5"]),
    (["inspect", "fake.h5"], ["fake.h5"]),
    (["plot", "flow", "missing.h5"], ["missing.h5"]),
    (["plot", "thermo", "fake.h5"], ["fake.h5"]),
    (["plot", "flow", "{k20}", "--levels", "0"], ["--levels", ">= 1"]),
    (["plot", "flow", "{k20}", "--output", "flow.jpg"], ["--output", ".png"]),
    (["plot", "thermo", "{k20}", "--quantity", "susceptibility"], ["--quantity"]),
    (["sweep", "{k20toml}"], ["no [sweep] table"]),
    (["sweep", "{k20toml}", "--jobs", "0"], ["--jobs", ">= 1"]),
])
def test_bad_command_line_arguments(results, tmp_path, args, names):
    (tmp_path / "fake.h5").write_text("not hdf5")
    args = [a.format(k20=results / "k20.h5", k20toml=results / "k20.toml") for a in args]
    before = listing(tmp_path)
    proc = run_cli(*args, cwd=tmp_path)
    assert_one_line_error(proc, *names)
    assert listing(tmp_path) == before


# --- property-based: random malformed configs through the real command line -------------------------

BASE_LINES = tiny_kondo(0.2).strip().splitlines()
ODD_VALUES = ["-1", "0", "0.5", "2", "3.7", "1e400", "nan", "true", "\"x\"", "\"abelian\"", "[1, 2]",
              "{ a = 1 }", "", "\"table\"", "\"anderson\""]
KEYS = ["model", "exchange", "Lambda", "twists", "kept_states", "lowest_temperature", "shape", "symmetry",
        "hybridization", "kept_state", "interactoin", "beta_bar", "field", "energy_cutoff", "table"]
edits = st.lists(st.tuples(st.integers(0, len(BASE_LINES)), st.sampled_from(KEYS), st.sampled_from(ODD_VALUES),
                           st.sampled_from(["insert", "replace", "garbage"])), min_size=1, max_size=3)


def _mutate(lines, ops):
    lines = list(lines)
    for pos, key, value, how in ops:
        pos = min(pos, len(lines))
        if how == "insert":
            lines.insert(pos, f"{key} = {value}")
        elif how == "replace" and pos < len(lines) and "=" in lines[pos]:
            lines[pos] = lines[pos].split("=")[0] + f"= {value}"
        else:
            lines.insert(pos, f"{key}{value}]=")
    return "\n".join(lines) + "\n"


@settings(max_examples=5, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(edits)
def test_random_malformed_configs_never_give_a_traceback(tmp_path, ops):
    work = tmp_path / f"case{abs(hash(str(ops))) % 10 ** 8}"
    work.mkdir()
    (work / "c.toml").write_text(_mutate(BASE_LINES, ops))
    proc = run_cli("run", "c.toml", "--output", "out.h5", "--quiet", cwd=work)
    assert "Traceback" not in proc.stderr
    assert proc.returncode in (0, 2), proc.stderr
    if proc.returncode == 2:
        assert len(proc.stderr.strip().splitlines()) == 1, proc.stderr
        assert not (work / "out.h5").exists()
    else:
        assert (work / "out.h5").is_file()
    assert not list(work.glob(".*.part"))
    shutil.rmtree(work)


def test_inspect_derives_lowest_temperature_not_reached(results, tmp_path):
    """A file whose config asked for a lower temperature than the run reached is flagged."""
    path = tmp_path / "edited.h5"
    shutil.copy(results / "k20.h5", path)
    with h5py.File(path, "r+") as h:
        reached = float(h["summary"].attrs["lowest_temperature_reached"])
        h.attrs["config_text"] = tiny_kondo(0.2).replace("1e-4", "1e-12")
    assert reached > 1e-6
    proc = run_cli("inspect", path, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert f"lowest temperature not reached: {reached:.3g} D > requested 1e-12 D" in proc.stdout
    original = run_cli("inspect", results / "k20.h5", cwd=tmp_path)
    assert "lowest temperature not reached" not in original.stdout


def test_hard_truncation_is_flagged_by_run_and_inspect(tmp_path):
    """30 kept states at Λ = 3 discard far more than DISCARDED_WEIGHT_LIMIT of the thermal weight: the run
    stores a warning and inspect derives it (common practice, no source)."""
    (tmp_path / "hard.toml").write_text(tiny_kondo(0.2).replace("kept_states = ", "kept_states = 30 #"))
    proc = run_cli("run", "hard.toml", "--output", "hard.h5", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "truncation too aggressive" in proc.stdout
    with h5py.File(tmp_path / "hard.h5") as h:
        assert float(np.max(h["diagnostics/discarded_weight"][()])) > DISCARDED_WEIGHT_LIMIT
    out = run_cli("inspect", tmp_path / "hard.h5", cwd=tmp_path).stdout
    assert "truncation too aggressive" in out
