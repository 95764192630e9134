"""`recoilsim compare`: every method on one scenario, side by side.

Runs every registered method (`sim.config.registry.METHOD_NAMES`: perturbative, markov, exact and
fock, the last only when it accepts the scenario) through `sim.result.run`, and writes into one
folder, atomically:

    compare.csv   t, then the excited population of each method that ran (column = method key),
                  every curve interpolated linearly onto the first method's sample times;
    compare.png   all curves on a log axis, and their differences from exact below;
    summary.json  "simulated": true, methods run and skipped (with the reason), fitted and
                  golden-rule rates, largest difference from exact, each method's warnings.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..config.registry import METHOD_NAMES
from ..errors import ScenarioError
from ..io.atomic import atomic_write_text
from ..io.writers import csv_text, output_folder, write_json
from ..physics.checks import load_scenario
from ..plotting import compare_figure, save
from ..plotting.compare import REFERENCE
from ..result import run

#: methods in the order they are run and written
COMPARED = METHOD_NAMES
#: methods that may refuse a scenario (reported as skipped instead of failing the comparison)
REFUSING = ("fock",)


def run_methods(scenario) -> tuple[dict, dict]:
    """Results of every method that runs, and method -> reason for those skipped.

    Parameters
    ----------
    scenario : Scenario
        A loaded scenario (`sim.physics.checks.load_scenario`).

    Returns
    -------
    results : dict
        Method key -> `Result`, in the order of `COMPARED`.
    skipped : dict
        Method key -> reason (one line) for each method of `REFUSING` that refused the scenario.

    Raises
    ------
    ScenarioError
        If a method not in `REFUSING` refuses the scenario.
    """
    results, skipped = {}, {}
    for method in COMPARED:
        try:
            results[method] = run(scenario, method=method)
        except ScenarioError as exc:
            if method not in REFUSING:
                raise
            skipped[method] = "does not accept this scenario: " + "; ".join(exc.problems)
    return results, skipped


def common_curves(results: dict) -> tuple[np.ndarray, dict]:
    """Sample times of the first result and every excited population interpolated onto them.

    Parameters
    ----------
    results : dict
        Method key -> `Result` (at least one), as from `run_methods`.

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


def compare_summary(scenario, results: dict, skipped: dict, curves: dict) -> dict:
    """The compare folder's summary.json contents.

    Parameters
    ----------
    scenario : Scenario
        The compared scenario (its title and its source as read are recorded).
    results : dict
        Method key -> `Result` of each method that ran.
    skipped : dict
        Method key -> reason for each method skipped.
    curves : dict
        Method key -> excited-state population on common sample times (`common_curves`).

    Returns
    -------
    dict
        "title", "simulated", "note", "methods", "skipped", "rate_golden_rule" and
        "rate_fitted" (method -> rate; inverse time, natural units as in each Result's
        summary), "max_difference_from_exact" (method -> largest absolute difference of the
        excited population from exact; None without an exact run), "warnings" (method ->
        list) and "scenario".
    """
    reference = curves.get(REFERENCE)
    return {
        "title": scenario.title,
        "simulated": True,
        "note": "simulated data from recoilsim, not a measurement",
        "methods": list(results),
        "skipped": skipped,
        "rate_golden_rule": next(iter(results.values())).summary["rate_golden_rule"],
        "rate_fitted": {m: r.summary["rate_fitted"] for m, r in results.items()},
        "max_difference_from_exact": (
            {m: float(np.max(np.abs(c - reference))) for m, c in curves.items() if m != REFERENCE}
            if reference is not None else None),
        "warnings": {m: r.warnings for m, r in results.items()},
        "scenario": dict(scenario.source),
    }


def compare_to_folder(scenario, out, force: bool = False) -> Path:
    """Run every method on `scenario` and write compare.csv, compare.png, summary.json to `out`.

    Parameters
    ----------
    scenario : Scenario, str, Path or mapping
        Loaded with `sim.physics.checks.load_scenario` when it is not a Scenario yet.
    out : str or Path
        The output folder, replaced as a whole once every file is written; the times of
        compare.csv are in output units for a scenario with units, natural units otherwise.
    force : bool
        Replace a non-empty `out` that recoilsim wrote (`sim.io.writers.refuse_existing`).

    Returns
    -------
    Path
        `out`.

    Raises
    ------
    OutputExists
        Before any run, if `out` is a file or the current folder, or a non-empty folder and
        `force` is not given, or not recoilsim's own (or holding files it did not write).
    ScenarioError
        If the scenario does not load or validate, or a method other than those of `REFUSING`
        refuses it.
    """
    scenario = load_scenario(scenario)
    units = scenario.units
    out = Path(out)
    with output_folder(out, force, kind="compare") as stage:  # refused before any run
        results, skipped = run_methods(scenario)
        times, curves = common_curves(results)
        columns = {"t": units.to_output("t", times) if units else times, **curves}
        atomic_write_text(stage / "compare.csv", csv_text(columns))
        save(compare_figure(scenario, times, curves), stage / "compare.png")
        write_json(stage / "summary.json", compare_summary(scenario, results, skipped, curves))
    return out
