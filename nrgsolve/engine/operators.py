"""Operators of the *old block* carried through the iteration (the spectral pass).

An operator O that acts on the impurity (e.g. the spinor d†_σ of the
Anderson level) lives, after the first step, on the "block" part of the
product basis |(L, a) L_new⟩ = block multiplet L ⊗ site multiplet a, coupled
to L_new.  The engine's product states put the site's creators to the left
of the block's, A_a† B_k† |0⟩ (this is what gives the sign (−1)^{n_b} in
:meth:`Su2Symmetry.hop_coef`), so moving a fermionic O past the site gives

.. math::

    O\\,A_a^†B_k^†|0⟩ = (-1)^{n_a} A_a^† (O B_k^†)|0⟩ .

Abelian mode (labels (Q, 2S_z)): the coefficient is just (−1)^{n_a}, and
⟨(L', a) L'_new| O_σ |(L, a) L_new⟩ = (−1)^{n_a} ⟨L'|O_σ|L⟩.

SU(2) mode (labels (Q, 2S)): O_σ is a spin-½ tensor (d†_σ, or d†_σ n_{d,−σ}
which is d†_σ times the scalar n_d).  With the Wigner–Eckart convention of
:mod:`nrgsolve.engine.symmetry`, ⟨S'M'|O_σ|SM⟩ = ⟨S M; ½ σ|S' M'⟩ ⟨S'‖O‖S⟩,
the reduced element in the new basis is

.. math::

    ⟨(S_1', a) S'‖O‖(S_1, a) S⟩ = (-1)^{n_a}\\,
        \\frac{\\sum_{m_a} ⟨S_1 m_1; s_a m_a|S M⟩ ⟨S_1' m_1'; s_a m_a|S' S'⟩
               ⟨S_1 m_1; ½ σ|S_1' m_1'⟩}{⟨S M; ½ σ|S' S'⟩}\\, ⟨S_1'‖O‖S_1⟩ ,

with M' = S', M = S' − σ (any σ with a non-zero denominator),
m_1 = M − m_a, m_1' = m_1 + σ.  This is the usual 6j recoupling of a tensor
acting on the first factor of a coupled product (Krishna-murthy, Wilkins &
Wilson 1980; Tóth et al. 2008), here evaluated numerically from
Clebsch–Gordan coefficients as :meth:`Su2Symmetry.site_coef` does, so no
closed formula has to be trusted.  Each symmetry implements it as
:meth:`nrgsolve.engine.symmetry.Symmetry.block_op_coef`.

The transformation kernel :func:`transform_block_operator` is a pure
function of arrays: it takes the operator's matrices in the kept basis of
the previous iteration, the new eigenvectors and the row layout of each new
block (as handed to the engine's ``vector_sink``), and returns the matrices
between the new eigenstates.
"""

from __future__ import annotations

import numpy as np


__all__ = ["block_operator_coef", "transform_block_operator", "operator_targets", "SPINOR", "VECTOR"]

#: Twice the rank of a spinor (fermionic, spin-½) operator such as d†_σ.
SPINOR = 1
#: Twice the rank of a charge-neutral spin vector (bosonic) such as the impurity spin S.
VECTOR = 2


def operator_targets(sym, comp, label, twice_rank: int = SPINOR) -> list:
    """Block labels an operator connects ``label`` to (:meth:`Symmetry.operator_targets`): the creator
    of channel ``comp`` (``twice_rank`` = 1) or the spin vector (``twice_rank`` = 2)."""
    return sym.operator_targets(comp, label, twice_rank)


def block_operator_coef(sym, comp, L_old_in, a, L_in, L_old_out, L_out, twice_rank: int = SPINOR) -> float:
    """Recoupling coefficient of a spinor (or spin-vector) operator acting on the old block
    (:meth:`Symmetry.block_op_coef`).

    For the spin vector (``twice_rank`` = 2, bosonic: no sign from the site)
    the same formula holds with the rank-1 Clebsch–Gordan coefficients
    ⟨S M; 1 q|S' M'⟩ in place of ⟨S M; ½ σ|S' M'⟩.

    Parameters
    ----------
    sym : Symmetry
    comp : component of ``sym.components``
        The coefficient does not depend on it apart from the selection rules.
    L_old_in, L_old_out : tuple
        Old block labels (right and left of the operator).
    a : int
        Site multiplet index (the same on both sides).
    L_in, L_out : tuple
        New block labels the product states are coupled to.

    Returns
    -------
    float
        ⟨(L_old_out, a) L_out‖O‖(L_old_in, a) L_in⟩ / ⟨L_old_out‖O‖L_old_in⟩
        (reduced elements for non-abelian labels, plain elements for abelian ones).
    """
    return sym.block_op_coef(comp, L_old_in, a, L_in, L_old_out, L_out, twice_rank)


def transform_block_operator(sym, comp, F_old, vectors, layout, rows=None, cols=None, twice_rank: int = SPINOR):
    """Matrices of an old-block spinor (or spin-vector) operator between the new eigenstates.

    Parameters
    ----------
    sym : Symmetry
    comp : int or (int, int)
        Operator component (raises the charge of channel ``comp`` by one).
    F_old : dict (L_old_out, L_old_in) -> ndarray (k_out, k_in)
        The operator in the kept basis of the previous iteration.
    vectors : dict L -> ndarray (dim_L, dim_L)
        Eigenvectors (columns) of every new block, rows in the product basis.
    layout : dict L -> list of ((L_old, a), row_offset, rows)
        Row ranges of the product basis (as handed to the engine's vector sink).
    rows, cols : dict L -> int, optional
        Keep only the lowest ``rows[L_out]`` eigenstates on the left and
        ``cols[L_in]`` on the right (default: all states).
    twice_rank : int
        1 for spinors (fermionic), 2 for the spin vector (bosonic, reduced elements of rank 1).

    Returns
    -------
    dict (L_out, L_in) -> ndarray (rows[L_out], cols[L_in])
        Only non-empty blocks connected by the operator.

    Notes
    -----
    Cost: one product of the sub-block matrices with the right eigenvectors
    and one dense product with the left eigenvectors per connected block pair;
    no loops over matrix elements.
    """
    where = {}
    for L, subs in layout.items():
        for (Lo, a), off, n in subs:
            where[(Lo, a, L)] = (off, n)
    by_old = {}
    for L, subs in layout.items():
        for (Lo, a), off, n in subs:
            by_old.setdefault((Lo, a), []).append(L)
    out = {}
    for Li, subs in layout.items():
        ci = vectors[Li].shape[1] if cols is None else cols.get(Li, 0)
        if ci == 0:
            continue
        targets = set(operator_targets(sym, comp, Li, twice_rank))
        X = {}
        for (Lio, a), ri, ni in subs:
            Ui = vectors[Li][ri:ri + ni, :ci]
            for Loo in operator_targets(sym, comp, Lio, twice_rank):
                M = F_old.get((Loo, Lio))
                if M is None:
                    continue
                MU = None
                for Lo in by_old.get((Loo, a), ()):
                    if Lo not in targets:
                        continue
                    co = vectors[Lo].shape[1] if rows is None else rows.get(Lo, 0)
                    if co == 0:
                        continue
                    c = block_operator_coef(sym, comp, Lio, a, Li, Loo, Lo, twice_rank)
                    if c == 0.0:
                        continue
                    ro, no = where[(Loo, a, Lo)]
                    if Lo not in X:
                        X[Lo] = np.zeros((vectors[Lo].shape[0], ci))
                    if MU is None:
                        MU = M @ Ui
                    X[Lo][ro:ro + no] += c * MU
        for Lo, XU in X.items():
            co = vectors[Lo].shape[1] if rows is None else rows.get(Lo, 0)
            out[(Lo, Li)] = vectors[Lo][:, :co].T @ XU
    return out
