"""Fixed points read off the level flow: candidate spectra from the run's own chain.

For every iteration N the lowest levels of the run (energies in units of ω_N
from the ground state, charge Q from half filling, 2S, degeneracy) are
compared with the finite-size spectra of the candidate fixed points of the
model (Wilson 1975; Krishna-murthy, Wilkins & Wilson 1980), each computed
independently of the NRG engine from the same Wilson chain:

* ``free-orbital``: chain sites 0..N free, the impurity orbital decoupled
  with its four states (empty, spin-½ doublet, doubly occupied) degenerate;
* ``valence-fluctuation``: as free-orbital with only two valence states
  (empty + doublet, or doublet + doubly occupied) degenerate;
* ``local-moment``: free spin S times the chain 0..N (a marginal potential
  scattering on site 0 is fitted);
* Fermi liquids: chain 0..N with a potential scattering V on site 0 and the
  impurity absorbed (its charge offset q = ±1).  The phase shift at the
  Fermi level is tan δ₀ = −π ρ₀ V (ρ₀ the effective density of states of
  site 0 at ε = 0, given by the caller: for Wilson's scheme the discretized
  hybridization is g/A_Λ, and ρ₀ must include that factor), and the total phase shift per spin is δ/π = δ₀/π + (q + 1)/2, the
  Friedel sum rule's displaced charge per spin (Langreth 1966).  Labelled
  ``strong-coupling`` for |δ/π − ½| ≤ 0.1 (δ = π/2 is the chain with site 0
  removed), ``frozen-impurity`` for δ/π ≤ 0.1 or ≥ 0.9 and ``fermi-liquid``
  in between;
* ``underscreened``: a residual spin S − ½ times the strong-coupling chain
  (Nozières & Blandin 1980);
* two channels: ``local-moment`` (two free chains and the spin),
  ``strong-coupling`` in one channel (its chain without site 0, the other
  free, no spin) and the non-Fermi-liquid ``two-channel`` fixed point.  The
  latter has no free-fermion form; its levels are the conformal-field-theory
  prediction of Affleck & Ludwig (1991) (fusion of the free spectrum with a
  spin ½ in the SU(2)₂ spin sector, worked out here from memory): relative
  energies 0, 1/8, 1/2, 5/8, 1 in units of πv_F/ℓ with the multiplets
  listed in :data:`TWO_CHANNEL_LEVELS`.  The conformal unit in ω_N is not
  known for a logarithmic discretization, so it is fixed by the lowest
  (Q = ±1, S = 0) level (the 1/8 level) and the rest of the pattern is
  compared, with its own tolerance.  (Measured at Λ = 3: the run's levels sit
  at 0.202, 0.804, 1.01, 1.62 ω_N, within 0.5 % of 1/8 : 1/2 : 5/8 : 1.)
  With per-channel charges the strong-coupling candidates also tell which
  channel screens the spin.

Comparison: levels are paired by rank within each (Q, S) sector (Q, 2S_z in
the abelian mode) over the lowest ``n_compare`` run levels; the mismatch is
the RMS energy difference in ω_N, a level without partner costing 1 ω_N.  A
local moment (and the underscreened fixed point) is approached only
logarithmically because the exchange is marginal: its degenerate groups are
split at first order without moving their centroids, so these candidates are
compared by group centroids, with 1.5 times the tolerance.  An iteration is
labelled with the candidate of smallest mismatch relative to its tolerance,
or left as a crossover ("") when none is within it.

Free-fermion candidate spectra: the single-particle levels of the chain piece
are computed by adding one site at a time in units of ω_n (an arrowhead
eigenproblem per site; levels far above |η| = 10⁴ are dropped as always filled
or empty), so that levels of order ω_N stay accurate although the chain
spans Λ^{N/2} in energy.  The many-body levels are all fillings within an
energy window, with (Q, 2S) from the counts of 2S_z.

Everything here is a pure function of arrays (energies in units of D for
the chain, ω_N for levels).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.optimize as sopt

__all__ = ["TWO_CHANNEL_LEVELS", "LABELS", "FixedPointFlow", "single_particle_flow", "many_body_states",
           "multiplets", "chain_multiplets", "couple", "spectrum_mismatch", "identify_fixed_points", "fixed_point_sequence",
           "format_sequence", "fermi_liquid_label", "FixedPointSummary", "summarize_fixed_points"]

#: All labels that can appear (the empty string marks a crossover).
LABELS = ("free-orbital", "valence-fluctuation", "local-moment", "strong-coupling", "fermi-liquid",
          "frozen-impurity", "underscreened", "two-channel")

#: Two-channel spin-½ Kondo fixed point, levels up to one conformal unit above the ground state:
#: (energy in units of πv_F/ℓ, total charge Q, 2S, number of multiplets).  Affleck & Ludwig,
#: Nucl. Phys. B 360, 641 (1991) (from memory): x = Q²/8 + j_s(j_s+1)/4 + j_f(j_f+1)/4 + n for the
#: free primaries fused with spin ½ (0 → ½, ½ → 0 or 1, 1 → ½), minus the ground value 3/16.
TWO_CHANNEL_LEVELS = (
    (0.0, 0, 1, 1),
    (0.125, 1, 0, 2), (0.125, -1, 0, 2),
    (0.5, 0, 1, 3), (0.5, 2, 1, 1), (0.5, -2, 1, 1),
    (0.625, 1, 2, 2), (0.625, -1, 2, 2),
    (1.0, 0, 1, 5), (1.0, 0, 3, 1), (1.0, 2, 1, 3), (1.0, -2, 1, 3),
)

_CHANNEL_CODE = 1000   # two channels: a level's charge code is 1000 Q_1 + Q_2
_DROP = 1e4          # single-particle levels beyond ±_DROP ω_n are frozen
_TINY_AMPLITUDE = 1e-14    # site amplitudes of a level below this are set to zero (see single_particle_flow)
_E_WINDOW = 4.5      # many-body window above the ground state (units of ω_N)
_UNMATCHED = 1.0     # mismatch charged for a level without partner (units of ω_N)


# --------------------------------------------------------------------------- #
# single-particle levels

def single_particle_flow(onsite, hopping, scales, first: int, last: int, potential: float = 0.0):
    """Single-particle levels of the chain sites first..n, for every n ≤ last, in units of ω_n.

    Parameters
    ----------
    onsite : ndarray (M,)
        ε_n of the chain (units of D).
    hopping : ndarray (M−1,)
        t_n between sites n and n+1 (units of D).
    scales : ndarray (M,)
        ω_n of every chain index n (units of D).
    first, last : int
        Chain piece first..last; the potential acts on site ``first``.
    potential : float
        Extra on-site energy V on site ``first`` (units of D).

    Returns
    -------
    dict
        n -> (levels, frozen_filled, orbitals): the kept single-particle levels
        (sorted, units of ω_n), the number of dropped levels below the Fermi
        level (always filled) and the number of orbitals n − first + 1.
    """
    out = {}
    e = np.array([(onsite[first] + potential) / scales[first]])
    amp = np.array([1.0])
    filled = 0

    def drop(e, amp, filled):
        far = np.abs(e) > _DROP
        filled += int(np.count_nonzero(e[far] < 0))
        return e[~far], amp[~far], filled

    e, amp, filled = drop(e, amp, filled)
    out[first] = (e.copy(), filled, 1)
    for n in range(first + 1, last + 1):
        ratio = scales[n - 1] / scales[n]
        k = e.size
        H = np.zeros((k + 1, k + 1))
        H[np.arange(k), np.arange(k)] = ratio * e
        H[k, k] = onsite[n] / scales[n]
        H[:k, k] = H[k, :k] = hopping[n - 1] / scales[n] * amp
        e, U = np.linalg.eigh(H)
        amp = U[k, :]
        # amplitudes below 1e-14 change no level (the shift is ~ amp² ω_n ~ 1e-28 ω_n), but once LAPACK
        # meets their products in the subnormal range every later eigh gets ~300 times slower
        amp = np.where(np.abs(amp) < _TINY_AMPLITUDE, 0.0, amp)
        e, amp, filled = drop(e, amp, filled)
        out[n] = (e.copy(), filled, n - first + 1)
    return out


def _species_configs(levels, filled, orbitals, ecut):
    """All fillings of one spin species with excitation energy ≤ ecut: (E, q) with q = n − orbitals/2."""
    levels = np.asarray(levels, float)
    neg = levels < 0
    base = filled + int(np.count_nonzero(neg)) - 0.5 * orbitals
    cost = np.abs(levels)
    sign = np.where(neg, -1, 1)
    order = np.argsort(cost)
    cost, sign = cost[order], sign[order]
    Es, qs = [], []

    def rec(i, E, q):
        Es.append(E)
        qs.append(q)
        for j in range(i, cost.size):
            if E + cost[j] > ecut:
                break
            rec(j + 1, E + cost[j], q + sign[j])

    rec(0, 0.0, 0)
    return np.array(Es), np.array(qs) + base


def _combine(a, b, ecut):
    """Product of two state lists (E, Q, 2S_z) within the window ecut."""
    E = a[0][:, None] + b[0][None, :]
    m = E <= ecut + 1e-9
    Q = a[1][:, None] + b[1][None, :]
    S = a[2][:, None] + b[2][None, :]
    return E[m], Q[m], S[m]


def many_body_states(channels, impurity, ecut: float = _E_WINDOW):
    """Many-body states of free channels times impurity states, from their common ground.

    Parameters
    ----------
    channels : list of (levels, frozen_filled, orbitals)
        One entry per channel (both spin species alike), from :func:`single_particle_flow`.
    impurity : list of (Q, 2S_z)
        Degenerate impurity states at zero energy.
    ecut : float
        Window above the lowest state (units of ω_N).

    Returns
    -------
    E, Q, twice_sz : ndarray
        One entry per state; E from the lowest state, Q from half filling.
    """
    lists = []
    for levels, filled, orbitals in channels:
        E, q = _species_configs(levels, filled, orbitals, ecut)
        lists.append((E, q, q))          # spin up: 2S_z contribution +q
        lists.append((E, q, -q))         # spin down: −q
    imp = np.asarray(impurity, float).reshape(-1, 2)
    st = (np.zeros(len(imp)), imp[:, 0], imp[:, 1])
    for a in lists:
        st = _combine(st, a, ecut)
    E = st[0] - st[0].min()
    keep = E <= ecut
    return E[keep], np.rint(st[1][keep]).astype(int), np.rint(st[2][keep]).astype(int)


def multiplets(E, Q, twice_sz, tol: float = 1e-7):
    """Group states into SU(2) multiplets: returns (E, Q, 2S) sorted by energy.

    The number of multiplets with spin S in a degenerate (E, Q) group is
    n(2S_z = 2S) − n(2S_z = 2S + 2).
    """
    E = np.asarray(E, float)
    if E.size == 0:
        return np.zeros(0), np.zeros(0, int), np.zeros(0, int)
    key = np.rint(E / tol).astype(np.int64)
    rows, counts = np.unique(np.stack([key, np.asarray(Q, np.int64), np.asarray(twice_sz, np.int64)]),
                             axis=1, return_counts=True)
    have = {(int(k), int(q), int(m)): int(c) for (k, q, m), c in zip(rows.T, counts)}
    oE, oQ, oS = [], [], []
    for (k, q, m), c in have.items():
        if m < 0:
            continue
        n = c - have.get((k, q, m + 2), 0)
        if n > 0:
            oE += [k * tol] * n
            oQ += [q] * n
            oS += [m] * n
    order = np.lexsort((oS, oQ, oE))
    return np.asarray(oE)[order], np.asarray(oQ, int)[order], np.asarray(oS, int)[order]


def chain_multiplets(channel, ecut: float = _E_WINDOW):
    """Spinful multiplets (E, Q, 2S) of one free channel from its lowest state (units of ω_N).

    Parameters
    ----------
    channel : (levels, frozen_filled, orbitals)
        From :func:`single_particle_flow`.
    """
    return multiplets(*many_body_states([channel], [(0, 0)], ecut))


def couple(a, b, ecut: float = _E_WINDOW):
    """SU(2) product of two multiplet lists (E, Q, 2S): energies and charges add, spins couple."""
    E = np.add.outer(a[0], b[0]).ravel()
    Q = np.add.outer(a[1], b[1]).ravel()
    s1 = np.repeat(a[2], len(b[0]))
    s2 = np.tile(b[2], len(a[0]))
    m = E <= ecut + 1e-9
    E, Q, s1, s2 = E[m], Q[m], s1[m], s2[m]
    n = np.minimum(s1, s2) + 1                          # number of total spins per pair
    idx = np.repeat(np.arange(E.size), n)
    start = np.cumsum(n) - n
    k = np.arange(idx.size) - np.repeat(start, n)
    E, Q = E[idx], Q[idx]
    S = np.abs(s1 - s2)[idx] + 2 * k
    if E.size:
        E = E - E.min()
    order = np.lexsort((S, Q, E))
    return E[order], Q[order].astype(int), S[order].astype(int)


def _impurity(mults):
    """Zero-energy impurity multiplets [(Q, 2S), ...] as a multiplet list."""
    m = np.asarray(mults, int).reshape(-1, 2)
    return np.zeros(len(m)), m[:, 0], m[:, 1]


# --------------------------------------------------------------------------- #
# comparison

def _ranked(E, Q, S):
    """dict (Q, S) -> sorted energies."""
    out = {}
    for e, q, s in sorted(zip(np.asarray(E).tolist(), np.asarray(Q).tolist(), np.asarray(S).tolist())):
        out.setdefault((q, s), []).append(e)
    return out


def spectrum_mismatch(E, Q, S, cE, cQ, cS, n_compare: int = 12, margin: float = 0.3) -> float:
    """RMS difference (units of ω_N) between the lowest run levels and a candidate spectrum.

    Levels are paired by rank inside each (Q, S) sector.  The window is the
    energy of the ``n_compare``-th run level; a run level in it without a
    candidate partner, or a candidate level below the window minus ``margin``
    without a run partner, costs 1 ω_N.

    Parameters
    ----------
    E, Q, S : ndarray
        Run levels (energies from the ground state, charge, 2S or 2S_z).
    cE, cQ, cS : ndarray
        Candidate levels, same conventions.
    """
    return _mismatch(_run_levels(E, Q, S, n_compare), cE, cQ, cS, margin)


def _run_levels(E, Q, S, n_compare):
    """(window top, ranked run levels) of one iteration, or None if it holds no level."""
    E = np.asarray(E, float)
    ok = np.isfinite(E)
    if not np.any(ok):
        return None
    E, Q, S = E[ok], np.asarray(Q)[ok], np.asarray(S)[ok]
    top = float(np.sort(E)[min(n_compare, E.size) - 1])
    run = {k: (v, sum(1 for x in v if x <= top)) for k, v in _ranked(E, Q, S).items()}
    return top, run


def _mismatch(levels, cE, cQ, cS, margin=0.3):
    if levels is None or np.size(cE) == 0:
        return math.inf
    top, run = levels
    cE = np.asarray(cE, float)
    sel = cE <= top + 1.0
    cand = _ranked(cE[sel], np.asarray(cQ)[sel], np.asarray(cS)[sel])
    total, count = 0.0, 0
    for key in set(run) | set(cand):
        a, na = run.get(key, ((), 0))
        b = cand.get(key, ())
        nb = sum(1 for x in b if x <= top - margin)
        for i in range(max(na, nb)):
            d = min(abs(a[i] - b[i]), _UNMATCHED) if i < len(a) and i < len(b) else _UNMATCHED
            total += d * d
            count += 1
    return math.sqrt(total / count) if count else math.inf


def _centroid_mismatch(E, Q, S, abelian, top, cE, cQ, cS, margin=0.3):
    """Mismatch of degenerate-cluster centroids, for fixed points approached with a marginal exchange.

    A marginal exchange J S·s splits each degenerate (E, Q) cluster of the
    local-moment spectrum at first order without moving its centroid (S·s is
    traceless on the product of the impurity and a chain multiplet), so the
    run's states of each charge sector are assigned in energy order to the
    candidate clusters (counting 2S+1 states per multiplet) and the cluster
    centroids are compared, all measured from the centroid of the ground cluster.
    """
    E = np.asarray(E, float)
    ok = np.isfinite(E)
    E, Q, S = E[ok], np.asarray(Q)[ok], np.asarray(S)[ok]
    mult = np.ones(E.size, int) if abelian else S + 1
    cE, cQ, cS = np.asarray(cE, float), np.asarray(cQ), np.asarray(cS)
    cmult = np.ones(cE.size, int) if abelian else cS + 1
    pairs = []                                   # (candidate energy, run centroid or None, is ground)
    for q in sorted(set(Q.tolist()) | set(cQ[cE <= top].tolist())):
        sel = Q == q
        order = np.argsort(E[sel], kind="stable")
        states = np.repeat(E[sel][order], mult[sel][order])
        csel = cQ == q
        ce, cm = cE[csel], cmult[csel]
        keys = np.rint(ce / 1e-7).astype(np.int64)
        clusters = [(float(ce[keys == k][0]), int(cm[keys == k].sum())) for k in np.unique(keys)]
        pos = 0
        for e, n in clusters:
            if e > top + margin:
                break
            good = pos + n <= states.size
            if good or e <= top - margin:       # near the window edge only complete clusters count
                pairs.append((e, float(states[pos:pos + n].mean()) if good else None, e == 0.0))
            pos += n
        left = int(np.count_nonzero(states[pos:] <= top - margin)) if pos < states.size else 0
        pairs.extend([(math.inf, None, False)] * left)
    ground = [c for e, c, g in pairs if g and c is not None]
    if not ground:
        return math.inf
    c0 = float(np.mean(ground))
    errs = [_UNMATCHED if c is None else min(abs(c - c0 - e), _UNMATCHED) for e, c, g in pairs]
    return math.sqrt(sum(x * x for x in errs) / len(errs)) if errs else math.inf


def _expand(E, Q, S, abelian):
    """Multiplets -> the run's representation (abelian: one state per S_z)."""
    if not abelian:
        return E, Q, S
    rows = [(e, q, m) for e, q, s in zip(E, Q, S) for m in range(-s, s + 1, 2)]
    return (np.array([r[0] for r in rows]), np.array([r[1] for r in rows], int),
            np.array([r[2] for r in rows], int))


# --------------------------------------------------------------------------- #
# candidates

@dataclass(frozen=True)
class _Candidate:
    label: str
    chains: tuple            # per channel: first chain site (0 or 1)
    impurity: tuple          # zero-energy impurity multiplets (Q, 2S)
    fit_potential: bool = False          # fit a potential on site 0 of channel 0
    charge_offset: int | None = None     # Fermi liquid: absorbed charge q, for the total phase shift


def _candidates(twice_spin: int, n_channels: int, charged: bool):
    c = []
    if n_channels == 2:
        c.append(_Candidate("local-moment", (0, 0), ((0, twice_spin),)))
        c.append(_Candidate("strong-coupling", (1, 0), ((0, 0),)))      # channel 1 screens the spin
        c.append(_Candidate("strong-coupling", (0, 1), ((0, 0),)))      # channel 2 screens the spin
        return c
    if charged:
        c.append(_Candidate("free-orbital", (0,), ((-1, 0), (0, 1), (1, 0)), True))
        c.append(_Candidate("valence-fluctuation", (0,), ((-1, 0), (0, 1)), True))
        c.append(_Candidate("valence-fluctuation", (0,), ((1, 0), (0, 1)), True))
    c.append(_Candidate("local-moment", (0,), ((0, twice_spin),), True))
    for q in (-1, 1):
        if twice_spin == 1 or charged:
            c.append(_Candidate("fermi-liquid", (0,), ((q, 0),), True, q))
        else:
            c.append(_Candidate("underscreened", (0,), ((q, twice_spin - 1),), True, q))
    return c


def fermi_liquid_label(phase_shift: float) -> str:
    """Name of a Fermi-liquid fixed point from its total phase shift per spin δ/π.

    ``strong-coupling`` for |δ/π − ½| ≤ 0.1, ``frozen-impurity`` for δ/π ≤ 0.1 or
    ≥ 0.9, ``fermi-liquid`` (a generic phase-shifted Fermi liquid) in between.
    """
    if abs(phase_shift - 0.5) <= 0.1:
        return "strong-coupling"
    if phase_shift <= 0.1 or phase_shift >= 0.9:
        return "frozen-impurity"
    return "fermi-liquid"


@dataclass(frozen=True)
class FixedPointFlow:
    """Fixed point of every iteration.

    Attributes
    ----------
    iteration : ndarray (I,)
        Chain index N.
    label : list of str (I,)
        Best candidate, or "" where none matches within the tolerance (a crossover).
    error : ndarray (I,)
        RMS level mismatch of the best candidate (units of ω_N).
    phase_shift : ndarray (I,)
        Total phase shift per spin δ/π where the best candidate is a Fermi liquid
        (or the underscreened fixed point) and the bath has a finite density of
        states at the Fermi level; NaN otherwise.
    candidates : dict
        label -> ndarray (I,): the smallest mismatch of each candidate kind.
    screening_channel : ndarray (I,)
        Two channels with channel charges: the channel (1 or 2) of the best
        strong-coupling candidate; 0 otherwise.
    """

    iteration: np.ndarray
    label: list
    error: np.ndarray
    phase_shift: np.ndarray
    candidates: dict = field(default_factory=dict)
    screening_channel: np.ndarray | None = None


def _theta_potential(theta, rho0, scale):
    """Site-0 potential V (D) for the angle θ = δ₀: tan δ₀ = −π ρ₀ V (ρ₀ = 0: V = −tan θ · scale)."""
    t = math.tan(theta)
    return -t / (math.pi * rho0) if rho0 > 0 else -t * scale


def _two_channel_mismatch(E, Q, S, abelian, n_compare):
    """Mismatch against the conformal two-channel levels, in units fixed by the lowest Q = ±1, S = 0 level."""
    lev = [(e, q, s) for e, q, s, n in TWO_CHANNEL_LEVELS for _ in range(n)]
    cE0 = np.array([r[0] for r in lev])
    cQ = np.array([r[1] for r in lev])
    cS = np.array([r[2] for r in lev])
    ok = np.isfinite(E)
    sel = ok & (np.abs(Q) == 1) & (S == 0)
    if not np.any(sel):
        return math.inf
    unit = float(np.min(E[sel])) / 0.125
    if unit < 0.4:            # the 1/8 level must be a real gap (≥ 0.05 ω_N), not a degeneracy
        return math.inf
    a, b, c = _expand(cE0 * unit, cQ, cS, abelian)
    nn = int(np.count_nonzero(np.asarray(E)[ok] < unit * 1.05))
    if nn < 8:
        return math.inf
    return spectrum_mismatch(E, Q, S, a, b, c, min(n_compare, nn)) / unit


#: A local moment is approached only logarithmically (the exchange is marginal; Wilson 1975), so its
#: levels keep a splitting of order ρJ over many iterations: it gets this multiple of the tolerance.
LOCAL_MOMENT_SLACK = 1.5
_MARGINAL = ("local-moment", "underscreened")


def _tolerance(label, tolerance, two_channel_tolerance):
    if label == "two-channel":
        return two_channel_tolerance
    if label in ("local-moment", "underscreened"):
        return LOCAL_MOMENT_SLACK * tolerance
    return tolerance


def identify_fixed_points(iteration, energy, charge, twice_spin, onsite, hopping, scales, *,
                          charged: bool, twice_impurity_spin: int = 1, n_channels: int = 1,
                          abelian: bool = False, rho0: float = 0.0, particle_hole_symmetric: bool = False,
                          tolerance: float = 0.06, two_channel_tolerance: float = 0.1, n_compare: int = 12,
                          channel_charge=None) -> FixedPointFlow:
    """Label every iteration of a flow with the best-matching fixed point.

    Parameters
    ----------
    iteration : ndarray (I,)
        Chain index N of each stored iteration.
    energy, charge, twice_spin : ndarray (I, L)
        Lowest levels per iteration (units of ω_N from the ground state; Q from
        half filling; 2S in su2 mode, 2S_z in abelian mode); NaN energies are ignored.
    onsite, hopping : ndarray (M,), (M−1,)
        The run's chain (units of D), the same for every channel.
    scales : ndarray (M,)
        ω_n for every chain index n (units of D).
    charged : bool
        The impurity is an orbital (Anderson model) rather than a spin (Kondo models).
    twice_impurity_spin : int
        2S of a Kondo impurity (1 for the Anderson model).
    n_channels : int
        1 or 2.
    abelian : bool
        Levels are (Q, 2S_z) states rather than SU(2) multiplets.
    rho0 : float
        Density of states of chain site 0 at the Fermi level (1/D), which fixes
        the phase shift of a site-0 potential; 0 for a pseudogap (no phase
        shift is then reported).
    particle_hole_symmetric : bool
        The model is particle-hole symmetric: the site-0 potential is then only
        0 or infinite (phase shift 0 or π/2) instead of being fitted.
    tolerance : float
        Largest RMS mismatch (units of ω_N) for a free-fermion candidate to count.
    two_channel_tolerance : float
        Largest RMS mismatch for the conformal two-channel candidate, in units
        of the fitted conformal energy unit.
    n_compare : int
        Number of lowest run levels compared (multiplets; twice as many
        states in abelian mode).
    channel_charge : ndarray (I, L, 2), optional
        Charge of each channel of each level (two channels): then the
        strong-coupling candidates tell which channel screens the spin.

    Returns
    -------
    FixedPointFlow
    """
    iteration = np.asarray(iteration, int)
    energy = np.asarray(energy, float)
    charge = np.asarray(charge)
    twice_spin = np.asarray(twice_spin)
    weights = (1,) * n_channels               # charge code of a level: Σ_k weight_k Q_k
    total_charge = charge
    if channel_charge is not None and n_channels == 2:
        weights = (_CHANNEL_CODE, 1)
        channel_charge = np.asarray(channel_charge, int)
        charge = channel_charge[..., 0] * _CHANNEL_CODE + channel_charge[..., 1]
    screening = np.zeros(iteration.size, int)
    if abelian:
        n_compare = 2 * n_compare
    n_compare = max(1, min(n_compare, energy.shape[1] if energy.ndim == 2 else 0))   # run.flow_levels may be small
    cands = _candidates(twice_impurity_spin, n_channels, charged)
    I = iteration.size
    last = int(iteration.max()) if I else 0
    scale0 = float(np.max(np.abs(hopping))) if np.size(hopping) else 1.0
    free = {0: single_particle_flow(onsite, hopping, scales, 0, max(last, 0)),
            1: single_particle_flow(onsite, hopping, scales, 1, last) if last >= 1 else {}}
    if particle_hole_symmetric:
        grid = np.array([0.0, 0.5 * math.pi - 1e-7])
    else:
        grid = np.linspace(-0.5 * math.pi, 0.5 * math.pi, 97)[1:]
        grid[-1] = 0.5 * math.pi - 1e-7
    coarse = list(range(0, grid.size, 8)) if grid.size > 8 else list(range(grid.size))
    hint: dict = {}            # (candidate, parity) -> best grid index two iterations before
    flows: dict = {}                          # grid index -> single-particle flow, computed when first needed

    def flow_at(j):
        if j not in flows:
            flows[j] = single_particle_flow(onsite, hopping, scales, 0, max(last, 0),
                                            _theta_potential(grid[j], rho0, scale0))
        return flows[j]
    kinds = {c.label for c in cands} | ({"two-channel"} if n_channels == 2 else set())
    if any(c.label == "fermi-liquid" for c in cands):
        kinds |= {"strong-coupling", "frozen-impurity"}
    per = {k: np.full(I, np.inf) for k in sorted(kinds)}
    fl_err = np.full(I, np.inf)
    fl_shift = np.full(I, np.nan)

    for i, N in enumerate(iteration.tolist()):
        ok = np.isfinite(energy[i])
        if int(ok.sum()) < n_compare or N < 0:      # too few levels to tell fixed points apart
            continue
        En, Qn, Sn = energy[i], charge[i], twice_spin[i]
        levels = _run_levels(En, Qn, Sn, n_compare)
        top = levels[0]
        ecut = top + 1.0
        cache = {}

        def chain_part(key, channel, weight=1):
            if (key, weight) not in cache:
                e, q, sp = chain_multiplets(channel, ecut)
                cache[(key, weight)] = (e, q * weight, sp)
            return cache[(key, weight)]

        def error(c, ch0, key0):
            parts = []
            for k, f in enumerate(c.chains):
                if f > N:
                    return math.inf
                if k == 0 and c.fit_potential:
                    parts.append(chain_part(key0, ch0))
                else:
                    parts.append(chain_part(("free", f), free[f][N], weights[k]))
            m = _impurity(c.impurity)
            for p in parts:
                m = couple(m, p, ecut)
            cand = _expand(*m, abelian)
            if c.label in _MARGINAL:
                return _centroid_mismatch(En, Qn, Sn, abelian, levels[0], *cand)
            return _mismatch(levels, *cand)

        for c in cands:
            if not c.fit_potential:
                err = error(c, None, None)
                if c.label == "strong-coupling" and n_channels == 2 and err < per[c.label][i]:
                    screening[i] = c.chains.index(1) + 1
                per[c.label][i] = min(per[c.label][i], err)
                continue
            known = {}

            def at(j):
                if j not in known:
                    known[j] = error(c, flow_at(j)[N], ("grid", j))
                return known[j]
            h = hint.get((id(c), N % 2))
            if h is None or grid.size <= 8:
                j = min(coarse, key=at)
            else:
                j = h
            if at(j) < 5 * tolerance:             # walk downhill on the fine grid unless hopeless
                for _ in range(grid.size):
                    jn = min((k for k in range(j - 2, j + 3) if 0 <= k < grid.size), key=at)
                    if jn == j:
                        break
                    j = jn
            best_th, best = float(grid[j]), float(known[j])
            hint[(id(c), N % 2)] = j if best < 3 * tolerance else None
            refine = c.charge_offset is not None and i >= I - 2 and not particle_hole_symmetric
            if refine and np.isfinite(best) and best < 3 * tolerance:
                lo, hi = float(grid[max(j - 1, 0)]), float(grid[min(j + 1, grid.size - 1)])

                def f(th):
                    sp = single_particle_flow(onsite, hopping, scales, 0, N, _theta_potential(th, rho0, scale0))
                    return error(c, sp[N], ("fit", th))
                r = sopt.minimize_scalar(f, bounds=(lo, hi), method="bounded", options={"xatol": 1e-5})
                if r.fun < best:
                    best_th, best = float(r.x), float(r.fun)
            label = c.label
            if c.charge_offset is not None:
                delta = best_th / math.pi + 0.5 * (c.charge_offset + 1)
                if c.label == "fermi-liquid":
                    label = fermi_liquid_label(delta)
                if best < fl_err[i]:
                    fl_err[i], fl_shift[i] = best, delta
            per[label][i] = min(per[label][i], best)
        if n_channels == 2:
            per["two-channel"][i] = _two_channel_mismatch(En, total_charge[i], Sn, abelian, n_compare)
    labels, errors = [], np.full(I, np.inf)
    shift = np.full(I, np.nan)
    for i in range(I):
        scores = [(per[k][i] / _tolerance(k, tolerance, two_channel_tolerance), per[k][i], k) for k in per]
        ratio, e, k = min(scores) if scores else (math.inf, math.inf, "")
        errors[i] = e
        if ratio <= 1.0:
            labels.append(k)
            if k in ("strong-coupling", "fermi-liquid", "frozen-impurity", "underscreened") and rho0 > 0:
                shift[i] = fl_shift[i]
        else:
            labels.append("")
    if channel_charge is None:
        screening[:] = 0                      # without channel charges the two channels look alike
    return FixedPointFlow(iteration=iteration, label=labels, error=errors, phase_shift=shift, candidates=per,
                          screening_channel=screening)


# --------------------------------------------------------------------------- #
# sequence along the flow

def fixed_point_sequence(iteration, label, min_run: int = 3):
    """Consecutive stretches of one fixed point.

    Parameters
    ----------
    iteration : ndarray (I,)
    label : sequence of str (I,)
        "" for crossovers.
    min_run : int
        Shortest stretch (iterations) that counts; shorter ones are treated as crossover.

    Returns
    -------
    list of (label, first N, last N)
    """
    it = np.asarray(iteration, int)
    runs = []
    for i, lab in enumerate(label):
        lab = str(lab)
        if runs and runs[-1][0] == lab:
            runs[-1][2] = int(it[i])
            runs[-1][3] += 1
        else:
            runs.append([lab, int(it[i]), int(it[i]), 1])
    out = []
    for lab, a, b, n in runs:
        if not lab or n < min_run:
            continue
        if out and out[-1][0] == lab:
            out[-1] = (lab, out[-1][1], b)
        else:
            out.append((lab, a, b))
    return out


def format_sequence(seq, first: int | None = None, last: int | None = None, phase_shift: float = math.nan) -> str:
    """Text such as ``free-orbital (N ≤ 8) → local-moment (14–30) → strong-coupling (N ≥ 42)``."""
    parts = []
    for k, (lab, a, b) in enumerate(seq):
        if first is not None and a <= first:
            rng = f"N ≤ {b}"
        elif last is not None and b >= last:
            rng = f"N ≥ {a}"
        else:
            rng = f"{a}–{b}"
        extra = ""
        if k == len(seq) - 1 and math.isfinite(phase_shift) and lab in (
                "strong-coupling", "fermi-liquid", "frozen-impurity", "underscreened"):
            extra = f", δ = {phase_shift:.3f}π"
        parts.append(f"{lab} ({rng}{extra})")
    return " → ".join(parts) if parts else "no fixed point identified"


@dataclass(frozen=True)
class FixedPointSummary:
    """The fixed points a run passes through.

    Attributes
    ----------
    sequence : tuple of (str, int, int)
        (label, first N, last N) of every stretch, in order of decreasing energy.
    crossover_temperatures : tuple of float
        T between consecutive stretches (units of D): the geometric mean of
        T_N = ω_N/β̄ at the last iteration of one stretch and the first of the next.
    phase_shift : float
        Total phase shift per spin δ/π of a final Fermi-liquid (or underscreened)
        fixed point, from its last iterations; NaN otherwise.
    first_iteration, last_iteration : int
        The iterations of the flow (for "N ≤ …" and "N ≥ …" in the text).
    screening_channel : int
        Two channels: the channel (1 or 2) that screens the spin at a final
        strong-coupling fixed point; 0 otherwise or when unknown.
    """

    sequence: tuple
    crossover_temperatures: tuple
    phase_shift: float
    first_iteration: int
    last_iteration: int
    screening_channel: int = 0

    @property
    def final(self) -> str:
        """Label of the last fixed point, "" when none was identified or the flow ends in a crossover."""
        if not self.sequence:
            return ""
        lab, _, b = self.sequence[-1]
        return lab if b >= self.last_iteration - 2 else ""

    def text(self) -> str:
        """e.g. ``free-orbital (N ≤ 8) → local-moment (14–30) → strong-coupling (N ≥ 42)``."""
        text = format_sequence(self.sequence, self.first_iteration, self.last_iteration, self.phase_shift)
        if self.screening_channel:
            text += f" [channel {self.screening_channel} screens the spin]"
        return text


def summarize_fixed_points(flow: FixedPointFlow, temperatures, min_run: int = 3) -> FixedPointSummary:
    """Sequence of fixed points, crossover temperatures and final phase shift of a labelled flow.

    Parameters
    ----------
    flow : FixedPointFlow
    temperatures : ndarray (I,)
        T_N = ω_N/β̄ of every iteration (units of D).
    min_run : int
        Shortest stretch (iterations) that counts as a fixed point.
    """
    T = np.asarray(temperatures, float)
    it = np.asarray(flow.iteration, int)
    seq = fixed_point_sequence(it, flow.label, min_run)
    pos = {int(n): i for i, n in enumerate(it)}
    cross = tuple(float(math.sqrt(T[pos[a[2]]] * T[pos[b[1]]])) for a, b in zip(seq[:-1], seq[1:]))
    shift = math.nan
    if seq and seq[-1][2] >= it[-1] - 2:
        tail = np.asarray(flow.phase_shift, float)[-2:]
        tail = tail[np.isfinite(tail)]
        if tail.size:
            shift = float(tail.mean())
    compared = np.flatnonzero(np.isfinite(np.asarray(flow.error, float)))
    channel = 0
    if seq and seq[-1][0] == "strong-coupling" and flow.screening_channel is not None:
        channel = int(np.asarray(flow.screening_channel)[-1])
    return FixedPointSummary(sequence=tuple(seq), crossover_temperatures=cross, phase_shift=shift,
                             first_iteration=int(it[compared[0]]) if compared.size else 0,
                             last_iteration=int(it[-1]) if it.size else 0,
                             screening_channel=channel if seq and seq[-1][2] >= it[-1] - 2 else 0)
