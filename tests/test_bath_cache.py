"""The bath-only reference run: computed once per chain and truncation, kept in the user's cache folder.

Every test uses a fresh temporary cache folder ($XDG_CACHE_HOME, monkeypatched), never the real home.
A cached bath run must give exactly the result of a fresh one (the cache may only save time).
"""

import numpy as np
import pytest

from nrgsolve import bath_cache
from nrgsolve.config import parse_config
from nrgsolve.solve import solve
from nrgsolve.sweep import run_sweep
from nrgsolve.user_cache import default_cache_dir

import subprocess
import sys

from cli_helpers import cli_env, tiny_kondo

def base(exchange: float, thermo: str) -> str:
    """A small Kondo config with the given thermodynamics method (cheap enough for several runs)."""
    return tiny_kondo(exchange, kept_states=120, lowest_temperature="1e-5",
                      run_lines=f'thermodynamics = "{thermo}"\n')


@pytest.fixture
def cache_home(tmp_path, monkeypatch):
    """A private cache folder through $XDG_CACHE_HOME; the counters start at zero."""
    monkeypatch.delenv("NRGSOLVE_CACHE_DIR", raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    monkeypatch.setattr(bath_cache, "STATS", bath_cache.CacheStats())
    assert default_cache_dir() == tmp_path / "xdg" / "nrgsolve"
    return tmp_path / "xdg" / "nrgsolve"


def _spec(exchange, thermo="conventional", cache=True):
    text = base(exchange, thermo) + ("" if cache else "bath_cache = false\n")
    return parse_config(text, "point.toml")


def _entries(folder):
    return sorted((folder / "bath-runs").rglob("*.entry")) if (folder / "bath-runs").is_dir() else []


def _same(a, b):
    for q in ("temperature", "T_chi", "entropy", "heat"):
        np.testing.assert_array_equal(getattr(a.thermo, q), getattr(b.thermo, q), err_msg=q)


def test_a_sweep_over_the_coupling_computes_the_bath_run_once(cache_home, tmp_path):
    """Four values of ρJ, conventional thermodynamics: the bath run depends only on the chain and the
    truncation, so it is computed for the first point and reused by the three others."""
    text = base(0.1, "conventional") + \
        '\n[sweep]\n"impurity.exchange" = [0.1, 0.15, 0.2, 0.25]\n'
    run_sweep(parse_config(text, "grid.toml"), tmp_path / "out", jobs=1)
    assert bath_cache.STATS.computed == 1
    assert bath_cache.STATS.reused == 3
    assert len(_entries(cache_home)) == 1


def test_cached_bath_runs_give_exactly_the_fresh_result(cache_home):
    """Full-density-matrix thermodynamics (the bath run follows the impurity run's truncation energies):
    whenever an entry is reused, the engine's truncation rule replays identically on it, so every number
    equals that of a run without the cache (bit for bit)."""
    fresh = {J: solve(_spec(J, "full-density-matrix", cache=False), workers=1) for J in (0.2, 0.24)}
    assert not _entries(cache_home)                         # bath_cache = false writes nothing
    first = {J: solve(_spec(J, "full-density-matrix"), workers=1) for J in (0.2, 0.24)}
    again = solve(_spec(0.2, "full-density-matrix"), workers=1)
    assert bath_cache.STATS.reused >= 1                     # at least the repeated point came from the cache
    for J in (0.2, 0.24):
        _same(first[J], fresh[J])
    _same(again, fresh[0.2])


def test_a_corrupted_cache_entry_is_recomputed_not_trusted(cache_home):
    """Truncated and bit-flipped entries: the run recomputes the bath run and its result does not change."""
    reference = solve(_spec(0.2), workers=1)
    (entry,) = _entries(cache_home)
    raw = entry.read_bytes()
    for broken in (raw[: len(raw) // 2], raw[:-40] + bytes(b ^ 0xFF for b in raw[-40:])):
        entry.write_bytes(broken)
        computed = bath_cache.STATS.computed
        _same(solve(_spec(0.2), workers=1), reference)
        assert bath_cache.STATS.computed == computed + 1    # recomputed, not read
        assert entry.read_bytes() != broken                 # and the entry was rewritten
    _same(solve(_spec(0.2), workers=1), reference)


def test_no_cache_flag_neither_reads_nor_writes_the_cache(tmp_path):
    """`nrgsolve run --no-cache` leaves the cache folder empty; without it the bath run is stored."""
    (tmp_path / "k.toml").write_text(base(0.2, "conventional"))
    env = cli_env()
    env.pop("NRGSOLVE_CACHE_DIR", None)
    env["XDG_CACHE_HOME"] = str(tmp_path / "xdg")
    run = lambda *a: subprocess.run([sys.executable, "-m", "nrgsolve", "run", "k.toml", "-q", *a], cwd=tmp_path,
                                    env=env, capture_output=True, text=True, timeout=180)
    proc = run("--no-cache", "-o", "a.h5")
    assert proc.returncode == 0, proc.stderr
    assert not _entries(tmp_path / "xdg" / "nrgsolve")
    proc = run("-o", "b.h5")
    assert proc.returncode == 0, proc.stderr
    assert len(_entries(tmp_path / "xdg" / "nrgsolve")) == 1
