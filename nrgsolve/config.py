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
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any, Callable

from .errors import ConfigError

__all__ = [
    "SCHEMA", "RunSpec", "ImpuritySpec", "BathSpec", "DiscretizationSpec", "RunSettings",
    "OutputSpec", "SweepSpec", "SpectralSpec", "parse_config", "load_config", "config_reference_markdown",
    "MODELS",
]

MODELS = ("kondo", "anderson", "resonant-level", "spin-kondo", "two-channel-kondo")
BATH_SHAPES = ("flat", "semicircular", "power-law", "table")
SCHEMES = ("wilson", "adaptive")
SYMMETRIES = ("su2", "abelian")
THERMO_METHODS = ("full-density-matrix", "conventional")


@dataclass(frozen=True)
class Key:
    """Declaration of one config key."""

    kind: type | tuple          # accepted python type(s) after TOML parsing
    default: Any
    unit: str
    allowed: str                # human-readable allowed range
    meaning: str
    check: Callable[[Any], bool] | None = None
    choices: tuple | None = None
    convert: Callable[[Any], Any] | None = None   # applied after the checks (e.g. list -> tuple)


def _finite(x):
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


NUM = (int, float)

# Ranges that keep the numerics meaningful; each is documented in the "allowed" column of docs/config.md.
#: |ρJ|, |ρK|: at ρJ = 1 the exchange J = 2D equals the bandwidth and the Kondo scale is of the order of D
#: (strong-coupling limit); larger couplings only describe that limit and drive the first iterations into
#: overflow (ρJ = 1e100 gave NaN specific heats).
MAX_COUPLING = 1.0
#: |ε_d|, Γ, |h| (and U/2) in units of the half-bandwidth D: ten bandwidths is far outside the band (the impurity
#: state is frozen out or the level is locked to site 0), beyond which the answer is that limit.
MAX_ENERGY = 10.0
#: Power-law bath exponent r (pseudogap g = |ε/D|^r): the physically studied range is 0 <= r <= 2 or so.
MAX_EXPONENT = 4.0
#: Λ: below 1.2 the chain length grows like 2 ln(D/T)/ln Λ beyond a thousand sites for the temperatures
#: of interest (Λ = 1.0000001 asked for 3.7e8 sites); above 10 the discretization has fewer than one site
#: per decade of energy.
MIN_LAMBDA, MAX_LAMBDA = 1.2, 10.0
#: Twists: z-averaging converges with a few (2 to 8 are usual); 64 is a generous ceiling on the run time.
MAX_TWISTS = 64
#: β̄: T_N = ω_N/β̄ must lie within the kept spectrum (a few ω_N; β̄ >= 0.1) and above the level spacing of
#: the finite chain (β̄ <= 10); outside this the thermodynamics measure truncation or discreteness.
MIN_BETA_BAR, MAX_BETA_BAR = 0.1, 10.0
#: Hard ceiling on kept states; the memory estimate (nrgsolve.resources) refuses most runs well below it.
MAX_KEPT_STATES = 1_000_000
#: energy_cutoff (units of ω_N): typical values are 5 to 10; the kept count grows about exponentially with it.
MAX_ENERGY_CUTOFF = 100.0
#: lowest_temperature / half_bandwidth: 1e-30 needs 760 chain sites at Λ = 1.2, already hours of work.
MIN_TEMPERATURE_RATIO = 1e-30
#: flow_levels: the flow plot draws a few tens; 2000 per iteration is still small on disk.
MAX_FLOW_LEVELS = 2000


def _coupling(x):
    return _finite(x) and abs(x) <= MAX_COUPLING


def _number_list(v, low, allow_low, longest=64):
    return (isinstance(v, list) and 1 <= len(v) <= longest
            and all(_finite(x) and (x >= low if allow_low else x > low) for x in v))


def _log_range(v, most=400):
    """A { start, stop, points } table of a logarithmic temperature range."""
    if not isinstance(v, dict) or set(v) != {"start", "stop", "points"}:
        return False
    a, b, n = v["start"], v["stop"], v["points"]
    return (_finite(a) and _finite(b) and 0 < a < b and isinstance(n, int) and not isinstance(n, bool)
            and 2 <= n <= most)


def _temperature_tuple(v):
    if isinstance(v, dict):
        a, b, n = float(v["start"]), float(v["stop"]), int(v["points"])
        return tuple(a * (b / a) ** (i / (n - 1)) for i in range(n))
    return tuple(float(x) for x in v)


# The one place where every default lives.
SCHEMA: dict[str, dict[str, Key]] = {
    "impurity": {
        "model": Key(str, "kondo", "-", " | ".join(MODELS), "impurity model", choices=MODELS),
        "exchange": Key(NUM, 0.15, "ρJ (dimensionless)",
                        f"|ρJ| <= {MAX_COUPLING:g}; > 0 antiferromagnetic, < 0 ferromagnetic",
                        "Kondo exchange coupling ρJ, ρ = 1/(2D)", _coupling),
        "exchange_second_channel": Key(NUM, None, "ρJ (dimensionless)",
                                       f"|ρJ| <= {MAX_COUPLING:g} (default: equal to exchange)",
                                       "two-channel Kondo: exchange coupling to the second channel", _coupling),
        "potential_scattering": Key(NUM, 0.0, "ρK (dimensionless)", f"|ρK| <= {MAX_COUPLING:g}",
                                    "Kondo model: potential scattering ρK at the impurity site", _coupling),
        "spin": Key(NUM, 0.5, "ħ", "0.5, 1, 1.5, 2, ...", "spin-Kondo model: impurity spin S",
                    lambda s: _finite(s) and s > 0 and abs(2 * s - round(2 * s)) < 1e-12 and s <= 4),
        "level": Key(NUM, None, "D", f"|ε_d| <= {MAX_ENERGY:g} D (default: −interaction/2, the symmetric point)",
                     "Anderson model: level energy ε_d", _finite),
        "interaction": Key(NUM, 0.1, "D", f">= 0 and <= {2 * MAX_ENERGY:g} D",
                           "Anderson model: on-site repulsion U", lambda u: _finite(u) and u >= 0),
        "hybridization": Key(NUM, 0.01, "D", f"> 0 and <= {MAX_ENERGY:g} D",
                             "Anderson/resonant level: Γ = πρV² at the Fermi level",
                             lambda g: _finite(g) and g > 0),
        "field": Key(NUM, 0.0, "D", f"|h| <= {MAX_ENERGY:g} D (non-zero needs run.symmetry = \"abelian\")",
                     "Zeeman energy h on the impurity, H = −h S_z", _finite),
    },
    "bath": {
        "shape": Key(str, "flat", "-", " | ".join(BATH_SHAPES), "shape g(ε) of the hybridization function",
                     choices=BATH_SHAPES),
        "half_bandwidth": Key(NUM, 1.0, "D", ">= 1e-06 and <= 1e+06", "half-bandwidth D of the conduction band",
                              lambda d: _finite(d) and 1e-6 <= d <= 1e6),
        "exponent": Key(NUM, 0.0, "-", f">= 0 and <= {MAX_EXPONENT:g}", "power-law bath: g(ε) = |ε/D|^r, r = exponent",
                        lambda r: _finite(r) and 0 <= r <= MAX_EXPONENT),
        "table": Key(str, None, "path", "readable two-column text file (ε, g(ε))",
                     "table bath: file with ε (units of D) and g(ε) >= 0; relative to the config file"),
    },
    "discretization": {
        "Lambda": Key(NUM, 3.0, "-", f">= {MIN_LAMBDA:g} and <= {MAX_LAMBDA:g}", "logarithmic discretization parameter Λ",
                      lambda x: _finite(x) and MIN_LAMBDA <= x <= MAX_LAMBDA),
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
                             lambda e: _finite(e) and 0 < e <= MAX_ENERGY_CUTOFF),
        "lowest_temperature": Key(NUM, 1e-8, "D",
                                  f"> 0 and < half_bandwidth, at least {MIN_TEMPERATURE_RATIO:g} half_bandwidth",
                                  "lowest temperature wanted; sets the chain length",
                                  lambda t: _finite(t) and t > 0),
        "beta_bar": Key(NUM, 1.0, "-", f">= {MIN_BETA_BAR:g} and <= {MAX_BETA_BAR:g}",
                        "conventional thermodynamics: T_N = ω_N / beta_bar, the temperature evaluated at "
                        "iteration N; also sets the temperature of the discarded-weight diagnostic",
                        lambda b: _finite(b) and MIN_BETA_BAR <= b <= MAX_BETA_BAR),
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
        "symmetry": Key(str, "su2", "-", " | ".join(SYMMETRIES), "quantum numbers used by the engine",
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
        "flow_levels": Key(int, 40, "levels", f">= 1 and <= {MAX_FLOW_LEVELS}",
                           "lowest levels per iteration stored for the flow",
                           lambda n: 1 <= n <= MAX_FLOW_LEVELS),
    },
    "spectral": {
        "temperatures": Key(list, None, "D", "list of 1 to 64 numbers >= 0 and < half_bandwidth (0: ground state)",
                            "temperatures of the impurity spectral function A(ω, T); no spectral pass when absent "
                            "(Anderson and resonant-level models)",
                            lambda v: _number_list(v, 0.0, True), convert=_temperature_tuple),
        "broadening": Key(NUM, 0.6, "-", "> 0 and <= 2", "width b of the log-Gaussian broadening kernel",
                          lambda b: _finite(b) and 0 < b <= 2),
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
        "memory_budget": Key(NUM, 1.0, "GB", "> 0 and <= 10000",
                             "eigenvectors kept in memory for the spectral pass; the rest goes to a temporary file",
                             lambda m: _finite(m) and 0 < m <= 1e4),
    },
    "output": {
        "file": Key(str, None, "path", "writable path ending in .h5 (default: <config name>.h5 in the current folder)",
                    "HDF5 result file"),
    },
}

#: The [impurity] keys each model uses besides ``model`` (the one place; a model registry can take it over).
#: Any other [impurity] key given explicitly is an error naming the model and these keys.
MODEL_KEYS: dict[str, tuple[str, ...]] = {
    "kondo": ("exchange", "potential_scattering", "field"),
    "spin-kondo": ("exchange", "potential_scattering", "spin", "field"),
    "two-channel-kondo": ("exchange", "exchange_second_channel", "field"),
    "anderson": ("level", "interaction", "hybridization", "field"),
    "resonant-level": ("level", "hybridization", "field"),
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
        return ("model",) + MODEL_KEYS[choice]
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
    for table, choices, label, declared in (("impurity", tuple(models), "model", MODEL_KEYS),
                                            ("bath", tuple(shapes), "shape", SHAPE_KEYS)):
        used = set().union(*(used_keys(table, c) for c in choices))
        for key in given.get(table, ()):
            if key in SCHEMA[table] and key not in used:
                names = " or ".join(f'"{c}"' for c in choices)
                uses = "; ".join(f'"{c}" uses {", ".join(declared[c])}' for c in choices)
                raise ConfigError(f"{where}{table}.{key}: not used by {label} {names}; remove it ({uses})")


SWEEP_NOTE = ("[sweep] maps a parameter name 'table.key' to a list of values, or to a table "
              "{ start, stop, points, spacing = \"linear\" | \"log\" }; [sweep] folder names the output folder")


@dataclass(frozen=True)
class ImpuritySpec:
    """Physics of the impurity (units of D; see module docstring)."""

    model: str
    exchange: float
    exchange_second_channel: float | None
    potential_scattering: float
    spin: float
    level: float | None
    interaction: float
    hybridization: float
    field: float

    @property
    def U(self) -> float:
        """Effective on-site repulsion (0 for the resonant level)."""
        return 0.0 if self.model == "resonant-level" else self.interaction

    @property
    def epsilon_d(self) -> float:
        """Effective level energy: ``level``, or −U/2 (the symmetric point) when not given."""
        return -0.5 * self.U if self.level is None else self.level


@dataclass(frozen=True)
class BathSpec:
    """Physics of the conduction band."""

    shape: str
    half_bandwidth: float
    exponent: float
    table: str | None


@dataclass(frozen=True)
class DiscretizationSpec:
    """Numerical approximation: logarithmic discretization."""

    Lambda: float
    twists: int
    scheme: str
    wilson_correction: bool

    @property
    def corrects_coupling(self) -> bool:
        """True when the coupling is multiplied by A_Λ: Wilson's scheme with the correction on (the adaptive
        scheme needs none and ignores ``wilson_correction``)."""
        return self.wilson_correction and self.scheme == "wilson"


@dataclass(frozen=True)
class RunSettings:
    """Numerical approximation: truncation, chain length, thermodynamics grid."""

    kept_states: int
    energy_cutoff: float | None
    lowest_temperature: float
    beta_bar: float
    thermodynamics: str
    temperatures: tuple | None
    error_estimate: bool
    symmetry: str
    workers: int
    blas_threads: int
    bath_reference: str
    flow_levels: int


@dataclass(frozen=True)
class SpectralSpec:
    """Numerical request for spectral functions and conductance (temperatures in units of D)."""

    temperatures: tuple | None
    broadening: float
    points_per_decade: int
    self_energy: bool
    conductance_temperatures: tuple | None
    memory_budget: float

    @property
    def requested(self) -> bool:
        """True when a spectral pass is wanted (spectral or conductance temperatures given)."""
        return bool(self.temperatures) or bool(self.conductance_temperatures)


@dataclass(frozen=True)
class OutputSpec:
    file: str | None


@dataclass(frozen=True)
class SweepSpec:
    """Parameter sweep: ordered parameter names and the value list of each (outer product)."""

    parameters: tuple[str, ...] = ()
    values: tuple[tuple, ...] = ()
    folder: str | None = None


@dataclass(frozen=True)
class RunSpec:
    """A validated, frozen run specification: the only thing the numerics see."""

    impurity: ImpuritySpec
    bath: BathSpec
    discretization: DiscretizationSpec
    run: RunSettings
    output: OutputSpec
    sweep: SweepSpec = field(default_factory=SweepSpec)
    config_text: str = ""
    config_path: str = ""
    spectral: SpectralSpec | None = None

    def with_value(self, dotted: str, value) -> "RunSpec":
        """Return a copy with one parameter ``table.key`` replaced and re-validated."""
        table, key = dotted.split(".", 1)
        raw = self.as_dict()
        raw[table][key] = value
        return _build(raw, self.config_text, self.config_path, self.sweep, check_cross=True)

    def as_dict(self) -> dict:
        out = {}
        for f in fields(self):
            if f.name in SCHEMA and getattr(self, f.name) is not None:
                sub = getattr(self, f.name)
                out[f.name] = {g.name: getattr(sub, g.name) for g in fields(sub)}
        return out


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
        raise ConfigError(f"{name}: expected {_type_name(kind)}, got {type(value).__name__} {show(value)}")
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
    return _build(values, text, path, sweep, check_cross=True)


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
        if not _finite(v):
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


def _build(values, text, path, sweep, check_cross) -> RunSpec:
    imp = dict(values["impurity"])
    spec = RunSpec(
        impurity=ImpuritySpec(**imp),
        bath=BathSpec(**values["bath"]),
        discretization=DiscretizationSpec(**values["discretization"]),
        run=RunSettings(**values["run"]),
        output=OutputSpec(**values["output"]),
        spectral=SpectralSpec(**values["spectral"]) if "spectral" in values else None,
        sweep=sweep,
        config_text=text,
        config_path=path,
    )
    if check_cross:
        _cross_checks(spec)
    return spec


def _cross_checks(spec: RunSpec):
    imp, bath, run = spec.impurity, spec.bath, spec.run
    if imp.model == "resonant-level" and imp.interaction != 0.0 and "interaction" in _given(spec, "impurity"):
        raise ConfigError(f"impurity.interaction: got {imp.interaction}; allowed range: 0 for model \"resonant-level\"")
    if imp.field != 0.0 and run.symmetry == "su2":
        raise ConfigError("impurity.field: a non-zero field breaks spin symmetry; allowed with run.symmetry = \"abelian\" only")
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
        asked = "temperatures" if sp.temperatures else "conductance_temperatures"
        if sp.requested and imp.model not in ("anderson", "resonant-level"):
            raise ConfigError(f"spectral.{asked}: expected impurity.model = \"anderson\" or \"resonant-level\" "
                              f"(spectra are computed for the d level), got {imp.model!r}")
        for key in ("temperatures", "conductance_temperatures"):
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


def _given(spec, table):
    try:
        return tomllib.loads(spec.config_text).get(table, {})
    except tomllib.TOMLDecodeError:
        return {}


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
