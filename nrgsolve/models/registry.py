"""The model registry: every impurity model declared once, in a file of its own.

A :class:`ModelDeclaration` says everything the rest of nrgsolve needs to know
about a model: its name, its own ``[impurity]`` parameters (units, defaults,
ranges, through :class:`nrgsolve.keys.Key`), its number of conduction
channels, whether it has an impurity level (charge fluctuations, spectra of
the d level), which impurity averages it offers, whether a Kondo scale is
expected, when it is particle-hole symmetric, which exact curve applies, and
how to build its explicit block.  Config validation, the driver, inspect,
sweeps and the generated docs read the declaration; nothing outside
``nrgsolve/models/`` compares model names.

Adding a model is one new module in this package that defines ``MODEL = ModelDeclaration(...)``
(it is found automatically) and its tests.

Conventions: energies in units of the half-bandwidth D; J > 0 antiferromagnetic;
Γ = πρV².
"""

from __future__ import annotations

import importlib
import pkgutil
from dataclasses import dataclass
from typing import Callable

from ..engine.fock import ExplicitBlock
from ..keys import Key

__all__ = ["ModelDeclaration", "ChainContact", "MODELS", "model", "model_names", "impurity_parameters"]


@dataclass(frozen=True)
class ChainContact:
    """What a model needs to know of the chain it couples to (units of D).

    Attributes
    ----------
    onsite0 : float
        On-site energy ε_0 of chain site 0.
    coupling_sq : float
        V_0²/Γ: (1/π)∫g(ε)dε of the bath shape, times A_Λ when Wilson's correction is on
        (flat band without correction: 2D/π).
    correction : float
        A_Λ when Wilson's correction is on, else 1 (multiplies exchange couplings).
    density : float
        ρ = 1/(2D), which turns the dimensionless ρJ into J.
    """

    onsite0: float
    coupling_sq: float
    correction: float
    density: float


def _never(imp) -> str | None:
    return "no exact curve for this model"


@dataclass(frozen=True)
class ModelDeclaration:
    """One impurity model.

    Attributes
    ----------
    name : str
        The value of ``impurity.model``.
    summary : str
        One line for the docs: the Hamiltonian in words.
    parameters : dict of str to Key
        The ``[impurity]`` keys the model uses (besides ``model``), with units, defaults and ranges.
    build : callable (ImpuritySpec, ChainContact) -> ExplicitBlock
        The model's explicit block (impurity, and site 0 for Kondo models).
    channels : callable (ImpuritySpec) -> int
        Conduction channels.
    impurity_level : bool
        The model has a d level coupled by hybridization: charge fluctuations, the impurity spectral
        function A_d(ω), the chain starts at site 0.
    twice_impurity_spin : callable (ImpuritySpec) -> int
        2S of the local moment the model can form.
    averages : tuple of str
        Impurity averages stored with the thermodynamics (besides ``impurity_sz`` in a field).
    kondo_scale : callable (ImpuritySpec) -> bool
        A Kondo temperature is expected (the run warns when it is not found).
    particle_hole_symmetric : callable (ImpuritySpec) -> bool
        The impurity part is particle-hole symmetric (the bath and the field are checked separately).
    particle_hole_breaker : callable (ImpuritySpec) -> str
        When it is not: which parameters break the symmetry, with their values (for error messages).
    exact_curve : callable (ImpuritySpec) -> tuple (channels, spin) or str
        The Bethe-ansatz curve that applies, or the reason why none does.
    """

    name: str
    summary: str
    parameters: dict[str, Key]
    build: Callable[..., ExplicitBlock]
    channels: Callable[..., int] = lambda imp: 1
    impurity_level: bool = False
    twice_impurity_spin: Callable[..., int] = lambda imp: 1
    averages: tuple[str, ...] = ()
    kondo_scale: Callable[..., bool] = lambda imp: True
    particle_hole_symmetric: Callable[..., bool] = lambda imp: True
    particle_hole_breaker: Callable[..., str] = lambda imp: "the impurity parameters are not particle-hole symmetric"
    exact_curve: Callable[..., object] = _never
    order: int = 100                      # position in menus and docs

    def impurity_states(self, imp) -> int:
        """States of the impurity part of the initial block (4 for a d level, 2S+1 for a spin)."""
        return 4 if self.impurity_level else self.twice_impurity_spin(imp) + 1


def _discover() -> dict[str, ModelDeclaration]:
    found = []
    from .. import models as package
    for info in pkgutil.iter_modules(package.__path__):
        if info.name in ("registry", "parameters"):
            continue
        module = importlib.import_module(f"{package.__name__}.{info.name}")
        decl = getattr(module, "MODEL", None)
        if isinstance(decl, ModelDeclaration):
            found.append(decl)
    found.sort(key=lambda m: (m.order, m.name))
    out = {}
    for m in found:
        if m.name in out:
            raise RuntimeError(f"model {m.name!r} is declared twice")
        out[m.name] = m
    return out


_REGISTRY: dict[str, ModelDeclaration] | None = None


def _registry() -> dict[str, ModelDeclaration]:
    global _REGISTRY
    if _REGISTRY is None:
        _REGISTRY = _discover()
    return _REGISTRY


def model_names() -> tuple[str, ...]:
    """Names of every registered model, in menu order."""
    return tuple(_registry())


def model(name: str) -> ModelDeclaration:
    """The declaration of model ``name`` (KeyError when there is none)."""
    return _registry()[name]


def impurity_parameters() -> dict[str, Key]:
    """Every ``[impurity]`` parameter of every model (a name two models share must be declared alike)."""
    out: dict[str, Key] = {}
    for m in _registry().values():
        for name, key in m.parameters.items():
            if name in out and out[name] != key:
                raise RuntimeError(f"impurity parameter {name!r} is declared differently by two models")
            out.setdefault(name, key)
    return out


class _Models:
    """Read-only view of the registry: ``MODELS["kondo"]``, ``list(MODELS)``."""

    def __getitem__(self, name):
        return model(name)

    def __iter__(self):
        return iter(model_names())

    def __len__(self):
        return len(model_names())

    def __contains__(self, name):
        return name in _registry()

    def values(self):
        return list(_registry().values())


MODELS = _Models()
