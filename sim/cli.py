"""The `recoilsim` command line.

    recoilsim demo                      bundled default scenario end to end, into ./recoilsim-demo/
    recoilsim rates SCENARIO            golden-rule template function and packet-averaged rate
    recoilsim run SCENARIO --out DIR    time evolution with the scenario's method
    recoilsim compare SCENARIO --out DIR  all methods side by side
    recoilsim sweep SCENARIO --vary KEY=SPEC --out DIR  parameter sweeps
    recoilsim new NAME                  a commented template scenario
    recoilsim figures                   regenerate the README's figures into figures/

Bad input prints one line per problem to stderr and exits with status 2.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

import numpy as np

from .scenario import ScenarioError, load_scenario

EXIT_BAD_INPUT = 2


class UsageError(Exception):
    """A command-line problem to report in one line (exit status 2)."""


def bundled(name: str) -> Path:
    """Path of a scenario shipped inside the package (sim/data/NAME.toml)."""
    return Path(__file__).parent / "data" / f"{name}.toml"


def _momenta_option(text: str) -> np.ndarray:
    try:
        values = [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise UsageError(f"--at {text!r}: expected comma-separated numbers, e.g. --at 0,0.5,1") from None
    if not values or not all(np.isfinite(values)):
        raise UsageError(f"--at {text!r}: expected comma-separated finite numbers")
    return np.array(values)


def rates_report(scenario, at: np.ndarray | None) -> dict:
    """The rates contract: packet-averaged rate, rest rate, template function.

    With a scenario in physical units, `at` momenta are read in, and every number is reported in,
    the run's output units (listed under "units"); otherwise natural units throughout.
    """
    from .rates import packet_rate, rest_rate, template_grid, template_rate

    units = scenario.units
    rate_out = (lambda r: float(units.to_output("rate_golden_rule", r))) if units else float
    p_out = (lambda p: units.to_output("p", p)) if units else np.asarray
    if at is not None and units:
        at = at / float(units.to_output("p", 1.0))
    p = at if at is not None else template_grid(scenario)
    rates = np.atleast_1d(template_rate(scenario, np.abs(p)))
    report = {"rate": rate_out(packet_rate(scenario)), "rest_rate": rate_out(rest_rate(scenario)),
              "template": {"p": [float(x) for x in np.atleast_1d(p_out(p))],
                           "rate": [rate_out(x) for x in rates]}}
    if units:
        report["units"] = {"rate": units.column_unit("rate_golden_rule"),
                           "rest_rate": units.column_unit("rate_golden_rule"),
                           "p": units.column_unit("p")}
    return report


def cmd_rates(args) -> int:
    scenario = load_scenario(args.scenario)
    report = rates_report(scenario, _momenta_option(args.at) if args.at else None)
    if args.plot:
        from .figures import rates_figure

        rates_figure(scenario, args.plot)
    if args.json:
        print(json.dumps(report))
        return 0
    kind = "excitation" if scenario.packet.internal == "ground" else "decay"
    print(f"{scenario.title}  [{scenario.detector.model}, {scenario.dimensions}D, {kind}]")
    units = report.get("units", {"rate": "", "p": ""})
    print(f"packet-averaged golden-rule rate  {report['rate']:.10g} {units['rate']}")
    print(f"rest-frame rate Gamma(0)          {report['rest_rate']:.10g} {units['rate']}")
    print(f"{'p ' + units['p']:>16}  {'Gamma(p) ' + units['rate']:>16}")
    for p, r in zip(report["template"]["p"], report["template"]["rate"]):
        print(f"{p:16.8g}  {r:16.10g}")
    if args.plot:
        print(f"figure: {args.plot}")
    return 0


def convergence_report(result, refined_result) -> dict:
    """Largest change of the excited population when the discretisation is refined."""
    fine = np.interp(result.times, refined_result.times, refined_result.excited)
    return {"max_change_excited": float(np.max(np.abs(fine - result.excited))),
            "refined": refined_result.summary.get("stats", {})}


def run_to_folder(scenario, out: Path, *, check: bool, force: bool, progress: bool) -> dict:
    """Run the scenario's method, optionally the convergence check, and write the folder."""
    from .output import refuse_existing, write_result
    from .solvers import solver_for

    refuse_existing(out, force)  # before the run, not after it
    solver = solver_for(scenario, progress=progress)
    result = solver.run()
    extra = {}
    if check:
        refined = solver.refined()
        if refined is None:
            extra["convergence"] = {"max_change_excited": 0.0,
                                    "note": f"method {solver.name!r} has no discretisation to refine"}
        else:
            extra["convergence"] = convergence_report(result, refined.run())
    return write_result(result, out, force=force, extra_summary=extra)


def print_run_summary(summary: dict, out: Path) -> None:
    rate_unit = summary.get("units", {}).get("rate_golden_rule", "")
    rate_unit = f" {rate_unit}" if rate_unit else ""
    print(f"{summary['title']}: method {summary['method']}, simulated")
    print(f"  golden-rule rate {summary['rate_golden_rule']:.6g}{rate_unit}, fitted rate "
          f"{summary['rate_fitted']:.6g}{rate_unit}, final excited population "
          f"{summary['final_excited']:.6g}")
    if "convergence" in summary:
        print(f"  convergence: largest change of P_e on refinement "
              f"{summary['convergence']['max_change_excited']:.3g}")
    for w in summary.get("warnings", []):
        print(f"  warning: {w}")
    print(f"  files in {out}/")


def cmd_run(args) -> int:
    scenario = load_scenario(args.scenario)
    if args.dry_run:
        from .solvers import solver_for
        from .solvers.base import available_memory

        estimate = solver_for(scenario).estimate()
        print(f"{scenario.title}: method {scenario.run.method} would use {estimate.describe()}; "
              f"{available_memory() / 2**30:.3g} GiB available"
              + (f"; size set by {', '.join(estimate.keys)}" if estimate.keys else ""))
        return 0
    if args.out is None:
        raise UsageError("run: --out DIR is required (or --dry-run)")
    out = Path(args.out)
    summary = run_to_folder(scenario, out, check=args.check, force=args.force,
                            progress=sys.stderr.isatty())
    print_run_summary(summary, out)
    return 0


def cmd_demo(args) -> int:
    from .demo import run_demo

    return run_demo(Path(args.out), force=args.force)


def cmd_compare(args) -> int:
    from .compare import compare_to_folder

    compare_to_folder(load_scenario(args.scenario), Path(args.out), force=args.force)
    print(f"comparison written to {args.out}/")
    return 0


def cmd_sweep(args) -> int:
    from .sweep import sweep_command

    return sweep_command(args)


def cmd_new(args) -> int:
    from .templates import write_template

    path = write_template(args.name, force=args.force)
    print(f"wrote {path}")
    return 0


def cmd_figures(args) -> int:
    from .demo import make_readme_figures

    for path in make_readme_figures(Path(args.out)):
        print(path)
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="recoilsim", description=(
        "Simulated decay of a two-level detector with a quantum centre of mass."))
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("demo", help="run the bundled default scenario end to end")
    p.add_argument("--out", default="recoilsim-demo", help="output folder (default ./recoilsim-demo)")
    p.add_argument("--force", action="store_true", help="replace an existing output folder")
    p.set_defaults(func=cmd_demo)

    p = sub.add_parser("rates", help="golden-rule template function and packet-averaged rate")
    p.add_argument("scenario")
    p.add_argument("--at", help="comma-separated momenta along the packet axis")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE.png", help="figure of the three models' rates")
    p.set_defaults(func=cmd_rates)

    p = sub.add_parser("run", help="time evolution with the scenario's run.method")
    p.add_argument("scenario")
    p.add_argument("--out", help="output folder")
    p.add_argument("--check", action="store_true", help="rerun refined and report convergence")
    p.add_argument("--dry-run", action="store_true", help="print the memory and work estimate only")
    p.add_argument("--force", action="store_true", help="replace an existing output folder")
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("compare", help="perturbative, markov, exact (and fock) side by side")
    p.add_argument("scenario")
    p.add_argument("--out", required=True)
    p.add_argument("--force", action="store_true")
    p.set_defaults(func=cmd_compare)

    p = sub.add_parser("sweep", help="sweep scenario keys over values, in parallel, resumable")
    p.add_argument("scenario")
    p.add_argument("--vary", action="append", required=True, metavar="KEY=SPEC",
                   help="dotted key and values: a:b:n (linear), a:b:nlog (log) or v1,v2,...")
    p.add_argument("--out", required=True)
    p.add_argument("--workers", type=int, default=None, help="local worker processes")
    p.add_argument("--scheduler", default=None, help="address of an existing Dask scheduler")
    p.set_defaults(func=cmd_sweep)

    p = sub.add_parser("new", help="write a commented template scenario NAME.toml")
    p.add_argument("name")
    p.add_argument("--force", action="store_true")
    p.set_defaults(func=cmd_new)

    p = sub.add_parser("figures", help="regenerate the README's figures")
    p.add_argument("--out", default="figures")
    p.set_defaults(func=cmd_figures)
    return parser


def main(argv: list[str] | None = None) -> int:
    from .output import OutputExists

    args = build_parser().parse_args(argv)
    try:
        return args.func(args)
    except ScenarioError as exc:
        for line in exc.problems:
            print(f"recoilsim: {line}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except (UsageError, OutputExists) as exc:
        print(f"recoilsim: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:  # output piped into a program that stopped reading (e.g. head)
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print("recoilsim: interrupted; no partial output was left behind", file=sys.stderr)
        return 130
    except MemoryError:
        print("recoilsim: ran out of memory; `recoilsim run SCENARIO --dry-run` shows the "
              "estimate; lower the [bath] or [grid] sizes", file=sys.stderr)
        return EXIT_BAD_INPUT
    except Exception as exc:  # the last line of defence: one line, no traceback
        if os.environ.get("RECOILSIM_DEBUG"):
            raise
        print(f"recoilsim: internal error ({type(exc).__name__}: {exc}); rerun with "
              "RECOILSIM_DEBUG=1 for the traceback and please report it", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
