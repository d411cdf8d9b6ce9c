"""The resonant-level model: the Anderson model at U = 0 (non-interacting, solvable exactly).

H_imp = ε_d n_d − h S_z + V_0 Σ_σ (d†_σ f_0σ + h.c.), Γ = πρV² (energies in units of D).
"""

from __future__ import annotations

from .anderson import anderson_block
from .parameters import LEVEL, HYBRIDIZATION, FIELD
from .registry import ModelDeclaration, ChainContact

__all__ = ["MODEL"]


def _build(imp, contact: ChainContact):
    return anderson_block(imp.epsilon_d, 0.0, (imp.hybridization * contact.coupling_sq) ** 0.5, imp.field)


MODEL = ModelDeclaration(
    name="resonant-level",
    summary="a non-interacting level ε_d hybridized with one channel (Γ = πρV²)",
    parameters={"level": LEVEL, "hybridization": HYBRIDIZATION, "field": FIELD},
    build=_build,
    impurity_level=True,
    averages=("occupation", "double_occupancy"),
    kondo_scale=lambda imp: False,
    particle_hole_symmetric=lambda imp: imp.epsilon_d == 0.0,
    particle_hole_breaker=lambda imp: f"impurity.level = {imp.epsilon_d:g} ≠ 0",
    exact_curve=lambda imp: "no exact curve for model \"resonant-level\"; exact curves exist for kondo, "
                            "spin-kondo and two-channel-kondo",
    order=2,
)
