"""The shipped configs: each one validates, and the quick-start command of the README works."""

import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

from nrgsolve.config import load_config

ROOT = Path(__file__).resolve().parent.parent
CONFIGS = sorted((ROOT / "configs").glob("*.toml"))


@pytest.mark.parametrize("path", CONFIGS, ids=lambda p: p.name)
def test_every_shipped_config_is_valid(path):
    spec = load_config(path)
    assert spec.impurity.model
    assert spec.discretization.Lambda > 1


def test_quick_start_command_runs_the_kondo_config(tmp_path):
    """`nrgsolve run configs/kondo.toml` (README quick start) writes kondo.h5 in the current folder with a
    screened impurity: T·χ_imp falls from ≈ 1/4 to ≈ 0 (Wilson 1975)."""
    out = subprocess.run([sys.executable, "-m", "nrgsolve", "run", str(ROOT / "configs" / "kondo.toml")],
                         cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    assert "Kondo temperature (crossover" in out.stdout
    with h5py.File(tmp_path / "kondo.h5") as h:
        tchi = h["thermodynamics/T_chi_imp"][()]
        assert tchi[-1] > 0.18 and abs(tchi[0]) < 1e-3
        assert np.isfinite(h["summary"].attrs["kondo_temperature_crossover"])
