"""Run the engine on Wilson's closed-form flat-band chain (independent of nrgsolve.chain)."""

import numpy as np

from nrgsolve.engine import make_symmetry, run_chain, EngineSettings
from nrgsolve.engine.iterate import Step
from nrgsolve.models import kondo_block, anderson_block

from conftest import wilson_hopping, omega


def closed_chain(n_sites, Lam):
    return np.zeros(n_sites), wilson_hopping(np.arange(n_sites - 1), Lam)


def run_kondo(rhoJ, N, kept, symmetry="su2", Lam=2.0, rhoK=0.0, twice_spin=1, field=0.0, ph=False, **kw):
    onsite, hop = closed_chain(N + 1, Lam)
    sym = make_symmetry(symmetry)
    blk = kondo_block(2 * rhoJ, 2 * rhoK, twice_spin, field, onsite[0])
    steps = [Step(n, (onsite[n],), (hop[n - 1],), omega(n, Lam)) for n in range(1, N + 1)]
    st = EngineSettings(kept_states=kept, particle_hole_symmetric=ph, **kw)
    return run_chain(sym.from_explicit(blk), 0, omega(0, Lam), sym, steps, st), onsite, hop


def run_anderson(eps_d, U, Gamma, N, kept, symmetry="su2", Lam=2.0, field=0.0, ph=False, **kw):
    onsite, hop = closed_chain(N + 1, Lam)
    V = np.sqrt(2 * Gamma / np.pi)
    sym = make_symmetry(symmetry)
    blk = anderson_block(eps_d, U, V, field)
    steps = [Step(n, (onsite[n],), ((V if n == 0 else hop[n - 1]),), omega(n, Lam)) for n in range(0, N + 1)]
    st = EngineSettings(kept_states=kept, particle_hole_symmetric=ph, **kw)
    return run_chain(sym.from_explicit(blk), -1, omega(-1, Lam), sym, steps, st), onsite, hop, V
