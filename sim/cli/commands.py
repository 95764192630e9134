"""The `recoilsim` command line.

    recoilsim demo                      bundled default scenario end to end, into ./recoilsim-demo/
    recoilsim rates SCENARIO            golden-rule template function and packet-averaged rate
    recoilsim run SCENARIO --out DIR    time evolution with the scenario's method
    recoilsim compare SCENARIO --out DIR  all methods side by side
    recoilsim sweep SCENARIO --vary KEY=SPEC --out DIR  parameter sweeps
    recoilsim new NAME                  a commented template scenario
    recoilsim figures                   regenerate the README's figures into figures/

Bad input prints one line per problem to stderr and exits with status 2.  This module only
parses arguments and prints: what each command does is in `sim.workflows`, and every import
of the package's layers happens when a command needs it, so `recoilsim --help` stays quick.
Figures are drawn with matplotlib's file backend (Agg) unless MPLBACKEND says otherwise.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import warnings
from pathlib import Path

from ..config.registry import (CHECK_TOLERANCE, COMPARE_BUDGET_SECONDS, FIGURE_DPI,
                               FIGURE_FORMATS)
from ..errors import OutputExists, ScenarioError, UsageError

EXIT_BAD_INPUT = 2


def _momenta_option(text: str):
    """--at P1,P2,...: the momenta as an array."""
    import numpy as np

    try:
        values = [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise UsageError(f"--at {text!r}: expected comma-separated numbers, e.g. --at 0,0.5,1") from None
    if not values or not all(math.isfinite(v) for v in values):
        raise UsageError(f"--at {text!r}: expected comma-separated finite numbers")
    return np.array(values)


def _load(path: str):
    """The scenario file at `path` ("-": standard input), loaded and validated.

    Its notes (warnings that did not stop it loading) go to stderr, one line each.
    """
    from ..physics.checks import load_scenario

    scenario = load_scenario(path)
    for note in scenario.notes:
        print(f"recoilsim: warning: {note}", file=sys.stderr)
    return scenario


def cmd_rates(args) -> int:
    """`recoilsim rates`: print the golden-rule rates of a scenario (or one JSON object).

    Parameters
    ----------
    args : argparse.Namespace
        ``scenario`` (TOML file), ``at`` (comma-separated momenta along the packet axis, in
        output units for a scenario with units, natural units otherwise; or None), ``json``
        (bool) and ``plot`` (PNG file for `write_rates_figure`, or None).

    Returns
    -------
    int
        The process exit status: 0.

    Raises
    ------
    ScenarioError
        If the scenario does not load or validate.
    UsageError
        If ``--at`` is not a list of finite numbers.
    """
    from ..workflows.rates import rates_report, write_rates_figure

    scenario = _load(args.scenario)
    report = rates_report(scenario, _momenta_option(args.at) if args.at else None)
    figure = write_rates_figure(scenario, args.plot, args.fmt, args.dpi) if args.plot else None
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
    if figure:
        print(f"figure: {figure}")
    return 0


def _fit_words(summary: dict) -> str:
    """The fitted rate and its verdict, or why no rate is given."""
    unit = summary.get("units", {}).get("rate_fitted", "")
    rate, fit = summary.get("rate_fitted"), summary.get("fit") or {}
    if rate is None or (isinstance(rate, float) and math.isnan(rate)):  # the reason is a warning
        return f"no fitted rate ({fit.get('verdict') or 'no exponential part to fit'})"
    verdict = fit.get("verdict")
    return f"fitted rate {rate:.6g}{' ' + unit if unit else ''}" + (f" ({verdict})" if verdict else "")


def print_run_summary(summary: dict, out: Path) -> None:
    """Print the report of a finished run: rates, fit verdict, recoil, convergence, warnings.

    Parameters
    ----------
    summary : dict
        The summary written to summary.json (`run_to_folder`); its rates are in inverse time,
        in the units listed under "units" for a scenario with units, natural units otherwise.
    out : Path
        The run folder (printed).
    """
    rate_unit = summary.get("units", {}).get("rate_golden_rule", "")
    rate_unit = f" {rate_unit}" if rate_unit else ""
    print(f"{summary['title']}: method {summary['method']}, simulated")
    print(f"  golden-rule rate {summary['rate_golden_rule']:.6g}{rate_unit}; {_fit_words(summary)}")
    line = f"  final excited population {summary['final_excited']:.6g}"
    if summary.get("trapped_population") is not None:
        line += f"; trapped (late-time plateau) {summary['trapped_population']:.4g}"
    print(line)
    for side, state in (summary.get("bound_states") or {}).items():
        if isinstance(state, dict):
            print(f"  bound state {side} the band: energy {state['energy_from_level']:+.4g} from the "
                  f"level, weight |<e|b>|^2 {state['weight']:.4g}, traps "
                  f"{state['trapped_population']:.4g} of P_e [natural units]")
    velocity = summary.get("recoil_velocity_m_s")
    if velocity is not None and math.isfinite(velocity):
        print(f"  recoil velocity of one emission at rest {velocity:.4g} m/s")
    if "convergence" in summary:
        c = summary["convergence"]
        rate = c.get("relative_change_rate")
        print(f"  convergence check: largest change of P_e on refinement "
              f"{c['max_change_excited']:.3g}, relative change of the fitted rate "
              f"{'-' if rate is None else format(rate, '.3g')}: {c.get('verdict', '')} "
              f"(tolerance {c.get('tolerance', float('nan')):.3g})")
    for w in summary.get("warnings", []):
        print(f"  warning: {w}")
    print(f"  files in {out}/")


def cmd_run(args) -> int:
    """`recoilsim run`: run the scenario's method into ``--out``, or print the dry-run estimate.

    Parameters
    ----------
    args : argparse.Namespace
        ``scenario`` (TOML file), ``out`` (folder or None), ``check``, ``force`` and
        ``dry_run`` (bools).

    Returns
    -------
    int
        The process exit status: 0; with ``--dry-run`` 0 when the run would go ahead and
        EXIT_BAD_INPUT (2) when the memory guard would refuse it (the verdict is printed).

    Raises
    ------
    ScenarioError
        If the scenario does not load or validate, or its method cannot honour it.
    UsageError
        If ``--out`` is missing without ``--dry-run``.
    OutputExists
        If ``--out`` is a file, or a non-empty folder without ``--force``.
    """
    from ..workflows.run import dry_run, run_to_folder

    scenario = _load(args.scenario)
    if args.dry_run:
        from ..solvers.base import refusal

        estimate, available = dry_run(scenario)
        reason = refusal(estimate, scenario.run.method, available)
        verdict = "would run" if reason is None else f"would be refused: {reason}"
        print(f"{scenario.title}: method {scenario.run.method} would use {estimate.describe()}; "
              f"{available / 2**30:.3g} GiB available; size set mostly by "
              f"{estimate.named(estimate.dominant_key)}"
              + (f" (size keys: {', '.join(estimate.ordered_keys())})" if estimate.keys else "")
              + f"; {verdict}")
        return 0 if reason is None else EXIT_BAD_INPUT
    if args.out is None:
        raise UsageError("run: --out DIR is required (or --dry-run)")
    out = Path(args.out)
    summary = run_to_folder(scenario, out, check=args.check, force=args.force,
                            progress=_progress(args), check_tolerance=args.check_tolerance,
                            fmt=args.fmt, dpi=args.dpi)
    print_run_summary(summary, out)
    return 0


def cmd_demo(args) -> int:
    """`recoilsim demo`: build the demo folder and print where its figures and data are.

    Parameters
    ----------
    args : argparse.Namespace
        ``out`` (the demo folder) and ``force`` (bool).

    Returns
    -------
    int
        The process exit status: 0.

    Raises
    ------
    OutputExists
        If ``--out`` is a file, or a non-empty folder without ``--force``.
    """
    from ..workflows.demo import run_demo

    out = Path(args.out)
    report = run_demo(out, force=args.force, progress=_progress(args), quiet=not _progress(args),
                      fmt=args.fmt, dpi=args.dpi)
    summary = report["exact"]
    print(f"{report['title']} (simulated)")
    print(f"  golden-rule rate {report['rate']:.6g}; exact run: {_fit_words(summary)}")
    for w in summary.get("warnings", []):
        print(f"  warning: {w}")
    f = args.fmt
    print(f"  figures: {out}/rates.{f}, {out}/exact/decay.{f}, {out}/exact/momentum.{f}, "
          f"{out}/exact/recoil_map.{f}, {out}/exact/variance.{f}, {out}/compare/compare.{f}, "
          f"{out}/sweep/sweep.{f}")
    print(f"  data: {out}/exact/*.csv, {out}/compare/compare.csv, {out}/sweep/sweep.csv")
    return 0


def _number(value, fmt: str = ".4g") -> str:
    """A table cell: the number formatted, or "-" for None or nan."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    return format(value, fmt)


def print_comparison(summary: dict, out: Path) -> None:
    """Print the compare table: method, fitted rate, largest |P_e - P_e(exact)|, verdict, warnings.

    Then one line per skipped or failed method with its reason.

    Parameters
    ----------
    summary : dict
        The compare folder's summary (`sim.workflows.compare.compare_summary`); rates in the
        units under "units" for a scenario with units, natural units otherwise.
    out : Path
        The compare folder (printed).
    """
    from ..result.result import truncation_verdict  # loaded by the comparison already

    unit = summary.get("units", {}).get("rate_fitted", "natural units")
    differences = summary["max_difference_from_exact"] or {}
    print(f"{summary['title']}: compared (simulated); golden-rule rate "
          f"{_number(summary['rate_golden_rule'], '.6g')} [{unit}]")
    print(f"  {'method':<13}{'fitted rate':>13}  {'max |dP_e| vs exact':>20}  verdict")
    for method in summary["methods"]:
        fit = summary.get("fits", {}).get(method) or {}
        verdict = fit.get("verdict") or ("reference" if method == "exact" else "ran")
        cut = summary.get("truncation", {}).get(method)
        if cut:
            verdict += (f"; truncated {cut['kept']} of {cut['of']} {cut['what']}, "
                        f"{truncation_verdict(cut['converged'])}")
        warns = len(summary["warnings"].get(method, []))
        verdict += f"; {warns} warning{'s' if warns != 1 else ''}" if warns else ""
        print(f"  {method:<13}{_number(summary['rate_fitted'].get(method)):>13}  "
              f"{_number(differences.get(method), '.3g'):>20}  {verdict}")
    for kind in ("skipped", "failed"):
        for method, reason in summary.get(kind, {}).items():
            print(f"  {method:<13}{kind}: {reason}")
    said: dict[str, list[str]] = {}  # a warning every method gives is printed once
    for method, warns in summary["warnings"].items():
        for w in warns:
            said.setdefault(w, []).append(method)
    for w, methods in said.items():
        print(f"  warning ({', '.join(methods)}): {w}")
    print(f"  files in {out}/")


def cmd_compare(args) -> int:
    """`recoilsim compare`: every method on the scenario, written into ``--out``, and a table.

    Parameters
    ----------
    args : argparse.Namespace
        ``scenario`` (TOML file), ``out`` (folder), ``force`` and ``quiet`` (bools) and
        ``budget`` (seconds per method).

    Returns
    -------
    int
        The process exit status: 0 when every method that was not skipped ran, 1 when one
        failed while running.

    Raises
    ------
    ScenarioError
        If the scenario does not load or validate, or no method gives a result.
    OutputExists
        If ``--out`` is a file, or a non-empty folder without ``--force``.
    """
    from ..workflows.compare import compare_to_folder

    out = Path(args.out)
    comparison = compare_to_folder(_load(args.scenario), out, force=args.force,
                                   budget=args.budget, progress=_progress(args),
                                   quiet=not _progress(args), fmt=args.fmt, dpi=args.dpi)
    print_comparison(comparison.summary, out)
    return 1 if comparison.failed else 0


def cmd_sweep(args) -> int:
    """`recoilsim sweep`: parse, run or resume, print a one-paragraph report.

    Parameters
    ----------
    args : argparse.Namespace
        ``scenario`` (TOML file), ``vary`` (list of KEY=SPEC), ``out`` (folder), ``workers``
        (int or None), ``scheduler`` (Dask scheduler address or None) and ``force`` (bool:
        replace a recoilsim folder holding a different sweep).

    Returns
    -------
    int
        The process exit status: 0 when every point is ok, 1 when some failed or were lost.

    Raises
    ------
    ScenarioError
        If the scenario does not load or validate, or a point's values are invalid.
    UsageError
        If a ``--vary``, ``--workers`` or ``--scheduler`` is unusable, or ``--out`` cannot hold
        this sweep.
    OutputExists
        With ``--force``, if ``--out`` is not recoilsim's own folder or holds files it did not
        write.
    """
    from ..workflows.sweep import TABLE_FILE, parse_vary, run_sweep

    scenario = _load(args.scenario)
    axes = [parse_vary(text) for text in args.vary]
    out = Path(args.out)
    counts = run_sweep(scenario, axes, out, workers=args.workers, scheduler=args.scheduler,
                       progress=_progress(args), force=args.force,
                       mode="rates-only" if args.rates_only else "run",
                       figures=not args.no_figures, plot_column=args.plot_column,
                       fmt=args.fmt, dpi=args.dpi)
    print(f"sweep of {counts['points']} points (simulated): {counts['ok']} ok, "
          f"{counts['failed']} failed, {counts['skipped']} finished earlier -> {out / TABLE_FILE}")
    if counts["figure"]:
        print(f"  figure: {out / counts['figure']}")
    for key, n in counts["dropped"].items():
        print(f"  {key} does not apply at {n} point{'s' if n != 1 else ''} and was dropped there")
    if counts["lost"]:
        print(f"recoilsim: {counts['lost']} points lost with their worker "
              f"({counts['lost_errors'][0]}); rerun the same command to resume", file=sys.stderr)
    return 0 if counts["ok"] == counts["points"] else 1


def cmd_new(args) -> int:
    """`recoilsim new`: write the commented template scenario NAME.toml.

    Parameters
    ----------
    args : argparse.Namespace
        ``name`` (scenario name or .toml path) and ``force`` (bool).

    Returns
    -------
    int
        The process exit status: 0.

    Raises
    ------
    OutputExists
        If the file exists and ``--force`` is not given.
    """
    from ..workflows.new import write_template

    path = write_template(args.name, force=args.force)
    print(f"wrote {path}")
    return 0


def cmd_figures(args) -> int:
    """`recoilsim figures`: regenerate the README's figures and print their paths.

    Parameters
    ----------
    args : argparse.Namespace
        ``out`` (folder of the figures, created if missing).

    Returns
    -------
    int
        The process exit status: 0.
    """
    from ..workflows.demo import make_readme_figures

    for path in make_readme_figures(Path(args.out), fmt=args.fmt, dpi=args.dpi):
        print(path)
    return 0


def _figure_options(parser) -> None:
    """--format and --dpi of a command that draws (the range of --dpi is checked where the
    figures are drawn, `sim.plotting.figure_dpi`, before any run)."""
    parser.add_argument("--format", dest="fmt", choices=FIGURE_FORMATS, default=FIGURE_FORMATS[0],
                        help=f"figure file format (default {FIGURE_FORMATS[0]})")
    parser.add_argument("--dpi", type=float, default=FIGURE_DPI,
                        help=f"figure resolution in dots per inch (default {FIGURE_DPI})")


def _force_option(parser, what: str = "an existing output folder") -> None:
    parser.add_argument("--force", action="store_true", help=f"replace {what}")


def _command(sub, name: str, func, help_text: str, *, scenario: bool = True):
    """A sub-command `name` run by `func`, with --quiet, and SCENARIO unless `scenario` is False."""
    p = sub.add_parser(name, help=help_text)
    if scenario:
        p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--quiet", action="store_true",
                   help="no progress bars or status lines (results and errors still print)")
    p.set_defaults(func=func)
    return p


def _progress(args) -> bool:
    """Progress bars and status lines: on a terminal (stderr), unless --quiet."""
    return sys.stderr.isatty() and not getattr(args, "quiet", False)


def _positive_option(text: str, what: str) -> float:
    """A positive finite number, or an argparse error naming what it should be."""
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"expected a positive {what}, got {text!r}")
    return value


def _tolerance_option(text: str) -> float:
    """--check-tolerance TOL: a positive finite number."""
    return _positive_option(text, "tolerance, e.g. 1e-3")


def _budget_option(text: str) -> float:
    """--budget SECONDS: a positive finite number."""
    return _positive_option(text, "number of seconds")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of every sub-command.

    Returns
    -------
    argparse.ArgumentParser
        One sub-parser per command; the parsed namespace's ``func`` is the `cmd_*` to call.
    """
    parser = argparse.ArgumentParser(prog="recoilsim", description=(
        "Simulated decay of a two-level detector with a quantum centre of mass."))
    sub = parser.add_subparsers(dest="command", required=True)

    p = _command(sub, "demo", cmd_demo, "run the bundled default scenario end to end", scenario=False)
    p.add_argument("--out", default="recoilsim-demo", help="output folder (default ./recoilsim-demo)")
    _figure_options(p)
    _force_option(p)

    p = _command(sub, "rates", cmd_rates, "golden-rule template function and packet-averaged rate")
    p.add_argument("--at", help="comma-separated momenta along the packet axis")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE.png", help="figure of the three models' rates (its "
                   "suffix, or --format, sets the format)")
    p.add_argument("--format", dest="fmt", choices=FIGURE_FORMATS, default=None,
                   help="figure file format of --plot (default: from its suffix, else png)")
    p.add_argument("--dpi", type=float, default=FIGURE_DPI,
                   help=f"figure resolution in dots per inch (default {FIGURE_DPI})")

    p = _command(sub, "run", cmd_run, "time evolution with the scenario's run.method")
    p.add_argument("--out", help="output folder")
    p.add_argument("--check", action="store_true", help="rerun refined and report convergence")
    p.add_argument("--check-tolerance", type=_tolerance_option, default=CHECK_TOLERANCE,
                   metavar="TOL",
                   help="largest change of P_e and relative change of the rate that --check "
                        f"calls converged (default {CHECK_TOLERANCE:g})")
    p.add_argument("--dry-run", action="store_true", help="print the memory and work estimate only")
    _figure_options(p)
    _force_option(p)

    p = _command(sub, "compare", cmd_compare, "perturbative, markov, exact (and fock) side by side")
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--budget", type=_budget_option, default=COMPARE_BUDGET_SECONDS, metavar="SECONDS",
                   help="skip a method whose estimated wall time exceeds this "
                        f"(default {COMPARE_BUDGET_SECONDS:g} s)")
    _figure_options(p)
    _force_option(p)

    p = _command(sub, "sweep", cmd_sweep, "sweep scenario keys over values, in parallel, resumable")
    p.add_argument("--vary", action="append", required=True, metavar="KEY=SPEC",
                   help="dotted key and values: a:b:n (linear), a:b:nlog (log) or v1,v2,...")
    p.add_argument("--out", required=True)
    p.add_argument("--workers", type=int, default=None, help="local worker processes")
    p.add_argument("--scheduler", default=None, help="address of an existing Dask scheduler")
    p.add_argument("--rates-only", action="store_true",
                   help="golden-rule rates only: no time evolution, no per-point figures")
    p.add_argument("--no-figures", action="store_true", help="no per-point figures")
    p.add_argument("--plot-column", default=None, metavar="COLUMN",
                   help="the sweep.csv column sweep.png draws against the first --vary key "
                        "(default rate_fitted, rate_golden_rule with --rates-only)")
    _figure_options(p)
    _force_option(p, "a sweep folder recoilsim wrote for a different sweep")

    p = _command(sub, "new", cmd_new, "write a commented template scenario NAME.toml", scenario=False)
    p.add_argument("name")
    _force_option(p, "an existing file NAME.toml")

    p = _command(sub, "figures", cmd_figures, "regenerate the README's figures", scenario=False)
    p.add_argument("--out", default="figures")
    _figure_options(p)
    return parser


def _plain_numeric_warning(message, category, filename, lineno, file=None, line=None):
    """Backstop of `main`: a numpy RuntimeWarning that leaked out, as one plain stderr line."""
    if issubclass(category, RuntimeWarning):
        print(f"recoilsim: warning: numerical trouble ({message}); results may be inaccurate, "
              "please report the scenario", file=sys.stderr)
    else:
        print(f"recoilsim: warning: {message}", file=sys.stderr)


def _interrupted(exc: BaseException) -> bool:
    """Whether a KeyboardInterrupt stands behind `exc` (its cause or context chain)."""
    seen = set()
    while exc is not None and id(exc) not in seen:
        if isinstance(exc, KeyboardInterrupt):
            return True
        seen.add(id(exc))
        exc = exc.__cause__ or exc.__context__
    return False


def main(argv: list[str] | None = None) -> int:
    """The `recoilsim` command: parse `argv` (default sys.argv[1:]), run, return the exit status.

    Parameters
    ----------
    argv : list of str, optional
        The arguments without the program name; default ``sys.argv[1:]``.

    Returns
    -------
    int
        The process exit status: the command's (0, or 1 for a sweep with failed or lost
        points); `EXIT_BAD_INPUT` (2) for a ScenarioError, UsageError, OutputExists or
        MemoryError, reported in one line per problem on stderr; 130 on Ctrl-C; 1 for an
        internal error (re-raised instead when RECOILSIM_DEBUG is set); 0 when stdout closes
        early.

    Raises
    ------
    SystemExit
        From argparse, for ``--help`` (0) or malformed arguments (2).
    """
    args = build_parser().parse_args(argv)
    os.environ.setdefault("MPLBACKEND", "Agg")  # files, not windows
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _plain_numeric_warning
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
        if _interrupted(exc):  # Ctrl-C inside an import surfaces as the import's own error
            print("recoilsim: interrupted; no partial output was left behind", file=sys.stderr)
            return 130
        if os.environ.get("RECOILSIM_DEBUG"):
            raise
        print(f"recoilsim: internal error ({type(exc).__name__}: {exc}); rerun with "
              "RECOILSIM_DEBUG=1 for the traceback and please report it", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
