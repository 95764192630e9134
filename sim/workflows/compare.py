"""`recoilsim compare`: every method on one scenario, side by side, within a time budget.

Every registered method (`sim.config.registry.METHOD_NAMES`: perturbative, markov, exact, fock)
is first sized (`Solver.estimate`); a method that refuses the scenario, would not fit the memory
guard, or whose estimated wall time exceeds the budget is skipped with its reason, before
anything runs.  The others run in turn; one that fails while running is reported as that method's
failure and the comparison goes on.  Written into one folder, atomically:

    compare.csv   t, then the excited population of each method that ran (column = method key),
                  every curve interpolated linearly onto the first method's sample times;
    compare.png   all curves on a log axis, a panel per method of its difference from exact
                  below (a truncated, unconverged bath drawn dashed and labelled so);
    summary.json  "simulated": true, methods run, skipped and failed (each with its reason),
                  each method's estimate, fitted and golden-rule rates, largest difference from
                  exact, each method's warnings.
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..config.registry import COMPARE_BUDGET_SECONDS, METHOD_NAMES
from ..errors import ResourceError, ScenarioError
from ..io.atomic import atomic_write_text
from ..io.writers import csv_text, output_folder, write_json
from ..physics.checks import load_scenario
from ..plotting import DPI, coherence_compare_figure, compare_figure, figure_dpi, figure_format, save
from ..plotting.compare import REFERENCE
from ..result import result_of
from ..solvers import solver_for
from ..solvers.base import refusal

#: methods in the order they are run and written
COMPARED = METHOD_NAMES
#: a method's own truncation check (`Solver.convergence`) costs about this many runs of it (fock:
#: one more quantum, 1.5x the modes, more directions); run when that fits the budget
CONVERGENCE_RUNS = 4


@dataclass
class Comparison:
    """What `compare_methods` found: the results, and why the other methods did not give one.

    Parameters
    ----------
    results : dict
        Method key -> `Result` of each method that ran, in the order of `COMPARED`.
    skipped : dict
        Method key -> reason (one line) for each method not run: it refused the scenario, or
        its estimate exceeds the memory guard or the time budget.
    failed : dict
        Method key -> reason (one line) for each method that failed while running.
    estimates : dict
        Method key -> {"seconds": estimated wall time (s, None if unknown), "memory_bytes":
        estimated memory (bytes)} for each method that could be sized.
    budget : float
        The time budget of one method (seconds).
    summary : dict, optional
        The summary.json written for it (`compare_summary`), once written.
    """

    results: dict
    skipped: dict
    failed: dict
    estimates: dict
    budget: float
    summary: dict | None = None


def _problems(exc: ScenarioError) -> str:
    """A ScenarioError's problems as one line."""
    return "; ".join(exc.problems)


def plan_method(scenario, method: str, budget: float, progress: bool = False):
    """Size one method on the scenario: its solver, its estimate, or why it will not run.

    Parameters
    ----------
    scenario : Scenario
        A loaded scenario.
    method : str
        A key of `COMPARED`.
    budget : float
        Largest estimated wall time allowed (seconds).
    progress : bool
        Give the solver a progress bar.

    Returns
    -------
    solver : Solver or None
        The solver to run, None when skipped.
    estimate : Estimate or None
        Its estimate, None when the method refused the scenario before sizing it.
    reason : str or None
        Why the method is skipped (refusal, memory guard or budget), None when it runs.
    """
    try:
        solver = solver_for(scenario, method, progress=progress)
        estimate = solver.estimate()
    except ScenarioError as exc:
        return None, None, "does not accept this scenario: " + _problems(exc)
    memory = refusal(estimate, method)
    if memory is not None:
        return None, estimate, "would not fit in memory: " + memory
    if estimate.seconds > budget:
        return None, estimate, (f"estimated {estimate.seconds:.3g} s, over the budget of "
                                f"{budget:.3g} s (raise --budget, or lower "
                                f"{estimate.named(estimate.dominant_key)})")
    return solver, estimate, None


def run_planned(solver, check_truncation: bool = False):
    """Run one planned solver: its Result, or the one-line reason it failed.

    With `check_truncation` the method's own truncation is checked by its finer runs
    (`Solver.convergence`) before the result is assembled, so the figure and the summary say
    whether a truncated bath is converged.

    Parameters
    ----------
    solver : Solver
    check_truncation : bool, optional
        Run `solver.convergence` too (default False).

    Returns
    -------
    result : Result or None
    reason : str or None
        None on success; else the refusal (ScenarioError, ResourceError) or, for any other
        error (an integrator's, a numerical one, MemoryError), its type and message.
    """
    try:
        return result_of(solver, check_truncation), None
    except ScenarioError as exc:
        return None, "refused while running: " + _problems(exc)
    except ResourceError as exc:
        return None, f"refused while running: {exc}"
    except Exception as exc:  # noqa: BLE001 - one method's failure (an integrator's, a
        # numerical one, out of memory) is reported as that method's, and the comparison goes on
        return None, f"failed: {type(exc).__name__}: {exc}"


def _say(quiet: bool, text: str) -> None:
    """A progress line on stderr unless `quiet`."""
    if not quiet:
        print(f"recoilsim compare: {text}", file=sys.stderr, flush=True)


def compare_methods(scenario, budget: float = COMPARE_BUDGET_SECONDS, *, progress: bool = False,
                    quiet: bool = True) -> Comparison:
    """Size every method, skip those over the memory or time budget, run the others.

    Parameters
    ----------
    scenario : Scenario
        A loaded scenario (`sim.physics.checks.load_scenario`).
    budget : float
        Largest estimated wall time of one method (seconds; a method without a time estimate
        runs).
    progress : bool
        Progress bars inside long solver runs.
    quiet : bool
        No status lines on stderr.

    Returns
    -------
    Comparison

    Raises
    ------
    ScenarioError
        If no method gives a result (every reason listed).
    """
    if not budget > 0:
        raise ScenarioError(f"--budget {budget!r}: expected a positive number of seconds")
    plans, skipped, estimates = {}, {}, {}
    for method in COMPARED:
        solver, estimate, reason = plan_method(scenario, method, budget, progress)
        if estimate is not None:
            estimates[method] = {"seconds": None if math.isnan(estimate.seconds)
                                 else estimate.seconds, "memory_bytes": estimate.memory_bytes}
        if reason is None:
            plans[method] = solver
        else:
            skipped[method] = reason
            _say(quiet, f"skipping {method}: {reason}")
    results, failed = {}, {}
    for method, solver in plans.items():
        seconds = estimates[method]["seconds"]
        _say(quiet, f"running {method}" + (f" (estimated {seconds:.2g} s)" if seconds else ""))
        # the truncation check costs about CONVERGENCE_RUNS runs more: only within the budget
        affordable = seconds is not None and CONVERGENCE_RUNS * seconds <= budget
        result, reason = run_planned(solver, check_truncation=affordable)
        if result is None:
            failed[method] = reason
            _say(quiet, f"{method} {reason}")
        else:
            results[method] = result
    if not results:
        raise ScenarioError([f"compare: {m}: {r}" for m, r in {**skipped, **failed}.items()])
    return Comparison(results, skipped, failed, estimates, float(budget))


def common_curves(results: dict) -> tuple[np.ndarray, dict]:
    """Sample times of the first result and every excited population interpolated onto them.

    Parameters
    ----------
    results : dict
        Method key -> `Result` (at least one), as in `Comparison.results`.

    Returns
    -------
    times : ndarray
        Sample times of the first result (natural units: inverse energy).
    curves : dict
        Method key -> excited-state population (dimensionless) at `times`, interpolated
        linearly.
    """
    times = next(iter(results.values())).times
    return times, {m: np.interp(times, r.times, r.excited) for m, r in results.items()}


def _rate_out(scenario, rate):
    """A rate (natural units) in the scenario's output units; None stays None."""
    if rate is None or scenario.units is None:
        return rate
    return float(scenario.units.to_output("rate_fitted", rate))


def compare_summary(scenario, comparison: Comparison, curves: dict) -> dict:
    """The compare folder's summary.json contents.

    Parameters
    ----------
    scenario : Scenario
        The compared scenario (its title and its source as read are recorded).
    comparison : Comparison
        From `compare_methods`.
    curves : dict
        Method key -> excited-state population on common sample times (`common_curves`).

    Returns
    -------
    dict
        "title", "simulated", "note", "methods", "skipped", "failed" (method -> reason),
        "estimates" (method -> seconds and bytes), "budget_seconds", "rate_golden_rule" and
        "rate_fitted" (method -> rate; inverse time in the output units of a scenario with
        units, given under "units", natural units otherwise; None where withheld), "fits"
        (method -> the fit's verdict and reason), "max_difference_from_exact"
        (method -> largest absolute difference of the excited population from exact; None
        without an exact run), "warnings" (method -> list), "final_coherence" (method -> the
        spatial coherence at t_max, where the scenario asks for it), "truncation" (method -> its
        truncated bath and convergence verdict, `truncation_entry`) and "scenario".
    """
    results = comparison.results
    reference = curves.get(REFERENCE)
    summary = {
        "title": scenario.title,
        "simulated": True,
        "note": "simulated data from recoilsim, not a measurement",
        "methods": list(results),
        "skipped": comparison.skipped,
        "failed": comparison.failed,
        "estimates": comparison.estimates,
        "budget_seconds": comparison.budget,
        "rate_golden_rule": _rate_out(scenario,
                                      next(iter(results.values())).summary["rate_golden_rule"]),
        "rate_fitted": {m: _rate_out(scenario, r.summary["rate_fitted"])
                        for m, r in results.items()},
        "fits": {m: {"verdict": (r.summary.get("fit") or {}).get("verdict"),
                     "reason": (r.summary.get("fit") or {}).get("reason")}
                 for m, r in results.items()},
        "max_difference_from_exact": (
            {m: float(np.max(np.abs(c - reference))) for m, c in curves.items() if m != REFERENCE}
            if reference is not None else None),
        "warnings": {m: r.warnings for m, r in results.items()},
        "final_coherence": {m: r.summary["final_coherence"] for m, r in results.items()
                            if "final_coherence" in r.summary},
        "truncation": {m: entry for m, r in results.items()
                       if (entry := truncation_entry(r)) is not None},
        "scenario": dict(scenario.source),
    }
    if scenario.units is not None:
        unit = scenario.units.column_unit("rate_fitted")
        summary["units"] = {"t": scenario.units.column_unit("t"), "rate_golden_rule": unit,
                            "rate_fitted": unit}
    return summary


def truncation_entry(result) -> dict | None:
    """A method's bath truncation and its convergence check, for the compare summary.

    Parameters
    ----------
    result : Result

    Returns
    -------
    dict or None
        The solver's truncation record (kept, of, what, converged, key) with the checks of its
        convergence run (`Solver.convergence`) under "convergence" where it ran; None for a
        method that truncates nothing.
    """
    stats = result.summary.get("stats", {})
    record = stats.get("truncation")
    if record is None or record.get("kept", 0) >= record.get("of", 0):
        return None
    return {**record, **({"convergence": stats["convergence"]} if "convergence" in stats else {})}


def write_comparison(scenario, comparison: Comparison, stage: Path, fmt: str = "png",
                     dpi: float = DPI) -> dict:
    """Write compare.csv, compare.png (and compare_coherence.png) and summary.json into `stage`.

    Parameters
    ----------
    scenario : Scenario
    comparison : Comparison
    stage : Path
        An existing folder (the output folder's stage).
    fmt : str
        Figure file format: "png", "pdf" or "svg".
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    dict
        The summary written (`compare_summary`), with "figure" (the figure's file name).
    """
    units = scenario.units
    times, curves = common_curves(comparison.results)
    columns = {"t": units.to_output("t", times) if units else times, **curves}
    atomic_write_text(stage / "compare.csv", csv_text(columns))
    figure = compare_figure(scenario, times, curves, results=comparison.results,
                            left_out={**comparison.skipped, **comparison.failed})
    summary = compare_summary(scenario, comparison, curves)
    summary["figure"] = save(figure, stage / "compare", fmt, dpi).name
    if any(r.coherence is not None for r in comparison.results.values()):
        coherence = coherence_compare_figure(scenario, comparison.results,
                                             {**comparison.skipped, **comparison.failed})
        summary["coherence_figure"] = save(coherence, stage / "compare_coherence", fmt, dpi).name
    write_json(stage / "summary.json", summary)
    return summary


def compare_to_folder(scenario, out, force: bool = False, *, budget: float = COMPARE_BUDGET_SECONDS,
                      progress: bool = False, quiet: bool = True, fmt: str = "png",
                      dpi: float = DPI) -> Comparison:
    """Compare every method on `scenario` and write compare.csv, compare.png, summary.json.

    Parameters
    ----------
    scenario : Scenario, str, Path or mapping
        Loaded with `sim.physics.checks.load_scenario` when it is not a Scenario yet.
    out : str or Path
        The output folder, replaced as a whole once every file is written; the times of
        compare.csv are in output units for a scenario with units, natural units otherwise.
    force : bool
        Replace a non-empty `out` that recoilsim wrote (`sim.io.writers.refuse_existing`).
    budget : float
        Largest estimated wall time of one method (seconds).
    progress : bool
        Progress bars inside long solver runs.
    quiet : bool
        No status lines on stderr.
    fmt : str
        Figure file format: "png", "pdf" or "svg".
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    Comparison
        The results, the reasons of every method skipped or failed, and the summary written.

    Raises
    ------
    OutputExists
        Before any run, if `out` is a file or the current folder, or a non-empty folder and
        `force` is not given, or not recoilsim's own (or holding files it did not write).
    ScenarioError
        If the scenario does not load or validate, or no method gives a result.
    """
    scenario = load_scenario(scenario)
    fmt, dpi = figure_format(fmt), figure_dpi(dpi)  # refused before any run
    with output_folder(Path(out), force, kind="compare") as stage:  # refused before any run
        comparison = compare_methods(scenario, budget, progress=progress, quiet=quiet)
        comparison.summary = write_comparison(scenario, comparison, stage, fmt, dpi)
    return comparison
