"""Clebsch–Gordan coefficients from Racah's closed formula.

All angular momenta are passed as *twice* their value (integers), so that
half-integer spins are exact.  Convention (Condon–Shortley):
``cg(j1, m1, j2, m2, J, M)`` = ⟨j1 m1; j2 m2 | J M⟩.
"""

from __future__ import annotations

from functools import lru_cache
from math import factorial, sqrt

__all__ = ["cg"]


def _f(twice):
    return factorial(twice // 2)


@lru_cache(maxsize=None)
def cg(j1: int, m1: int, j2: int, m2: int, J: int, M: int) -> float:
    """⟨j1/2 m1/2; j2/2 m2/2 | J/2 M/2⟩ (arguments are twice the quantum numbers).

    Returns 0 for forbidden combinations (M ≠ m1 + m2, triangle rule violated,
    |m| > j, or parities that do not match).
    """
    if m1 + m2 != M or abs(m1) > j1 or abs(m2) > j2 or abs(M) > J:
        return 0.0
    if (j1 + m1) % 2 or (j2 + m2) % 2 or (J + M) % 2:
        return 0.0
    if J > j1 + j2 or J < abs(j1 - j2) or (j1 + j2 + J) % 2:
        return 0.0
    pref = (J + 1) * _f(J + j1 - j2) * _f(J - j1 + j2) * _f(j1 + j2 - J) / _f(j1 + j2 + J + 2)
    pref *= _f(J + M) * _f(J - M) * _f(j1 - m1) * _f(j1 + m1) * _f(j2 - m2) * _f(j2 + m2)
    total = 0.0
    for k2 in range(0, j1 + j2 - J + 1, 2):
        a = j1 + j2 - J - k2
        b = j1 - m1 - k2
        c = j2 + m2 - k2
        d = J - j2 + m1 + k2
        e = J - j1 - m2 + k2
        if min(a, b, c, d, e) < 0:
            continue
        term = _f(k2) * _f(a) * _f(b) * _f(c) * _f(d) * _f(e)
        total += (-1) ** (k2 // 2) / term
    return sqrt(pref) * total
