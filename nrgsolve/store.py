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
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from .errors import NrgInputError
from .observables.kondo_scale import WILSON_NUMBER
from .uncertainty import headline_values

__all__ = ["FORMAT_VERSION", "write_result", "read_result", "StoredResult", "check_output_path", "check_writable",
           "atomic_path", "stored_fixed_points"]

#: 2: root attributes ``discretization_scheme``, ``thermodynamics_method``, ``wilson_number``; ``/summary``
#: gains ``chi_zero``, ``gamma_zero``, ``T_chi_lowest``, ``entropy_lowest`` and ``<name>_error``;
#: ``/thermodynamics/free_energy``.  Files of version 1 are still read.
FORMAT_VERSION = 2

THERMO_NAMES = {"T_chi": ("T_chi_imp", "(g mu_B)^2/k_B"), "entropy": ("S_imp", "k_B"), "heat": ("C_imp", "k_B")}
EXTRA_UNITS = {"free_energy": "D", "occupation": "electrons", "double_occupancy": "1", "impurity_sz": "hbar",
               "total_sz": "hbar", "spin_correlation": "hbar^2"}


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


def check_output_path(path: str | Path, force: bool, name: str = "output", suffix: str = ".h5",
                      create_folder: bool = True) -> Path:
    """Refuse an existing output file unless ``force``, or a file that cannot be created; create the folder.

    Checked before any work: the name is not empty, not a folder, not too long for
    the file system, and the folder (or its nearest existing parent) can be written to.

    Parameters
    ----------
    path : str or Path
    force : bool
        Allow overwriting an existing file.
    name : str
        The parameter named in messages (e.g. "output", "--output").
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
        raise NrgInputError(f"{name}: {p} already exists; use --force to overwrite or choose another --output")
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

    def __init__(self, target, exclusive: bool = False, name: str = "output"):
        self.target = Path(target)
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
                                f"use --force to overwrite or choose another --output") from None
        finally:
            self.tmp.unlink(missing_ok=True)
        return False


def _ds(group, name, data, units):
    d = group.create_dataset(name, data=np.asarray(data))
    d.attrs["units"] = units
    return d


def _pad(rows, fill=np.nan):
    n = max(len(r) for r in rows)
    out = np.full((len(rows), n), fill, dtype=float)
    for i, r in enumerate(rows):
        out[i, :len(r)] = r
    return out


def _write_flow(g, flow):
    f = g.create_group("flow")
    _ds(f, "iteration", flow.iteration, "1")
    _ds(f, "energy", flow.energy, "omega_N")
    _ds(f, "charge", flow.charge, "electrons from half filling")
    _ds(f, "twice_spin", flow.twice_spin, "2S (su2) or 2S_z (abelian)")
    _ds(f, "degeneracy", flow.degeneracy, "states")
    if getattr(flow, "channel_charge", None) is not None:
        _ds(f, "channel_charge", flow.channel_charge, "electrons from half filling, per channel")
    d = g.create_group("diagnostics")
    _ds(d, "iteration", flow.iteration, "1")
    _ds(d, "kept_states", flow.kept_states, "states")
    _ds(d, "truncation_energy", flow.truncation_energy, "omega_N")
    _ds(d, "discarded_weight", flow.discarded_weight, "1")
    _ds(d, "block_dimensions", flow.block_dimensions, "states")


def _write_thermo(g, curve):
    t = g.create_group("thermodynamics")
    _ds(t, "temperature", curve.temperature, "D")
    for attr, (name, units) in THERMO_NAMES.items():
        _ds(t, name, getattr(curve, attr), units)
    for name, values in curve.extra.items():
        _ds(t, name, values, EXTRA_UNITS.get(name, "1"))


def write_result(result, path: str | Path, force: bool = False) -> Path:
    """Write a :class:`~nrgsolve.solve.RunResult` to ``path`` atomically.

    Raises
    ------
    NrgInputError
        If the file exists and ``force`` is False.
    """
    import h5py
    import scipy

    target = check_output_path(path, force)
    spec = result.spec
    with atomic_path(target, exclusive=not force) as tmp:
        with h5py.File(tmp, "w") as h:
            a = h.attrs
            a["format_version"] = FORMAT_VERSION
            a["nrgsolve_version"] = _version()
            a["config_text"] = spec.config_text
            a["config_path"] = spec.config_path
            a["created_utc"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
            a["python_version"] = platform.python_version()
            a["numpy_version"] = np.__version__
            a["scipy_version"] = scipy.__version__
            a["h5py_version"] = h5py.__version__
            a["git_commit"] = _git_commit()
            a["symmetry"] = spec.run.symmetry
            a["model"] = spec.impurity.model
            a["discretization_scheme"] = spec.discretization.scheme
            a["wilson_correction"] = bool(spec.discretization.corrects_coupling)
            a["thermodynamics_method"] = spec.run.thermodynamics
            a["wilson_number"] = WILSON_NUMBER
            tw = result.twists
            c = h.create_group("chain")
            _ds(c, "z", [t.z for t in tw], "1")
            _ds(c, "onsite", _pad([t.onsite for t in tw]), "D")
            _ds(c, "hopping", _pad([t.hopping for t in tw]), "D")
            _ds(c, "coupling_sq", [t.coupling_sq for t in tw], "D")
            main = int(np.argmax([t.z for t in tw]))
            _write_flow(h, tw[main].flow)
            _write_thermo(h, result.thermo)
            g = h.create_group("twists")
            for k, t in enumerate(tw):
                gk = g.create_group(str(k))
                gk.attrs["z"] = t.z
                gk.attrs["diag_seconds"] = t.diag_seconds
                gk.attrs["total_seconds"] = t.total_seconds
                _write_flow(gk, t.flow)
                _write_thermo(gk, t.thermo)
            s = h.create_group("summary")
            values = headline_values(result)
            values["lowest_temperature_reached"] = result.summary.lowest_temperature_reached
            for name, v in values.items():
                s.attrs[name] = np.nan if v is None else float(v)
            for name, err in result.uncertainties.items():
                s.attrs[f"{name}_error"] = np.nan if err is None else float(err)
            if result.checks:
                s.attrs["error_checks"] = "; ".join(result.checks)
            s.attrs["wall_seconds"] = float(result.wall_seconds)
            s.attrs["warnings"] = np.array([w.encode() for w in result.warnings] or [b""], dtype="S")
            _write_spectral(h, result)
            _write_fixed_points(h, result)
    return target


def _write_fixed_points(h, result):
    """/flow/fixed_point, /flow/fixed_point_error, /flow/phase_shift and the /summary attributes."""
    fixed = getattr(result, "fixed_points", None)
    if fixed is None:
        return
    labelled, summ = fixed
    f = h["flow"]
    _ds(f, "fixed_point", np.array([x.encode() for x in labelled.label], dtype="S"), "label")
    _ds(f, "fixed_point_error", labelled.error, "omega_N")
    _ds(f, "phase_shift", labelled.phase_shift, "pi")
    a = h["summary"].attrs
    a["fixed_points"] = np.array([lab.encode() for lab, _, _ in summ.sequence] or [b""], dtype="S")
    a["fixed_point_first_iteration"] = np.array([x for _, x, _ in summ.sequence] or [-1], dtype=int)
    a["fixed_point_last_iteration"] = np.array([x for _, _, x in summ.sequence] or [-1], dtype=int)
    a["crossover_temperatures"] = np.array(summ.crossover_temperatures or [np.nan], dtype=float)
    a["final_fixed_point"] = summ.final
    a["phase_shift"] = float(summ.phase_shift)
    a["screening_channel"] = int(summ.screening_channel)
    a["fixed_point_text"] = summ.text()


def _spin_first(a):
    """(n_T, n_comp, n_ω) -> (n_T, n_ω) for one component, else (n_comp, n_T, n_ω)."""
    a = np.asarray(a)
    return a[:, 0] if a.shape[1] == 1 else np.moveaxis(a, 1, 0)


def _write_spectral(h, result):
    sp, tr = getattr(result, "spectral", None), getattr(result, "transport", None)
    if sp is not None:
        g = h.create_group("spectral")
        g.attrs["broadening"] = float(sp.broadening)
        g.attrs["components"] = ", ".join(sp.components)
        _ds(g, "omega", sp.omega, "D")
        _ds(g, "temperature", sp.temperatures, "D")
        _ds(g, "A", _spin_first(sp.spectral), "1/D")
        _ds(g, "occupation", sp.occupation, "electrons")
        if sp.improved is not None:
            _ds(g, "A_improved", _spin_first(sp.improved), "1/D")
            _ds(g, "self_energy_real", _spin_first(sp.self_energy.real), "D")
            _ds(g, "self_energy_imag", _spin_first(sp.self_energy.imag), "D")
    if tr is not None:
        g = h.create_group("transport")
        _ds(g, "temperature", tr.temperature, "D")
        _ds(g, "conductance", tr.conductance, "2e^2/h")


@dataclass
class StoredResult:
    """What a result file holds, read back into plain arrays (see module docstring)."""

    path: str
    attrs: dict
    chain: dict
    flow: dict
    diagnostics: dict
    thermodynamics: dict
    twists: list
    summary: dict
    warnings: list = field(default_factory=list)
    spectral: dict = field(default_factory=dict)     # /spectral datasets (empty when absent)
    transport: dict = field(default_factory=dict)    # /transport datasets (empty when absent)


def _group_dict(g):
    return {k: g[k][()] for k in g if hasattr(g[k], "shape")}


def read_result(path: str | Path) -> StoredResult:
    """Read a result file written by :func:`write_result`.

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
            attrs = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in h.attrs.items()}
            twists = []
            names = list(h["twists"]) if "twists" in h else []
            odd = [k for k in names if not k.isdigit()]
            if odd:
                raise NrgInputError(f"{p}: not a valid result file (unexpected member /twists/{odd[0][:60]})")
            for k in sorted(names, key=int):
                gk = h["twists"][k]
                twists.append({"z": float(gk.attrs["z"]), "flow": _group_dict(gk["flow"]),
                               "diagnostics": _group_dict(gk["diagnostics"]),
                               "thermodynamics": _group_dict(gk["thermodynamics"])})
            summary = {k: v for k, v in h["summary"].attrs.items() if k != "warnings"}
            warns = [w.decode() for w in h["summary"].attrs.get("warnings", []) if w]
            spectral = _group_dict(h["spectral"]) if "spectral" in h else {}
            if "spectral" in h:
                spectral.update({k: (v.decode() if isinstance(v, bytes) else v) for k, v in h["spectral"].attrs.items()})
            transport = _group_dict(h["transport"]) if "transport" in h else {}
            return StoredResult(str(p), attrs, _group_dict(h["chain"]), _group_dict(h["flow"]),
                                _group_dict(h["diagnostics"]), _group_dict(h["thermodynamics"]),
                                twists, summary, warns, spectral=spectral, transport=transport)
    except NrgInputError:
        raise
    except (OSError, KeyError, ValueError, TypeError, AttributeError, IndexError, UnicodeDecodeError) as exc:
        msg = " ".join(str(exc).split())[:200] or exc.__class__.__name__
        raise NrgInputError(f"{p}: cannot read result file ({msg})") from None


def _text(v) -> str:
    return v.decode() if isinstance(v, bytes) else str(v)


def stored_fixed_points(stored: StoredResult) -> dict | None:
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
