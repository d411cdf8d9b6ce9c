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

import importlib

from .errors import ConfigError, NrgError, NrgInputError, NrgNumericalError

# The rest is imported when first used (PEP 562): ``import nrgsolve`` stays light, so the command line
# starts in milliseconds and a Ctrl-C while numpy and scipy load reaches its handler, not a traceback.
_LAZY = {
    **dict.fromkeys(("RunSpec", "ImpuritySpec", "BathSpec", "DiscretizationSpec", "RunSettings", "SpectralSpec",
                     "OutputSpec"), "config"),
    "MODELS": "models", "Result": "result", "QUANTITIES": "result",
    "run": "api", "load": "api", "as_spec": "api",
    # the plot functions import matplotlib
    **dict.fromkeys(("plot_thermo", "plot_flow", "plot_spectral", "plot_conductance"), "plots"),
}


def __getattr__(name):
    home = _LAZY.get(name)
    if home is not None:
        value = getattr(importlib.import_module(f".{home}", __name__), name)
        globals()[name] = value
        return value
    try:                                  # a submodule, e.g. nrgsolve.config after a plain import nrgsolve
        return importlib.import_module(f".{name}", __name__)
    except ModuleNotFoundError as exc:
        if exc.name != f"{__name__}.{name}":
            raise
    raise AttributeError(f"module 'nrgsolve' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(__all__))


__all__ = ["__version__", "run", "load", "as_spec", "Result", "QUANTITIES", "RunSpec", "ImpuritySpec", "BathSpec",
           "DiscretizationSpec", "RunSettings", "SpectralSpec", "OutputSpec", "MODELS", "ConfigError", "NrgError",
           "NrgInputError", "NrgNumericalError", "plot_thermo", "plot_flow", "plot_spectral", "plot_conductance"]
