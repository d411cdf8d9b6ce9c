"""Config files: TOML text -> validated, frozen :class:`RunSpec`.

Every key nrgsolve understands is declared once, in :data:`SCHEMA`, with its
type, default, unit, allowed range and a one-line meaning.  Unknown keys are
errors with a "did you mean" suggestion; wrong types and out-of-range values
are errors naming the key and the allowed range.  Nothing here does numerics.

Conventions: energies and temperatures in units of the conduction
half-bandwidth D (k_B = 1); ``exchange`` is the dimensionless ρJ with
ρ = 1/(2D) and J > 0 antiferromagnetic; ``hybridization`` is Γ = πρV² at the
Fermi level (Γ(ε) = Γ·g(ε) for a bath shape g); ``field`` is the Zeeman
energy h on the impurity, H_field = −h S_z (h > 0 favours spin up).
"""

from __future__ import annotations

import difflib
import math
import tomllib
from dataclasses import dataclass, field, fields, make_dataclass
from pathlib import Path
from typing import Any

from .errors import ConfigError
from .engine.symmetry import SYMMETRIES as _SYMMETRY_CLASSES
from .models.registry import model as model_declaration, model_names, impurity_parameters
from .keys import (Key, NUM, finite, MAX_ENERGY, MAX_EXPONENT, MIN_LAMBDA,
                   MAX_LAMBDA, MAX_TWISTS, MIN_BETA_BAR, MAX_BETA_BAR, MAX_KEPT_STATES, MAX_ENERGY_CUTOFF,
                   MIN_TEMPERATURE_RATIO, MAX_FLOW_LEVELS)

__all__ = [
    "SCHEMA", "models_markdown", "RunSpec", "ImpuritySpec", "BathSpec", "DiscretizationSpec", "RunSettings",
    "OutputSpec", "SweepSpec", "SpectralSpec", "parse_config", "load_config", "config_reference_markdown",
    "MODELS",
]

MODELS = model_names()
BATH_SHAPES = ("flat", "semicircular", "power-law", "table")
SCHEMES = ("wilson", "adaptive")
#: "auto" (the largest symmetry the run allows, see nrgsolve.symmetry_choice) and every implementation
SYMMETRIES = ("auto",) + tuple(_SYMMETRY_CLASSES)
THERMO_METHODS = ("full-density-matrix", "conventional")
#: What the spectral (backward) pass can compute (``spectral.quantities``).
SPECTRAL_QUANTITIES = ("impurity", "t-matrix", "spin-susceptibility")


def _number_list(v, low, allow_low, longest=64):
    return (isinstance(v, list) and 1 <= len(v) <= longest
            and all(finite(x) and (x >= low if allow_low else x > low) for x in v))


def _log_range(v, most=400):
    """A { start, stop, points } table of a logarithmic temperature range."""
    if not isinstance(v, dict) or set(v) != {"start", "stop", "points"}:
        return False
    a, b, n = v["start"], v["stop"], v["points"]
    return (finite(a) and finite(b) and 0 < a < b and isinstance(n, int) and not isinstance(n, bool)
            and 2 <= n <= most)


def _temperature_tuple(v):
    if isinstance(v, dict):
        a, b, n = float(v["start"]), float(v["stop"]), int(v["points"])
        return tuple(a * (b / a) ** (i / (n - 1)) for i in range(n))
    return tuple(float(x) for x in v)


def _impurity_table() -> dict:
    """[impurity]: ``model`` and every model's own parameters, as the model registry declares them."""
    table = {"model": Key(str, "kondo", "-", " | ".join(MODELS), "impurity model (see docs/config.md, Models)",
                          choices=MODELS)}
    table.update(impurity_parameters())
    return table


def _table_data(v) -> bool:
    """bath.table given as data: { energies = [...], values = [...] }."""
    return (isinstance(v, dict) and set(v) == {"energies", "values"}
            and all(isinstance(v[k], (list, tuple)) for k in v))


def _table_value(v):
    """A table path stays a string; table data becomes a validated pair of tuples (energies, values)."""
    if isinstance(v, str):
        return v
    from .bath import _check_table_points
    e, g = _check_table_points(v["energies"], v["values"], "bath.table", lines=None)
    return (tuple(float(x) for x in e), tuple(float(x) for x in g))


# The one place where every default lives (the [impurity] parameters are declared by the models).
SCHEMA: dict[str, dict[str, Key]] = {
    "impurity": _impurity_table(),
    "bath": {
        "shape": Key(str, "flat", "-", " | ".join(BATH_SHAPES), "shape g(ε) of the hybridization function",
                     choices=BATH_SHAPES),
        "half_bandwidth": Key(NUM, 1.0, "D", ">= 1e-06 and <= 1e+06", "half-bandwidth D of the conduction band",
                              lambda d: finite(d) and 1e-6 <= d <= 1e6),
        "exponent": Key(NUM, 0.0, "-", f">= 0 and <= {MAX_EXPONENT:g}", "power-law bath: g(ε) = |ε/D|^r, r = exponent",
                        lambda r: finite(r) and 0 <= r <= MAX_EXPONENT),
        "table": Key((str, dict), None, "path or data",
                     "readable two-column text file (ε, g(ε)), or { energies = [...], values = [...] } with at "
                     "least 5 points, energies strictly increasing around 0, values >= 0",
                     "table bath: g(ε) >= 0 at energies ε (units of D), from a file (relative to the config "
                     "file) or given as data", lambda v: isinstance(v, str) or _table_data(v), convert=_table_value),
    },
    "discretization": {
        "Lambda": Key(NUM, 3.0, "-", f">= {MIN_LAMBDA:g} and <= {MAX_LAMBDA:g}", "logarithmic discretization parameter Λ",
                      lambda x: finite(x) and MIN_LAMBDA <= x <= MAX_LAMBDA),
        "twists": Key(int, 2, "-", f">= 1 and <= {MAX_TWISTS}",
                      "number of evenly spaced twists z = k/n, k = 1..n (z-averaging; "
                      "the adaptive scheme reproduces Γ(ε) only on average over twists, and one twist misses the "
                      "Friedel sum rule by 2 % at Λ = 3)",
                      lambda n: 1 <= n <= MAX_TWISTS),
        "scheme": Key(str, "adaptive", "-", " | ".join(SCHEMES),
                      "discretization scheme: \"adaptive\" reproduces Γ(ε) exactly after z-averaging "
                      "(Campo & Oliveira 2005; Žitko & Pruschke 2009), so physical scales do not depend on Λ",
                      choices=SCHEMES),
        "wilson_correction": Key(bool, True, "-", "true | false (the adaptive scheme needs none and ignores it)",
                                 "Wilson scheme: multiply the coupling by A_Λ (Wilson 1975), which undoes the "
                                 "discretization's reduction of the effective coupling"),
    },
    "run": {
        "kept_states": Key(int, 1000, "states",
                           f">= 1 and <= {MAX_KEPT_STATES} (counting 2S+1); the memory the run needs is estimated "
                           "before it starts and must fit into the machine",
                           "states kept per iteration, counting spin degeneracy", lambda n: 1 <= n <= MAX_KEPT_STATES),
        "energy_cutoff": Key(NUM, None, "ω_N", f"> 0 and <= {MAX_ENERGY_CUTOFF:g} (optional; memory estimated up front)",
                             "keep every state below this energy (units of ω_N) instead of a fixed count",
                             lambda e: finite(e) and 0 < e <= MAX_ENERGY_CUTOFF),
        "lowest_temperature": Key(NUM, 1e-8, "D",
                                  f"> 0 and < half_bandwidth, at least {MIN_TEMPERATURE_RATIO:g} half_bandwidth",
                                  "lowest temperature wanted; sets the chain length",
                                  lambda t: finite(t) and t > 0),
        "beta_bar": Key(NUM, 1.0, "-", f">= {MIN_BETA_BAR:g} and <= {MAX_BETA_BAR:g}",
                        "conventional thermodynamics: T_N = ω_N / beta_bar, the temperature evaluated at "
                        "iteration N; also sets the temperature of the discarded-weight diagnostic",
                        lambda b: finite(b) and MIN_BETA_BAR <= b <= MAX_BETA_BAR),
        "thermodynamics": Key(str, "full-density-matrix", "-", " | ".join(THERMO_METHODS),
                              "how impurity thermodynamics is computed: from the complete basis of discarded "
                              "states of every shell at any temperature (no beta_bar), or conventionally at "
                              "T_N = ω_N/beta_bar of each iteration", choices=THERMO_METHODS),
        "temperatures": Key((list, dict), None, "D",
                            "{ start, stop, points } (log spacing, 2 to 2000 points) or a list of 1 to 2000 "
                            "numbers > 0 and < half_bandwidth",
                            "full-density-matrix thermodynamics: temperatures of the curves (default: from "
                            "lowest_temperature up to half_bandwidth, 10 per decade)",
                            lambda v: _number_list(v, 0.0, False, 2000) or _log_range(v, 2000),
                            convert=_temperature_tuple),
        "error_estimate": Key(bool, False, "-", "true | false",
                              "repeat the run with 1.5 × kept_states, and at Λ^1.25 with twice the twists, and give every "
                              "headline number an uncertainty (measured: about 3 × the time of a plain run)"),
        "symmetry": Key(str, "auto", "-", " | ".join(SYMMETRIES),
                        "quantum numbers used by the engine: \"auto\" picks the largest symmetry the model, bath and "
                        "field allow (isospin = spin × charge SU(2) at particle-hole symmetry, then su2, then abelian)",
                        choices=SYMMETRIES),
        "workers": Key(int, 0, "processes", ">= 0 and <= 1024 (0: one per twist, at most the CPU count)",
                       "parallel processes for the twists", lambda n: 0 <= n <= 1024),
        "blas_threads": Key(int, 1, "threads", ">= 1 and <= 1024",
                            "BLAS/LAPACK threads per process (the blocks are small: one thread is usually fastest)",
                            lambda n: 1 <= n <= 1024),
        "bath_reference": Key(str, "nrg", "-", "nrg | exact",
                              "how the bare-chain thermodynamics subtracted from the impurity run is computed: "
                              "an NRG run with the same truncation (errors cancel) or exact single-particle",
                              choices=("nrg", "exact")),
        "bath_cache": Key(bool, True, "-", "true | false",
                          "keep the bath-only reference run in the user's cache folder and reuse it whenever the "
                          "chain and truncation are the same (sweeps, reruns); results are identical either way"),
        "flow_levels": Key(int, 40, "levels", f">= 1 and <= {MAX_FLOW_LEVELS}",
                           "lowest levels per iteration stored for the flow",
                           lambda n: 1 <= n <= MAX_FLOW_LEVELS),
    },
    "spectral": {
        "temperatures": Key(list, None, "D", "list of 1 to 64 numbers >= 0 and < half_bandwidth (0: ground state)",
                            "temperatures of the spectra (spectral.quantities: A_d, T-matrix, χ''); no spectral "
                            "pass when neither these nor conductance or transport temperatures are given",
                            lambda v: _number_list(v, 0.0, True), convert=_temperature_tuple),
        "broadening": Key(NUM, 0.5, "-", "> 0 and <= 2", "width b of the log-Gaussian broadening kernel",
                          lambda b: finite(b) and 0 < b <= 2),
        "bias_correction": Key(bool, True, "-", "true | false",
                               "remove the leading bias of the log-Gaussian kernel (second-order deconvolution in "
                               "ln|ω|; keeps the total weight): power laws |ω|^α are otherwise raised by "
                               "e^{α(α+1)b²/4}"),
        "thermal_width": Key(NUM, 0.25, "T", "> 0 and <= 2",
                             "width of the Gaussian that replaces the log-Gaussian near ω = 0 at temperature T, "
                             "in units of T (at least twice the last iteration's energy scale)",
                             lambda w: finite(w) and 0 < w <= 2),
        "points_per_decade": Key(int, 25, "points", ">= 2 and <= 400",
                                 "frequency points per decade of |ω| of the stored spectra", lambda n: 2 <= n <= 400),
        "self_energy": Key(bool, False, "-", "true | false",
                           "also store the improved estimate from Σ = U F/G (Bulla, Hewson, Pruschke 1998)"),
        "conductance_temperatures": Key((list, dict), None, "D",
                                        "list of 1 to 64 numbers > 0 and < half_bandwidth, or "
                                        "{ start, stop, points } (log spacing, 2 to 400 points)",
                                        "temperatures of the linear conductance G(T) through the dot",
                                        lambda v: _number_list(v, 0.0, False) or _log_range(v),
                                        convert=_temperature_tuple),
        "quantities": Key(list, None, "-", "list of distinct names from: " + ", ".join(SPECTRAL_QUANTITIES),
                          "what the backward pass computes: the impurity spectral function A_d(ω, T) "
                          "(models with a d level), the conduction-electron T-matrix −πρ Im T(ω, T), the "
                          "dynamical impurity spin susceptibility χ''(ω, T) (default: impurity for models "
                          "with a d level, t-matrix otherwise)",
                          lambda v: (isinstance(v, list) and 1 <= len(v) <= len(SPECTRAL_QUANTITIES)
                                     and all(x in SPECTRAL_QUANTITIES for x in v) and len(set(v)) == len(v)),
                          convert=tuple),
        "transport_temperatures": Key((list, dict), None, "D",
                                      "list of 1 to 64 numbers > 0 and < half_bandwidth, or "
                                      "{ start, stop, points } (log spacing, 2 to 400 points)",
                                      "temperatures of the impurity resistivity, thermopower and thermal "
                                      "conductivity of a dilute alloy (from the T-matrix)",
                                      lambda v: _number_list(v, 0.0, False) or _log_range(v),
                                      convert=_temperature_tuple),
        "memory_budget": Key(NUM, 1.0, "GB", "> 0 and <= 10000",
                             "eigenvectors kept in memory for the spectral pass; the rest goes to a temporary file",
                             lambda m: finite(m) and 0 < m <= 1e4),
    },
    "output": {
        "file": Key(str, None, "path", "writable path ending in .h5 (default: <config name>.h5 in the current folder)",
                    "HDF5 result file"),
    },
}

#: The [bath] keys each shape uses besides ``shape``.
SHAPE_KEYS: dict[str, tuple[str, ...]] = {
    "flat": ("half_bandwidth",),
    "semicircular": ("half_bandwidth",),
    "power-law": ("half_bandwidth", "exponent"),
    "table": ("table",),
}


def used_keys(table: str, choice: str) -> tuple[str, ...]:
    """Keys of ``[impurity]`` (``choice`` = model) or ``[bath]`` (``choice`` = shape) that are used.

    Other tables use all their keys; the selecting key itself (``model``, ``shape``) is included.
    """
    if table == "impurity":
        return ("model",) + tuple(model_declaration(choice).parameters)
    if table == "bath":
        return ("shape",) + SHAPE_KEYS[choice]
    return tuple(SCHEMA[table])


def check_used_keys(given: dict, models, shapes, where: str = "") -> None:
    """Refuse keys given in [impurity] or [bath] that none of the models (shapes) uses.

    Parameters
    ----------
    given : dict
        ``{table: {key: value}}`` as written in the config (defaults not filled in), or
        ``{table: [key, ...]}``.
    models, shapes : iterable of str
        The models (bath shapes) the config runs: the one given, or every value a sweep takes.
    where : str
        Prefix for the message (e.g. "sweep." for swept parameters).

    Raises
    ------
    ConfigError
        Naming the key, the model (shape) and the keys it uses.
    """
    for table, choices in (("impurity", tuple(models)), ("bath", tuple(shapes))):
        used = set().union(*(used_keys(table, c) for c in choices))
        for key in given.get(table, ()):
            if key in SCHEMA[table] and key not in used:
                raise ConfigError(where + unused_key_message(table, key, choices))


def unused_key_message(table: str, key: str, choices) -> str:
    """The one message for a key of [impurity] ([bath]) that the model (shape) does not use."""
    label = "model" if table == "impurity" else "shape"
    names = " or ".join(f'"{c}"' for c in choices)
    uses = "; ".join(f'"{c}" uses {", ".join(used_keys(table, c)[1:])}' for c in choices)
    return f"{table}.{key}: not used by {label} {names}; remove it ({uses})"


SWEEP_NOTE = ("[sweep] maps a parameter name 'table.key' to a list of values, or to a table "
              "{ start, stop, points, spacing = \"linear\" | \"log\" }; [sweep] folder names the output folder")


def _validate_fields(obj, table: str) -> None:
    """Check every field of a spec object against :data:`SCHEMA` (the same checks and messages as a
    config file) and store the converted values; an invalid spec object cannot exist."""
    for f in fields(obj):
        key = SCHEMA[table].get(f.name)
        if key is None:
            continue
        value = getattr(obj, f.name)
        if value is None and key.default is None:
            continue
        object.__setattr__(obj, f.name, _check_value(table, f.name, key, _as_given(value, key)))


def _as_given(value, key: Key):
    """A value as a config file or mapping would give it (tuples as lists, numpy scalars as numbers)."""
    if hasattr(value, "item") and getattr(value, "ndim", None) == 0:
        value = value.item()
    if isinstance(value, tuple) and key.kind in ((list, dict), list):
        return list(value)
    if isinstance(value, tuple) and key.kind == (str, dict) and len(value) == 2:
        return {"energies": list(value[0]), "values": list(value[1])}
    return value


def _impurity_post_init(self):
    _validate_fields(self, "impurity")
    decl = model_declaration(self.model)
    for name, key in impurity_parameters().items():
        if name not in decl.parameters and getattr(self, name) != key.default:
            raise ConfigError(unused_key_message("impurity", name, (self.model,)))


def _impurity_spec_class():
    """ImpuritySpec: ``model`` and every parameter any registered model declares (defaults from the
    declarations).  A parameter the chosen model does not use must keep its default."""
    specs = [("model", str, field(default=SCHEMA["impurity"]["model"].default))]
    specs += [(name, Any, field(default=key.default)) for name, key in impurity_parameters().items()]

    def U(self) -> float:
        """On-site repulsion U (units of D); 0 for a model without an ``interaction`` parameter."""
        return self.interaction if "interaction" in model_declaration(self.model).parameters else 0.0

    def epsilon_d(self) -> float:
        """Level energy ε_d (units of D): ``level``, or −U/2 (the symmetric point) when not given."""
        return -0.5 * self.U if self.level is None else self.level

    def declaration(self):
        """The model's :class:`~nrgsolve.models.ModelDeclaration`."""
        return model_declaration(self.model)

    namespace = {"U": property(U), "epsilon_d": property(epsilon_d), "declaration": property(declaration),
                 "__post_init__": _impurity_post_init,
                 "__doc__": "Physics of the impurity: the model and its parameters (units of D; ρJ, ρK "
                            "dimensionless with ρ = 1/(2D), J > 0 antiferromagnetic; Γ = πρV²).  Validated on "
                            "construction like a config file; keys the model does not use keep their defaults."}
    cls = make_dataclass("ImpuritySpec", specs, namespace=namespace, frozen=True)
    cls.__module__ = __name__          # so that specs pickle (worker processes) and print as nrgsolve.config
    return cls


ImpuritySpec = _impurity_spec_class()


def _default(table: str, key: str):
    return field(default=SCHEMA[table][key].default)


@dataclass(frozen=True)
class BathSpec:
    """Physics of the conduction band: shape g(ε), half-bandwidth D, power-law exponent r, table (a path,
    or the pair (energies, values) with energies in units of D).  Validated on construction."""

    shape: str = _default("bath", "shape")
    half_bandwidth: float = _default("bath", "half_bandwidth")
    exponent: float = _default("bath", "exponent")
    table: str | tuple | None = None

    def __post_init__(self):
        _validate_fields(self, "bath")


@dataclass(frozen=True)
class DiscretizationSpec:
    """Numerical approximation: logarithmic discretization (Λ, twists, scheme).  Validated on construction."""

    Lambda: float = _default("discretization", "Lambda")
    twists: int = _default("discretization", "twists")
    scheme: str = _default("discretization", "scheme")
    wilson_correction: bool = _default("discretization", "wilson_correction")

    def __post_init__(self):
        _validate_fields(self, "discretization")

    @property
    def corrects_coupling(self) -> bool:
        """True when the coupling is multiplied by A_Λ: Wilson's scheme with the correction on (the adaptive
        scheme needs none and ignores ``wilson_correction``)."""
        return self.wilson_correction and self.scheme == "wilson"


@dataclass(frozen=True)
class RunSettings:
    """Numerical approximation: truncation, chain length, thermodynamics grid (temperatures in units of D).
    Validated on construction."""

    kept_states: int = _default("run", "kept_states")
    energy_cutoff: float | None = None
    lowest_temperature: float = _default("run", "lowest_temperature")
    beta_bar: float = _default("run", "beta_bar")
    thermodynamics: str = _default("run", "thermodynamics")
    temperatures: tuple | None = None
    error_estimate: bool = _default("run", "error_estimate")
    symmetry: str = _default("run", "symmetry")
    workers: int = _default("run", "workers")
    blas_threads: int = _default("run", "blas_threads")
    bath_reference: str = _default("run", "bath_reference")
    bath_cache: bool = _default("run", "bath_cache")
    flow_levels: int = _default("run", "flow_levels")

    def __post_init__(self):
        _validate_fields(self, "run")


@dataclass(frozen=True)
class SpectralSpec:
    """Numerical request for spectral functions and conductance (temperatures in units of D).
    Validated on construction."""

    temperatures: tuple | None = None
    broadening: float = _default("spectral", "broadening")
    points_per_decade: int = _default("spectral", "points_per_decade")
    self_energy: bool = _default("spectral", "self_energy")
    conductance_temperatures: tuple | None = None
    memory_budget: float = _default("spectral", "memory_budget")
    quantities: tuple | None = None
    transport_temperatures: tuple | None = None
    bias_correction: bool = _default("spectral", "bias_correction")
    thermal_width: float = _default("spectral", "thermal_width")

    def __post_init__(self):
        _validate_fields(self, "spectral")

    @property
    def requested(self) -> bool:
        """True when a spectral pass is wanted (spectral, conductance or transport temperatures given)."""
        return bool(self.temperatures) or bool(self.conductance_temperatures) or bool(self.transport_temperatures)

    def quantities_for(self, impurity_level: bool) -> tuple:
        """The quantities of the backward pass: ``quantities``, or the default of the model
        (``impurity`` with a d level, ``t-matrix`` otherwise); the T-matrix is added when transport
        temperatures are given."""
        q = tuple(self.quantities) if self.quantities else (("impurity",) if impurity_level else ("t-matrix",))
        if self.transport_temperatures and "t-matrix" not in q:
            q += ("t-matrix",)
        return q


@dataclass(frozen=True)
class OutputSpec:
    """Where ``nrgsolve run`` writes the result (a path ending in .h5; None: next to the config)."""

    file: str | None = None

    def __post_init__(self):
        _validate_fields(self, "output")


@dataclass(frozen=True)
class SweepSpec:
    """Parameter sweep: ordered parameter names and the value list of each (outer product)."""

    parameters: tuple[str, ...] = ()
    values: tuple[tuple, ...] = ()
    folder: str | None = None


_TABLE_TYPES = {"impurity": ImpuritySpec, "bath": BathSpec, "discretization": DiscretizationSpec,
                "run": RunSettings, "spectral": SpectralSpec, "output": OutputSpec}


@dataclass(frozen=True)
class RunSpec:
    """A validated, frozen run specification: the only thing the numerics see.

    Built from a config file (:func:`load_config`), from a mapping with the same tables and keys
    (:func:`spec_from_mapping`) or from the table objects directly; every way runs the same checks
    and raises the same one-line :class:`~nrgsolve.errors.ConfigError`.  Tables left out take their
    defaults; ``config_text`` is generated when not given.

    Examples
    --------
    >>> spec = RunSpec(impurity=ImpuritySpec(model="kondo", exchange=0.2))
    >>> spec.discretization.scheme
    'adaptive'
    """

    impurity: ImpuritySpec = field(default_factory=ImpuritySpec)
    bath: BathSpec = field(default_factory=BathSpec)
    discretization: DiscretizationSpec = field(default_factory=DiscretizationSpec)
    run: RunSettings = field(default_factory=RunSettings)
    output: OutputSpec = field(default_factory=OutputSpec)
    sweep: SweepSpec = field(default_factory=SweepSpec)
    config_text: str = ""
    config_path: str = ""
    spectral: SpectralSpec | None = None

    def __post_init__(self):
        for table, kind in _TABLE_TYPES.items():
            value = getattr(self, table)
            if not isinstance(value, kind) and not (table == "spectral" and value is None):
                raise ConfigError(f"{table}: expected a {kind.__name__}, got {type(value).__name__}")
        _cross_checks(self)
        if not self.config_text:
            object.__setattr__(self, "config_text", spec_to_toml(self, output=True))

    def with_value(self, dotted: str, value) -> "RunSpec":
        """Return a copy with one parameter ``table.key`` replaced and re-validated (config text regenerated)."""
        table, key = dotted.split(".", 1)
        if table not in SCHEMA or key not in SCHEMA[table]:
            known = [f"{t}.{k}" for t in SCHEMA for k in SCHEMA[t]]
            raise ConfigError(f"unknown parameter {dotted!r}{_suggest(dotted, known)}")
        raw = self.as_dict()
        raw.setdefault(table, {})[key] = value
        spec = _build(raw, "", self.config_path, self.sweep)
        return spec

    def as_dict(self) -> dict:
        """``{table: {key: value}}`` of every table present (values as validated)."""
        out = {}
        for f in fields(self):
            if f.name in SCHEMA and getattr(self, f.name) is not None:
                sub = getattr(self, f.name)
                out[f.name] = {g.name: getattr(sub, g.name) for g in fields(sub)}
        return out


def toml_value(value) -> str:
    """One value as TOML text (numbers, booleans, strings, lists, inline tables)."""
    if hasattr(value, "item") and getattr(value, "ndim", None) == 0:
        value = value.item()
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        out = "".join(c if (c >= " " and c not in '"\\\x7f') else f"\\u{ord(c):04x}" for c in value)
        return f'"{out}"'
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + " }"
    if isinstance(value, (list, tuple)) or hasattr(value, "tolist"):
        return "[" + ", ".join(toml_value(v) for v in list(value)) + "]"
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def spec_to_toml(spec: RunSpec, header: str = "", output: bool = False) -> str:
    """The resolved config of a spec as TOML text (no ``[sweep]`` table).

    Every parameter is written out, so the text stays valid even if a
    default changes later; left out are ``None`` values (meaning "use the
    documented fallback"), the ``[output]`` table unless ``output`` (a sweep
    names its own files) and the keys the model or bath shape does not use
    (:func:`used_keys`; giving them is an error).  ``parse_config(spec_to_toml(spec))``
    gives back the same parameters.

    Parameters
    ----------
    spec : RunSpec
    header : str
        Comment lines put at the top (each line gets a ``# ``).
    output : bool
        Also write the ``[output]`` table.
    """
    lines = [f"# {h}" if h else "#" for h in header.splitlines()]
    for table, values in spec.as_dict().items():
        if table == "output" and not output:
            continue
        body = []
        choice = values["model"] if table == "impurity" else values["shape"] if table == "bath" else None
        used = used_keys(table, choice)
        for key, value in values.items():
            if value is None or key not in used:
                continue
            if table == "bath" and key == "table" and isinstance(value, tuple):
                value = {"energies": value[0], "values": value[1]}
            body.append(f"{key} = {toml_value(value)}")
        if body:
            lines.append(f"[{table}]")
            lines.extend(body)
    return "\n".join(lines) + "\n"


def _suggest(word, options):
    m = difflib.get_close_matches(word, list(options), n=1, cutoff=0.5)
    return f" (did you mean '{m[0]}'?)" if m else ""


def _type_name(kind):
    if kind is NUM:
        return "a number"
    if kind is int:
        return "an integer"
    if kind is bool:
        return "true or false"
    if kind is list:
        return "a list of numbers"
    if kind == (list, dict):
        return "a list of numbers or a table { start, stop, points }"
    if kind == (str, dict):
        return "a file path or a table { energies = [...], values = [...] }"
    return "a string"


def show(value, limit: int = 60) -> str:
    """A short repr of a received value for messages: numpy scalars as plain numbers, long text cut."""
    if hasattr(value, "item") and getattr(value, "ndim", None) == 0:
        value = value.item()
    text = repr(value)
    return text if len(text) <= limit else f"{text[:limit - 20]}... ({len(text)} characters)"


def _check_value(table, key, spec: Key, value):
    name = f"{table}.{key}"
    kind = spec.kind
    ok_type = isinstance(value, kind) and not (isinstance(value, bool) and kind is not bool)
    if kind is bool:
        ok_type = isinstance(value, bool)
    if not ok_type:
        wanted = "a list of names" if spec.choices is None and key == "quantities" else _type_name(kind)
        raise ConfigError(f"{name}: expected {wanted}, got {type(value).__name__} {show(value)}")
    if spec.choices is not None and value not in spec.choices:
        raise ConfigError(f"{name}: got {show(value)}; allowed: {spec.allowed}"
                          f"{_suggest(str(value)[:100], spec.choices)}")
    if spec.check is not None and not spec.check(value):
        if isinstance(value, (list, dict)):
            raise ConfigError(f"{name}: expected {spec.allowed}, got {show(value)}")
        raise ConfigError(f"{name}: got {show(value)}; allowed range: {spec.allowed}")
    if spec.convert is not None:
        return spec.convert(value)
    return float(value) if kind is NUM else value


def parse_config(text: str, path: str = "<config>", stored: bool = False) -> RunSpec:
    """Parse and validate config text.

    Parameters
    ----------
    text : str
        TOML text.
    path : str
        Name used in messages; table paths are resolved relative to its folder.
    stored : bool
        The text comes from a result file: keys the model does not use are
        tolerated (older versions wrote every key); everything else is checked.

    Returns
    -------
    RunSpec

    Raises
    ------
    ConfigError
        For malformed TOML, unknown tables or keys, wrong types, out-of-range values.
    """
    if not isinstance(text, str):
        raise ConfigError(f"{path}: expected config text, got {type(text).__name__}")
    if text.startswith("\ufeff"):
        text = text[1:]        # a UTF-8 byte-order mark (some editors write one) is not part of the TOML
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    return _spec_from_raw(raw, text, path, stored)


def spec_from_mapping(mapping, path: str = "<mapping>") -> RunSpec:
    """Validate a mapping with the tables and keys of a config file (the same checks and messages).

    Parameters
    ----------
    mapping : Mapping
        ``{"impurity": {"model": "kondo", "exchange": 0.2}, "run": {...}, ...}``; numpy numbers
        and arrays are accepted where the file takes numbers and lists.  ``bath.table`` may be a
        path or ``{"energies": [...], "values": [...]}``.
    path : str
        Name used in messages; a relative ``bath.table`` path is resolved against the current folder.

    Returns
    -------
    RunSpec
        Its ``config_text`` is the mapping written as TOML.

    Raises
    ------
    ConfigError
    """
    from collections.abc import Mapping
    if not isinstance(mapping, Mapping):
        raise ConfigError(f"{path}: expected a mapping of tables, got {type(mapping).__name__}")
    raw = _plain(mapping)
    try:
        text = "".join(f"[{t}]\n" + "".join(f"{k} = {toml_value(v)}\n" for k, v in body.items())
                       if isinstance(body, dict) else "" for t, body in raw.items())
        tomllib.loads(text)
    except (TypeError, tomllib.TOMLDecodeError):
        text = ""
    return _spec_from_raw(raw, text, path, stored=False)


def _plain(value):
    """Mappings to dicts, numpy scalars to numbers, arrays and tuples to lists (as a TOML parser gives)."""
    from collections.abc import Mapping
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if hasattr(value, "item") and getattr(value, "ndim", None) == 0:
        return value.item()
    if hasattr(value, "tolist"):
        return value.tolist()
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    if isinstance(value, list):
        return [_plain(v) for v in value]
    return value


def _spec_from_raw(raw: dict, text: str, path: str, stored: bool) -> RunSpec:
    """The checks shared by files and mappings: tables, keys, types, ranges, keys the model uses."""
    sweep_raw = raw.pop("sweep", None)
    for table in raw:
        if table not in SCHEMA:
            raise ConfigError(f"unknown table [{table}]{_suggest(table, list(SCHEMA) + ['sweep'])}; "
                              f"known tables: {', '.join(SCHEMA)}, sweep")
        if not isinstance(raw[table], dict):
            raise ConfigError(f"{table}: expected a table [{table}], got a {type(raw[table]).__name__}")
    values = {}
    for table, keys in SCHEMA.items():
        given = raw.get(table, {})
        for key in given:
            if key not in keys:
                raise ConfigError(f"unknown key {table}.{key}{_suggest(key, keys)}; "
                                  f"known keys in [{table}]: {', '.join(keys)}")
        values[table] = {}
        for key, spec in keys.items():
            if key in given:
                values[table][key] = _check_value(table, key, spec, given[key])
            else:
                values[table][key] = spec.default
    sweep = _parse_sweep(sweep_raw) if sweep_raw is not None else SweepSpec()
    if not stored:
        _check_used(raw, values, sweep)
    return _build(values, text, path, sweep)


def _check_used(raw, values, sweep):
    check_used_keys(raw, _swept_or(sweep, "impurity.model", values["impurity"]["model"]),
                    _swept_or(sweep, "bath.shape", values["bath"]["shape"]))
    check_used_keys({t: [n.split(".", 1)[1] for n in sweep.parameters if n.startswith(t + ".")]
                     for t in ("impurity", "bath")},
                    _swept_or(sweep, "impurity.model", values["impurity"]["model"]),
                    _swept_or(sweep, "bath.shape", values["bath"]["shape"]), where="sweep: ")


def _swept_or(sweep: "SweepSpec", name: str, value) -> tuple:
    """The values a sweep gives parameter ``name``, or the single configured value."""
    if name in sweep.parameters:
        return tuple(sweep.values[sweep.parameters.index(name)])
    return (value,)


def _parse_sweep(raw) -> SweepSpec:
    if not isinstance(raw, dict):
        raise ConfigError("sweep: expected a table [sweep]")
    folder = raw.pop("folder", None)
    if folder is not None and not isinstance(folder, str):
        raise ConfigError("sweep.folder: expected a string path")
    names, lists = [], []
    for name, spec in raw.items():
        if "." not in name:
            raise ConfigError(f"sweep: parameter {name!r} must be written \"table.key\", e.g. \"impurity.exchange\"")
        table, key = name.split(".", 1)
        if table not in SCHEMA or key not in SCHEMA[table]:
            known = [f"{t}.{k}" for t in SCHEMA for k in SCHEMA[t]]
            raise ConfigError(f"sweep: unknown parameter {name!r}{_suggest(name, known)}")
        if isinstance(spec, list):
            vals = spec
        elif isinstance(spec, dict):
            extra = set(spec) - {"start", "stop", "points", "spacing"}
            if extra:
                raise ConfigError(f"sweep.{name}: unknown key {sorted(extra)[0]!r}; allowed: start, stop, points, spacing")
            vals = _range_values(name, spec, SCHEMA[table][key].kind is int)
        else:
            raise ConfigError(f"sweep.{name}: expected a list of values or a range table")
        if not vals:
            raise ConfigError(f"sweep.{name}: empty list of values")
        if len(vals) > MAX_SWEEP_POINTS:
            raise ConfigError(f"sweep.{name}: got {len(vals)} values; allowed: at most {MAX_SWEEP_POINTS}")
        checked = tuple(_check_value(table, key, SCHEMA[table][key], v) for v in vals)
        names.append(name)
        lists.append(checked)
    if not names:
        raise ConfigError("sweep: name at least one parameter, e.g. \"impurity.exchange\" = [0.1, 0.2]")
    total = math.prod(len(v) for v in lists)
    if total > MAX_SWEEP_POINTS:
        raise ConfigError(f"sweep: the parameters give {total} points; allowed: at most {MAX_SWEEP_POINTS} "
                          f"(split the sweep)")
    return SweepSpec(tuple(names), tuple(lists), folder)


#: Points of one sweep (the outer product of all swept values): every point is a full run.
MAX_SWEEP_POINTS = 10_000


def _range_values(name: str, spec: dict, integer: bool) -> list:
    """Values of a sweep range table { start, stop, points, spacing }; integers for integer keys."""
    missing = [k for k in ("start", "stop", "points") if k not in spec]
    if missing:
        raise ConfigError(f"sweep.{name}: a range needs start, stop and points; missing {missing[0]!r}")
    start, stop, points = spec["start"], spec["stop"], spec["points"]
    for k, v in (("start", start), ("stop", stop)):
        if not finite(v):
            raise ConfigError(f"sweep.{name}.{k}: got {show(v)}; allowed: a finite number")
        if integer and not isinstance(v, int):
            raise ConfigError(f"sweep.{name}.{k}: got {show(v)}; allowed: an integer ({name} takes integers)")
    if not isinstance(points, int) or isinstance(points, bool) or not 1 <= points <= MAX_SWEEP_POINTS:
        raise ConfigError(f"sweep.{name}.points: got {show(points)}; allowed: an integer from 1 to {MAX_SWEEP_POINTS}")
    spacing = spec.get("spacing", "linear")
    if spacing not in ("linear", "log"):
        raise ConfigError(f"sweep.{name}.spacing: got {show(spacing)}; allowed: \"linear\" or \"log\"")
    a, b = float(start), float(stop)
    if spacing == "log":
        if a <= 0 or b <= 0:
            raise ConfigError(f"sweep.{name}: a log range needs start > 0 and stop > 0")
        vals = [a * (b / a) ** (i / max(points - 1, 1)) for i in range(points)]
    else:
        vals = [a + (b - a) * i / max(points - 1, 1) for i in range(points)]
    if integer:
        vals = [int(round(v)) for v in vals]
        if len(set(vals)) != len(vals):
            raise ConfigError(f"sweep.{name}: {points} points between {start} and {stop} repeat integers; "
                              f"allowed: at most {abs(stop - start) + 1} points")
    return vals


def _build(values, text, path, sweep) -> RunSpec:
    """Spec objects from checked values; keys the model (bath shape) does not use take their defaults."""
    imp = dict(values["impurity"])
    used = used_keys("impurity", imp["model"])
    for key in imp:
        if key not in used:
            imp[key] = SCHEMA["impurity"][key].default
    bath = dict(values["bath"])
    if "table" not in used_keys("bath", bath["shape"]):
        bath["table"] = None
    spectral = values.get("spectral")
    return RunSpec(
        impurity=ImpuritySpec(**imp),
        bath=BathSpec(**bath),
        discretization=DiscretizationSpec(**values["discretization"]),
        run=RunSettings(**values["run"]),
        output=OutputSpec(**values["output"]),
        spectral=SpectralSpec(**spectral) if spectral is not None else None,
        sweep=sweep,
        config_text=text,
        config_path=path,
    )


def _cross_checks(spec: RunSpec):
    imp, bath, run = spec.impurity, spec.bath, spec.run
    if imp.field != 0.0 and run.symmetry != "auto" and not _SYMMETRY_CLASSES[run.symmetry].resolves_sz:
        raise ConfigError(f"impurity.field: a non-zero field breaks spin symmetry; allowed with run.symmetry = "
                          f"\"abelian\" or \"auto\" only (got \"{run.symmetry}\")")
    if bath.shape == "table" and not bath.table:
        raise ConfigError("bath.table: shape \"table\" needs bath.table = \"path/to/file\"")
    if bath.shape != "table" and bath.table:
        raise ConfigError(f"bath.table: only allowed with bath.shape = \"table\" (got shape {bath.shape!r})")
    if run.temperatures and max(run.temperatures) >= bath.half_bandwidth:
        raise ConfigError(f"run.temperatures: expected temperatures < half_bandwidth ({bath.half_bandwidth}), "
                          f"got {max(run.temperatures)}")
    if run.temperatures and run.thermodynamics != "full-density-matrix":
        raise ConfigError("run.temperatures: only used with run.thermodynamics = \"full-density-matrix\" "
                          f"(got {run.thermodynamics!r}, whose temperatures are T_N = ω_N/beta_bar)")
    if run.lowest_temperature >= bath.half_bandwidth:
        raise ConfigError(f"run.lowest_temperature: got {run.lowest_temperature}; allowed range: > 0 and < half_bandwidth")
    _check_scales(spec)
    sp = spec.spectral
    if sp is not None:
        if sp.requested and not imp.declaration.impurity_level:
            levels = " or ".join(f'"{m}"' for m in MODELS if model_declaration(m).impurity_level)
            if sp.quantities and "impurity" in sp.quantities:
                asked = "quantities"
            elif sp.conductance_temperatures:
                asked = "conductance_temperatures"
            elif sp.self_energy:
                asked = "self_energy"
            else:
                asked = None
            if asked is not None:
                raise ConfigError(f"spectral.{asked}: expected impurity.model = {levels} (the impurity spectral "
                                  f"function, the dot's conductance and the self-energy need a d level), got "
                                  f"{imp.model!r}; models without a d level offer \"t-matrix\" and "
                                  f"\"spin-susceptibility\"")
        for key in ("temperatures", "conductance_temperatures", "transport_temperatures"):
            ts = getattr(sp, key)
            if ts and max(ts) >= bath.half_bandwidth:
                raise ConfigError(f"spectral.{key}: expected temperatures < half_bandwidth ({bath.half_bandwidth}), "
                                  f"got {max(ts)}")
    if spec.output.file is not None and not spec.output.file.endswith((".h5", ".hdf5")):
        raise ConfigError(f"output.file: got {spec.output.file!r}; allowed: a path ending in .h5")


def _check_scales(spec: RunSpec):
    """Energies relative to the half-bandwidth D (see MAX_ENERGY, MIN_TEMPERATURE_RATIO)."""
    imp, D = spec.impurity, spec.bath.half_bandwidth
    limits = (("level", imp.level, MAX_ENERGY), ("interaction", imp.interaction, 2 * MAX_ENERGY),
              ("hybridization", imp.hybridization, MAX_ENERGY), ("field", imp.field, MAX_ENERGY))
    for key, value, limit in limits:
        if value is not None and abs(value) > limit * D:
            raise ConfigError(f"impurity.{key}: got {show(value)}; allowed range: {SCHEMA['impurity'][key].allowed} "
                              f"(D = half_bandwidth = {D:g})")
    t = spec.run.lowest_temperature
    if t < MIN_TEMPERATURE_RATIO * D:
        raise ConfigError(f"run.lowest_temperature: got {show(t)}; allowed range: "
                          f"{SCHEMA['run']['lowest_temperature'].allowed} (D = {D:g})")


def load_config(path: str | Path) -> RunSpec:
    """Read and validate a config file (see :func:`parse_config`).

    Raises
    ------
    ConfigError
        If the file is missing or unreadable, or its content is invalid.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: cannot read config file ({exc.__class__.__name__}: {getattr(exc, 'strerror', None) or exc})") from None
    return parse_config(text, str(p))


def resolve_table_path(spec: RunSpec) -> str | None:
    """Table path relative to the config file's folder."""
    if spec.bath.table is None:
        return None
    t = Path(spec.bath.table)
    if not t.is_absolute() and spec.config_path and not spec.config_path.startswith("<"):
        t = Path(spec.config_path).parent / t
    return str(t)


def models_markdown() -> str:
    """The table of impurity models (markdown), generated from the model registry."""
    from .models import MODELS as registry
    lines = ["| model | Hamiltonian | parameters | channels | impurity level | Kondo scale looked for |",
             "|---|---|---|---|---|---|"]
    for name in registry:
        m = registry[name]
        ch = sorted({m.channels(ImpuritySpec(model=name))})
        kondo = "yes" if m.kondo_scale(ImpuritySpec(model=name)) else "no"
        cells = [f"`{name}`", m.summary, ", ".join(f"`{k}`" for k in m.parameters), str(ch[0]),
                 "yes" if m.impurity_level else "no", kondo]
        lines.append("| " + " | ".join(c.replace("|", "\\|") for c in cells) + " |")
    return "\n".join(lines)


def config_reference_markdown() -> str:
    """The config reference table (markdown), generated from :data:`SCHEMA`."""
    lines = ["| key | meaning | unit | default | allowed |", "|---|---|---|---|---|"]
    for table, keys in SCHEMA.items():
        for key, k in keys.items():
            default = "—" if k.default is None else repr(k.default).replace("'", '"')
            if isinstance(k.default, bool):
                default = str(k.default).lower()
            cells = [str(c).replace("|", "\\|") for c in (k.meaning, k.unit, default, k.allowed)]
            lines.append(f"| `{table}.{key}` | " + " | ".join(cells) + " |")
    lines.append("| `sweep.*` | " + SWEEP_NOTE.replace("|", "\\|") + " | | | |")
    return "\n".join(lines)
