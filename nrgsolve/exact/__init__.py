"""Independent exact references that runs can be compared with.

* :func:`kondo_thermodynamics` — the universal impurity thermodynamics
  (T·χ_imp, S_imp, C_imp) of the k-channel spin-S Kondo model from the
  thermodynamic Bethe ansatz (Andrei, Furuya & Lowenstein 1983; Tsvelick &
  Wiegmann 1983), as functions of T/T_K (one channel, S = ½; Wilson's T_K) or
  T/T_0 (all other models).

Units: T·χ in (g μ_B)²/k_B (free spin-½: ¼), entropy and specific heat in k_B.
"""

from .bethe_ansatz import ExactThermodynamics, WILSON_NUMBER_EXACT, has_exact_curve, kondo_thermodynamics

__all__ = ["ExactThermodynamics", "WILSON_NUMBER_EXACT", "has_exact_curve", "kondo_thermodynamics"]
