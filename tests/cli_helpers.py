"""Helpers for tests that drive the real command line in a subprocess."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

#: A small, fast Kondo run (about a second through the command line).
TINY_KONDO = """\
[impurity]
model = "kondo"
exchange = {exchange}

[discretization]
Lambda = 3.0
twists = 1

[run]
kept_states = {kept_states}
lowest_temperature = {lowest_temperature}
"""


def tiny_kondo(exchange: float = 0.2, kept_states: int = 80, lowest_temperature: str = "1e-4",
               run_lines: str = "") -> str:
    """The small Kondo config; ``run_lines`` are added to its [run] table (the last one).  The lowest
    temperature is text, as written in the file (tests edit it by replacing "1e-4")."""
    return TINY_KONDO.format(exchange=exchange, kept_states=kept_states,
                             lowest_temperature=lowest_temperature) + run_lines


def cli_env(extra_path: str | None = None) -> dict:
    """Environment for a subprocess: the package source first on the path, no terminal tricks."""
    env = dict(os.environ)
    parts = [extra_path or "", str(ROOT), env.get("PYTHONPATH", "")]
    env["PYTHONPATH"] = os.pathsep.join(p for p in parts if p)
    env.pop("PYTHONWARNINGS", None)
    return env


def run_cli(*args, cwd, extra_path: str | None = None, timeout: float = 180) -> subprocess.CompletedProcess:
    """Run ``python -m nrgsolve ARGS`` in ``cwd``; returns the completed process (text output)."""
    return subprocess.run([sys.executable, "-m", "nrgsolve", *map(str, args)], cwd=cwd, env=cli_env(extra_path),
                          capture_output=True, text=True, timeout=timeout, stdin=subprocess.DEVNULL)


def assert_one_line_error(proc, *names):
    """Exit code 2, exactly one line on stderr, no traceback, and every name in it."""
    err = proc.stderr
    assert proc.returncode == 2, (proc.returncode, err, proc.stdout)
    assert "Traceback" not in err, err
    lines = err.strip("\n").splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("nrgsolve: error: "), err
    for n in names:
        assert n in lines[0], (n, lines[0])
    return lines[0]


def listing(folder) -> dict:
    """Every file below ``folder`` (relative name -> size, mtime), hidden files included."""
    folder = Path(folder)
    return {str(p.relative_to(folder)): (p.stat().st_size, p.stat().st_mtime_ns)
            for p in sorted(folder.rglob("*")) if p.is_file()}
