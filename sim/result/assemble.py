"""From a solver's raw Evolution to the one Result, and the front door `run`.

`assemble` adds what every method shares: the golden-rule reference rate, the fitted rate,
the shared warnings (perturbation parameter, rotating-wave validity, norm drift), the resolved
parameters, library versions and the run's statistics.
"""

from __future__ import annotations

import platform
from importlib import metadata

import numpy as np

from ..config.schema import Scenario
from ..physics.field import packet_for
from ..physics.golden_rule import packet_rate
from ..physics.models import EXCITED, level_of
from ..solvers import solver_for
from ..solvers.base import Evolution
from ..solvers.common import norm_warning, physics_warnings
from .fits import FIT_WINDOW, fitted_excitation_rate, fitted_rate
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


def result_of(solver) -> Result:
    """Run a solver and assemble its Result.

    Parameters
    ----------
    solver : Solver
        A solver for a loaded scenario (`sim.solvers.solver_for`).

    Returns
    -------
    Result
        `assemble(solver.name, solver.scenario, solver.run())`.
    """
    return assemble(solver.name, solver.scenario, solver.run())


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
        Its summary holds rate_golden_rule and rate_fitted (inverse time units), lamb_shift
        (energy units), warnings, the scenario as read, resolved parameters, versions and stats.
    """
    times = evo.times
    nan = np.full_like(times, np.nan)
    golden = packet_rate(scenario)
    excited_start = level_of(scenario.packet.internal) == EXCITED
    fitted = (fitted_rate(times, evo.excited) if excited_start
              else fitted_excitation_rate(times, evo.excited))
    warnings = (list(getattr(scenario, "notes", ())) + list(evo.warnings)
                + physics_warnings(scenario, golden)
                + norm_warning(evo.norm, NORM_ADVICE.get(method, "")))
    if excited_start and not np.isfinite(fitted):
        warnings.append(fit_warning(scenario, golden, evo.excited))
    summary = {
        "title": scenario.title,
        "method": method,
        "simulated": True,
        "note": "simulated data from recoilsim, not a measurement",
        "rate_golden_rule": golden,
        "rate_fitted": fitted,
        "lamb_shift": evo.lamb_shift,
        "t_max": float(times[-1]),
        "samples": int(len(times)),
        "final_excited": float(evo.excited[-1]),
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
                  summary=summary, tables=evo.tables, final_state=evo.final_state)


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


def fit_warning(scenario: Scenario, golden: float, excited: np.ndarray) -> str:
    """Why the decay curve gave no fitted rate, with the key that would help.

    Parameters
    ----------
    scenario : Scenario
    golden : float
        The golden-rule rate (1 / time units).
    excited : ndarray
        The excited population over the sample times (dimensionless).

    Returns
    -------
    str
        With zero coupling or a zero golden-rule rate: nothing decays (run.t_max and
        run.samples cannot help; coupling.strength, or the level and field keys, can); when
        P_e never falls to FIT_WINDOW[1]: raise run.t_max; else too few samples fall in the
        window: raise run.samples.
    """
    low, high = FIT_WINDOW
    head = "rate_fitted: no exponential fit"
    if scenario.coupling.strength == 0:
        return (f"{head}: coupling.strength = 0, so the detector does not decay and there is no "
                "rate to fit (a longer run.t_max or more run.samples will not change that); set "
                "coupling.strength > 0 for a decay")
    if not golden > 0:
        return (f"{head}: the golden-rule rate is zero (no emission is on shell for this packet), "
                "so there is no decay to fit and a longer run.t_max or more run.samples will not "
                "help; raise detector.gap above field.mass or change the packet")
    if float(np.min(excited)) > high:
        return (f"{head}: P_e stays above {high} until t_max, so the decay has barely started; "
                f"raise run.t_max (five golden-rule lifetimes are {5 / golden:.4g})")
    return (f"{head}: fewer than three samples fall between P_e = {high} and {low}; raise "
            "run.samples")


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
