"""From a solver's raw Evolution to the one Result, and the front door `run`.

`assemble` adds what every method shares: the golden-rule reference rate, the fitted rate with
its fit and verdict, the trapped population, the shared warnings (perturbation parameter,
rotating-wave validity, norm drift, no fitted rate), the resolved parameters, library versions
and the run's statistics.
"""

from __future__ import annotations

import platform
from importlib import metadata

import numpy as np

from ..config.schema import Scenario
from ..physics.coherence import (coherence_check, coherence_distance, coherence_warning,
                                 packet_characteristic, spatial_coherence)
from ..physics.field import packet_for
from ..physics.golden_rule import packet_rate
from ..physics.models import EXCITED, level_of
from ..solvers import solver_for
from ..solvers.base import Evolution
from ..solvers.common import norm_warning, physics_warnings
from .fits import (FIT_WINDOW, MIN_FIT_SAMPLES, SHORT_WINDOW, THERMAL, TOO_FEW_SAMPLES,
                   RateFit, fit_decay, fit_excitation)
from .result import Result


def run(scenario, method: str | None = None, **options) -> Result:
    """Evolve a scenario with its `run.method` (or `method`) and return the Result.

    Parameters
    ----------
    scenario : Scenario, str, Path or dict
        A loaded scenario, a TOML file or a dict (loaded with `sim.load_scenario`).
    method : str, optional
        A key of `sim.METHODS` instead of the scenario's `run.method`.
    **options
        Passed to the solver (``progress=True`` shows a progress bar on long runs).

    Returns
    -------
    Result
        Observables over the sample times (time units) and the summary (natural units).
    """
    return result_of(solver_for(scenario, method, **options))


def result_of(solver, check_truncation: bool = False) -> Result:
    """Run a solver and assemble its Result.

    Parameters
    ----------
    solver : Solver
        A solver for a loaded scenario (`sim.solvers.solver_for`).
    check_truncation : bool, optional
        Also check the method's own truncation by its finer runs (`Solver.convergence`, which
        records its verdict in the evolution's details) before assembling (default False).

    Returns
    -------
    Result
        `assemble(solver.name, solver.scenario, solver.run())`.
    """
    evolution = solver.run()
    if check_truncation:
        solver.convergence(evolution.times, evolution)
    return assemble(solver.name, solver.scenario, evolution)


def assemble(method: str, scenario: Scenario, evo: Evolution) -> Result:
    """The Result of one run: the evolution plus the shared summary.

    Parameters
    ----------
    method : str
        The method that produced `evo`.
    scenario : Scenario
    evo : Evolution
        With `times` (time units) and `wall_seconds` set (`Solver.run`).

    Returns
    -------
    Result
        Its summary holds rate_golden_rule and rate_fitted (inverse time units; rate_fitted is
        None when the curve has no rate), fit (`RateFit.summary`: window, residual, verdict and
        reason), trapped_population (the late-time plateau of P_e, dimensionless, or None),
        bound_states where the solver finds them (exact: energy from the level, weight and the
        P_e they trap, below and above the band),
        lamb_shift (energy units), warnings, the scenario as read, resolved parameters,
        versions and stats.
    """
    times = evo.times
    nan = np.full_like(times, np.nan)
    golden = packet_rate(scenario)
    excited_start = level_of(scenario.packet.internal) == EXCITED
    fit = (fit_decay(times, evo.excited, golden, thermal=scenario.field.temperature > 0)
           if excited_start else fit_excitation(times, evo.excited, golden))
    warnings = (list(getattr(scenario, "notes", ())) + list(evo.warnings)
                + physics_warnings(scenario, golden)
                + norm_warning(evo.norm, NORM_ADVICE.get(method, "")))
    if excited_start and fit.rate is None and fit.verdict != THERMAL:
        warnings.append(fit_warning(scenario, golden, fit, evo.excited))
    coherence, coherence_entries, coherence_notes = coherence_of(method, scenario, evo)
    warnings += coherence_notes
    summary = {
        "title": scenario.title,
        "method": method,
        "simulated": True,
        "note": "simulated data from recoilsim, not a measurement",
        "rate_golden_rule": golden,
        "rate_fitted": fit.rate,
        "fit": fit.summary(),
        "trapped_population": fit.trapped_population,
        **({"bound_states": evo.details["bound_states"]} if "bound_states" in evo.details else {}),
        "lamb_shift": evo.lamb_shift,
        "t_max": float(times[-1]),
        "samples": int(len(times)),
        "final_excited": float(evo.excited[-1]),
        **coherence_entries,
        "warnings": warnings,
        "scenario": dict(scenario.source),
        "resolved": resolved_parameters(scenario),
        "versions": versions(),
        "stats": {"wall_seconds": round(float(evo.wall_seconds), 4), **evo.details},
    }
    return Result(method=method, scenario=scenario, times=times, excited=evo.excited,
                  p_mean=evo.p_mean, p_var=evo.p_var,
                  x_var=evo.x_var if evo.x_var is not None else nan,
                  purity=evo.purity if evo.purity is not None else nan,
                  momentum_grid=evo.momentum_grid, snapshot_times=evo.snapshot_times,
                  momentum_density=evo.momentum_density, initial_density=evo.initial_density,
                  summary=summary, tables=evo.tables, final_state=evo.final_state,
                  coherence=coherence, x_var_transverse=evo.x_var_transverse)


def coherence_of(method: str, scenario: Scenario, evo: Evolution):
    """The spatial coherence of a run, its summary entries and warnings.

    coherence(t) = |chi(t)| / |chi(0)| with chi(t) = Tr(rho_COM(t) exp(i P d)) from the solver
    (`Evolution.coherence`) at d = `coherence_distance(scenario)`.

    Parameters
    ----------
    method : str
    scenario : Scenario
    evo : Evolution

    Returns
    -------
    coherence : ndarray or None
        Over the sample times (dimensionless; nan where not computed), None when the scenario
        asks for no coherence or the method gives none.
    entries : dict
        coherence_at (d, length units) and final_coherence (the last computed value, or None)
        when a distance is set; empty otherwise.
    notes : list of str
        Why the coherence is missing or withheld: the method does not compute it, its chi(0)
        misses the packet's own (`coherence_check`: d not resolved), or the packet holds no
        coherence at d (`coherence_warning`).
    """
    distance = coherence_distance(scenario)
    if distance is None:
        return None, {}, []
    d, key = distance
    entries = {"coherence_at": d, "final_coherence": None}
    if evo.coherence is None:
        return None, entries, [f"spatial coherence at {key} = {d:g}: method \"{method}\" does "
                               "not compute it for this scenario, so final_coherence is null; "
                               "choose another run.method"]
    chi = np.asarray(evo.coherence, dtype=complex)
    reference = packet_characteristic(packet_for(scenario), d)
    missed = coherence_warning(reference, d, key) or coherence_check(chi[0], reference, d, key)
    if missed:
        return None, entries, missed
    coherence = spatial_coherence(chi)
    known = np.flatnonzero(np.isfinite(coherence))
    if known.size:
        entries["final_coherence"] = float(coherence[known[-1]])
    return coherence, entries, []


#: where each method's norm drift comes from and the key that reduces it (`norm_warning`): the
#: evolution conserves probability, so a larger bath or grid does not help (measured for fock:
#: the drift halves with run.t_max and does not move with bath.max_quanta)
NORM_ADVICE = {
    "fock": "the truncated evolution conserves probability, so this is the ODE integrator's "
            "error, which grows with the length of the run: lower run.t_max (raising "
            "bath.max_quanta or bath.fock_modes does not remove it)",
    "markov": "the master equation conserves probability, so this is the ODE integrator's "
              "error, which grows with the length of the run: lower run.t_max (a finer "
              "grid.points does not remove it)",
    "exact": "the evolution of each sector is unitary, so this is rounding in the sector "
             "spectra (stats.residue_sum_error shows the worst residue sum), not a bath too "
             "small: changing the bath keys is not the remedy",
}


def fit_warning(scenario: Scenario, golden: float, fit: RateFit, excited: np.ndarray) -> str:
    """Why the decay curve gave no fitted rate, with the key that would help.

    Parameters
    ----------
    scenario : Scenario
    golden : float
        The golden-rule rate (1 / time units).
    fit : RateFit
        The decay fit (`fit_decay`) whose rate is None.
    excited : ndarray
        The excited population over the sample times (dimensionless).

    Returns
    -------
    str
        With zero coupling or a zero golden-rule rate: nothing decays (run.t_max and
        run.samples cannot help; coupling.strength, or the level and field keys, can); too few
        samples: raise run.t_max when P_e never falls to FIT_WINDOW[1], else run.samples; a
        window shorter than a lifetime: raise run.t_max; trapping, oscillation or curvature:
        the decay is not exponential, lower coupling.strength for one that is.
    """
    high = FIT_WINDOW[1]
    head = "rate_fitted: no exponential fit"
    if scenario.coupling.strength == 0:
        return (f"{head}: coupling.strength = 0, so the detector does not decay and there is no "
                "rate to fit (a longer run.t_max or more run.samples will not change that); set "
                "coupling.strength > 0 for a decay")
    if not golden > 0:
        return (f"{head}: the golden-rule rate is zero (no emission is on shell for this packet), "
                "so there is no decay to fit and a longer run.t_max or more run.samples will not "
                "help; raise detector.gap above field.mass or change the packet")
    lifetimes = f"five golden-rule lifetimes are {5 / golden:.4g}"
    if fit.verdict == TOO_FEW_SAMPLES and float(np.min(excited)) > high:
        return (f"{head}: P_e stays above {high} until t_max, so the decay has barely started; "
                f"raise run.t_max ({lifetimes})")
    if fit.verdict == TOO_FEW_SAMPLES:
        return (f"{head}: fewer than {MIN_FIT_SAMPLES} samples fall between P_e = {high} and "
                f"{FIT_WINDOW[0]}; raise run.samples")
    if fit.verdict == SHORT_WINDOW:
        return f"{head}: {fit.reason}; raise run.t_max ({lifetimes})"
    return (f"{head}: {fit.reason}. The decay is not exponential here and the golden-rule rate "
            "does not describe it; lower coupling.strength (or raise coupling.lifetime) for an "
            "exponential decay")


def resolved_parameters(scenario: Scenario) -> dict:
    """The numbers a run actually used, for the record in summary.json.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    dict
        strength lambda (natural units), momentum_std sigma_p and mean_momentum (momentum units),
        matching and rotating_wave as used.
    """
    packet = packet_for(scenario)
    c = scenario.coupling
    return {"strength": c.strength, "momentum_std": packet.momentum_std,
            "mean_momentum": scenario.mean_momentum,
            "matching": c.matching, "rotating_wave": c.rotating_wave}


def versions() -> dict:
    """Versions of recoilsim and the libraries a result depends on.

    Returns
    -------
    dict
        Package name -> version string ("not installed" where missing), and the Python version.
    """
    out = {"python": platform.python_version()}
    for name in ("recoilsim", "numpy", "scipy", "qutip"):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out
