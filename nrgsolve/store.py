"""HDF5 result files: one file per run, written atomically.

Layout (units in each dataset's ``units`` attribute; see docs/results.md):

* root attributes: ``format_version``, ``nrgsolve_version``, ``config_text``,
  ``created_utc``, ``python_version``, ``numpy_version``, ``scipy_version``,
  ``h5py_version``, ``git_commit`` (when known), ``symmetry``, ``model``.
* ``/chain/z`` (twists), ``/chain/onsite``, ``/chain/hopping`` (twists × sites,
  NaN-padded), ``/chain/coupling_sq`` (twists).
* ``/flow/iteration``, ``/flow/energy`` (iterations × levels, units of ω_N),
  ``/flow/charge``, ``/flow/twice_spin``, ``/flow/degeneracy`` — of the twist z = 1.
* ``/diagnostics/iteration``, ``/diagnostics/kept_states``,
  ``/diagnostics/truncation_energy``, ``/diagnostics/discarded_weight``,
  ``/diagnostics/block_dimensions`` — of the twist z = 1.
* ``/thermodynamics/temperature`` (ascending, D), ``T_chi_imp``, ``S_imp``,
  ``C_imp`` and impurity averages (``occupation``, ``double_occupancy``,
  ``impurity_sz``, ...) — z-averaged.
* ``/twists/<k>/`` with attribute ``z``: ``flow/``, ``diagnostics/`` and
  ``thermodynamics/`` of every twist.
* root attributes (format 2): ``discretization_scheme``, ``wilson_correction``,
  ``thermodynamics_method``, ``wilson_number``.
* ``/summary`` attributes: ``kondo_temperature_wilson``,
  ``kondo_temperature_crossover``, ``wilson_ratio``, ``chi_zero``, ``gamma_zero``,
  ``T_chi_lowest``, ``entropy_lowest``,
  ``lowest_temperature_reached`` (NaN means "not reached"), ``wall_seconds``,
  ``warnings``; with error estimates ``<name>_error`` (same unit) and ``error_checks``.
* ``/flow/fixed_point`` (label per iteration, "" for a crossover),
  ``/flow/fixed_point_error`` (ω_N), ``/flow/phase_shift`` (π) — twist z = 1;
  ``/summary`` attributes ``fixed_points``, ``fixed_point_first_iteration``,
  ``fixed_point_last_iteration``, ``crossover_temperatures`` (D),
  ``final_fixed_point``, ``phase_shift`` (π), ``screening_channel``,
  ``fixed_point_text``; ``/flow/channel_charge`` (two channels).  Absent
  in files written before they existed.
* ``/spectral/`` (runs with a [spectral] table): ``omega`` (D), ``temperature`` (D),
  ``A`` (temperatures × ω in su2 mode; spin × temperatures × ω, spin = up, down,
  in the abelian mode; 1/D, per spin), ``occupation`` (⟨n_d⟩ at those
  temperatures), optionally ``A_improved`` (same shape as ``A``) and
  ``self_energy_real`` / ``self_energy_imag`` (D); attributes ``broadening``,
  ``components``.  ``/transport/temperature`` (D) and ``/transport/conductance``
  (2e²/h) when conductance temperatures were asked for.

The file is written to a temporary name in the target folder and renamed, so
an interrupted run never leaves a half-written file.
"""

from __future__ import annotations

import os
import platform
import subprocess
import tempfile
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from .errors import NrgInputError
from .observables.kondo_scale import WILSON_NUMBER
from .result import GROUP_PATHS, QUANTITIES, Group, Result, TwistData, dataset_name, python_name, unit_of

__all__ = ["FORMAT_VERSION", "write_result", "read_result", "check_output_path", "check_writable",
           "atomic_path", "stored_fixed_points", "provenance"]

#: 2: root attributes ``discretization_scheme``, ``thermodynamics_method``, ``wilson_number``; ``/summary``
#: gains ``chi_zero``, ``gamma_zero``, ``T_chi_lowest``, ``entropy_lowest`` and ``<name>_error``;
#: ``/thermodynamics/free_energy``.  Files of version 1 are still read.
FORMAT_VERSION = 2



def provenance(spec) -> dict:
    """Root attributes of a new result: versions, creation time, config text, the methods used."""
    import h5py
    import scipy
    return {"format_version": FORMAT_VERSION, "nrgsolve_version": _version(), "config_text": spec.config_text,
            "config_path": spec.config_path,
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "python_version": platform.python_version(), "numpy_version": np.__version__,
            "scipy_version": scipy.__version__, "h5py_version": h5py.__version__, "git_commit": _git_commit(),
            "symmetry": spec.run.symmetry, "model": spec.impurity.model,
            "discretization_scheme": spec.discretization.scheme,
            "wilson_correction": bool(spec.discretization.corrects_coupling),
            "thermodynamics_method": spec.run.thermodynamics, "wilson_number": float(WILSON_NUMBER)}


def _version():
    try:
        from importlib.metadata import version
        return version("nrgsolve")
    except Exception:
        from . import __version__
        return __version__


def _git_commit():
    try:
        here = Path(__file__).resolve().parent
        out = subprocess.run(["git", "rev-parse", "HEAD"], cwd=here, capture_output=True, text=True, timeout=5)
        return out.stdout.strip() if out.returncode == 0 else ""
    except (OSError, subprocess.SubprocessError):
        return ""


#: What a library caller is told to do about an existing file (the command line names its own flags).
OVERWRITE_HINT = "pass overwrite=True to replace it, or choose another path"


def check_output_path(path: str | Path, force: bool, name: str = "path", suffix: str = ".h5",
                      create_folder: bool = True, hint: str = OVERWRITE_HINT) -> Path:
    """Refuse an existing output file unless ``force``, or a file that cannot be created; create the folder.

    Checked before any work: the name is not empty, not a folder, not too long for
    the file system, and the folder (or its nearest existing parent) can be written to.

    Parameters
    ----------
    path : str or Path
    force : bool
        Allow overwriting an existing file.
    name : str
        The argument named in messages (the command line passes its own flag name here).
    suffix : str
        The file kind named in messages.
    create_folder : bool
        Create missing folders now (False: only check that they could be created).

    Raises
    ------
    NrgInputError
        If the file exists and ``force`` is False, the path is a folder, or the
        file cannot be created there.
    """
    if not str(path).strip():
        raise NrgInputError(f"{name}: got an empty file name; give a file name ending in {suffix}")
    p = Path(path)
    check_writable(p, name)
    if p.is_dir():
        raise NrgInputError(f"{name}: {p} is a folder; give a file name ending in {suffix}")
    if (p.exists() or p.is_symlink()) and not force:
        raise NrgInputError(f"{name}: {p} already exists; {hint}")
    if create_folder:
        try:
            p.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise NrgInputError(f"{name}: cannot create folder {p.parent} ({exc.strerror})") from None
    return p


def _short(p) -> str:
    text = str(p)
    return text if len(text) <= 120 else f"{text[:60]}...{text[-40:]} ({len(text)} characters)"


def check_writable(path: str | Path, name: str = "output") -> None:
    """Check, before any work, that a file ``path`` can be created (folders may be missing).

    Every missing folder name and the file name must fit the file system's name
    limit; in an existing folder a temporary file is created and removed; for a
    missing folder the nearest existing parent must be writable.

    Raises
    ------
    NrgInputError
        Naming ``name`` and the path, with the reason.
    """
    p = Path(os.path.abspath(path))
    existing = p.parent
    missing = [p.name]
    try:
        while not existing.exists():
            missing.append(existing.name)
            existing = existing.parent
        folder_ok = existing.is_dir()
    except OSError as exc:          # e.g. a folder name too long
        raise NrgInputError(f"{name}: cannot write {_short(path)} ({exc.strerror or exc})") from None
    if not folder_ok:
        raise NrgInputError(f"{name}: cannot write {_short(path)} ({existing} is not a folder)")
    try:
        limit = os.pathconf(existing, "PC_NAME_MAX")
    except (OSError, ValueError, AttributeError):
        limit = 255
    for part in missing:
        if len(os.fsencode(part)) > limit:
            raise NrgInputError(f"{name}: cannot write {_short(path)} (the name {_short(part)} is longer than the "
                                f"{limit} bytes the file system allows)")
    if existing != p.parent:
        if not os.access(existing, os.W_OK | os.X_OK):
            raise NrgInputError(f"{name}: cannot write {_short(path)} (folder {existing} is not writable)")
        return
    try:
        fd, probe = tempfile.mkstemp(prefix=_temp_prefix(p), suffix=".part", dir=existing)
    except OSError as exc:
        raise NrgInputError(f"{name}: cannot write {_short(path)} ({exc.strerror or exc})") from None
    os.close(fd)
    os.unlink(probe)


def _temp_prefix(target: Path) -> str:
    """Hidden temporary name beside the target, short enough for any file system (<= 255 bytes in all)."""
    stem = target.name
    while len(os.fsencode(stem)) > 100:
        stem = stem[:-1]
    return f".{stem}."


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


class atomic_path:
    """Context manager: yields a temporary path beside ``target``; renames it on success, removes it on failure.

    With ``exclusive=True`` the final step fails with :class:`NrgInputError` if ``target``
    exists by then: the temporary file is hard-linked to the target (which fails if the
    target exists, so checking and creating are one atomic step) and then removed.  On a
    file system without hard links the target is reserved with ``O_CREAT | O_EXCL`` and
    the temporary file renamed onto it.  Of two runs writing the same new file, exactly
    one succeeds.
    """

    def __init__(self, target, exclusive: bool = False, name: str = "path", hint: str = OVERWRITE_HINT):
        self.target = Path(target)
        self.hint = hint
        self.exclusive = exclusive
        self.name = name

    def __enter__(self):
        fd, tmp = tempfile.mkstemp(prefix=_temp_prefix(self.target), suffix=".part", dir=self.target.parent)
        os.close(fd)
        os.chmod(tmp, 0o666 & ~_umask())    # mkstemp makes 0600; give the final file the usual permissions
        self.tmp = Path(tmp)
        return self.tmp

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None:
            self.tmp.unlink(missing_ok=True)
            return False
        if not self.exclusive:
            os.replace(self.tmp, self.target)
            return False
        try:
            try:
                os.link(self.tmp, self.target)
            except FileExistsError:
                raise
            except OSError:                     # no hard links here: reserve the name, then rename onto it
                os.close(os.open(self.target, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666 & ~_umask()))
                os.replace(self.tmp, self.target)
        except FileExistsError:
            raise NrgInputError(f"{self.name}: {self.target} already exists (written by another run meanwhile); "
                                f"{self.hint}") from None
        finally:
            self.tmp.unlink(missing_ok=True)
        return False


def _encode(v):
    """A value as HDF5 takes it: str arrays as UTF-8 byte strings."""
    if not isinstance(v, np.ndarray):
        return v
    a = v
    if a.dtype.kind == "U":
        return np.array([x.encode() for x in a.ravel()], dtype="S").reshape(a.shape) if a.size else \
            np.array([b""], dtype="S")
    return v


def _decode(v):
    """A value read from HDF5 as a Result holds it: byte strings to str, numpy scalars to Python ones."""
    if isinstance(v, bytes):
        return v.decode()
    if isinstance(v, np.ndarray):
        if v.dtype.kind == "S" or v.dtype.kind == "O":
            return np.array([x.decode() if isinstance(x, bytes) else str(x) for x in v.ravel()]).reshape(v.shape)
        return v
    if isinstance(v, np.bool_):
        return bool(v)
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.floating):
        return float(v)
    return v


def _write_group(parent, path: str, group, kind: str):
    g = parent.create_group(path)
    for k, v in group.attrs.items():
        g.attrs[k] = _encode(v)
    for name, data in group.items():
        d = g.create_dataset(dataset_name(kind, name), data=_encode(data))
        d.attrs["units"] = unit_of(kind, name)
    return g


def _read_group(g, kind: str) -> Group:
    data = {python_name(kind, k): _decode(g[k][()]) for k in g if hasattr(g[k], "shape")}
    order = [q.name for q in QUANTITIES if q.group == kind]
    data = dict(sorted(data.items(), key=lambda kv: order.index(kv[0]) if kv[0] in order else len(order)))
    return Group(kind, data, {k: _decode(v) for k, v in g.attrs.items()})


def write_result(result, path: str | Path, overwrite: bool = False, force: bool | None = None,
                 name: str = "path", hint: str = OVERWRITE_HINT) -> Path:
    """Write a :class:`~nrgsolve.result.Result` to ``path`` atomically.

    Parameters
    ----------
    result : Result
        (or a finished run of the driver, :class:`nrgsolve.solve.RunResult`, converted first)
    path : str or Path
    overwrite : bool
        Replace an existing file (``force`` is the older name of this argument).

    Raises
    ------
    NrgInputError
        If the file exists and ``overwrite`` is False, or it cannot be written.
    """
    import h5py

    if not isinstance(result, Result):            # a run of the driver: its Result first
        from .result import result_from_run
        result = result_from_run(result)
    overwrite = bool(overwrite or force)
    target = check_output_path(path, overwrite, name=name, hint=hint)
    with atomic_path(target, exclusive=not overwrite, name=name, hint=hint) as tmp:
        with h5py.File(tmp, "w") as h:
            for k, v in result.provenance.items():
                h.attrs[k] = _encode(v)
            for kind, where in GROUP_PATHS.items():
                group = getattr(result, kind)
                if group is not None:
                    _write_group(h, where, group, kind)
            g = h.create_group("twists")
            for k, t in enumerate(result.twists):
                gk = g.create_group(str(k))
                gk.attrs["z"] = t.z
                for name, v in t.attrs.items():
                    gk.attrs[name] = _encode(v)
                _write_group(gk, "flow", t.flow, "flow")
                _write_group(gk, "diagnostics", t.diagnostics, "diagnostics")
                _write_group(gk, GROUP_PATHS["thermo"], t.thermo, "thermo")
            s = h.create_group("summary")
            for name, v in result.summary.items():
                s.attrs[name] = _encode(v)
            s.attrs["warnings"] = np.array([w.encode() for w in result.warnings] or [b""], dtype="S")
    object.__setattr__(result, "path", str(target))
    return target


def read_result(path: str | Path) -> Result:
    """Read a result file written by :func:`write_result` (or by an older version) as a :class:`Result`.

    Raises
    ------
    NrgInputError
        If the file is missing or not an nrgsolve result file.
    """
    import h5py

    p = Path(path)
    if p.is_dir():
        raise NrgInputError(f"{p}: is a folder, not a result file")
    if not p.is_file():
        raise NrgInputError(f"{p}: no such result file")
    try:
        with h5py.File(p, "r") as h:
            if "format_version" not in h.attrs:
                raise NrgInputError(f"{p}: not an nrgsolve result file (no format_version attribute)")
            attrs = {k: _decode(v) for k, v in h.attrs.items()}
            twists = []
            names = list(h["twists"]) if "twists" in h else []
            odd = [k for k in names if not k.isdigit()]
            if odd:
                raise NrgInputError(f"{p}: not a valid result file (unexpected member /twists/{odd[0][:60]})")
            for k in sorted(names, key=int):
                gk = h["twists"][k]
                extra = {a: _decode(v) for a, v in gk.attrs.items() if a != "z"}
                twists.append(TwistData(float(gk.attrs["z"]), _read_group(gk["flow"], "flow"),
                                        _read_group(gk["diagnostics"], "diagnostics"),
                                        _read_group(gk[GROUP_PATHS["thermo"]], "thermo"), extra))
            summary = {k: _decode(v) for k, v in h["summary"].attrs.items() if k != "warnings"}
            warns = tuple(w.decode() for w in h["summary"].attrs.get("warnings", []) if w)
            groups = {kind: _read_group(h[where], kind) if where in h else None for kind, where in GROUP_PATHS.items()}
    except NrgInputError:
        raise
    except (OSError, KeyError, ValueError, TypeError, AttributeError, IndexError, UnicodeDecodeError) as exc:
        msg = " ".join(str(exc).split())[:200] or exc.__class__.__name__
        raise NrgInputError(f"{p}: cannot read result file ({msg})") from None
    for kind in ("chain", "flow", "diagnostics", "thermo"):
        if groups[kind] is None:
            raise NrgInputError(f"{p}: cannot read result file (no /{GROUP_PATHS[kind]} group)")
    return Result(spec=stored_spec(attrs), summary=summary, twists=tuple(twists), warnings=warns,
                  provenance=attrs, path=str(p), **groups)


def stored_spec(attrs: dict):
    """The RunSpec of a stored config text, or None when it does not parse with this version."""
    from .config import parse_config
    try:
        return parse_config(str(attrs.get("config_text", "")), str(attrs.get("config_path") or "<stored config>"),
                            stored=True)
    except NrgInputError:
        return None


def _text(v) -> str:
    return v.decode() if isinstance(v, bytes) else str(v)


def stored_fixed_points(stored: Result) -> dict | None:
    """The fixed-point data of a stored run, or None for files written before they existed.

    Returns
    -------
    dict or None
        ``labels`` (list of str per iteration, "" for crossovers), ``error``
        (ndarray, ω_N), ``iteration`` (ndarray), ``sequence`` (list of
        (label, first N, last N)), ``crossover_temperatures`` (list, D),
        ``final`` (str), ``phase_shift`` (float, units of π; NaN when none)
        and ``text`` (the one-line sequence).
    """
    if "fixed_point" not in stored.flow or "fixed_points" not in stored.summary:
        return None
    s = stored.summary
    names = [_text(x) for x in np.ravel(s["fixed_points"])]
    first = [int(x) for x in np.ravel(s["fixed_point_first_iteration"])]
    last = [int(x) for x in np.ravel(s["fixed_point_last_iteration"])]
    seq = [(n, a, b) for n, a, b in zip(names, first, last) if n]
    temps = [float(x) for x in np.ravel(s["crossover_temperatures"]) if np.isfinite(x)]
    return {"labels": [_text(x) for x in np.ravel(stored.flow["fixed_point"])],
            "error": np.asarray(stored.flow.get("fixed_point_error", []), float),
            "iteration": np.asarray(stored.flow["iteration"], int),
            "sequence": seq, "crossover_temperatures": temps,
            "final": _text(s.get("final_fixed_point", "")),
            "phase_shift": float(s.get("phase_shift", np.nan)),
            "text": _text(s.get("fixed_point_text", ""))}
