"""Parameter sweeps: `recoilsim sweep SCENARIO --vary KEY=SPEC [--vary ...] --out DIR`.

KEY is a dotted scenario key (``packet.width``); SPEC is ``a:b:n`` (n values, linear),
``a:b:nlog`` (n values, geometric; a, b > 0) or ``v1,v2,...`` (numbers, true/false, or strings
such as model names or unit strings "50 nm").  A range may carry a unit on both ends
(``"50 nm:400 nm:4log"``).  The product of every --vary is swept.

Layout of DIR (one sweep per folder):

* ``sweep.json``: the sweep's definition (scenario as read, the varied keys and values); a rerun
  must match it;
* ``point-0000/`` ...: one run folder per point, written by
  :func:`sim.workflows.run.write_result` as a whole (staged folder + rename), its summary.json
  carrying ``"sweep_point"``; a point whose run raised holds only ``failed.json`` (written the
  same way) with its one-line error;
* ``sweep.csv``: one row per finished point (a column per varied key named by its dotted key,
  then rate_golden_rule, rate_fitted, final_excited, gamma_over_omega, lamb_shift, warnings
  (count), dropped (keys that do not apply at the point, e.g. coupling.matching for a model
  other than one-particle: dropped there, not fatal), status = "ok" or "failed: <error>"),
  rebuilt atomically from the point records after each point.  Rates are those of
  summary.json: natural units, or the output units of a scenario with units (sweep.json
  "units" lists every column's; each point's summary.json its own, since varying run.t_max
  across time units, "100 ns,1 us", changes the rate unit per row);
* ``sweep.png``: a chosen column against the first varied key, one line per value of the
  second.

With ``--rates-only`` a point computes only the golden-rule rates (no time evolution, no
figures; its folder holds summary.json alone); ``--no-figures`` skips each point's figures.

Resuming: a rerun of the same command skips every point with a summary.json and runs the rest
(failed points are retried), so an interrupted sweep loses no finished point and a killed one
leaves no half record.  Points run on local worker processes (--workers, default: one per core)
or, with --scheduler ADDRESS, on an existing Dask cluster whose workers share DIR's file system.
Exit status: 0 when every point is ok, 1 when some failed or were lost with their worker.
"""

from __future__ import annotations

import fcntl
import itertools
import json
import math
import os
import re
import shutil
import signal
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from contextlib import contextmanager
from dataclasses import dataclass
from multiprocessing import get_context
from pathlib import Path
from typing import Any

import numpy as np
from tqdm import tqdm

from ..config.scenario import inapplicable_keys, set_keys
from ..config.schema import SCHEMA, Scenario
from ..config.units import QUANTITY_TEXT
from ..errors import ScenarioError, UsageError
from ..io.atomic import atomic_write_text, remove_stale_stages
from ..io.writers import (csv_text, json_safe, output_folder, refuse_existing,
                          write_json, write_marker)
from ..physics.checks import load_scenario
from ..physics.golden_rule import packet_rate
from ..plotting import DPI, FORMATS, figure_dpi, figure_format, save, sweep_figure
from ..result import run
from .rates import rates_report
from .run import write_result

#: refuse sweeps larger than this many points (a typo in n, most likely)
MAX_POINTS = 100_000
#: columns of sweep.csv after the varied keys: numbers taken from each point's summary.json, then
#: the warning count, the keys dropped at the point (";"-separated) and the status
SUMMARY_COLUMNS = ("rate_golden_rule", "rate_fitted", "final_excited", "gamma_over_omega",
                   "lamb_shift")
RESULT_COLUMNS = (*SUMMARY_COLUMNS, "warnings", "dropped", "status")
#: what a point computes: the full run of its method, or only the golden-rule rates
MODES = ("run", "rates-only")
DEFINITION_FILE = "sweep.json"
TABLE_FILE = "sweep.csv"
FIGURE_STEM = "sweep"
#: sweep.csv columns sweep.png can draw (the numbers; --plot-column)
PLOT_COLUMNS = (*SUMMARY_COLUMNS, "warnings")
FAILED_FILE = "failed.json"
LOCK_FILE = ".sweep.lock"
#: names of the point folders (the sweep folder's marker lists them by this pattern)
POINT_PATTERN = r"point-[0-9]{4,}"
#: staging leftovers recoilsim makes inside a sweep folder (points and its own files)
STALE_PATTERN = re.compile(r"\.(" + POINT_PATTERN + r"|sweep\.csv|sweep\.json|\.recoilsim\.json)"
                           r"\.[a-z0-9_]{8}\.(part|old)")
#: seconds worker processes get to clean up after a terminate, before they are killed
WORKER_GRACE = 0.8
#: seconds to wait for a Dask scheduler before giving up
SCHEDULER_TIMEOUT = 20
#: at most this many invalid points are listed before the sweep is refused
LISTED_PROBLEMS = 5


@dataclass(frozen=True)
class Axis:
    """One --vary: a dotted scenario key and the values it takes."""

    key: str
    values: tuple


@dataclass(frozen=True)
class PointTask:
    """One point of a sweep: everything a worker needs to run it and write its folder."""

    scenario: Scenario
    index: int
    values: dict
    folder: str
    mode: str = "run"
    figures: bool = True
    fmt: str = "png"
    dpi: float = DPI


# ---------------------------------------------------------------------------------------------
# --vary KEY=SPEC
# ---------------------------------------------------------------------------------------------


def _scalar(text: str):
    """A list item: int, float, true/false, or the string itself."""
    lowered = text.lower()
    if lowered in ("true", "false"):
        return lowered == "true"
    for kind in (int, float):
        try:
            return kind(text)
        except ValueError:
            pass
    return text


def _range_end(text: str, what: str, spec: str) -> tuple[float, str]:
    """(number, unit text) of one end of a range."""
    match = QUANTITY_TEXT.match(text)
    if not match:
        raise UsageError(f"--vary {spec!r}: {what} {text!r} is not a number (or number "
                              "with a unit); expected a:b:n, a:b:nlog or v1,v2,...")
    return float(match.group(1)), match.group(2)


def parse_range(spec: str, body: str) -> tuple:
    """Values of 'a:b:n' (linear) or 'a:b:nlog' (geometric), numbers or numbers with a unit.

    Parameters
    ----------
    spec : str
        The whole --vary argument (quoted in messages).
    body : str
        Its SPEC, the text after "=": 'a:b:n' or 'a:b:nlog', each end a number or a number
        with a unit ("50 nm").

    Returns
    -------
    tuple
        n floats, as a scenario file would give the key, or, when the ends carry a unit, n
        strings "value unit" (12 significant digits) for the scenario to convert.

    Raises
    ------
    UsageError
        If the count is not a whole number >= 1, an end is not a number, the ends' units
        differ, or a log range has an end <= 0.
    """
    start, stop, count = (part.strip() for part in body.split(":"))
    log = count.lower().endswith("log")
    count = count[:-3] if log else count
    if not count.isdigit() or int(count) < 1:
        raise UsageError(f"--vary {spec!r}: the count {count!r} must be a whole number "
                              ">= 1 (a:b:n or a:b:nlog)")
    a, unit_a = _range_end(start, "start", spec)
    b, unit_b = _range_end(stop, "stop", spec)
    if unit_a != unit_b:
        raise UsageError(f"--vary {spec!r}: both ends need the same unit "
                              f"({unit_a or 'none'!r} vs {unit_b or 'none'!r})")
    if log and not (a > 0 and b > 0):
        raise UsageError(f"--vary {spec!r}: a log range needs a > 0 and b > 0")
    values = (np.geomspace if log else np.linspace)(a, b, int(count))
    if unit_a:
        return tuple(f"{v:.12g} {unit_a}" for v in values)
    return tuple(float(v) for v in values)


def parse_vary(text: str) -> Axis:
    """KEY=SPEC -> Axis; UsageError (one line) for a bad key or spec.

    Parameters
    ----------
    text : str
        One --vary argument: a dotted scenario key, "=", and a range (`parse_range`) or a
        list v1,v2,... (each item an int, float, true/false, or a string).

    Returns
    -------
    Axis
        The key and its values, in the order given.

    Raises
    ------
    UsageError
        If "=" or the spec is missing, the key is not a scenario key, the range is malformed,
        or a list item is empty.
    """
    key, sep, body = text.partition("=")
    key, body = key.strip(), body.strip()
    table, _, name = key.partition(".")
    if not sep or not body:
        raise UsageError(f"--vary {text!r}: expected KEY=SPEC, e.g. packet.width=5:50:4log")
    if table not in SCHEMA or name not in SCHEMA[table]:
        raise UsageError(f"--vary {text!r}: {key!r} is not a scenario key; use table.key, "
                              "e.g. packet.width (keys: see `recoilsim new`)")
    if body.count(":") == 2 and "," not in body:
        return Axis(key, parse_range(text, body))
    if ":" in body and "," not in body:
        raise UsageError(f"--vary {text!r}: a range is a:b:n or a:b:nlog")
    items = [item.strip() for item in body.split(",")]
    if any(not item for item in items):
        raise UsageError(f"--vary {text!r}: empty value in the list v1,v2,...")
    return Axis(key, tuple(_scalar(item) for item in items))


def sweep_points(axes: list[Axis]) -> list[dict]:
    """Every combination of the axes' values (the first axis varies slowest).

    Parameters
    ----------
    axes : list of Axis
        The parsed --vary arguments.

    Returns
    -------
    list of dict
        One dict per point: dotted key -> value.

    Raises
    ------
    UsageError
        If a key is varied twice, or the sweep would have more than `MAX_POINTS` points.
    """
    keys = [axis.key for axis in axes]
    if len(set(keys)) != len(keys):
        raise UsageError("--vary: each key may be varied once; repeated: "
                              + ", ".join(sorted({k for k in keys if keys.count(k) > 1})))
    count = math.prod(len(axis.values) for axis in axes)
    if count > MAX_POINTS:
        raise UsageError(f"--vary: {count} points; a sweep has at most {MAX_POINTS}")
    return [dict(zip(keys, combo)) for combo in itertools.product(*(a.values for a in axes))]


def point_label(values: dict) -> str:
    """A point's values as text, "key=value, ..." (for messages).

    Parameters
    ----------
    values : dict
        Dotted key -> value of one point.

    Returns
    -------
    str
    """
    return ", ".join(f"{k}={v}" for k, v in values.items())


def point_scenario(scenario: Scenario, values: dict) -> tuple[Scenario, dict]:
    """The scenario of one point, without the keys that do not apply there.

    A key valid alone that the point's other keys make meaningless (`inapplicable_keys`, e.g.
    coupling.matching at a point whose detector.model is not "one-particle") is dropped at that
    point instead of failing it.

    Parameters
    ----------
    scenario : Scenario
        The sweep's base scenario.
    values : dict
        Dotted key -> value of the point.

    Returns
    -------
    scenario : Scenario
        The point's scenario, loaded and validated (`sim.physics.checks.load_scenario`).
    dropped : dict
        Dotted key -> why it was dropped (empty when none was).

    Raises
    ------
    ScenarioError
        If a key is not a scenario key, or the point's scenario is not valid.
    """
    raw = set_keys(scenario.source, values)
    dropped = inapplicable_keys(raw)
    for dotted in dropped:
        table, key = dotted.split(".")
        del raw[table][key]
    return load_scenario(raw), dropped


def invalid_points(scenario: Scenario, points: list[dict]) -> list[str]:
    """One problem line per invalid key value (checked before anything runs).

    Parameters
    ----------
    scenario : Scenario
        The sweep's base scenario.
    points : list of dict
        The points (`sweep_points`).

    Returns
    -------
    list of str
        "point KEY=VALUE, ...: problem" lines, at most `LISTED_PROBLEMS` of them and then one
        line counting the rest; empty when every point validates.
    """
    problems = []
    for values in points:
        try:
            point_scenario(scenario, values)
        except ScenarioError as exc:
            problems += [f"point {point_label(values)}: {p}" for p in exc.problems]
    if len(problems) > LISTED_PROBLEMS:
        problems = problems[:LISTED_PROBLEMS] + [f"... and {len(problems) - LISTED_PROBLEMS} "
                                                 "more problems"]
    return problems


# ---------------------------------------------------------------------------------------------
# One point (runs in a worker)
# ---------------------------------------------------------------------------------------------


def folder_name(index: int, count: int) -> str:
    """point-0000 ... (at least four digits, enough for `count` points).

    Parameters
    ----------
    index : int
        The point's index (from 0).
    count : int
        Number of points in the sweep.

    Returns
    -------
    str
        The folder's name, e.g. "point-0007".
    """
    return f"point-{index:0{max(4, len(str(count - 1)))}d}"


def one_line(exc: BaseException) -> str:
    """An exception as one line: its type and the first line of its message.

    Parameters
    ----------
    exc : BaseException

    Returns
    -------
    str
        "TypeName: first line", or the type name alone for an empty message.
    """
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}: {text[0]}" if text else type(exc).__name__


def rates_summary(scenario: Scenario) -> dict:
    """A rates-only point's summary: the golden-rule rates, no time evolution.

    Parameters
    ----------
    scenario : Scenario
        The point's scenario.

    Returns
    -------
    dict
        "simulated", "title", "method" ("golden rule only"), rate_golden_rule and rest_rate
        (inverse time: output units for a scenario with units, listed under "units"),
        gamma_over_omega (packet-averaged Gamma / Omega, dimensionless), the
        template function {"p", "rate"} (`rates_report`) and "warnings" (the scenario's notes).
    """
    report = rates_report(scenario, None)
    summary = {"simulated": True, "title": scenario.title, "method": "golden rule only",
               "rate_golden_rule": report["rate"], "rest_rate": report["rest_rate"],
               "gamma_over_omega": packet_rate(scenario) / scenario.detector.gap,
               "template": report["template"], "warnings": list(scenario.notes)}
    if "units" in report:
        summary["units"] = {"rate_golden_rule": report["units"]["rate"],
                            "rest_rate": report["units"]["rest_rate"], "p": report["units"]["p"]}
    return summary


def run_point(task: PointTask) -> int:
    """Run one point and write its record (run folder, or failed.json); returns its index.

    Any exception of the run is recorded, not raised: one failed point never stops a sweep.
    Mode "run" writes the method's full run folder (figures unless `task.figures` is False);
    mode "rates-only" writes only summary.json with the golden-rule rates (`rates_summary`).

    Parameters
    ----------
    task : PointTask
        The point: base scenario, index, dotted key -> value, its folder, mode and figures.

    Returns
    -------
    int
        ``task.index``.
    """
    folder = Path(task.folder)
    record = {"index": task.index, "values": task.values}
    try:
        scenario, dropped = point_scenario(task.scenario, task.values)
        record["dropped"] = dropped
        gamma = {"gamma_over_omega": None}
        if task.mode == "rates-only":
            summary = rates_summary(scenario)
            with output_folder(folder, force=True, kind="sweep-point") as stage:
                write_json(stage / "summary.json", {**summary, "sweep_point": record})
        else:
            result = run(scenario)
            gamma["gamma_over_omega"] = result.summary["rate_golden_rule"] / scenario.detector.gap
            write_result(result, folder, force=True, figures=task.figures,
                         extra_summary={"sweep_point": record, **gamma}, fmt=task.fmt,
                         dpi=task.dpi)
    except Exception as exc:  # noqa: BLE001 - recorded in failed.json and sweep.csv
        failure = {"sweep_point": record, "status": f"failed: {one_line(exc)}", "simulated": True}
        with output_folder(folder, force=True, kind="sweep-point") as stage:
            write_json(stage / FAILED_FILE, failure)
    return task.index


def _number(data: dict, key: str) -> float:
    """A summary number, nan where it is absent or null."""
    value = data.get(key)
    return math.nan if value is None else value


def point_row(folder: Path, values: dict) -> dict | None:
    """The sweep.csv row of a point from its record on disk; None if it has not finished.

    Parameters
    ----------
    folder : Path
        The point's folder.
    values : dict
        The point's dotted key -> value.

    Returns
    -------
    dict or None
        `values` plus the `SUMMARY_COLUMNS` as in the point's summary.json (rates and the
        Lamb shift in inverse time: natural units, or output units for a scenario with units;
        final_excited and gamma_over_omega = Gamma / Omega dimensionless; nan when absent,
        null or failed), "warnings" (count), "dropped" (the keys dropped at the point,
        ";"-separated) and "status" ("ok" or "failed: <error>"); None when the folder holds
        neither summary.json nor failed.json.
    """
    summary, failed = folder / "summary.json", folder / FAILED_FILE
    if summary.is_file():
        data = json.loads(summary.read_text())
        status = "ok"
    elif failed.is_file():
        data = json.loads(failed.read_text())
        status = data["status"]
    else:
        return None
    dropped = data.get("sweep_point", {}).get("dropped", {})
    return {**values, **{k: _number(data, k) for k in SUMMARY_COLUMNS},
            "warnings": len(data.get("warnings", [])), "dropped": ";".join(dropped),
            "status": status}


# ---------------------------------------------------------------------------------------------
# The sweep folder
# ---------------------------------------------------------------------------------------------


def column_units(scenario: Scenario, axes: list[Axis]) -> dict:
    """The unit of every sweep.csv column, for sweep.json.

    Parameters
    ----------
    scenario : Scenario
        The base scenario (its output units; a point that varies a unit key may differ, its
        own summary.json lists its units).
    axes : list of Axis
        The varied keys.

    Returns
    -------
    dict
        Column -> unit text: a varied key's values are as given ("as given (unit)" for unit
        strings; natural units for bare numbers in a natural-unit scenario; none for names
        and flags); rates
        and the Lamb shift in the output rate unit or natural units; the rest dimensionless,
        a count or text.
    """
    natural = "natural units (hbar = c = 1)"
    units = scenario.units
    rate = units.column_unit("rate_fitted") if units else natural
    out = {}
    for axis in axes:
        quantities = {v.split(maxsplit=1)[1] for v in axis.values
                      if isinstance(v, str) and QUANTITY_TEXT.match(v) and len(v.split()) > 1}
        numbers = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in axis.values)
        out[axis.key] = (f"as given ({', '.join(sorted(quantities))})" if quantities
                         else (natural if units is None else "as a bare number in the scenario "
                               "file (see its notes)") if numbers else "none (a name or flag)")
    return {**out, "rate_golden_rule": rate, "rate_fitted": rate, "lamb_shift": rate,
            "final_excited": "dimensionless", "gamma_over_omega": "dimensionless",
            "warnings": "count", "dropped": "keys dropped at the point", "status": "text"}


def definition(scenario: Scenario, axes: list[Axis], mode: str = "run") -> dict:
    """What identifies a sweep: the scenario as read, the varied keys and values, the mode.

    Parameters
    ----------
    scenario : Scenario
        The base scenario (its `source`, as read, is recorded).
    axes : list of Axis
        The varied keys and their values.
    mode : str
        "run" (every point's full run) or "rates-only" (golden-rule rates only).

    Returns
    -------
    dict
        The contents of sweep.json, JSON-safe: {"simulated": True, "scenario", "vary":
        [[key, values], ...], "mode", "units" (column -> unit, `column_units`)}.
    """
    return json_safe({"simulated": True, "scenario": dict(scenario.source),
                      "vary": [[a.key, list(a.values)] for a in axes], "mode": mode,
                      "units": column_units(scenario, axes)})


def _replace_owned(out: Path, shown: str) -> None:
    """Remove the recoilsim folder `out` for a new sweep (`--force`): refused unless recoilsim
    wrote every file in it (`refuse_existing`); set aside by one rename, then removed."""
    refuse_existing(shown, force=True)
    old = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".old", dir=out.parent))
    os.replace(out, old / "previous")
    shutil.rmtree(old, ignore_errors=True)


@contextmanager
def sweep_folder(out: Path, ident: dict, force: bool = False):
    """Lock DIR for this sweep, check it holds this sweep (or nothing), clear stale stages.

    Parameters
    ----------
    out : Path
        The sweep folder, created if missing.
    ident : dict
        The sweep's definition (`definition`): written to sweep.json in a new folder, compared
        with it in an existing one.
    force : bool
        Replace a folder recoilsim wrote (its marker lists every file in it) that holds a
        different sweep or no sweep.

    Yields
    ------
    Path
        `out`, locked against other sweeps until the block ends.

    Raises
    ------
    UsageError
        If `out` is a file, another sweep holds its lock, it holds a different sweep (without
        `force`), or it is not empty and holds no sweep (without `force`).
    OutputExists
        With `force`, if `out` is not recoilsim's own folder or holds files recoilsim did not
        write (they are named), or is the current folder.
    """
    shown = str(out)
    out = Path(os.path.abspath(out))
    if out.is_symlink() or (out.exists() and not out.is_dir()):
        raise UsageError(f"--out {shown!r}: exists and is not a folder")
    remove_stale_stages(out.parent, out.name)
    definition_file = out / DEFINITION_FILE
    if out.is_dir() and not definition_file.is_file() and any(
            p.name != LOCK_FILE for p in out.iterdir()):
        if not force:
            raise UsageError(f"--out {shown!r}: folder is not empty and holds no sweep; "
                             "choose another folder")
        _replace_owned(out, shown)
    out.mkdir(parents=True, exist_ok=True)
    lock = open(out / LOCK_FILE, "w")
    try:
        try:
            fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise UsageError(f"--out {shown!r}: another sweep is writing to this "
                             "folder") from None
        if definition_file.is_file() and json.loads(definition_file.read_text()) != ident:
            if not force:
                raise UsageError(f"--out {shown!r}: holds a different sweep (scenario or "
                                 "--vary changed); pass --force to replace it, or choose "
                                 "another folder")
            _replace_owned(out, shown)
            lock.close()
            out.mkdir(parents=True)
            lock = open(out / LOCK_FILE, "w")
            fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        if not definition_file.is_file():
            write_json(definition_file, ident)
            write_marker(out, "sweep", files=[DEFINITION_FILE, TABLE_FILE, LOCK_FILE,
                                              *(f"{FIGURE_STEM}.{f}" for f in FORMATS)],
                         folder_pattern=POINT_PATTERN)
        remove_stale_stages(out, pattern=STALE_PATTERN)
        yield out
    finally:
        lock.close()


def write_table(out: Path, keys: list[str], rows: dict[int, dict]) -> None:
    """Rebuild DIR/sweep.csv from the finished points' rows, atomically.

    Parameters
    ----------
    out : Path
        The sweep folder.
    keys : list of str
        The varied dotted keys (the first columns).
    rows : dict
        Point index -> row (`point_row`), written in index order.
    """
    ordered = [rows[i] for i in sorted(rows)]
    columns = {name: [row[name] for row in ordered] for name in [*keys, *RESULT_COLUMNS]}
    atomic_write_text(out / TABLE_FILE, csv_text(columns))


def default_plot_column(mode: str) -> str:
    """The column sweep.png draws unless told: the fitted rate, or the golden rule (rates-only).

    Parameters
    ----------
    mode : str
        The sweep's mode ("run" or "rates-only").

    Returns
    -------
    str
        "rate_golden_rule" for rates-only sweeps, else "rate_fitted".
    """
    return "rate_golden_rule" if mode == "rates-only" else "rate_fitted"


def write_sweep_figure(scenario: Scenario, out: Path, column: str, fmt: str, dpi: float) -> str:
    """sweep.<fmt>: `column` of sweep.csv against the first varied key, a line per other value.

    The fitted rate is drawn with the golden-rule rate beside it as a thin reference line.

    Parameters
    ----------
    scenario : Scenario
        The base scenario (title, output units).
    out : Path
        The sweep folder holding sweep.csv.
    column : str
        A column of `PLOT_COLUMNS`.
    fmt : str
        "png", "pdf" or "svg".
    dpi : float
        Dots per inch.

    Returns
    -------
    str
        The file name written.
    """
    reference = "rate_golden_rule" if column == "rate_fitted" else None
    figure = sweep_figure(out / TABLE_FILE, column, scenario.units, reference=reference,
                          title=scenario.title)
    return save(figure, out / FIGURE_STEM, fmt, dpi).name


# ---------------------------------------------------------------------------------------------
# Execution
# ---------------------------------------------------------------------------------------------


def local_workers(requested: int | None) -> int:
    """Worker processes: as requested, else one per usable core.

    Parameters
    ----------
    requested : int or None
        The --workers value; None for the default.

    Returns
    -------
    int
        `requested`, or the number of cores this process may run on (`os.sched_getaffinity`,
        else `os.cpu_count()`).

    Raises
    ------
    UsageError
        If `requested` < 1.
    """
    if requested is None:
        return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (
            os.cpu_count() or 1)
    if requested < 1:
        raise UsageError(f"--workers {requested}: allowed: >= 1")
    return requested


#: set in a worker process once it is asked to stop
_STOPPING = False


def _worker_setup() -> None:
    """In a local worker: ignore Ctrl-C (the main process stops the workers) and turn SIGTERM
    into SystemExit, so the point being written removes its stage on the way out."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)

    def stop(signum, frame):
        global _STOPPING
        _STOPPING = True
        raise SystemExit(128 + signum)

    signal.signal(signal.SIGTERM, stop)


def _pool_point(task: PointTask) -> int:
    """`run_point` in a local worker; a worker asked to stop exits at once."""
    if _STOPPING:
        os._exit(143)
    try:
        return run_point(task)
    except SystemExit:  # SIGTERM: the stage is already removed
        os._exit(143)


def _stop_pool(pool: ProcessPoolExecutor) -> None:
    """Cancel the pool's pending points, terminate its workers (killed after `WORKER_GRACE`
    seconds) and wait for them to end."""
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        if process.is_alive():
            process.terminate()
    deadline = time.monotonic() + WORKER_GRACE
    for process in processes:
        process.join(max(0.0, deadline - time.monotonic()))
    for process in processes:
        if process.is_alive():
            process.kill()
            process.join(1.0)


def finished_indices(tasks: list[PointTask], workers: int, scheduler: str | None):
    """Run the tasks; yield (index, None) as each finishes, (None, error) for a lost one.

    Parameters
    ----------
    tasks : list of PointTask
        The points to run.
    workers : int
        Local worker processes (spawned; with 1, or a single task, the points run in this
        process); ignored with `scheduler`.
    scheduler : str or None
        Address of an existing Dask scheduler to run the points on instead.

    Yields
    ------
    index : int or None
        Index of a point whose record is written; None for a point lost with its worker.
    error : Exception or None
        Why a point was lost; None otherwise.

    Raises
    ------
    UsageError
        If the scheduler cannot be reached within `SCHEDULER_TIMEOUT` seconds.
    """
    if not tasks:
        return
    if scheduler:
        from distributed import Client
        from distributed import as_completed as dask_completed

        try:
            client = Client(scheduler, timeout=SCHEDULER_TIMEOUT)
        except (OSError, TimeoutError) as exc:
            raise UsageError(f"--scheduler {scheduler!r}: cannot reach a Dask scheduler there "
                             f"({one_line(exc)})") from None
        with client:
            futures = client.map(run_point, tasks, pure=False)
            try:
                for future in dask_completed(futures):
                    try:
                        yield future.result(), None
                    except Exception as exc:  # noqa: BLE001 - a lost worker: rerun resumes it
                        yield None, exc
            except BaseException:
                client.cancel(futures)
                raise
    elif workers == 1 or len(tasks) == 1:
        for task in tasks:
            yield run_point(task), None
    else:
        pool = ProcessPoolExecutor(min(workers, len(tasks)), mp_context=get_context("spawn"),
                                   initializer=_worker_setup)
        try:
            futures = [pool.submit(_pool_point, task) for task in tasks]
            for future in as_completed(futures):
                try:
                    yield future.result(), None
                except Exception as exc:  # noqa: BLE001 - a dead worker process
                    yield None, exc
        except BaseException:  # Ctrl-C, or the caller stopped early: stop now, not later
            _stop_pool(pool)
            raise
        pool.shutdown(wait=True)


def run_sweep(scenario: Scenario, axes: list[Axis], out: Path, *, workers: int | None = None,
              scheduler: str | None = None, progress: bool = False, force: bool = False,
              mode: str = "run", figures: bool = True, plot_column: str | None = None,
              fmt: str = "png", dpi: float = DPI) -> dict[str, Any]:
    """Run (or resume) a sweep into `out`; returns counts of its points.

    Parameters
    ----------
    scenario : Scenario
        The loaded base scenario.
    axes : list of Axis
        The varied keys (`parse_vary`); the product of their values is swept.
    out : Path
        The sweep folder (layout: see the module docstring).
    workers : int, optional
        Local worker processes; default one per usable core; ignored with `scheduler`.
    scheduler : str, optional
        Address of an existing Dask scheduler whose workers share `out`'s file system.
    progress : bool
        Show a progress bar on stderr.
    force : bool
        Replace a folder recoilsim wrote that holds a different sweep (`sweep_folder`).
    mode : str
        "run": each point's full run folder; "rates-only": only its golden-rule rates (no
        time evolution, no figures; in this process unless `workers` or `scheduler` is given).
    figures : bool
        Draw each point's figures (mode "run").
    plot_column : str, optional
        The sweep.csv column sweep.png draws (`PLOT_COLUMNS`); default `default_plot_column`.
    fmt : str
        Figure file format: "png", "pdf" or "svg" (the points' figures and sweep.png).
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    dict
        Counts {"points", "ok", "failed", "lost", "skipped"} (skipped: finished before this
        call; lost: with their worker, rerun to resume), "lost_errors" (one line per lost
        point), "dropped" (key -> number of points where it did not apply and was dropped) and
        "figure" (the file name of sweep.png, None when no point has finished).

    Raises
    ------
    ScenarioError
        If any point's values are invalid (nothing runs).
    UsageError
        If a key repeats, there are too many points, `workers` < 1, `out` cannot hold this
        sweep (`sweep_folder`) or the scheduler cannot be reached.
    """
    if mode not in MODES:
        raise UsageError(f"sweep mode {mode!r}: allowed: {', '.join(MODES)}")
    column = plot_column or default_plot_column(mode)
    if column not in PLOT_COLUMNS:
        raise UsageError(f"--plot-column {column!r}: not a number column of {TABLE_FILE}; "
                         f"allowed: {', '.join(PLOT_COLUMNS)}")
    fmt, dpi = figure_format(fmt), figure_dpi(dpi)
    points = sweep_points(axes)
    problems = invalid_points(scenario, points)
    if problems:
        raise ScenarioError(problems)
    n_workers = 1 if scheduler or (mode == "rates-only" and workers is None) \
        else local_workers(workers)
    keys = [axis.key for axis in axes]
    with sweep_folder(out, definition(scenario, axes, mode), force):
        folders = [out / folder_name(i, len(points)) for i in range(len(points))]
        rows = {i: row for i, (f, v) in enumerate(zip(folders, points))
                if (row := point_row(f, v)) is not None}
        done = {i for i, row in rows.items() if row["status"] == "ok"}
        tasks = [PointTask(scenario, i, points[i], str(folders[i]), mode, figures, fmt, dpi)
                 for i in range(len(points)) if i not in done]
        write_table(out, keys, rows)
        lost = []
        try:
            with tqdm(total=len(points), initial=len(done), unit="point", disable=not progress,
                      file=sys.stderr) as bar:
                for index, error in finished_indices(tasks, n_workers, scheduler):
                    if error is not None:
                        lost.append(one_line(error))
                        continue
                    rows[index] = point_row(folders[index], points[index])
                    write_table(out, keys, rows)
                    bar.update()
        except BaseException:
            # interrupted: the workers are stopped; list exactly the points finished on disk
            remove_stale_stages(out, pattern=STALE_PATTERN)
            rows = {i: row for i, (f, v) in enumerate(zip(folders, points))
                    if (row := point_row(f, v)) is not None}
            write_table(out, keys, rows)
            raise
        figure = write_sweep_figure(scenario, out, column, fmt, dpi) if rows else None
    failed = sum(1 for row in rows.values() if row["status"] != "ok")
    dropped: dict[str, int] = {}
    for row in rows.values():
        for key in filter(None, row["dropped"].split(";")):
            dropped[key] = dropped.get(key, 0) + 1
    return {"points": len(points), "ok": len(rows) - failed, "failed": failed,
            "lost": len(lost), "lost_errors": lost, "skipped": len(done), "dropped": dropped,
            "figure": figure}
