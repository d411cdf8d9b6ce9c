"""Observables computed from the engine's iteration records: thermodynamics, flow, Kondo scale."""

from .thermo import (ThermoCurve, iteration_thermodynamics, free_chain_thermodynamics,
                     impurity_thermodynamics, average_twists, temperature_grid)
from .kondo_scale import KondoSummary, kondo_summary, WILSON_NUMBER, CROSSOVER_VALUE
from .flow import FlowSpectrum, flow_spectrum

__all__ = [
    "ThermoCurve", "iteration_thermodynamics", "free_chain_thermodynamics", "impurity_thermodynamics",
    "average_twists", "temperature_grid", "KondoSummary", "kondo_summary", "WILSON_NUMBER",
    "CROSSOVER_VALUE", "FlowSpectrum", "flow_spectrum",
]
