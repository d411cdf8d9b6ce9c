"""The one result type, live or stored, and the one table of stored quantities.

A :class:`Result` is what :func:`nrgsolve.run` returns and what
:func:`nrgsolve.load` reads from a file; the two are the same object shape
and a round trip through a file is bit for bit.  Every array lives in a
:class:`Group` (``result.thermo``, ``result.flow``, ...), read-only, with
attribute and item access; :data:`QUANTITIES` names each stored quantity
once: its group and name in Python, its dataset path in the HDF5 file, its
unit and its plot label.  Storage, plots, inspect and the command-line help
read that table.

Units: energies and temperatures in units of the half-bandwidth D (k_B = 1);
T·χ_imp in (g μ_B)²/k_B (a free spin ½ has ¼); entropy and specific heat in
k_B; flow energies in units of ω_N measured from the iteration's ground state.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["Quantity", "QUANTITIES", "quantity", "Group", "TwistData", "Result", "GROUP_PATHS", "result_from_run", "quantities_markdown"]


@dataclass(frozen=True)
class Quantity:
    """One stored quantity.

    Attributes
    ----------
    group : str
        The :class:`Result` attribute holding it ("thermo", "flow", ...).
    name : str
        Its name in Python (``result.thermo.T_chi``).
    dataset : str
        Its dataset name inside the group's HDF5 path (see :data:`GROUP_PATHS`).
    unit : str
        Unit (stored as the dataset's ``units`` attribute).
    label : str
        Axis label for plots (matplotlib mathtext).
    meaning : str
        One line for docs and help.
    """

    group: str
    name: str
    dataset: str
    unit: str
    label: str
    meaning: str


#: HDF5 group of each Result group (twists repeat flow, diagnostics and thermo under /twists/<k>/).
GROUP_PATHS = {"chain": "chain", "flow": "flow", "diagnostics": "diagnostics", "thermo": "thermodynamics",
               "spectral": "spectral", "transport": "transport"}

_Q = Quantity
#: Every stored array: the one table storage, plots, inspect and help read.
QUANTITIES: tuple[Quantity, ...] = (
    _Q("chain", "z", "z", "1", "$z$", "twist of each chain"),
    _Q("chain", "onsite", "onsite", "D", r"$\varepsilon_n$", "on-site energies ε_n (twists × sites, NaN-padded)"),
    _Q("chain", "hopping", "hopping", "D", "$t_n$", "hoppings t_n (twists × sites, NaN-padded)"),
    _Q("chain", "coupling_sq", "coupling_sq", "D", "$V_0^2/\\Gamma$", "V_0²/Γ of each twist"),
    _Q("flow", "iteration", "iteration", "1", "$N$", "iteration N (chain through site N)"),
    _Q("flow", "energy", "energy", "omega_N", r"$E/\omega_N$", "lowest levels (iterations × levels)"),
    _Q("flow", "charge", "charge", "electrons from half filling", "$Q$", "charge of each level"),
    _Q("flow", "twice_spin", "twice_spin", "2S (su2) or 2S_z (abelian)", "$2S$", "spin of each level"),
    _Q("flow", "degeneracy", "degeneracy", "states", "degeneracy", "states in each level"),
    _Q("flow", "channel_charge", "channel_charge", "electrons from half filling, per channel", "$Q_k$",
       "charge per channel (two channels)"),
    _Q("flow", "twice_isospin", "twice_isospin", "2I per channel (isospin mode)", "$2I_k$",
       "isospin of each level's multiplet, per channel"),
    _Q("flow", "fixed_point", "fixed_point", "label", "fixed point", "fixed point of each iteration (\"\": crossover)"),
    _Q("flow", "fixed_point_error", "fixed_point_error", "omega_N", r"$\Delta E/\omega_N$",
       "distance of the levels from the fixed-point spectrum"),
    _Q("flow", "phase_shift", "phase_shift", "pi", r"$\delta/\pi$", "phase shift fitted to the levels"),
    _Q("diagnostics", "iteration", "iteration", "1", "$N$", "iteration N"),
    _Q("diagnostics", "kept_states", "kept_states", "states", "kept states", "states kept (counting 2S+1)"),
    _Q("diagnostics", "truncation_energy", "truncation_energy", "omega_N", r"$E_{cut}/\omega_N$",
       "energy of the highest kept state"),
    _Q("diagnostics", "discarded_weight", "discarded_weight", "1", "discarded weight",
       "Boltzmann weight at T_N of the discarded states"),
    _Q("diagnostics", "block_dimensions", "block_dimensions", "states", "block size", "largest block of each iteration"),
    _Q("thermo", "temperature", "temperature", "D", r"$T$  [$D$]", "temperature (ascending)"),
    _Q("thermo", "T_chi", "T_chi_imp", "(g mu_B)^2/k_B", r"$T\chi_{imp}$  [$(g\mu_B)^2/k_B$]",
       "impurity susceptibility times T"),
    _Q("thermo", "entropy", "S_imp", "k_B", r"$S_{imp}$  [$k_B$]", "impurity entropy"),
    _Q("thermo", "heat", "C_imp", "k_B", r"$C_{imp}$  [$k_B$]", "impurity specific heat"),
    _Q("thermo", "free_energy", "free_energy", "D", r"$F_{imp}$  [$D$]", "impurity free energy"),
    _Q("thermo", "occupation", "occupation", "electrons", r"$\langle n_d\rangle$", "impurity occupation"),
    _Q("thermo", "double_occupancy", "double_occupancy", "1", r"$\langle n_{d\uparrow} n_{d\downarrow}\rangle$",
       "impurity double occupancy"),
    _Q("thermo", "impurity_sz", "impurity_sz", "hbar", r"$\langle S_z\rangle$", "impurity magnetization"),
    _Q("thermo", "total_sz", "total_sz", "hbar", r"$\langle S_z^{tot}\rangle$", "total magnetization"),
    _Q("thermo", "spin_correlation", "spin_correlation", "hbar^2", r"$\langle \vec S\cdot\vec s_0\rangle$",
       "impurity–site-0 spin correlation"),
    _Q("spectral", "omega", "omega", "D", r"$\omega$  [$D$]", "frequencies"),
    _Q("spectral", "temperature", "temperature", "D", "$T$", "temperatures of the spectra"),
    _Q("spectral", "A", "A", "1/D", r"$A(\omega)$  [$1/D$]", "impurity spectral function per spin"),
    _Q("spectral", "occupation", "occupation", "electrons", r"$\langle n_d\rangle$", "occupation from the spectra"),
    _Q("spectral", "A_improved", "A_improved", "1/D", r"$A(\omega)$  [$1/D$]", "improved estimate Σ = U F/G"),
    _Q("spectral", "self_energy_real", "self_energy_real", "D", r"Re $\Sigma$", "self-energy, real part"),
    _Q("spectral", "self_energy_imag", "self_energy_imag", "D", r"Im $\Sigma$", "self-energy, imaginary part"),
    _Q("spectral", "t_matrix", "t-matrix", "1", r"$-\pi\rho\,\mathrm{Im}\,T(\omega)$",
       "conduction-electron T-matrix (1: unitary limit), per spin/channel component"),
    _Q("spectral", "spin_susceptibility", "spin-susceptibility", "(g mu_B)^2/D", r"$\chi''(\omega)$  [$(g\mu_B)^2/D$]",
       "dynamical impurity spin susceptibility χ''(ω) of S_z"),
    _Q("spectral", "static_susceptibility", "static_susceptibility", "(g mu_B)^2/D", r"$\chi(\omega=0)$",
       "Kramers–Kronig static limit of χ''(ω) at each temperature"),
    _Q("transport", "temperature", "temperature", "D", r"$T$  [$D$]", "temperatures of the conductance"),
    _Q("transport", "conductance", "conductance", "2e^2/h", r"$G$  [$2e^2/h$]", "linear conductance"),
    _Q("transport", "alloy_temperature", "alloy_temperature", "D", r"$T$  [$D$]",
       "temperatures of the dilute-alloy transport"),
    _Q("transport", "resistivity", "resistivity", "rho_unitary", r"$\rho(T)/\rho_{unitary}$",
       "impurity resistivity of a dilute alloy in units of the unitary limit"),
    _Q("transport", "thermopower", "thermopower", "k_B/|e|", r"$S$  [$k_B/|e|$]", "impurity thermopower"),
    _Q("transport", "thermal_conductivity", "thermal_conductivity", "k_B^2/e^2",
       r"$\kappa\rho_{unitary}/T$  [$k_B^2/e^2$]", "thermal conductivity (π²/3 at the unitary limit)"),
    _Q("transport", "lorenz_ratio", "lorenz_ratio", "1", r"$\kappa\rho/(T L_0)$",
       "Lorenz number over π²/3 (1: Wiedemann–Franz)"),
)
del _Q

_BY_NAME = {(q.group, q.name): q for q in QUANTITIES}
_BY_DATASET = {(q.group, q.dataset): q for q in QUANTITIES}


def quantity(group: str, name: str) -> Quantity:
    """The table entry of ``name`` in ``group`` (a KeyError names the known ones)."""
    try:
        return _BY_NAME[(group, name)]
    except KeyError:
        known = ", ".join(q.name for q in QUANTITIES if q.group == group)
        raise KeyError(f"no quantity {name!r} in {group!r}; known: {known}") from None


def dataset_name(group: str, name: str) -> str:
    """Dataset name of a Python name (unknown names are stored under their own name)."""
    q = _BY_NAME.get((group, name))
    return q.dataset if q else name


def python_name(group: str, dataset: str) -> str:
    """Python name of a dataset (unknown datasets keep their own name)."""
    q = _BY_DATASET.get((group, dataset))
    return q.name if q else dataset


def unit_of(group: str, name: str, default: str = "1") -> str:
    """Unit of a quantity (``default`` for one the table does not know)."""
    q = _BY_NAME.get((group, name))
    return q.unit if q else default


class Group(Mapping):
    """Read-only arrays of one part of a result: ``g.T_chi`` or ``g["T_chi"]``; ``g.units`` per name.

    Arrays are numpy arrays made read-only; two groups are equal when they hold the same names and
    every array is equal element for element (NaN equal to NaN), with the same dtype.
    """

    __slots__ = ("_name", "_data", "_attrs")

    def __init__(self, name: str, data: dict, attrs: dict | None = None):
        arrays = {}
        for k, v in data.items():
            a = np.array(v)              # a copy: the result owns its arrays
            a.flags.writeable = False
            arrays[k] = a
        object.__setattr__(self, "_name", name)
        object.__setattr__(self, "_data", arrays)
        object.__setattr__(self, "_attrs", dict(attrs or {}))

    def __getitem__(self, key):
        return self._data[key]

    def __iter__(self):
        return iter(self._data)

    def __len__(self):
        return len(self._data)

    def __getattr__(self, key):
        try:
            return self._data[key]
        except KeyError:
            raise AttributeError(f"{self._name} has no {key!r}; it holds: {', '.join(self._data) or 'nothing'}") \
                from None

    def __setattr__(self, key, value):
        raise AttributeError("a result is read-only")

    @property
    def attrs(self) -> dict:
        """Scalar attributes of the group (e.g. the broadening of the spectra)."""
        return dict(self._attrs)

    @property
    def units(self) -> dict:
        """name → unit, from :data:`QUANTITIES`."""
        return {k: unit_of(self._name, k) for k in self._data}

    def __eq__(self, other):
        if not isinstance(other, Group) or set(self) != set(other) or _plain(self._attrs) != _plain(other._attrs):
            return False
        return all(_same(self[k], other[k]) for k in self)

    __hash__ = None

    def __repr__(self):
        return f"Group({self._name}: {', '.join(f'{k}{list(v.shape)}' for k, v in self._data.items())})"

    def __dir__(self):
        return list(self._data) + ["attrs", "units"]


def _same(a, b) -> bool:
    a, b = np.asarray(a), np.asarray(b)
    if a.shape != b.shape or a.dtype != b.dtype:
        return False
    if a.dtype.kind in "fc":
        return bool(np.array_equal(a, b, equal_nan=True))
    return bool(np.array_equal(a, b))


def _plain(d: dict) -> dict:
    out = {}
    for k, v in d.items():
        if isinstance(v, np.ndarray):
            out[k] = ("array", v.dtype.str, v.tolist())
        elif isinstance(v, float) and math.isnan(v):
            out[k] = "nan"
        else:
            out[k] = v
    return out


@dataclass(frozen=True, eq=False)
class TwistData:
    """One twist z of a run: its flow, diagnostics and thermodynamics (same names as the run's)."""

    z: float
    flow: Group
    diagnostics: Group
    thermo: Group
    attrs: dict = field(default_factory=dict)

    def __eq__(self, other):
        return (isinstance(other, TwistData) and self.z == other.z and self.flow == other.flow
                and self.diagnostics == other.diagnostics and self.thermo == other.thermo
                and _plain(self.attrs) == _plain(other.attrs))

    __hash__ = None


@dataclass(frozen=True, eq=False)
class Result:
    """One run: the same object whether just computed (:func:`nrgsolve.run`) or read from a file
    (:func:`nrgsolve.load`).

    Attributes
    ----------
    spec : RunSpec
        The validated run specification (for a stored file: parsed from its config text).
    thermo : Group
        ``temperature`` (D, ascending), ``T_chi`` ((g μ_B)²/k_B), ``entropy`` (k_B), ``heat`` (k_B),
        ``free_energy`` (D, full density matrix) and the impurity averages the model offers
        (``occupation``, ``double_occupancy``, ``impurity_sz``, ``spin_correlation``, ...); z-averaged.
    summary : dict
        Headline numbers: ``kondo_temperature_wilson``, ``kondo_temperature_crossover`` (D),
        ``chi_zero`` ((g μ_B)²/(k_B D)), ``gamma_zero`` (k_B/D), ``wilson_ratio``, ``T_chi_lowest``,
        ``entropy_lowest``, ``lowest_temperature_reached`` (D), ``wall_seconds``; NaN means not
        reached; with error estimates ``<name>_error`` in the same unit; fixed-point summary.
    flow : Group
        Levels of the twist z = 1 per iteration (units of ω_N) with their quantum numbers and fixed points.
    diagnostics : Group
        Kept states, truncation energy, discarded weight per iteration (twist z = 1).
    chain : Group
        ε_n, t_n of every twist (D).
    twists : tuple of TwistData
        Flow, diagnostics and thermodynamics of every twist.
    spectral, transport : Group or None
        Spectral functions and conductance when the run asked for them.
    warnings : tuple of str
        What the run found suspicious.
    provenance : dict
        Versions, creation time, file format, the methods used.
    path : str or None
        The file it was read from or last saved to.

    Examples
    --------
    >>> import nrgsolve
    >>> res = nrgsolve.run({"impurity": {"model": "kondo", "exchange": 0.3},
    ...                     "run": {"kept_states": 100, "lowest_temperature": 1e-4},
    ...                     "discretization": {"twists": 1}})
    >>> bool(res.thermo.T_chi[-1] > res.thermo.T_chi[0])
    True
    """

    spec: object
    thermo: Group
    summary: dict
    flow: Group
    diagnostics: Group
    chain: Group
    twists: tuple = ()
    spectral: Group | None = None
    transport: Group | None = None
    warnings: tuple = ()
    provenance: dict = field(default_factory=dict)
    path: str | None = None

    def save(self, path, overwrite: bool = False) -> Path:
        """Write the result to an HDF5 file atomically (a temporary file renamed into place).

        Parameters
        ----------
        path : str or Path
            Ending in .h5.
        overwrite : bool
            Replace an existing file (default: refuse it).

        Returns
        -------
        Path
            The file written.

        Raises
        ------
        NrgInputError
            The file exists and ``overwrite`` is False, or it cannot be written.
        """
        from .store import write_result
        return write_result(self, path, overwrite=overwrite)

    def same_data(self, other: "Result") -> bool:
        """True when every array, summary number and warning equals the other's (not the provenance and
        not the timings)."""
        keys = [k for k in set(self.summary) | set(other.summary) if k != "wall_seconds"]
        return (self.thermo == other.thermo and self.flow == other.flow and self.diagnostics == other.diagnostics
                and self.chain == other.chain and len(self.twists) == len(other.twists)
                and all(a.z == b.z and a.flow == b.flow and a.diagnostics == b.diagnostics and a.thermo == b.thermo
                        for a, b in zip(self.twists, other.twists))
                and self.spectral == other.spectral and self.transport == other.transport
                and all(k in self.summary and k in other.summary
                        and _same(np.asarray(self.summary[k]), np.asarray(other.summary[k])) for k in keys)
                and tuple(self.warnings) == tuple(other.warnings))

    def __eq__(self, other):
        return (isinstance(other, Result) and self.same_data(other) and tuple(self.twists) == tuple(other.twists)
                and _plain(self.provenance) == _plain(other.provenance)
                and _same(np.asarray(self.summary.get("wall_seconds", np.nan)),
                          np.asarray(other.summary.get("wall_seconds", np.nan))))

    __hash__ = None

    @property
    def kondo_temperature(self) -> float | None:
        """The crossover Kondo temperature T_K (D; T·χ_imp(T_K) = 0.07), or None when not reached."""
        v = float(self.summary.get("kondo_temperature_crossover", math.nan))
        return v if math.isfinite(v) else None

    @property
    def label(self) -> str:
        """A short name: the file name, or the model."""
        return Path(self.path).stem if self.path else str(self.provenance.get("model", "run"))

    def __repr__(self):
        tk = self.kondo_temperature
        return (f"Result(model={self.provenance.get('model', '?')!r}, "
                f"{len(self.thermo.get('temperature', []))} temperatures, "
                f"T_K={'not reached' if tk is None else f'{tk:.4g} D'}"
                f"{', path=' + repr(self.path) if self.path else ''})")


def _thermo_group(curve) -> Group:
    data = {"temperature": curve.temperature, "T_chi": curve.T_chi, "entropy": curve.entropy, "heat": curve.heat}
    data.update(curve.extra)
    return Group("thermo", data)


def _flow_groups(flow) -> tuple[Group, Group]:
    f = {"iteration": flow.iteration, "energy": flow.energy, "charge": flow.charge, "twice_spin": flow.twice_spin,
         "degeneracy": flow.degeneracy}
    if getattr(flow, "channel_charge", None) is not None:
        f["channel_charge"] = flow.channel_charge
    if getattr(flow, "twice_isospin", None) is not None:
        f["twice_isospin"] = flow.twice_isospin
    d = {"iteration": flow.iteration, "kept_states": flow.kept_states, "truncation_energy": flow.truncation_energy,
         "discarded_weight": flow.discarded_weight, "block_dimensions": flow.block_dimensions}
    return f, Group("diagnostics", d)


def _pad(rows, fill=np.nan):
    n = max(len(r) for r in rows)
    out = np.full((len(rows), n), fill, dtype=float)
    for i, r in enumerate(rows):
        out[i, :len(r)] = r
    return out


def _spin_first(a):
    """(n_T, n_comp, n_ω) -> (n_T, n_ω) for one component, else (n_comp, n_T, n_ω)."""
    a = np.asarray(a)
    return a[:, 0] if a.shape[1] == 1 else np.moveaxis(a, 1, 0)


def _none_nan(v):
    return math.nan if v is None else float(v)


def result_from_run(run) -> Result:
    """The :class:`Result` of a finished run of the driver (:class:`nrgsolve.solve.RunResult`).

    This is the one definition of what a result holds; :func:`nrgsolve.store.write_result` writes
    exactly this and :func:`nrgsolve.store.read_result` reads it back.
    """
    from .store import provenance
    from .uncertainty import headline_values

    tw = run.twists
    chain = Group("chain", {"z": np.array([t.z for t in tw], float), "onsite": _pad([t.onsite for t in tw]),
                            "hopping": _pad([t.hopping for t in tw]),
                            "coupling_sq": np.array([t.coupling_sq for t in tw], float)})
    main = int(np.argmax([t.z for t in tw]))
    flow, diagnostics = _flow_groups(tw[main].flow)
    twists = []
    for t in tw:
        f, d = _flow_groups(t.flow)
        twists.append(TwistData(float(t.z), Group("flow", f), d, _thermo_group(t.thermo),
                                {"diag_seconds": float(t.diag_seconds), "total_seconds": float(t.total_seconds)}))
    summary = {name: _none_nan(v) for name, v in headline_values(run).items()}
    summary["lowest_temperature_reached"] = _none_nan(run.summary.lowest_temperature_reached)
    for name, err in run.uncertainties.items():
        summary[f"{name}_error"] = _none_nan(err)
    if run.checks:
        summary["error_checks"] = "; ".join(run.checks)
    summary["wall_seconds"] = float(run.wall_seconds)
    if run.fixed_points is not None:
        labelled, summ = run.fixed_points
        flow["fixed_point"] = np.array(list(labelled.label), dtype=str)
        flow["fixed_point_error"] = np.asarray(labelled.error, float)
        flow["phase_shift"] = np.asarray(labelled.phase_shift, float)
        seq = summ.sequence
        summary.update({
            "fixed_points": np.array([lab for lab, _, _ in seq] or [""], dtype=str),
            "fixed_point_first_iteration": np.array([x for _, x, _ in seq] or [-1], dtype=np.int64),
            "fixed_point_last_iteration": np.array([x for _, _, x in seq] or [-1], dtype=np.int64),
            "crossover_temperatures": np.array(summ.crossover_temperatures or [np.nan], dtype=float),
            "final_fixed_point": str(summ.final), "phase_shift": float(summ.phase_shift),
            "screening_channel": int(summ.screening_channel), "fixed_point_text": summ.text()})
    spectral = transport = None
    from .observables.dynamics import zero_temperature_values, ZERO_TEMPERATURE_VALUES
    summary.update({k: math.nan for k in ZERO_TEMPERATURE_VALUES})     # index.csv columns of every run
    sp = run.spectral
    if sp is not None:
        data = {"omega": sp.omega, "temperature": sp.temperatures}
        attrs = {"broadening": float(sp.broadening)}
        if sp.spectral is not None:
            data.update(A=_spin_first(sp.spectral), occupation=sp.occupation)
            attrs["components"] = ", ".join(sp.components)
        if sp.improved is not None:
            data.update(A_improved=_spin_first(sp.improved), self_energy_real=_spin_first(sp.self_energy.real),
                        self_energy_imag=_spin_first(sp.self_energy.imag))
        dyn = getattr(sp, "dynamics", None)
        if dyn is not None:
            summary.update(zero_temperature_values(sp.omega, sp.temperatures, dyn))
            attrs["quantities"] = ", ".join(dyn.quantities)
            for q, name in (("t-matrix", "t_matrix"), ("spin-susceptibility", "spin_susceptibility")):
                if q in dyn.curves:
                    data[name] = _spin_first(dyn.curves[q])
                    attrs[f"{name}_components"] = ", ".join(dyn.components[q])
            if dyn.static_susceptibility is not None:
                data["static_susceptibility"] = np.asarray(dyn.static_susceptibility, float)
        spectral = Group("spectral", data, attrs)
    tr = {}
    if run.transport is not None:
        tr.update(temperature=run.transport.temperature, conductance=run.transport.conductance)
    alloy = getattr(run, "alloy_transport", None)
    if alloy is not None:
        tr.update(alloy_temperature=alloy.temperature, resistivity=alloy.resistivity,
                  thermopower=alloy.thermopower, thermal_conductivity=alloy.thermal_conductivity,
                  lorenz_ratio=alloy.lorenz_ratio)
    if tr:
        transport = Group("transport", tr)
    return Result(spec=run.spec, thermo=_thermo_group(run.thermo), summary=summary, flow=Group("flow", flow),
                  diagnostics=diagnostics, chain=chain, twists=tuple(twists), spectral=spectral,
                  transport=transport, warnings=tuple(run.warnings), provenance=provenance(run.spec))


def quantities_markdown() -> str:
    """The table of stored quantities (markdown): Python name, dataset path, unit, meaning."""
    lines = ["| Python | dataset | unit | meaning |", "|---|---|---|---|"]
    for q in QUANTITIES:
        cells = [f"`result.{q.group}.{q.name}`", f"`/{GROUP_PATHS[q.group]}/{q.dataset}`", q.unit, q.meaning]
        lines.append("| " + " | ".join(c.replace("|", "\\|") for c in cells) + " |")
    return "\n".join(lines)
