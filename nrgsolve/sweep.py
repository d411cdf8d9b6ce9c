"""Parameter sweeps: many full runs, one result file per point, one index.

A sweep config is an ordinary run config plus a ``[sweep]`` table (see
:func:`nrgsolve.config.parse_config`).  The points are the outer product of
the swept value lists, in the order the parameters are written (the last
parameter varies fastest).  Point ``i`` is a complete run written to
``point_<i:04d>.h5`` in the sweep folder; ``index.csv`` lists every point
with its swept values, the summary numbers and the file name.

Each point file stores its own resolved config (every swept value filled
in), so it can be re-run alone with ``nrgsolve run`` and re-plotted like any
other result.

Resuming: a point whose file exists, reads back and holds the same
configuration is skipped; anything else is (re)computed.  Result files are
written atomically (:func:`nrgsolve.store.write_result`), so a killed run
leaves at most stale ``.part`` files, which the next sweep removes.

Executors: local worker processes (``jobs``; the "spawn" start method, one
BLAS thread per worker, the twists of a point run serially), or an existing
``dask.distributed`` cluster named by its scheduler address (optional extra
``cluster``).  Nothing here reads globals: folder, worker count and
scheduler are arguments.
"""

from __future__ import annotations

import csv
import io
import itertools
import math
import os
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from .config import RunSpec, parse_config, spec_to_toml, toml_value as _toml_value
from .errors import NrgInputError
from .solve import bath_from_spec, solve
from .result import result_from_run
from .store import atomic_path, read_result, write_result

__all__ = ["SweepPoint", "SweepOutcome", "SUMMARY_COLUMNS", "FIXED_POINT_COLUMNS", "sweep_points", "spec_to_toml",
           "default_folder", "point_file_name", "run_sweep", "read_index", "WorkerLost", "remove_stale_parts"]

#: Summary attributes copied from each point file into ``index.csv``
#: (temperatures in units of D; NaN means "not reached").
SUMMARY_COLUMNS = ("kondo_temperature_wilson", "kondo_temperature_crossover", "wilson_ratio",
                   "lowest_temperature_reached", "wall_seconds",
                   # zero-temperature dynamics (runs with a T = 0 spectrum): −πρ Im T(0), ρ(0)/ρ_unitary,
                   # the static χ from χ''(ω) ((g μ_B)²/D); NaN when the run did not compute them
                   "t_matrix_zero", "resistivity_zero", "static_susceptibility_zero")

#: Fixed-point columns of ``index.csv``: the final fixed point of the flow (label, empty when the flow
#: ends in a crossover or the point file predates the analysis) and its phase shift δ/π (nan when none).
FIXED_POINT_COLUMNS = ("final_fixed_point", "phase_shift")

#: Settings that do not change the result and are not compared when resuming.
_NOT_COMPARED = {("output", "file"), ("run", "workers")}



class WorkerLost(RuntimeError):
    """A worker process or cluster worker died before finishing its point.

    The points finished so far are on disk; running the same sweep again
    resumes from them.
    """


@dataclass(frozen=True)
class SweepPoint:
    """One point of a sweep.

    Attributes
    ----------
    number : int
        Position in the outer product, from 0.
    values : tuple of (str, value)
        The swept parameters (``table.key``) and their values at this point.
    spec : RunSpec
        The validated run specification of the point; its ``config_text`` is
        the resolved TOML of this point alone.
    """

    number: int
    values: tuple
    spec: RunSpec

    @property
    def file_name(self) -> str:
        return point_file_name(self.number)


@dataclass(frozen=True)
class SweepOutcome:
    """What :func:`run_sweep` did.

    Attributes
    ----------
    folder : Path
        The sweep folder.
    index : Path
        The index file written.
    computed, skipped : tuple of int
        Point numbers computed now, and points resumed from existing files.
    rows : list of dict
        The index rows (as written to ``index.csv``).
    """

    folder: Path
    index: Path
    computed: tuple
    skipped: tuple
    rows: list


def point_file_name(number: int) -> str:
    """File name of sweep point ``number``: ``point_0003.h5``."""
    return f"point_{number:04d}.h5"


def default_folder(spec: RunSpec, cwd: str | Path | None = None) -> Path:
    """The sweep folder: ``[sweep] folder``, else ``<config stem>_sweep``, relative to ``cwd``."""
    base = Path.cwd() if cwd is None else Path(cwd)
    if spec.sweep.folder:
        return base / spec.sweep.folder
    stem = Path(spec.config_path).stem if spec.config_path and not spec.config_path.startswith("<") else "config"
    return base / f"{stem}_sweep"


def sweep_points(spec: RunSpec) -> list[SweepPoint]:
    """Every point of the sweep (outer product, last parameter fastest), validated.

    Raises
    ------
    NrgInputError
        If the config has no ``[sweep]`` table, or a combination of values is
        invalid (the message names the point and the parameter).
    """
    sw = spec.sweep
    if not sw.parameters:
        raise NrgInputError(f"{spec.config_path}: no [sweep] table; add one, e.g. "
                            f"[sweep] \"impurity.exchange\" = [0.1, 0.2], or use 'nrgsolve run'")
    points = []
    for number, combo in enumerate(itertools.product(*sw.values)):
        values = tuple(zip(sw.parameters, combo))
        point = spec
        try:
            for name, value in values:
                point = point.with_value(name, value)
        except NrgInputError as exc:
            where = ", ".join(f"{n} = {v!r}" for n, v in values)
            raise NrgInputError(f"sweep point {number} ({where}): {exc}") from None
        header = (f"point {number} of the sweep in {spec.config_path}\n"
                  + "\n".join(f"{n} = {_toml_value(v)}" for n, v in values))
        text = spec_to_toml(point, header)
        points.append(SweepPoint(number, values, parse_config(text, spec.config_path)))
    return points


def _comparable(spec: RunSpec) -> dict:
    d = spec.as_dict()
    for table, key in _NOT_COMPARED:
        d[table].pop(key, None)
    return d


def _stored_matches(stored, point: SweepPoint) -> bool:
    try:
        got = parse_config(str(stored.provenance.get("config_text", "")), point.spec.config_path, stored=True)
    except NrgInputError:
        return False
    return _comparable(got) == _comparable(point.spec)


def remove_stale_parts(folder: Path) -> list[Path]:
    """Remove temporary ``.part`` files a killed or interrupted sweep left in ``folder``; return them."""
    removed = []
    for pattern in (".point_*.h5.*.part", ".index.csv.*.part"):
        for p in folder.glob(pattern):
            try:
                p.unlink()
                removed.append(p)
            except OSError:
                pass
    return removed


def _run_point(config_text: str, config_path: str, target: str) -> str:
    """Worker: run one point (twists serially) and write its file atomically; returns the path."""
    spec = parse_config(config_text, config_path)
    result = result_from_run(solve(spec, workers=1))
    return str(write_result(result, target, overwrite=True))


def _run_local(tasks, jobs: int, done: Callable[[int], None]):
    if jobs <= 1 or len(tasks) <= 1:
        for number, args in tasks:
            _run_point(*args)
            done(number)
        return
    from concurrent.futures import as_completed
    from concurrent.futures.process import BrokenProcessPool
    from .workers import process_pool, submit_all

    # each point runs its twists serially with run.blas_threads BLAS threads (solve_twist pins them);
    # the workers die with this process and are terminated on Ctrl-C or SIGTERM (nrgsolve.workers)
    with process_pool(min(jobs, len(tasks))) as pool:
        futs = submit_all(pool, _run_point, [args for _, args in tasks])
        futures = {f: number for f, (number, _) in zip(futs, tasks)}
        try:
            for fut in as_completed(futures):
                fut.result()
                done(futures[fut])
        except BrokenProcessPool:
            raise WorkerLost("a worker process died before finishing its point") from None


def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise NrgInputError("scheduler: dask.distributed is not installed; install the optional extra "
                            "with: pip install 'nrgsolve[cluster]'") from None
    return distributed


def _connect(scheduler: str, connect_timeout: float):
    """A ``distributed.Client`` on an existing scheduler, or a one-line NrgInputError."""
    distributed = _import_distributed()
    from distributed.comm import get_address_host, parse_address
    from distributed.comm.registry import get_backend

    hint = "give the address of a running dask scheduler, e.g. tcp://host:8786"
    try:
        scheme, _ = parse_address(scheduler)
        get_backend(scheme)
        get_address_host(scheduler)
    except (ValueError, TypeError) as exc:
        raise NrgInputError(f"scheduler: got {scheduler!r} ({exc}); {hint}") from None
    try:
        return distributed.Client(scheduler, timeout=connect_timeout, set_as_default=False)
    except (OSError, TimeoutError, ValueError, TypeError) as exc:
        msg = str(exc).splitlines()[0] if str(exc) else exc.__class__.__name__
        raise NrgInputError(f"scheduler: cannot connect to {scheduler!r} ({msg}); {hint}") from None


def _run_cluster(tasks, client, scheduler: str, done: Callable[[int], None]):
    import asyncio
    import concurrent.futures
    import distributed

    lost = (OSError, TimeoutError, asyncio.CancelledError, concurrent.futures.CancelledError)
    futures = {}
    try:
        for number, args in tasks:
            fut = client.submit(_run_point, *args, pure=False, key=f"nrgsolve-point-{number:04d}-{os.getpid()}")
            futures[fut] = number
        for fut in distributed.as_completed(list(futures), loop=client.loop):
            fut.result()
            done(futures[fut])
    except distributed.KilledWorker:
        raise WorkerLost("a cluster worker died before finishing its point") from None
    except lost:   # the scheduler went away (CommClosedError is an OSError; futures are cancelled)
        raise WorkerLost(f"lost the connection to the scheduler {scheduler!r}") from None


@contextmanager
def _quiet_cluster_logs():
    """While a sweep talks to a cluster, the cluster library's own log lines (reconnect attempts, tracebacks
    of a lost scheduler) stay off the terminal; the sweep reports problems in one line itself."""
    import logging
    prefixes = ("distributed", "tornado", "asyncio")
    names = [n for n in list(logging.root.manager.loggerDict)
             if n.split(".")[0] in prefixes] + list(prefixes)
    old = {n: logging.getLogger(n).level for n in names}
    for n in names:
        logging.getLogger(n).setLevel(logging.CRITICAL + 1)
    try:
        yield
    finally:
        for n, level in old.items():
            logging.getLogger(n).setLevel(level)


def _row(point: SweepPoint, stored) -> dict:
    row = {"point": point.number}
    for name, value in point.values:
        row[name] = value
    for col in SUMMARY_COLUMNS:
        v = stored.summary.get(col, math.nan)
        row[col] = float(v)
    fp = stored.summary.get("final_fixed_point")      # absent in files older than the fixed-point analysis
    row["final_fixed_point"] = "" if fp is None else (fp.decode() if isinstance(fp, bytes) else str(fp))
    row["phase_shift"] = float(stored.summary.get("phase_shift", math.nan))
    row["warnings"] = " | ".join(stored.warnings)
    row["file"] = point.file_name
    return row


def _csv_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v)
    return str(v)


def _write_index(path: Path, rows: list[dict]):
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    header = list(rows[0])
    writer.writerow(header)
    for r in rows:
        writer.writerow([_csv_value(r[c]) for c in header])
    with atomic_path(path) as tmp:
        Path(tmp).write_text(buf.getvalue(), encoding="utf-8")


def read_index(path: str | Path) -> list[dict]:
    """Read ``index.csv`` back as a list of dicts of strings (one per point)."""
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def run_sweep(spec: RunSpec, folder: str | Path, jobs: int = 1, scheduler: str | None = None,
              force: bool = False, progress: Callable[[int], None] | None = None,
              connect_timeout: float = 10.0) -> SweepOutcome:
    """Run every point of a sweep that is not already on disk, then write ``index.csv``.

    Parameters
    ----------
    spec : RunSpec
        A spec with a ``[sweep]`` table.
    folder : str or Path
        Output folder (created if needed).
    jobs : int
        Local worker processes (>= 1); ignored when ``scheduler`` is given.
    scheduler : str, optional
        Address of a running ``dask.distributed`` scheduler; the folder must
        then be reachable by the cluster workers at the same path.
    force : bool
        Recompute every point even where a matching file exists.
    progress : callable, optional
        Called with 1 each time a point is finished (computed or skipped).
    connect_timeout : float
        Seconds to wait for the scheduler.

    Returns
    -------
    SweepOutcome

    Raises
    ------
    NrgInputError
        Bad sweep values, unreadable bath table, an output folder that is a
        file, a point file holding a different configuration (without
        ``force``), or an unreachable scheduler / missing dask.
    WorkerLost
        A worker died; finished points are kept for the next (resumed) run.
    """
    if not isinstance(jobs, int) or isinstance(jobs, bool) or jobs < 1:
        raise NrgInputError(f"jobs: got {jobs!r}; allowed: an integer >= 1")
    points = sweep_points(spec)
    bath_from_spec(points[0].spec)          # a bad table file fails here, before any file is made
    folder = Path(folder).resolve()
    if folder.exists() and not folder.is_dir():
        raise NrgInputError(f"folder: {folder} exists and is not a folder")
    # which points are already done (and whether they are ours)
    existing, todo = {}, []
    for p in points:
        path = folder / p.file_name
        stored = None
        if path.is_file() and not force:
            try:
                stored = read_result(path)
            except NrgInputError:
                stored = None           # unreadable: recompute
            if stored is not None and not _stored_matches(stored, p):
                raise NrgInputError(f"{path}: holds a different configuration than point {p.number} of "
                                    f"{spec.config_path}; pass force=True to recompute them, or choose another folder")
        if stored is not None:
            existing[p.number] = stored
        else:
            todo.append(p)
    if scheduler is not None:
        _import_distributed()
    with _quiet_cluster_logs():
        return _run_points(spec, points, existing, todo, folder, jobs, scheduler, progress, connect_timeout)


def _run_points(spec, points, existing, todo, folder, jobs, scheduler, progress, connect_timeout) -> SweepOutcome:
    client = _connect(scheduler, connect_timeout) if (scheduler is not None and todo) else None
    try:
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise NrgInputError(f"folder: cannot create {folder} ({exc.strerror})") from None
        remove_stale_parts(folder)
        if progress is not None:
            for _ in existing:
                progress(1)

        def done(number):
            if progress is not None:
                progress(1)

        tasks = [(p.number, (p.spec.config_text, p.spec.config_path, str(folder / p.file_name))) for p in todo]
        if client is not None:
            _run_cluster(tasks, client, scheduler, done)
        elif tasks:
            _run_local(tasks, jobs, done)
    finally:
        if client is not None:
            try:
                client.close(timeout=5)
            except Exception:       # the scheduler may be gone already; nothing left to close cleanly
                pass
    rows = []
    for p in points:
        stored = existing.get(p.number)
        if stored is None:
            stored = read_result(folder / p.file_name)
        rows.append(_row(p, stored))
    index = folder / "index.csv"
    _write_index(index, rows)
    return SweepOutcome(folder, index, tuple(p.number for p in todo), tuple(sorted(existing)), rows)
