"""Parameter sweeps: outer product, one file per point, index.csv, resuming after a killed worker,
and the dask.distributed executor."""

import math
import os
import signal
import subprocess
import sys
import time

import h5py
import pytest
from hypothesis import assume, given, settings, strategies as st

from nrgsolve.config import MODELS, parse_config
from nrgsolve.models import MODELS as REGISTRY
from nrgsolve.errors import ConfigError, NrgInputError
from nrgsolve.store import read_result
from nrgsolve.sweep import (FIXED_POINT_COLUMNS, SUMMARY_COLUMNS, default_folder, read_index, run_sweep,
                            spec_to_toml, sweep_points)

from cli_helpers import assert_one_line_error, cli_env, listing, run_cli, tiny_kondo

TWO_BY_TWO = tiny_kondo(0.2) + """
[sweep]
"impurity.exchange" = [0.15, 0.2]
"discretization.twists" = [1, 2]
"""

# about half a second per point, so that a worker can be killed in the middle of the sweep
SLOWER = """\
[impurity]
model = "kondo"

[discretization]
Lambda = 3.0
twists = 2

[run]
kept_states = 200
lowest_temperature = 1e-5

[sweep]
"impurity.exchange" = [0.12, 0.15, 0.18, 0.21]
"""


def _numbers_equal(a: str, b: str) -> bool:
    try:
        x, y = float(a), float(b)
    except ValueError:
        return a == b
    if math.isnan(x) or math.isnan(y):
        return math.isnan(x) and math.isnan(y)
    return math.isclose(x, y, rel_tol=1e-9, abs_tol=0.0)


def _same_index(rows_a, rows_b):
    assert len(rows_a) == len(rows_b)
    for ra, rb in zip(rows_a, rows_b):
        assert list(ra) == list(rb)
        for col in ra:
            if col == "wall_seconds":
                continue
            assert _numbers_equal(ra[col], rb[col]), (col, ra[col], rb[col])


# --- points -----------------------------------------------------------------------------------------------

def test_points_are_the_outer_product_with_the_last_parameter_fastest():
    spec = parse_config(TWO_BY_TWO, "grid.toml")
    pts = sweep_points(spec)
    assert [p.values for p in pts] == [
        (("impurity.exchange", 0.15), ("discretization.twists", 1)),
        (("impurity.exchange", 0.15), ("discretization.twists", 2)),
        (("impurity.exchange", 0.2), ("discretization.twists", 1)),
        (("impurity.exchange", 0.2), ("discretization.twists", 2)),
    ]
    for p in pts:
        assert p.spec.impurity.exchange == p.values[0][1]
        assert p.spec.discretization.twists == p.values[1][1]
        assert p.spec.run.kept_states == 80                   # the rest of the config is kept
        assert not p.spec.sweep.parameters                    # a point is a plain run
    assert [p.file_name for p in pts] == [f"point_000{i}.h5" for i in range(4)]


def test_an_invalid_combination_names_the_point():
    text = tiny_kondo(0.2).replace("[run]\n", "[run]\nsymmetry = \"su2\"\n") + (
        "\n[sweep]\n\"impurity.field\" = [0.0, 0.01]\n")
    with pytest.raises(NrgInputError, match=r"sweep point 1 \(impurity.field = 0.01\).*abelian"):
        sweep_points(parse_config(text, "f.toml"))


def test_no_sweep_table_is_an_input_error():
    with pytest.raises(NrgInputError, match="no \\[sweep\\] table"):
        sweep_points(parse_config(tiny_kondo(0.2), "plain.toml"))


def test_default_folder(tmp_path):
    spec = parse_config(TWO_BY_TWO, "configs/grid.toml")
    assert default_folder(spec, tmp_path) == tmp_path / "grid_sweep"
    named = parse_config(TWO_BY_TWO.replace("[sweep]\n", "[sweep]\nfolder = \"out/here\"\n"), "grid.toml")
    assert default_folder(named, tmp_path) == tmp_path / "out" / "here"


valid_values = st.fixed_dictionaries({
    "model": st.sampled_from([m for m in MODELS if m != "resonant-level"]),
    "exchange": st.floats(-1, 1, allow_nan=False),
    "interaction": st.floats(0, 2, allow_nan=False),
    "level": st.one_of(st.none(), st.floats(-1, 1, allow_nan=False)),
    "Lambda": st.floats(1.01, 10, allow_nan=False),
    "twists": st.integers(1, 8),
    "kept_states": st.integers(1, 5000),
    "lowest_temperature": st.floats(1e-300, 0.99, allow_nan=False),
    "symmetry": st.sampled_from(["su2", "abelian"]),
    "wilson_correction": st.booleans(),
})


@settings(max_examples=200, deadline=None)
@given(valid_values)
def test_resolved_point_config_parses_back_to_the_same_parameters(v):
    uses = REGISTRY[v["model"]].parameters          # a key the model does not use is an error
    imp = "".join(f"{k} = {v[k]!r}\n" for k in ("exchange", "interaction", "level") if k in uses and v[k] is not None)
    text = (f"[impurity]\nmodel = \"{v['model']}\"\n{imp}"
            f"[discretization]\nLambda = {v['Lambda']!r}\ntwists = {v['twists']}\n"
            f"wilson_correction = {str(v['wilson_correction']).lower()}\n"
            f"[run]\nkept_states = {v['kept_states']}\nlowest_temperature = {v['lowest_temperature']!r}\n"
            f"symmetry = \"{v['symmetry']}\"\n")
    try:
        spec = parse_config(text, "p.toml")
    except ConfigError:
        assume(False)
    again = parse_config(spec_to_toml(spec, "a header\nwith two lines"), "p.toml")
    assert again.as_dict() == spec.as_dict()


# --- running sweeps ---------------------------------------------------------------------------------------

def test_sweep_writes_one_file_per_point_and_an_index(tmp_path):
    (tmp_path / "grid.toml").write_text(TWO_BY_TWO)
    proc = run_cli("sweep", "grid.toml", "--jobs", "2", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    folder = tmp_path / "grid_sweep"
    assert sorted(p.name for p in folder.iterdir()) == ["index.csv"] + [f"point_000{i}.h5" for i in range(4)]
    rows = read_index(folder / "index.csv")
    assert list(rows[0]) == (["point", "impurity.exchange", "discretization.twists"] + list(SUMMARY_COLUMNS)
                             + list(FIXED_POINT_COLUMNS) + ["warnings", "file"])
    for i, row in enumerate(rows):
        assert int(row["point"]) == i and row["file"] == f"point_000{i}.h5"
        stored = read_result(folder / row["file"])
        spec = parse_config(stored.provenance["config_text"], "grid.toml")
        # the point file holds its own resolved config
        assert spec.impurity.exchange == float(row["impurity.exchange"])
        assert spec.discretization.twists == int(row["discretization.twists"])
        with h5py.File(folder / row["file"], "r") as h:
            assert len(h["chain/z"][()]) == spec.discretization.twists
            for col in SUMMARY_COLUMNS:
                assert _numbers_equal(row[col], repr(float(h["summary"].attrs[col]))), col
    # a larger exchange gives a larger Kondo temperature (T_K ~ exp(-1/ρJ))
    tk = {(r["impurity.exchange"], r["discretization.twists"]): float(r["kondo_temperature_crossover"])
          for r in rows}
    assert tk[("0.2", "1")] > 3 * tk[("0.15", "1")]

    # run again: every point is skipped, no point file is touched, the index is the same
    before = listing(folder)
    again = run_cli("sweep", "grid.toml", cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    assert "0 computed, 4 already done" in again.stdout
    after = listing(folder)
    assert {k: v for k, v in after.items() if k != "index.csv"} == {k: v for k, v in before.items()
                                                                    if k != "index.csv"}
    _same_index(read_index(folder / "index.csv"), rows)


def test_sweep_api_resumes_a_half_done_sweep_and_cleans_stale_parts(tmp_path):
    spec = parse_config(TWO_BY_TWO, str(tmp_path / "grid.toml"))
    folder = tmp_path / "out"
    first = run_sweep(spec, folder)
    assert first.computed == (0, 1, 2, 3) and first.skipped == ()
    (folder / "point_0002.h5").unlink()                        # never finished
    (folder / "point_0001.h5").write_bytes(b"truncated junk")   # unreadable: redone
    (folder / ".point_0003.h5.abc123.part").write_bytes(b"half")  # left by a killed process
    ticks = []
    second = run_sweep(spec, folder, progress=ticks.append)
    assert second.computed == (1, 2) and second.skipped == (0, 3)
    assert len(ticks) == 4
    assert not list(folder.glob("*.part")) and not list(folder.glob(".*.part"))
    _same_index([{k: _s(v) for k, v in r.items()} for r in first.rows],
                [{k: _s(v) for k, v in r.items()} for r in second.rows])


def _s(v):
    return repr(v) if isinstance(v, float) else str(v)


def test_sweep_refuses_point_files_of_another_configuration(tmp_path):
    (tmp_path / "grid.toml").write_text(TWO_BY_TWO)
    assert run_cli("sweep", "grid.toml", "-q", cwd=tmp_path).returncode == 0
    (tmp_path / "grid.toml").write_text(TWO_BY_TWO.replace("[0.15, 0.2]", "[0.15, 0.25]"))
    before = listing(tmp_path)
    proc = run_cli("sweep", "grid.toml", cwd=tmp_path)
    assert_one_line_error(proc, "point_0002.h5", "different configuration", "--force")
    assert listing(tmp_path) == before
    forced = run_cli("sweep", "grid.toml", "--force", "-q", cwd=tmp_path)
    assert forced.returncode == 0, forced.stderr
    rows = read_index(tmp_path / "grid_sweep" / "index.csv")
    assert [r["impurity.exchange"] for r in rows] == ["0.15", "0.15", "0.25", "0.25"]


def test_sweep_bad_value_writes_no_folder(tmp_path):
    (tmp_path / "bad.toml").write_text(tiny_kondo(0.2) + "\n[sweep]\n\"discretization.Lambda\" = [2.0, 0.9]\n")
    proc = run_cli("sweep", "bad.toml", cwd=tmp_path)
    assert_one_line_error(proc, "discretization.Lambda", ">= 1.2")
    assert sorted(listing(tmp_path)) == ["bad.toml"]


def _spawned_workers(pid):
    import psutil
    try:
        children = psutil.Process(pid).children(recursive=True)
    except psutil.NoSuchProcess:
        return []
    out = []
    for c in children:
        try:
            if "spawn_main" in " ".join(c.cmdline()):
                out.append(c)
        except psutil.NoSuchProcess:
            pass
    return out


@pytest.mark.slow
def test_sweep_interrupted_by_a_killed_worker_resumes_to_the_same_index(tmp_path):
    pytest.importorskip("psutil")
    (tmp_path / "s.toml").write_text(SLOWER)
    ref = run_cli("sweep", "s.toml", "--jobs", "2", "--output-folder", "reference", "-q", cwd=tmp_path)
    assert ref.returncode == 0, ref.stderr

    folder = tmp_path / "interrupted"
    proc = subprocess.Popen([sys.executable, "-m", "nrgsolve", "sweep", "s.toml", "--jobs", "2",
                             "--output-folder", str(folder), "-q"], cwd=tmp_path, env=cli_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, stdin=subprocess.DEVNULL)
    killed = False
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            if list(folder.glob("point_*.h5")):
                workers = _spawned_workers(proc.pid)
                if workers:
                    os.kill(workers[0].pid, signal.SIGKILL)
                    killed = True
                    break
            time.sleep(0.01)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert killed, "the sweep ended before a worker could be killed"
    assert proc.returncode == 1, err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    assert "run the same command again to resume" in err
    done = sorted(p.name for p in folder.glob("point_*.h5"))
    assert 1 <= len(done) < 4, done
    assert not (folder / "index.csv").exists()
    for name in done:
        read_result(folder / name)                        # whatever is there is complete

    resumed = run_cli("sweep", "s.toml", "--jobs", "2", "--output-folder", "interrupted", cwd=tmp_path)
    assert resumed.returncode == 0, resumed.stderr
    assert f"{4 - len(done)} computed, {len(done)} already done" in resumed.stdout
    assert not list(folder.glob(".*.part"))
    _same_index(read_index(folder / "index.csv"), read_index(tmp_path / "reference" / "index.csv"))


def test_scheduler_without_dask_is_a_one_line_error(tmp_path):
    shim = tmp_path / "shim"
    (shim / "distributed").mkdir(parents=True)
    (shim / "distributed" / "__init__.py").write_text("raise ImportError('dask.distributed hidden for this test')\n")
    (tmp_path / "grid.toml").write_text(TWO_BY_TWO)
    proc = run_cli("sweep", "grid.toml", "--scheduler", "tcp://127.0.0.1:1", cwd=tmp_path, extra_path=str(shim))
    assert_one_line_error(proc, "--scheduler", "dask.distributed", "nrgsolve[cluster]")
    assert not (tmp_path / "grid_sweep").exists()


@pytest.mark.slow
def test_sweep_on_a_dask_cluster_matches_the_local_sweep(tmp_path):
    distributed = pytest.importorskip("distributed")
    (tmp_path / "grid.toml").write_text(TWO_BY_TWO)
    local = run_cli("sweep", "grid.toml", "--output-folder", "local", "-q", cwd=tmp_path)
    assert local.returncode == 0, local.stderr
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                  host="127.0.0.1", silence_logs=50) as cluster:
        proc = run_cli("sweep", "grid.toml", "--scheduler", cluster.scheduler_address,
                       "--output-folder", "cluster", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "4 computed" in proc.stdout
    _same_index(read_index(tmp_path / "cluster" / "index.csv"), read_index(tmp_path / "local" / "index.csv"))


@pytest.mark.parametrize("address", ["nonsense://host:1", "localhost"])
def test_malformed_scheduler_address_is_a_one_line_error(tmp_path, address):
    pytest.importorskip("distributed")
    (tmp_path / "grid.toml").write_text(TWO_BY_TWO)
    proc = run_cli("sweep", "grid.toml", "--scheduler", address, cwd=tmp_path)
    assert_one_line_error(proc, "--scheduler", address)
    assert sorted(listing(tmp_path)) == ["grid.toml"]


def test_points_of_a_config_with_a_spectral_table_round_trip():
    """List-valued keys ([spectral] temperatures, conductance range) survive writing a point's config back
    to TOML: every point parses to the same spectral request (common practice, no source)."""
    spec = parse_config("""
[impurity]
model = "anderson"
[spectral]
temperatures = [0.0, 1e-4]
conductance_temperatures = { start = 1e-6, stop = 1e-3, points = 4 }
[sweep]
"impurity.interaction" = [0.05, 0.1]
""")
    points = sweep_points(spec)
    assert len(points) == 2
    for p in points:
        back = parse_config(spec_to_toml(p.spec))
        assert back.spectral == p.spec.spectral
        assert back.impurity.interaction == p.spec.impurity.interaction
