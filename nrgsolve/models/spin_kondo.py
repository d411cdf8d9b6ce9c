"""The spin-S Kondo model: a local spin S ≥ ½ exchange-coupled to one conduction channel.

H_imp = J S·s_0 + K (n_0 − 1) − h S_z (energies in units of D, J > 0 antiferromagnetic).  For S > ½
one channel screens only half a unit of spin: the underscreened Kondo effect (Nozières & Blandin 1980).
"""

from __future__ import annotations

from .kondo import build_kondo, kondo_exact_curve
from .parameters import EXCHANGE, POTENTIAL_SCATTERING, SPIN, FIELD
from .registry import ModelDeclaration

__all__ = ["MODEL"]


def _twice(imp) -> int:
    return int(round(2 * imp.spin))


MODEL = ModelDeclaration(
    name="spin-kondo",
    summary="spin-S local moment exchange-coupled to one channel (underscreened for S > ½)",
    parameters={"exchange": EXCHANGE, "potential_scattering": POTENTIAL_SCATTERING, "spin": SPIN, "field": FIELD},
    build=lambda imp, contact: build_kondo(imp, contact, _twice(imp)),
    twice_impurity_spin=_twice,
    averages=("spin_correlation",),
    particle_hole_symmetric=lambda imp: imp.potential_scattering == 0.0,
    particle_hole_breaker=lambda imp: f"impurity.potential_scattering = {imp.potential_scattering:g} ≠ 0",
    exact_curve=lambda imp: kondo_exact_curve(imp, float(imp.spin)),
    order=3,
)
