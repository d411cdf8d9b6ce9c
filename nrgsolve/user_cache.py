"""The user's cache folder and atomic, checksummed cache files (shared by every disk cache of nrgsolve).

Nothing here is needed for correctness: a cache entry that is missing, unreadable, truncated or
altered is treated as absent and recomputed, never trusted.
"""

from __future__ import annotations

import hashlib
import os
import sys
import tempfile
from pathlib import Path

__all__ = ["default_cache_dir", "write_checked", "read_checked"]

_MAGIC = b"nrgsolve-cache-1\n"


def default_cache_dir() -> Path:
    """The user's cache folder for nrgsolve: $NRGSOLVE_CACHE_DIR, else the platform's cache location
    ($XDG_CACHE_HOME/nrgsolve or ~/.cache/nrgsolve on Linux)."""
    env = os.environ.get("NRGSOLVE_CACHE_DIR")
    if env:
        return Path(env)
    if sys.platform.startswith("win"):
        base = os.environ.get("LOCALAPPDATA") or Path.home() / "AppData" / "Local"
    elif sys.platform == "darwin":
        base = Path.home() / "Library" / "Caches"
    else:
        base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base) / "nrgsolve"


def write_checked(path: Path, payload: bytes) -> bool:
    """Write ``payload`` with its SHA-256 to ``path`` atomically (temporary file in the same folder, then
    rename), so that concurrent writers and crashes never leave a half-written entry visible.

    Returns
    -------
    bool
        False when the cache could not be written (read-only folder, full disk): the caller goes on.
    """
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=path.name + ".", suffix=".tmp", dir=path.parent)
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(_MAGIC + hashlib.sha256(payload).hexdigest().encode() + b"\n" + payload)
            os.replace(tmp, path)
        finally:
            if os.path.exists(tmp):
                os.unlink(tmp)
        return True
    except OSError:
        return False


def read_checked(path: Path) -> bytes | None:
    """The payload written by :func:`write_checked`, or None when the file is missing or its checksum
    does not match (a corrupt entry is removed)."""
    try:
        raw = Path(path).read_bytes()
    except OSError:
        return None
    head = len(_MAGIC) + 65
    if raw[:len(_MAGIC)] == _MAGIC and len(raw) > head and raw[head - 1:head] == b"\n":
        digest, payload = raw[len(_MAGIC):head - 1], raw[head:]
        if hashlib.sha256(payload).hexdigest().encode() == digest:
            return payload
    try:
        os.unlink(path)
    except OSError:
        pass
    return None
