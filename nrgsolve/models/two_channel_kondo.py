"""The two-channel Kondo model: a spin ½ exchange-coupled to site 0 of two independent channels.

H_imp = J_1 S·s_{0,1} + J_2 S·s_{0,2} − h S_z (energies in units of D, J > 0 antiferromagnetic).  With
J_1 = J_2 the spin is overscreened: a non-Fermi-liquid fixed point with residual entropy ½ ln 2
(Nozières & Blandin 1980; Affleck & Ludwig 1991).
"""

from __future__ import annotations

from .kondo import two_channel_kondo_block
from .parameters import EXCHANGE, EXCHANGE_SECOND_CHANNEL, FIELD
from .registry import ModelDeclaration, ChainContact

__all__ = ["MODEL", "second_exchange"]


def second_exchange(imp) -> float:
    """ρJ_2: ``exchange_second_channel``, or ``exchange`` when it is not given."""
    return imp.exchange if imp.exchange_second_channel is None else imp.exchange_second_channel


def _build(imp, contact: ChainContact):
    scale = contact.correction / contact.density
    return two_channel_kondo_block(imp.exchange * scale, second_exchange(imp) * scale, 1, imp.field,
                                   contact.onsite0)


def _exact(imp):
    if second_exchange(imp) != imp.exchange:
        return (f"no exact curve for model \"two-channel-kondo\" with unequal couplings "
                f"(exchange = {imp.exchange:g}, exchange_second_channel = {second_exchange(imp):g})")
    if imp.exchange <= 0:
        return f"no exact curve for a ferromagnetic or zero coupling (exchange = {imp.exchange:g})"
    if imp.field != 0:
        return f"no exact curve in a field (field = {imp.field:g}); the exact curves are for zero field"
    return 2, 0.5


MODEL = ModelDeclaration(
    name="two-channel-kondo",
    summary="spin ½ exchange-coupled to two independent channels (overscreened when J_1 = J_2)",
    parameters={"exchange": EXCHANGE, "exchange_second_channel": EXCHANGE_SECOND_CHANNEL, "field": FIELD},
    build=_build,
    channels=lambda imp: 2,
    kondo_scale=lambda imp: False,
    exact_curve=_exact,
    order=4,
)
