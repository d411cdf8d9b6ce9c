"""The driver: a validated RunSpec in, a RunResult out (chains, flow, thermodynamics, Kondo scale).

This is the thin layer between the numerics and the user's side (PySCF's
kernel/driver split): it builds the bath and one chain per twist, sets up the
impurity model, runs the engine kernel for each twist (in parallel
processes), computes the observables and averages over the twists.
It knows nothing about files or plots.

The energy unit ω_N of each iteration is defined beside the chain
(:func:`nrgsolve.chain.energy_scale`); what a model needs is read from its
declaration in the model registry (:mod:`nrgsolve.models`).
"""

from __future__ import annotations

import math
import os
import time
from dataclasses import dataclass, field, replace

import numpy as np

from .config import RunSpec, resolve_table_path
from .bath import make_bath, read_table
from .discretize import twists as twist_values
from .chain import build_chain, energy_scale, sites_needed
from .engine import make_symmetry, run_chain, EngineSettings
from .engine.iterate import chain_steps
from .models import bare_chain_block, ChainContact
from .finite import check_finite_result
from .health import run_warnings
from .observables import (impurity_thermodynamics, average_twists, kondo_summary, flow_spectrum,
                          ThermoCurve, KondoSummary, FlowSpectrum)
from .observables.thermo_fdm import impurity_thermodynamics_fdm, default_temperatures

__all__ = ["TwistResult", "RunResult", "solve_twist", "solve", "bath_from_spec", "is_particle_hole_symmetric",
           "model_contact"]


@dataclass(frozen=True)
class TwistResult:
    """Results of one twist z: its chain (units of D), flow spectrum and impurity thermodynamics."""

    z: float
    onsite: np.ndarray
    hopping: np.ndarray
    coupling_sq: float
    flow: FlowSpectrum
    thermo: ThermoCurve
    diag_seconds: float
    total_seconds: float
    spectral: object = None          # DiscreteSpectrum of the d level when [spectral] asks for it


@dataclass(frozen=True)
class RunResult:
    """A whole run: per-twist results, z-averaged thermodynamics and the summary."""

    spec: RunSpec
    twists: list
    thermo: ThermoCurve
    summary: KondoSummary
    wall_seconds: float
    warnings: list = field(default_factory=list)
    spectral: object = None          # SpectralCurves (z-averaged) when [spectral] asks for it
    transport: object = None         # ConductanceCurve when spectral.conductance_temperatures is given
    alloy_transport: object = None   # AlloyTransport when spectral.transport_temperatures is given
    uncertainties: dict = field(default_factory=dict)   # headline name -> uncertainty (run.error_estimate)
    checks: tuple = ()               # descriptions of the checking runs behind the uncertainties
    fixed_points: object = None      # (FixedPointFlow, FixedPointSummary) of the twist z = 1


#: Full-density-matrix thermodynamics: the chain runs until ω_N is this factor below the lowest
#: temperature asked for, so that the last shell's level spacing is far below every temperature.
FDM_SCALE_MARGIN = 10.0


def run_temperatures(spec: RunSpec, half_bandwidth: float | None = None) -> np.ndarray:
    """Temperatures (units of D, ascending) of full-density-matrix thermodynamics: ``run.temperatures``,
    or from ``run.lowest_temperature`` up to the half-bandwidth, 10 per decade."""
    if spec.run.temperatures:
        return np.array(sorted(spec.run.temperatures), dtype=float)
    D = spec.bath.half_bandwidth if half_bandwidth is None else half_bandwidth
    return default_temperatures(spec.run.lowest_temperature, D)


def chain_sites(spec: RunSpec, z: float, half_bandwidth: float) -> int:
    """Chain sites 0..N+1 of twist z: far enough for the lowest temperature the run must reach."""
    d, r = spec.discretization, spec.run
    if r.thermodynamics == "full-density-matrix":
        low = min(r.lowest_temperature, float(run_temperatures(spec, half_bandwidth)[0]))
        return sites_needed(low, d.Lambda, z, 1.0 / FDM_SCALE_MARGIN, half_bandwidth, d.scheme)
    return sites_needed(r.lowest_temperature, d.Lambda, z, r.beta_bar, half_bandwidth, d.scheme)


def bath_from_spec(spec: RunSpec):
    """The Bath object of a spec (reads the table file if there is one)."""
    b = spec.bath
    if b.shape == "table" and isinstance(b.table, tuple):
        return make_bath("table", table=b.table)
    if b.shape == "table":
        return read_table(resolve_table_path(spec))
    return make_bath(b.shape, half_bandwidth=b.half_bandwidth, exponent=b.exponent)


def is_particle_hole_symmetric(spec: RunSpec, bath) -> bool:
    """True when the model is particle-hole symmetric: symmetric bath, no field, and the model's own
    test (ε_d = −U/2; no potential scattering)."""
    imp = spec.impurity
    if not bath.is_particle_hole_symmetric() or imp.field != 0.0:
        return False
    return bool(imp.declaration.particle_hole_symmetric(imp))


def model_contact(chain, bath) -> ChainContact:
    """What the model needs of a chain: ε_0, V_0²/Γ, the coupling correction A_Λ (or 1) and ρ = 1/(2D)."""
    D = bath.half_bandwidth
    plain = bath.integral(-D, D) / math.pi          # (1/π)∫ g dε without correction
    return ChainContact(onsite0=float(chain.onsite[0]), coupling_sq=float(chain.coupling_sq),
                        correction=float(chain.coupling_sq) / plain, density=1.0 / (2.0 * D))


def solve_twist(spec: RunSpec, z: float, progress=None, bath=None) -> TwistResult:
    """Run the engine and the observables for one twist z, with ``run.blas_threads`` BLAS threads.

    See :func:`_solve_twist` for the parameters.
    """
    from threadpoolctl import threadpool_limits
    with threadpool_limits(limits=spec.run.blas_threads):
        return _solve_twist(spec, z, progress, bath)


def _solve_twist(spec: RunSpec, z: float, progress=None, bath=None) -> TwistResult:
    """Run the engine and the observables for one twist z.

    Parameters
    ----------
    spec : RunSpec
    z : float
        Twist in (0, 1].
    progress : callable, optional
        Called with the iteration index after each iteration.
    bath : Bath, optional
        Pre-built bath (default: from the spec).
    """
    t0 = time.perf_counter()
    bath = bath_from_spec(spec) if bath is None else bath
    d, r = spec.discretization, spec.run
    D = bath.half_bandwidth
    fdm = r.thermodynamics == "full-density-matrix"
    n_sites = chain_sites(spec, z, D)
    chain = build_chain(bath, d.Lambda, z, n_sites, scheme=d.scheme,
                        wilson_correction=d.corrects_coupling)
    decl = spec.impurity.declaration
    block = decl.build(spec.impurity, model_contact(chain, bath))
    n_channels = decl.channels(spec.impurity)
    sym = make_symmetry(r.symmetry, n_channels)
    initial = sym.from_explicit(block)
    onsite = np.zeros_like(chain.onsite) if sym.particle_hole_only else chain.onsite   # exactly symmetric chain
    first = block.first_site

    def scale(n):
        return energy_scale(n, d.Lambda, z, D, d.scheme)

    first_hop = [block.first_hopping[k] for k in range(n_channels)] if first == 0 else None
    steps = chain_steps(onsite, chain.hopping, scale, first, n_sites, n_channels, first_hop)
    settings = EngineSettings(kept_states=r.kept_states, energy_cutoff=r.energy_cutoff, beta_bar=r.beta_bar,
                              flow_levels=r.flow_levels,
                              particle_hole_symmetric=is_particle_hole_symmetric(spec, bath))
    spectral = None
    if _spectral_wanted(spec):
        from .engine.backward import spectral_run
        from .observables.dynamics import backward_operators
        sp = spec.spectral
        ops, corr = backward_operators(sym, block, sp.quantities_for(decl.impurity_level), decl.impurity_level,
                                       sp.self_energy, onsite0=float(chain.onsite[0]))
        res, spectral = spectral_run(initial, first - 1, scale(first - 1), sym, steps, settings, ops,
                                     _spectral_temperatures(sp), corr, memory_budget=sp.memory_budget * 1e9,
                                     progress=progress)
    else:
        res = run_chain(initial, first - 1, scale(first - 1), sym, steps, settings, progress)
    bath_records = None
    diag = res.diag_seconds
    if r.bath_reference == "nrg":
        bare = sym.from_explicit(bare_chain_block(float(onsite[0]), n_channels))
        # the bath run starts at site 1 with the chain's own hopping t_0
        bsteps = chain_steps(onsite, chain.hopping, scale, 1, n_sites, n_channels)
        # full density matrix: the bath run discards above the impurity run's truncation energy of each
        # iteration, so that both runs drop the same part of the spectrum and the method's errors cancel
        cutoffs = {rec.index: rec.truncation_energy for rec in res.records} if fdm else None
        bsettings = EngineSettings(kept_states=r.kept_states, energy_cutoff=r.energy_cutoff, beta_bar=r.beta_bar,
                                   flow_levels=r.flow_levels, particle_hole_symmetric=bath.is_particle_hole_symmetric(),
                                   cutoffs=cutoffs)
        from .bath_cache import cached_bath_records
        parts = {"symmetry": sym.name, "channels": n_channels, "onsite0": float(onsite[0]),
                 "steps": [(st.index, list(np.ravel(st.onsite)), list(np.ravel(st.hopping)), st.scale) for st in bsteps],
                 "onsite": np.asarray(onsite, dtype=float), "hopping": np.asarray(chain.hopping, dtype=float)}
        bres = []

        def bath_run():
            bres.append(run_chain(bare, 0, scale(0), sym, bsteps, bsettings, None))
            return bres[0].records

        bath_records, _ = cached_bath_records(bath_run, parts, bsettings, use_cache=r.bath_cache)
        diag += bres[0].diag_seconds if bres else 0.0
    if fdm:
        thermo = impurity_thermodynamics_fdm(res.records, run_temperatures(spec, D), n_channels=n_channels,
                                             bath_records=bath_records,
                                             chain_onsite=chain.onsite, chain_hopping=chain.hopping)
    else:
        thermo = impurity_thermodynamics(res.records, chain.onsite, chain.hopping, r.beta_bar,
                                         n_channels=n_channels,
                                         bath_records=bath_records)
    flow = flow_spectrum(res.records, r.flow_levels)
    return TwistResult(z=z, onsite=np.asarray(chain.onsite), hopping=np.asarray(chain.hopping),
                       coupling_sq=float(chain.coupling_sq), flow=flow, thermo=thermo,
                       diag_seconds=diag, total_seconds=time.perf_counter() - t0, spectral=spectral)


def _spectral_wanted(spec: RunSpec) -> bool:
    sp = getattr(spec, "spectral", None)
    return sp is not None and sp.requested


def _spectral_temperatures(sp) -> tuple:
    """All temperatures of the backward pass: the spectral, conductance and transport ones, sorted."""
    return tuple(sorted(set(sp.temperatures or ()) | set(sp.conductance_temperatures or ())
                        | set(sp.transport_temperatures or ())))


def _broadening_wanted(spec: RunSpec, discrete) -> dict:
    """Which correlator is needed at which temperature of the backward pass: everything at the
    spectral temperatures, the d level at the conductance ones, the T-matrix at the transport ones."""
    from .observables.dynamics import QUANTITY_CORRELATORS
    sp = spec.spectral
    level = spec.impurity.declaration.impurity_level
    temps = list(discrete.temperatures)
    t_name = QUANTITY_CORRELATORS[("t-matrix", level)][0]
    out = {}
    for x in discrete.correlators:
        out[x] = [(T in (sp.temperatures or ())) or (x == "G" and T in (sp.conductance_temperatures or ()))
                  or (x == "F" and sp.self_energy and T in (sp.conductance_temperatures or ()))
                  or (x == t_name and T in (sp.transport_temperatures or ())) for T in temps]
    return out


def _spectral_outputs(spec: RunSpec, results, bath):
    """z-averaged spectra (with the improved estimate if asked for) and the conductance curve."""
    from .observables.spectral import average_spectra, hybridization_function, improved_spectral_function
    from .observables.transport import linear_conductance, ConductanceCurve, alloy_transport
    from .observables.dynamics import dynamics_curves, t_matrix_prefactor
    sp, imp = spec.spectral, spec.impurity
    decl = imp.declaration
    curves = average_spectra([t.spectral for t in results], sp.broadening, sp.points_per_decade,
                             corrected=sp.bias_correction, thermal_width=sp.thermal_width,
                             wanted=_broadening_wanted(spec, results[0].spectral))
    D = bath.half_bandwidth
    correction = results[0].coupling_sq / (bath.integral(-D, D) / math.pi)     # A_Λ or 1, as in model_contact
    t_factor = t_matrix_prefactor(decl.impurity_level, getattr(imp, "hybridization", 0.0) or 0.0,
                                  1.0 / (2.0 * D), correction)
    dyn = dynamics_curves(curves.correlators, curves.correlator_components, sp.quantities_for(decl.impurity_level),
                          decl.impurity_level, t_factor, curves.inverse_moments.get("chi"))
    curves = replace(curves, dynamics=dyn)
    alloy = None
    if sp.transport_temperatures:
        temps = np.asarray(sp.transport_temperatures, dtype=float)
        idx = [int(np.flatnonzero(curves.temperatures == T)[0]) for T in temps]
        alloy = alloy_transport(curves.omega, dyn.curves["t-matrix"][idx], temps, half_bandwidth=D)
    if sp.self_energy:
        delta = hybridization_function(bath, imp.hybridization, curves.omega)
        levels = [imp.epsilon_d] if len(curves.components) == 1 else [imp.epsilon_d - 0.5 * imp.field,
                                                                      imp.epsilon_d + 0.5 * imp.field]
        impr, sigma = improved_spectral_function(curves.omega, curves.spectral, curves.correlator_f, levels,
                                                 imp.U, delta)
        curves = replace(curves, improved=impr, self_energy=sigma)
    transport = None
    if sp.conductance_temperatures:
        temps = np.asarray(sp.conductance_temperatures, dtype=float)
        idx = [int(np.flatnonzero(curves.temperatures == T)[0]) for T in temps]
        gamma_w = imp.hybridization * bath.shape_function(curves.omega)
        g = linear_conductance(curves.omega, curves.best[idx], temps, gamma_w)
        transport = ConductanceCurve(temperature=temps, conductance=g)
    if sp.temperatures:
        keep = [int(np.flatnonzero(curves.temperatures == T)[0]) for T in sp.temperatures]
        sub = lambda a: None if a is None else a[keep]
        dyn = replace(dyn, curves={q: a[keep] for q, a in dyn.curves.items()},
                      static_susceptibility=sub(dyn.static_susceptibility))
        curves = replace(curves, temperatures=curves.temperatures[keep], spectral=sub(curves.spectral),
                         occupation=sub(curves.occupation), gaussian_widths=curves.gaussian_widths[keep],
                         correlator_f=sub(curves.correlator_f), improved=sub(curves.improved),
                         self_energy=sub(curves.self_energy), dynamics=dyn,
                         correlators={x: a[keep] for x, a in curves.correlators.items()},
                         inverse_moments={x: a[:, keep] for x, a in curves.inverse_moments.items()})
    else:
        curves = None
    return curves, transport, alloy


def _solve_twist_reporting(spec, z):
    from .workers import reporter
    return solve_twist(spec, z, reporter())


def n_iterations(spec: RunSpec, bath=None) -> int:
    """Total iterations of a run over all twists, with its checking runs (for progress bars)."""
    bath = bath_from_spec(spec) if bath is None else bath
    first = 0 if spec.impurity.declaration.impurity_level else 1
    specs = [spec]
    if spec.run.error_estimate:
        from .uncertainty import variant_specs
        specs += [v for _, v in variant_specs(spec)]
    return sum(chain_sites(s, z, bath.half_bandwidth) - first
               for s in specs for z in twist_values(s.discretization.twists))


def solve(spec: RunSpec, progress=None, workers: int | None = None) -> RunResult:
    """Run every twist (in parallel processes when workers > 1) and average; with
    ``run.error_estimate`` also the two checking runs of :mod:`nrgsolve.uncertainty`.

    Parameters
    ----------
    spec : RunSpec
    progress : callable, optional
        Called with the number of iterations just finished (for a progress bar).
    workers : int, optional
        Parallel processes (default: spec.run.workers; 0 means one per twist, at most the CPU count).

    Returns
    -------
    RunResult
    """
    t0 = time.perf_counter()
    from .symmetry_choice import with_resolved_symmetry
    spec = with_resolved_symmetry(spec, bath_from_spec(spec))       # "auto" -> the symmetry actually used
    main = _solve_once(spec, progress, workers)
    if not spec.run.error_estimate:
        return main
    from .uncertainty import variant_specs, uncertainties
    checks = variant_specs(spec)
    runs = [_solve_once(v, progress, workers) for _, v in checks]
    return replace(main, uncertainties=uncertainties(main, runs), checks=tuple(label for label, _ in checks),
                   wall_seconds=time.perf_counter() - t0)


def _solve_once(spec: RunSpec, progress=None, workers: int | None = None) -> RunResult:
    """One run of every twist, averaged (see :func:`solve`)."""
    t0 = time.perf_counter()
    bath = bath_from_spec(spec)   # validates the table before any process starts
    zs = [float(z) for z in twist_values(spec.discretization.twists)]
    if workers is None:
        workers = spec.run.workers
    if workers == 0:
        workers = min(len(zs), os.cpu_count() or 1)
    workers = max(1, min(workers, len(zs)))
    from .workers import can_spawn
    if workers > 1 and not can_spawn():      # e.g. a script piped into python: run the twists here
        workers = 1
    if workers == 1:
        cb = (lambda n: progress(1)) if progress is not None else None
        results = [solve_twist(spec, z, cb, bath) for z in zs]
    else:
        # every twist pins its own BLAS threads (run.blas_threads) inside solve_twist; the workers die with
        # this process and are stopped on Ctrl-C (nrgsolve.workers)
        from .workers import map_in_processes
        results = map_in_processes(_solve_twist_reporting, [(spec, z) for z in zs], workers, progress)
    thermo = average_twists([t.thermo for t in results])
    check_finite_result(thermo, [t.thermo for t in results], zs)      # NaN/inf never reach a result
    summary = kondo_summary(thermo.temperature, thermo.T_chi, thermo.heat)
    warnings = run_warnings(spec, max(float(np.max(t.flow.discarded_weight)) for t in results), thermo.temperature,
                            thermo.T_chi, summary.kondo_temperature_crossover,
                            [len(t.onsite) for t in results], [t.z for t in results])
    spectral, transport, alloy = (_spectral_outputs(spec, results, bath) if _spectral_wanted(spec)
                                  else (None, None, None))
    try:
        fixed = fixed_points_of_twist(spec, max(results, key=lambda t: t.z), bath)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:   # the labels must never cost the run
        fixed = None
        warnings.append(f"fixed-point analysis of the flow failed ({exc}); no fixed points stored")
    return RunResult(spec=spec, twists=results, thermo=thermo, summary=summary,
                     wall_seconds=time.perf_counter() - t0, warnings=warnings, spectral=spectral,
                     transport=transport, fixed_points=fixed, alloy_transport=alloy)


def fixed_points_of_twist(spec: RunSpec, twist: TwistResult, bath):
    """Label the flow of one twist with its fixed points (see :mod:`nrgsolve.observables.fixed_points`).

    The candidate spectra come from the twist's own chain.  ρ₀ = g(0)/(A · ∫g dε) is the
    effective density of states of chain site 0 at the Fermi level (1/D), with A = A_Λ for
    Wilson's scheme (whose discretized hybridization is g/A_Λ, whether or not the coupling is
    corrected) and 1 for the adaptive one; it converts a site-0 potential into a phase shift.

    Returns
    -------
    (FixedPointFlow, FixedPointSummary)
    """
    from .observables.fixed_points import identify_fixed_points, summarize_fixed_points
    d, imp, fl = spec.discretization, spec.impurity, twist.flow
    D = bath.half_bandwidth
    scales = np.array([energy_scale(n, d.Lambda, twist.z, D, d.scheme) for n in range(len(twist.onsite))])
    from .discretize import wilson_correction_factor
    A = wilson_correction_factor(d.Lambda) if d.scheme == "wilson" else 1.0
    rho0 = float(bath.shape_function(0.0)) / (A * bath.integral(-D, D))
    labelled = identify_fixed_points(
        fl.iteration, fl.energy, fl.charge, fl.twice_spin, twist.onsite, twist.hopping, scales,
        charged=imp.declaration.impurity_level, twice_impurity_spin=imp.declaration.twice_impurity_spin(imp),
        n_channels=imp.declaration.channels(imp), abelian=make_symmetry(spec.run.symmetry).resolves_sz,
        rho0=rho0, particle_hole_symmetric=is_particle_hole_symmetric(spec, bath),
        channel_charge=fl.channel_charge)
    temps = np.array([energy_scale(int(n), d.Lambda, twist.z, D, d.scheme) for n in fl.iteration]) / spec.run.beta_bar
    return labelled, summarize_fixed_points(labelled, temps)
