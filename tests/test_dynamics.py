"""Dynamics of every model: the T-matrix (also of Kondo models, through the composite operator), the
dynamical impurity spin susceptibility, and the transport of a dilute magnetic alloy.

Exact checks on short chains against dense diagonalization written here; physics checks against
published fixed-point values (sources named in each test)."""

import math

import numpy as np
import pytest
from scipy.linalg import eigh

from nrgsolve.engine import make_symmetry, EngineSettings
from nrgsolve.engine.backward import spectral_run
from nrgsolve.engine.fock import FockSpace
from nrgsolve.engine.iterate import Step
from nrgsolve.models import kondo_block, anderson_block
from nrgsolve.observables.dynamics import backward_operators

from conftest import wilson_hopping, omega


# ---------------------------------------------------------------------------------------------
# exact checks on short chains

def merged(om, w, tol=1e-8):
    """Sum the weights of coinciding poles; drop empty groups."""
    o = np.argsort(om, kind="stable")
    om, w = np.asarray(om)[o], np.asarray(w)[o]
    group = np.concatenate([[0], np.cumsum(np.diff(om) > tol)])
    W = np.bincount(group, weights=w)
    O = np.bincount(group, weights=om) / np.bincount(group)
    keep = np.abs(W) > 1e-12
    return O[keep], W[keep]


def dense_kondo(J, K, hop, T, spin):
    """Lehmann weights of the composite operator O_σ = [f_0σ, H_imp] (anticommutator) and of the
    impurity S_z (commutator) for a spin-½ Kondo impurity on the chain 0..n by dense diagonalization
    (built here from the Hamiltonian J S·s_0 + K(n_0 − 1) + Σ t_n (f†_n f_{n+1} + h.c.))."""
    n = len(hop) + 1
    sp = FockSpace([(0, s) for _ in range(n) for s in (1, -1)], local_spin_twice=1)
    c = [sp.annihilator(j) for j in range(2 * n)]
    nu, nd = c[0].T @ c[0], c[1].T @ c[1]
    Sz, Sp = sp.local_sz, sp.local_splus
    spin_dot = Sz @ (0.5 * (nu - nd)) + 0.5 * (Sp @ (c[1].T @ c[0]) + Sp.T @ (c[0].T @ c[1]))
    H_imp = J * spin_dot + K * (nu + nd - sp.identity)
    H = H_imp.copy()
    for k in range(n - 1):
        for s in range(2):
            h = c[2 * k + s].T @ c[2 * k + 2 + s]
            H += hop[k] * (h + h.T)
    E, W = eigh(H)
    mode = 0 if spin > 0 else 1
    O = c[mode] @ H_imp - H_imp @ c[mode]                  # [f_0σ, H_imp]
    A = W.T @ O.T @ W                                      # ⟨b|O†|a⟩
    S = W.T @ Sz @ W
    x = (E - E[0]) / T if T > 0 else np.where(E - E[0] < 1e-10, 0.0, np.inf)
    rho = np.exp(-x)
    rho /= rho.sum()
    om = (E[:, None] - E[None, :]).ravel()
    return om, (A * A * (rho[None, :] + rho[:, None])).ravel(), (S * S * (rho[None, :] - rho[:, None])).ravel()


@pytest.mark.parametrize("symmetry", ["su2", "abelian"])
@pytest.mark.parametrize("T", [0.0, 0.1])
def test_kondo_composite_operator_and_spin_weights_match_dense_diagonalization(symmetry, T):
    """Without truncation the full-density-matrix weights of the T-matrix operator O_σ = [f_0σ, H_imp]
    of a Kondo impurity (Costi 2000, from memory) and of the commutator ⟨⟨S_z; S_z⟩⟩ equal the
    Lehmann sums of dense exact diagonalization of the same chain (common practice, no source).
    In su2 mode this checks the rank-1 recoupling of the spin vector through the sites."""
    J, K, Lam, N = 0.4, 0.1, 2.0, 2
    hop = wilson_hopping(np.arange(N), Lam)
    sym = make_symmetry(symmetry)
    blk = kondo_block(J, K)
    steps = [Step(n, (0.0,), (hop[n - 1],), omega(n, Lam)) for n in range(1, N + 1)]
    ops, corr = backward_operators(sym, blk, ("t-matrix", "spin-susceptibility"), impurity_level=False)
    _res, ds = spectral_run(sym.from_explicit(blk), 0, omega(0, Lam), sym, steps, EngineSettings(kept_states=10 ** 6),
                            ops, [T], corr, bins_per_decade=None)
    names = list(ds.correlators)
    om, wT, wS = dense_kondo(J, K, hop, T, +1)
    for x, w in ((names.index("T"), wT), (names.index("chi"), wS)):
        o1, w1 = merged(ds.omega[x, 0, 0], ds.weight[x, 0, 0])
        o2, w2 = merged(om, w)
        assert o1.shape == o2.shape
        np.testing.assert_allclose(o1, o2, atol=1e-10)
        np.testing.assert_allclose(w1, w2, atol=1e-11)
    # Kramers–Kronig static limit from the discrete poles: Σ w/ω of the dense weights
    apart = np.abs(om) > 1e-9
    chi = float(np.sum(wS[apart] / om[apart]))
    assert ds.inverse_moment[names.index("chi"), 0, 0] == pytest.approx(chi, rel=1e-9, abs=1e-12)
