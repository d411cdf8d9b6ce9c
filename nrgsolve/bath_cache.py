"""The bath-only reference run, computed once and kept in the user's cache folder.

The impurity contribution of a thermodynamic quantity is (impurity + bath) − (bath alone) on the
same chain with the same truncation (``run.bath_reference = "nrg"``).  The bath run depends only on
the chain (per twist), the symmetry, the truncation settings and, with full-density-matrix
thermodynamics, the truncation energies it is asked to follow; it is the same for every point of a
sweep over impurity parameters.  It is therefore cached on disk (``$XDG_CACHE_HOME/nrgsolve/bath-runs``,
see :func:`nrgsolve.user_cache.default_cache_dir`):

* **key** — SHA-256 of everything that determines the run: the chain arrays and energy scales (exact
  bytes), the symmetry and channels, every engine setting except the followed truncation energies,
  and the source code of the engine (a changed engine never reuses old entries);
* **followed truncation energies** (full density matrix) — an entry records the truncation energy the
  run chose at every iteration.  A new request reuses an entry only if replaying the engine's own
  truncation rule on the stored spectra with the new energies makes the same choice at every
  iteration; then the run would be identical state by state, so the stored records are exactly
  what a new run would give.  Otherwise the run is computed and stored as a further entry;
* **safety** — entries are written to a temporary file and renamed (concurrent sweep workers are
  safe) and carry a SHA-256 checksum; an unreadable, truncated or altered entry is deleted and
  recomputed, never trusted.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
from pathlib import Path

import numpy as np

from .engine.iterate import IterationRecord, EngineSettings, cut_energy
from .user_cache import default_cache_dir, write_checked, read_checked

__all__ = ["cached_bath_records", "CacheStats", "STATS"]

#: Bumped when the stored layout changes.
FORMAT = 1
#: Entries tried per key before a new one is computed (each one a different truncation path).
MAX_ENTRIES = 64


@dataclasses.dataclass
class CacheStats:
    """Counts of this process (for tests and summaries): bath runs computed and reused."""

    computed: int = 0
    reused: int = 0


STATS = CacheStats()
_SOURCE_DIGEST: str | None = None


def _source_digest() -> str:
    """SHA-256 of the engine's source files (and the bath start block)."""
    global _SOURCE_DIGEST
    if _SOURCE_DIGEST is None:
        root = Path(__file__).resolve().parent
        files = sorted((root / "engine").rglob("*.py")) + [root / "models" / "bare_chain.py", Path(__file__)]
        h = hashlib.sha256()
        for f in files:
            h.update(f.relative_to(root).as_posix().encode())
            h.update(f.read_bytes())
        _SOURCE_DIGEST = h.hexdigest()
    return _SOURCE_DIGEST


def _key(parts: dict, settings: EngineSettings) -> str:
    h = hashlib.sha256()
    h.update(f"bath-run-{FORMAT}-{_source_digest()}".encode())
    for name in sorted(parts):
        v = parts[name]
        h.update(name.encode())
        if isinstance(v, np.ndarray):
            h.update(str((v.dtype.str, v.shape)).encode())
            h.update(np.ascontiguousarray(v).tobytes())
        else:
            h.update(json.dumps(v, sort_keys=True, default=str).encode())
    fields = {f.name: getattr(settings, f.name) for f in dataclasses.fields(settings) if f.name != "cutoffs"}
    fields["follows_cutoffs"] = settings.cutoffs is not None
    h.update(json.dumps(fields, sort_keys=True, default=repr).encode())
    return h.hexdigest()


# ---------------------------------------------------------------------------------------------- storage

def _pack(records) -> bytes:
    arrays = {"count": np.array(len(records))}
    for i, rec in enumerate(records):
        for f in dataclasses.fields(rec):
            v = getattr(rec, f.name)
            if v is None:
                continue
            if isinstance(v, dict):
                for name, arr in v.items():
                    arrays[f"{i}/{f.name}/{name}"] = np.asarray(arr)
            else:
                arrays[f"{i}/{f.name}"] = np.asarray(v)
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getvalue()


def _unpack(payload: bytes):
    """Records from a payload, or None when anything is inconsistent."""
    try:
        with np.load(io.BytesIO(payload), allow_pickle=False) as z:
            count = int(z["count"])
            names = list(z.keys())
            records = []
            for i in range(count):
                kw = {}
                for f in dataclasses.fields(IterationRecord):
                    key = f"{i}/{f.name}"
                    if key in z:
                        v = z[key]
                        kw[f.name] = v.item() if v.ndim == 0 else v
                    elif f.name == "scalars":
                        prefix = key + "/"
                        kw[f.name] = {n[len(prefix):]: z[n] for n in names if n.startswith(prefix)}
                    elif f.default is dataclasses.MISSING:
                        return None
                rec = IterationRecord(**kw)
                n = len(rec.energies)
                if (n == 0 or not np.all(np.isfinite(rec.energies)) or len(rec.multiplicity) != n
                        or len(rec.charge) != n or len(rec.spin_sq) != n):
                    return None
                records.append(rec)
        if not records or any(b.index <= a.index for a, b in zip(records, records[1:])):
            return None
        return records
    except Exception:                   # any unreadable entry is recomputed
        return None


# ---------------------------------------------------------------------------------------------- replay

def _same_truncation(records, settings: EngineSettings) -> bool:
    """Whether a run following ``settings.cutoffs`` makes the stored run's truncation choice everywhere."""
    if settings.cutoffs is None:
        return True
    for rec in records:
        if rec.index not in settings.cutoffs:
            continue
        e = cut_energy(rec.energies, settings, settings.cutoffs[rec.index])
        old = float(rec.truncation_energy)
        if np.isinf(e) or np.isinf(old):
            if not (np.isinf(e) and np.isinf(old)):
                return False
        elif abs(e - old) > 1e-9 * max(1.0, abs(old)):
            return False
    return True


# ---------------------------------------------------------------------------------------------- entry point

def cached_bath_records(compute, parts: dict, settings: EngineSettings, use_cache: bool = True,
                        cache_dir=None):
    """The bath run's iteration records, from the cache when an entry fits, else from ``compute()``.

    Parameters
    ----------
    compute : callable () -> list of IterationRecord
        Runs the bath-only engine run with ``settings``.
    parts : dict
        Everything besides ``settings`` that determines the run (chain arrays, scales, symmetry
        name, channels, ...); arrays are hashed by their exact bytes.
    settings : EngineSettings
        The engine settings of the bath run (``cutoffs``: the truncation energies it follows).
    use_cache : bool
        False: neither read nor write the cache.
    cache_dir : path, optional
        Default :func:`nrgsolve.user_cache.default_cache_dir`.

    Returns
    -------
    (list of IterationRecord, bool)
        The records, and whether they came from the cache.
    """
    if not use_cache:
        STATS.computed += 1
        return compute(), False
    folder = Path(cache_dir) if cache_dir is not None else default_cache_dir()
    folder = folder / "bath-runs" / _key(parts, settings)[:40]
    try:
        entries = sorted(folder.glob("*.entry"), key=lambda p: p.stat().st_mtime, reverse=True)[:MAX_ENTRIES]
    except OSError:
        entries = []
    for path in entries:
        payload = read_checked(path)
        records = _unpack(payload) if payload is not None else None
        if records is None:
            continue
        if _same_truncation(records, settings):
            STATS.reused += 1
            return records, True
    records = compute()
    STATS.computed += 1
    path_id = hashlib.sha256(np.array([r.truncation_energy for r in records], dtype=float).tobytes()).hexdigest()
    write_checked(folder / f"{path_id[:32]}.entry", _pack(records))
    return records, False
