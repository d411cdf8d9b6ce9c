"""Declarations of input keys and the ranges that keep the numerics meaningful.

The lowest layer of the input side: :class:`Key` declares one key (type,
default, unit, allowed range, meaning); the config schema (:mod:`nrgsolve.config`)
and the model declarations (:mod:`nrgsolve.models`) are written with it.
Energies in units of the half-bandwidth D.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

__all__ = ["Key", "NUM", "finite", "MAX_COUPLING", "MAX_ENERGY", "MAX_EXPONENT", "MIN_LAMBDA", "MAX_LAMBDA",
           "MAX_TWISTS", "MIN_BETA_BAR", "MAX_BETA_BAR", "MAX_KEPT_STATES", "MAX_ENERGY_CUTOFF",
           "MIN_TEMPERATURE_RATIO", "MAX_FLOW_LEVELS", "coupling_in_range"]


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


def finite(x):
    """True for a finite int or float (not a bool)."""
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


def coupling_in_range(x):
    """|x| <= MAX_COUPLING for a finite number."""
    return finite(x) and abs(x) <= MAX_COUPLING
