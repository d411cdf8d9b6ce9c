"""The symmetry-resolved iterative diagonalization engine (Wilson 1975).

Public names: :func:`run_chain` (the kernel), :class:`EngineSettings`,
:class:`IterationRecord`, :class:`EngineResult`, :func:`make_symmetry`,
:class:`ExplicitBlock`.
"""

from .fock import ExplicitBlock, FockSpace
from .symmetry import make_symmetry, Symmetry, Su2Symmetry, AbelianSymmetry, IsospinSymmetry, BlockSet
from .iterate import EngineSettings, IterationRecord, EngineResult, run_chain

__all__ = [
    "ExplicitBlock", "FockSpace", "make_symmetry", "Symmetry", "Su2Symmetry", "AbelianSymmetry",
    "IsospinSymmetry", "BlockSet",
    "EngineSettings", "IterationRecord", "EngineResult", "run_chain",
]
