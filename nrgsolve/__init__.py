"""nrgsolve: numerical renormalization group solver for quantum impurity models.

The Python interface::

    import nrgsolve
    res = nrgsolve.run({"impurity": {"model": "kondo", "exchange": 0.2}})
    res.thermo.T_chi, res.summary["kondo_temperature_wilson"]
    res.save("kondo.h5")
    same = nrgsolve.load("kondo.h5")
    nrgsolve.plot_thermo([res, same], "T_chi", scale="kondo")

Layers (imports flow one way): bath, discretize, chain -> models -> engine
(symmetry, iteration) -> observables -> solve (driver) -> result, store ->
plots -> command line and this interface.  Energies and temperatures in
units of the half-bandwidth D, k_B = 1; J > 0 antiferromagnetic; Γ = πρV².
"""

__version__ = "0.1.0"

from .errors import ConfigError, NrgError, NrgInputError, NrgNumericalError
from .config import RunSpec, ImpuritySpec, BathSpec, DiscretizationSpec, RunSettings, SpectralSpec, OutputSpec
from .models import MODELS
from .result import Result, QUANTITIES
from .api import run, load, as_spec


def __getattr__(name):
    # the plot functions import matplotlib: only when asked for
    if name in ("plot_thermo", "plot_flow", "plot_spectral", "plot_conductance"):
        from . import plots
        return getattr(plots, name)
    raise AttributeError(f"module 'nrgsolve' has no attribute {name!r}")


__all__ = ["__version__", "run", "load", "as_spec", "Result", "QUANTITIES", "RunSpec", "ImpuritySpec", "BathSpec",
           "DiscretizationSpec", "RunSettings", "SpectralSpec", "OutputSpec", "MODELS", "ConfigError", "NrgError",
           "NrgInputError", "NrgNumericalError", "plot_thermo", "plot_flow", "plot_spectral", "plot_conductance"]
