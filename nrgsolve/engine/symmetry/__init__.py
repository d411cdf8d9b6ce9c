"""Quantum numbers of the engine: the interface (:mod:`.base`) and its implementations.

* ``"su2"`` — :class:`Su2Symmetry`, spin SU(2) × charge U(1) per channel, labels (Q_1..Q_K, 2S);
* ``"abelian"`` — :class:`AbelianSymmetry`, charge U(1) per channel × S_z, labels (Q_1..Q_K, 2S_z);
* ``"isospin"`` — :class:`IsospinSymmetry`, spin SU(2) × charge SU(2) per channel, labels
  (2I_1..2I_K, 2S), for particle-hole symmetric models (Jones, Varma & Wilkins 1988).

Nothing outside this package looks at a symmetry's name or at the layout of its labels.
"""

from .base import Symmetry, BlockSet, SiteMultiplet, LevelView
from .su2 import Su2Symmetry
from .abelian import AbelianSymmetry
from .isospin import IsospinSymmetry

__all__ = ["Symmetry", "BlockSet", "SiteMultiplet", "LevelView", "Su2Symmetry", "AbelianSymmetry",
           "IsospinSymmetry", "make_symmetry", "SYMMETRIES"]

#: every implementation by name, from the largest symmetry to the smallest
SYMMETRIES = {"isospin": IsospinSymmetry, "su2": Su2Symmetry, "abelian": AbelianSymmetry}


def make_symmetry(name: str, n_channels: int = 1) -> Symmetry:
    """The symmetry object for ``name`` ("isospin", "su2" or "abelian") and ``n_channels`` channels.

    Raises
    ------
    ValueError
        For an unknown name.
    """
    try:
        cls = SYMMETRIES[name]
    except KeyError:
        raise ValueError(f"symmetry: got {name!r}; allowed: {', '.join(SYMMETRIES)}") from None
    return cls(n_channels)
