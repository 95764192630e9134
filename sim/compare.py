"""`recoilsim compare`: every method on one scenario, side by side.

Runs perturbative, markov, exact and fock (the last two when their modules exist; fock also only
when it accepts the scenario) through `sim.solvers.run`, and writes into one folder, atomically:

    compare.csv   t, then the excited population of each method that ran (column = method key),
                  every curve interpolated linearly onto the first method's sample times;
    compare.png   all curves on a log axis, and their differences from exact below;
    summary.json  "simulated": true, methods run and skipped (with the reason), fitted and
                  golden-rule rates, largest difference from exact, each method's warnings.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from .output import atomic_save_figure, atomic_write_text, csv_text, json_safe, staged_folder
from .scenario import ScenarioError, load_scenario
from .solvers import METHODS, run

#: methods in the order they are run and written
COMPARED = ("perturbative", "markov", "exact", "fock")
#: methods whose absence is reported instead of raised (being optional back ends)
OPTIONAL = ("exact", "fock")
REFERENCE = "exact"


def run_methods(scenario) -> tuple[dict, dict]:
    """Results of every method that runs, and method -> reason for those skipped."""
    results, skipped = {}, {}
    for method in COMPARED:
        try:
            results[method] = run(scenario, method=method)
        except ModuleNotFoundError as exc:
            if method not in OPTIONAL or exc.name != METHODS[method].split(":")[0]:
                raise
            skipped[method] = f"not available in this installation ({exc.name})"
        except ScenarioError as exc:
            if method != "fock":
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


def compare_figure(scenario, times, curves: dict, path) -> None:
    """All excited populations (log axis) and, below, each one minus exact."""
    import matplotlib.pyplot as plt

    from .figures import METHOD_COLOURS, stamp

    units = scenario.units
    t = units.to_output("t", times) if units else times
    label = f"t [{units.column_unit('t')}]" if units else "t [1/energy unit]"
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7, 6.5), sharex=True,
                                      constrained_layout=True, height_ratios=(2, 1))
    for method, values in curves.items():
        top.semilogy(t, np.clip(values, 1e-300, None), color=METHOD_COLOURS.get(method),
                     ls="--" if method == "perturbative" else "-", label=f"{method} (simulated)")
    positive = [v[v > 0] for v in curves.values() if np.any(v > 0)]
    floor = max(1e-8, min(float(v.min()) for v in positive) / 2) if positive else 1e-8
    top.set_ylim(floor, 1.2)
    top.set_ylabel("excited population $P_e(t)$")
    top.set_title(scenario.title, fontsize=10)
    top.legend(fontsize=8)
    reference = curves.get(REFERENCE)
    if reference is not None:
        for method, values in curves.items():
            if method != REFERENCE:
                bottom.plot(t, values - reference, color=METHOD_COLOURS.get(method), label=method,
                            ls="--" if method == "perturbative" else "-")
        bottom.axhline(0.0, color="0.6", lw=0.8)
        bottom.set_ylabel(r"$P_e - P_e^{\rm exact}$")
        bottom.legend(fontsize=8)
    else:
        bottom.text(0.5, 0.5, "exact solver not available: no differences", ha="center",
                    va="center", transform=bottom.transAxes)
    bottom.set_xlabel(label)
    stamp(fig)
    atomic_save_figure(fig, path, dpi=130)
    plt.close(fig)


def compare_to_folder(scenario, out, force: bool = False) -> Path:
    """Run every method on `scenario` and write compare.csv, compare.png, summary.json to `out`."""
    scenario = load_scenario(scenario)
    units = scenario.units
    out = Path(out)
    with staged_folder(out, force) as stage:  # refuses a full folder before any run
        results, skipped = run_methods(scenario)
        times, curves = common_curves(results)
        columns = {"t": units.to_output("t", times) if units else times, **curves}
        atomic_write_text(stage / "compare.csv", csv_text(columns))
        compare_figure(scenario, times, curves, stage / "compare.png")
        summary = compare_summary(scenario, results, skipped, curves)
        atomic_write_text(stage / "summary.json", json.dumps(json_safe(summary), indent=2) + "\n")
    return out
