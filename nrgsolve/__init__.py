"""nrgsolve: numerical renormalization group solver for quantum impurity models.

Layers (imports flow one way): bath, discretize, chain -> engine (symmetry,
iteration) -> observables -> solve (driver) -> store -> plots -> cli.
Energies and temperatures in units of the half-bandwidth D, k_B = 1.
"""

__version__ = "0.1.0"
__all__ = ["__version__"]
