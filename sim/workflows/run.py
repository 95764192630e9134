"""`recoilsim run`: one method into a run folder, optionally with the convergence check."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..config.registry import CHECK_TOLERANCE
from ..io.writers import output_folder, refuse_existing, write_json, write_tables
from ..plotting import DPI, figure_dpi, figure_format, result_figures
from ..result import Result, result_of
from ..solvers import solver_for
from ..solvers.base import Estimate, available_memory


def write_result(result: Result, out: str | Path, *, force: bool = False, figures: bool = True,
                 extra_summary: dict | None = None, fmt: str = "png", dpi: float = DPI) -> dict:
    """Write every file of a run into `out`, atomically as a whole.

    Parameters
    ----------
    result : Result
        The run to write.
    out : str or Path
        The run folder (replaced only with `force`).
    force : bool
        Replace a non-empty `out` that recoilsim wrote (`sim.io.writers.refuse_existing`).
    figures : bool
        Draw the registered figures (`sim.plotting.FIGURES`) too.
    extra_summary : dict, optional
        Entries added to summary.json.
    fmt : str
        Figure file format: "png", "pdf" or "svg".
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    dict
        The summary written to summary.json (output units for a scenario with units).

    Raises
    ------
    OutputExists
        If `out` is a file or the current folder, or a non-empty folder and `force` is not
        given, or not recoilsim's own (or holding files it did not write).
    """
    with output_folder(out, force, kind="run") as stage:
        summary = write_tables(result, stage, extra_summary)
        if figures:
            summary["figures"] = result_figures(result, stage, fmt=fmt, dpi=dpi)
        write_json(stage / "summary.json", summary)
    return summary




def _relative_change(coarse, fine) -> float | None:
    """|fine - coarse| / |fine|, None when either rate is missing (no valid fit) or fine is 0."""
    if coarse is None or fine is None or not (np.isfinite(coarse) and np.isfinite(fine)) \
            or fine == 0:
        return None
    return float(abs(fine - coarse) / abs(fine))


def convergence_report(result: Result, refined_result: Result,
                       tolerance: float = CHECK_TOLERANCE) -> dict:
    """Change of the excited population and of the fitted rate when the discretisation is refined.

    The verdict is "converged" when max_t |P_e'(t) - P_e(t)| <= tolerance and, where both runs
    have a fitted rate, |Gamma' - Gamma| / |Gamma'| <= tolerance; "not converged" otherwise.

    Parameters
    ----------
    result : Result
        The run as configured.
    refined_result : Result
        The same scenario with every discretisation parameter refined (`Solver.refined`).
    tolerance : float
        Largest change allowed for "converged" (dimensionless).

    Returns
    -------
    dict
        "max_change_excited": largest absolute change of the excited population
        (dimensionless) at the sample times of `result`, the refined curve interpolated
        linearly; "relative_change_rate": relative change of the fitted rate (None when either
        run has no valid fit); "tolerance"; "verdict"; "refined": the refined run's stats.
    """
    fine = np.interp(result.times, refined_result.times, refined_result.excited)
    change = float(np.max(np.abs(fine - result.excited)))
    rate = _relative_change(result.summary.get("rate_fitted"),
                            refined_result.summary.get("rate_fitted"))
    converged = change <= tolerance and (rate is None or rate <= tolerance)
    return {"max_change_excited": change, "relative_change_rate": rate,
            "tolerance": float(tolerance),
            "verdict": "converged" if converged else "not converged",
            "refined": refined_result.summary.get("stats", {})}


def run_to_folder(scenario, out: Path, *, check: bool, force: bool, progress: bool,
                  check_tolerance: float = CHECK_TOLERANCE, fmt: str = "png",
                  dpi: float = DPI) -> dict:
    """Run the scenario's method, optionally the convergence check, and write the folder.

    Parameters
    ----------
    scenario : Scenario, str, Path or mapping
        Loaded with `sim.physics.checks.load_scenario` when it is not a Scenario yet.
    out : Path
        The run folder, written as a whole after the run.
    check : bool
        Also run the refined solver (`Solver.refined`) and add "convergence" to the summary.
    force : bool
        Replace a non-empty `out` that recoilsim wrote (`sim.io.writers.refuse_existing`).
    progress : bool
        Show a progress bar on stderr during long runs.
    check_tolerance : float
        The convergence verdict's tolerance (`convergence_report`).
    fmt : str
        Figure file format: "png", "pdf" or "svg".
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    dict
        The summary written (with "convergence" when `check`).

    Raises
    ------
    OutputExists
        Before the run, if `out` is a file or the current folder, or a non-empty folder and
        `force` is not given, or not recoilsim's own (or holding files it did not write).
    ScenarioError
        If the scenario does not load or validate, or its method cannot honour it
        (`ResourceError` for a run too large for the memory).
    """
    refuse_existing(out, force)  # before the run, not after it
    fmt, dpi = figure_format(fmt), figure_dpi(dpi)  # a bad --format is refused before it too
    solver = solver_for(scenario, progress=progress)
    result = result_of(solver)
    extra = {}
    if check:
        refined = solver.refined()
        if refined is None:
            extra["convergence"] = {"max_change_excited": 0.0, "relative_change_rate": 0.0,
                                    "tolerance": float(check_tolerance), "verdict": "converged",
                                    "note": f"method {solver.name!r} has no discretisation to refine"}
        else:
            extra["convergence"] = convergence_report(result, result_of(refined), check_tolerance)
    return write_result(result, out, force=force, extra_summary=extra, fmt=fmt, dpi=dpi)


def dry_run(scenario) -> tuple[Estimate, float]:
    """The run's size estimate and the memory available (bytes), without running it.

    Parameters
    ----------
    scenario : Scenario, str, Path or mapping
        Loaded with `sim.physics.checks.load_scenario` when it is not a Scenario yet.

    Returns
    -------
    estimate : Estimate
        Size of the run with the scenario's method (states, memory in bytes, work in
        floating-point operations).
    available : float
        Memory available to a new allocation (bytes).

    Raises
    ------
    ScenarioError
        If the scenario does not load or validate, or its method cannot honour it.
    """
    return solver_for(scenario).estimate(), available_memory()
