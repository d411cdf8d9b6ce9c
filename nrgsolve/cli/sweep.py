"""``nrgsolve sweep``: every point of a [sweep] config, one result file per point, and index.csv."""

from __future__ import annotations

import sys
from pathlib import Path

from ..errors import NrgInputError
from .common import as_flags, positive_int, progress_bar

__all__ = ["add_command", "cmd_sweep"]


def cmd_sweep(args) -> int:
    """Run every point of a sweep config; write point files and index.csv."""
    from ..config import load_config
    from ..resources import check_resources
    from ..solve import bath_from_spec
    from ..sweep import WorkerLost, default_folder, remove_stale_parts, run_sweep, sweep_points
    from ..workers import Terminated

    spec = load_config(args.config)
    if args.no_cache:
        spec = spec.with_value("run.bath_cache", False)
    if args.output_folder is not None and not args.output_folder.strip():
        raise NrgInputError("--output-folder: got an empty folder name")
    folder = Path(args.output_folder) if args.output_folder else default_folder(spec)
    points = sweep_points(spec)
    n = len(points)
    jobs = 1 if args.scheduler else min(args.jobs, n)
    for p in points:          # refuse a point that cannot fit into memory before any point starts
        try:
            check_resources(p.spec, bath_from_spec(p.spec), workers=jobs)
        except NrgInputError as exc:
            where = ", ".join(f"{k} = {v!r}" for k, v in p.values)
            raise NrgInputError(f"sweep point {p.number} ({where}): {exc}") from None
    with progress_bar(n, args.quiet, f"sweep {Path(args.config).name}", "point") as bar:
        try:
            out = run_sweep(spec, folder, jobs=args.jobs, scheduler=args.scheduler, force=args.force,
                            progress=bar.update)
        except NrgInputError as exc:      # the library names its arguments; here they are flags
            raise as_flags(exc, {"scheduler": "--scheduler", "jobs": "--jobs", "folder": "--output-folder"},
                           {"pass force=True to recompute them, or choose another folder":
                            "use --force to recompute or choose another --output-folder"}) from None
        except (WorkerLost, KeyboardInterrupt) as exc:
            if folder.is_dir():
                remove_stale_parts(folder)
            done = len(list(folder.glob("point_*.h5"))) if folder.is_dir() else 0
            if isinstance(exc, WorkerLost):
                what, code = str(exc), 1
            elif isinstance(exc, Terminated):
                what, code = f"terminated (signal {exc.signum})", 128 + exc.signum
            else:
                what, code = "interrupted", 130
            print(f"nrgsolve: error: {what}; {done} of {n} point files are on disk in {folder}; "
                  f"run the same command again to resume", file=sys.stderr)
            return code
    if not args.quiet:
        print(f"{len(out.rows)} points: {len(out.computed)} computed, {len(out.skipped)} already done")
        print(f"wrote {out.index}")
    return 0


def add_command(sub) -> None:
    """Register ``sweep``."""
    s = sub.add_parser("sweep", help="run every point of a [sweep] config, one result file per point")
    s.add_argument("config", help="TOML config with a [sweep] table")
    s.add_argument("--jobs", "-j", type=positive_int("--jobs"), default=1,
                   help="points run in parallel processes (default 1)")
    s.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the points on an existing dask.distributed cluster (e.g. tcp://host:8786)")
    s.add_argument("--output-folder", metavar="DIR",
                   help="folder for point_NNNN.h5 and index.csv (default: [sweep] folder, else <config name>_sweep)")
    s.add_argument("--force", action="store_true", help="recompute points whose files already exist")
    s.add_argument("--quiet", "-q", action="store_true", help="no progress bar, no summary")
    s.add_argument("--no-cache", action="store_true",
                   help="compute every bath-only reference run afresh, without reading or writing the cache "
                        "folder (same as run.bath_cache = false)")
    s.set_defaults(func=cmd_sweep)

