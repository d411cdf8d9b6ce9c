"""Which symmetry a run uses: ``run.symmetry = "auto"`` resolved, ``"isospin"`` checked.

The engine offers three label sets (:mod:`nrgsolve.engine.symmetry`), from the largest symmetry to
the smallest: isospin (spin SU(2) × charge SU(2) per channel, particle-hole symmetric runs only;
Jones, Varma & Wilkins 1988), su2 (spin SU(2) × charge U(1)) and abelian (charge × S_z, needed in a
field).  ``"auto"`` picks the largest one that the model, the bath and the field allow.

This is the one place that decides; the particle-hole test of the impurity comes from the model's
declaration in the registry (:mod:`nrgsolve.models`), that of the bath from :class:`nrgsolve.bath.Bath`.
"""

from __future__ import annotations

from dataclasses import replace

from .errors import ConfigError

__all__ = ["particle_hole_breakers", "choose_symmetry", "with_resolved_symmetry"]


def particle_hole_breakers(spec, bath) -> list:
    """What breaks particle-hole symmetry in a run (empty when nothing does).

    Parameters
    ----------
    spec : RunSpec
    bath : nrgsolve.bath.Bath

    Returns
    -------
    list of str
        One short phrase per cause, naming the key and its value (energies in units of D).
    """
    imp = spec.impurity
    out = []
    if imp.field != 0.0:
        out.append(f"impurity.field = {imp.field:g} ≠ 0")
    decl = imp.declaration
    if not decl.particle_hole_symmetric(imp):
        out.append(decl.particle_hole_breaker(imp))
    if not bath.is_particle_hole_symmetric():
        out.append(f"the bath (shape \"{bath.shape}\") is not symmetric about ε = 0")
    return out


def _obstacle(cls, spec, breakers) -> str | None:
    """Why the symmetry ``cls`` cannot serve this run (None when it can)."""
    if spec.impurity.field != 0.0 and not cls.resolves_sz:
        return f"impurity.field = {spec.impurity.field:g} ≠ 0 breaks spin-rotation symmetry"
    if cls.particle_hole_only and breakers:
        return "it needs particle-hole symmetry, but " + "; ".join(breakers)
    return None


def choose_symmetry(spec, bath) -> str:
    """The symmetry a run uses: ``run.symmetry`` itself, or for ``"auto"`` the largest one allowed
    (the first of :data:`nrgsolve.engine.symmetry.SYMMETRIES` without an obstacle).

    Raises
    ------
    ConfigError
        The symmetry asked for cannot serve the run, e.g. ``"isospin"`` without particle-hole symmetry
        (one line naming what breaks it).
    """
    from .engine.symmetry import SYMMETRIES
    asked = spec.run.symmetry
    breakers = particle_hole_breakers(spec, bath)
    if asked != "auto":
        why = _obstacle(SYMMETRIES[asked], spec, breakers)
        if why:
            raise ConfigError(f"run.symmetry: got \"{asked}\", but {why}; use \"auto\" or a smaller symmetry")
        return asked
    for name, cls in SYMMETRIES.items():
        if _obstacle(cls, spec, breakers) is None:
            return name
    raise ConfigError("run.symmetry: no symmetry fits this run")        # abelian always fits


def with_resolved_symmetry(spec, bath):
    """``spec`` with ``run.symmetry`` replaced by :func:`choose_symmetry` (the config text is kept)."""
    name = choose_symmetry(spec, bath)
    if name == spec.run.symmetry:
        return spec
    return replace(spec, run=replace(spec.run, symmetry=name))
