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
    """Results of every method that runs, and method -> reason for those skipped."""
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
    """Sample times of the first result and every excited population interpolated onto them."""
    times = next(iter(results.values())).times
    return times, {m: np.interp(times, r.times, r.excited) for m, r in results.items()}


def compare_summary(scenario, results: dict, skipped: dict, curves: dict) -> dict:
    """The compare folder's summary.json contents."""
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
    """Run every method on `scenario` and write compare.csv, compare.png, summary.json to `out`."""
    scenario = load_scenario(scenario)
    units = scenario.units
    out = Path(out)
    with output_folder(out, force) as stage:  # refuses a full folder before any run
        results, skipped = run_methods(scenario)
        times, curves = common_curves(results)
        columns = {"t": units.to_output("t", times) if units else times, **curves}
        atomic_write_text(stage / "compare.csv", csv_text(columns))
        save(compare_figure(scenario, times, curves), stage / "compare.png")
        write_json(stage / "summary.json", compare_summary(scenario, results, skipped, curves))
    return out
