"""Writing a Result's data: CSV tables and summary.json, in output units, atomically.

`result_tables` gives a run's tables (file stem -> column -> values) in the output units of a
scenario with units (natural units otherwise); `file_summary` the summary as written.  The
figures are drawn by `sim.plotting`; a whole run folder is put together by
`sim.workflows.run.write_result`.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
from scipy import constants as const

from ..config.units import SUMMARY_FIT_KEYS, SUMMARY_KEYS, UnitSystem
from ..errors import OutputExists
from ..physics.golden_rule import recoil_velocity
from ..result import Result
from .atomic import atomic_write_text, staged_folder


#: the marker file recoilsim writes into every output folder it makes
MARKER_FILE = ".recoilsim.json"
#: at most this many foreign files are named in a refusal
LISTED_FILES = 5


def write_marker(folder: str | Path, kind: str, *, files: list[str] | None = None,
                 folders: list[str] | None = None, folder_pattern: str | None = None) -> None:
    """Write `folder`'s marker file: what recoilsim wrote there (last file of a folder).

    Parameters
    ----------
    folder : str or Path
        The folder (usually a stage).
    kind : str
        "run", "compare", "sweep", "sweep-point" or "demo".
    files : list of str, optional
        Names of the files recoilsim wrote directly in `folder`; default: every file there now.
    folders : list of str, optional
        Names of sub-folders recoilsim wrote (each carries its own marker).
    folder_pattern : str, optional
        A regular expression for further sub-folder names recoilsim writes later (e.g. a
        sweep's points), each carrying its own marker.
    """
    folder = Path(folder)
    if files is None:
        files = sorted(p.name for p in folder.iterdir()
                       if p.is_file() and not p.is_symlink() and p.name != MARKER_FILE)
    write_json(folder / MARKER_FILE, {"written_by": "recoilsim", "simulated": True,
                                      "kind": kind, "files": sorted(files),
                                      "folders": sorted(folders or []),
                                      "folder_pattern": folder_pattern})


def read_marker(folder: str | Path) -> dict | None:
    """The marker of `folder`, or None when it has none (or it is unreadable).

    Parameters
    ----------
    folder : str or Path

    Returns
    -------
    dict or None
        The marker's contents (`write_marker`).
    """
    path = Path(folder) / MARKER_FILE
    if path.is_symlink() or not path.is_file():
        return None
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("written_by") != "recoilsim":
        return None
    return data


def foreign_entries(folder: str | Path) -> list[str] | None:
    """Entries of `folder` recoilsim did not write; None when `folder` has no marker.

    Known are the marker, the files it lists, its sub-folders (listed or matching its
    pattern; each checked the same way) and recoilsim's own staging leftovers of those names
    (`sim.io.atomic.stage_pattern`).  Symbolic links are never recoilsim's.

    Parameters
    ----------
    folder : str or Path

    Returns
    -------
    list of str or None
        Paths relative to `folder` (a folder with a trailing "/"), sorted.
    """
    folder = Path(folder)
    marker = read_marker(folder)
    if marker is None:
        return None
    files = set(marker.get("files") or []) | {MARKER_FILE}
    folders = set(marker.get("folders") or [])
    pattern = re.compile(marker["folder_pattern"]) if marker.get("folder_pattern") else None

    def subfolder(name: str) -> bool:
        return name in folders or bool(pattern and pattern.fullmatch(name))

    def staging(name: str) -> bool:
        match = re.fullmatch(r"\.(.+)\.[a-z0-9_]{8}\.(part|old)", name)
        return bool(match) and (match.group(1) in files or subfolder(match.group(1)))

    foreign = []
    for entry in sorted(folder.iterdir()):
        name = entry.name
        if entry.is_symlink():
            foreign.append(name)
        elif entry.is_dir() and subfolder(name):
            inner = foreign_entries(entry)
            foreign += [f"{name}/"] if inner is None else [f"{name}/{p}" for p in inner]
        elif (entry.is_file() and name in files) or staging(name):
            continue
        else:
            foreign.append(name + ("/" if entry.is_dir() else ""))
    return foreign


def _listed(names: list[str]) -> str:
    shown = ", ".join(names[:LISTED_FILES])
    return shown + (f" and {len(names) - LISTED_FILES} more" if len(names) > LISTED_FILES else "")


def refuse_existing(out: str | Path, force: bool = False) -> None:
    """Refuse an output folder that cannot be (re)placed: `force` replaces only recoilsim's own.

    Parameters
    ----------
    out : str or Path
    force : bool
        Allow replacing a non-empty folder that recoilsim wrote (its marker lists every file
        in it).

    Raises
    ------
    OutputExists
        If `out` is a file, the current folder or one holding it; or a non-empty folder and
        `force` is not given; or, with `force`, a folder without recoilsim's marker or holding
        files recoilsim did not write (they are named).
    """
    shown = str(out)
    out = Path(os.path.abspath(out))
    if out.is_symlink() or (out.exists() and not out.is_dir()):
        raise OutputExists(f"--out {shown!r}: exists and is not a folder; choose another name")
    cwd = Path(os.path.abspath(os.getcwd()))
    if out == cwd or out in cwd.parents:
        raise OutputExists(f"--out {shown!r}: is the current folder or holds it, and recoilsim "
                           "replaces its output folder as a whole; choose a new sub-folder, "
                           "e.g. --out results")
    if not out.exists() or not any(out.iterdir()):
        return
    foreign = foreign_entries(out)
    if not force:
        if foreign is None:
            raise OutputExists(f"--out {shown!r}: folder is not empty and was not written by "
                               f"recoilsim (no {MARKER_FILE}); choose another folder (--force "
                               "replaces only recoilsim's own folders)")
        raise OutputExists(f"--out {shown!r}: folder holds an earlier recoilsim output; pass "
                           "--force to replace it, or choose another folder")
    if foreign is None:
        raise OutputExists(f"--out {shown!r}: --force replaces only a folder recoilsim wrote, "
                           f"and this one has no {MARKER_FILE}; move its files away or choose "
                           "another folder")
    if foreign:
        raise OutputExists(f"--out {shown!r}: --force refused, the folder holds files recoilsim "
                           f"did not write: {_listed(foreign)}; move them away or choose "
                           "another folder")


@contextmanager
def output_folder(out: str | Path, force: bool = False, kind: str = "run", folders=None):
    """A staged folder that replaces `out` when the block succeeds (refused first and again
    before the swap), its marker written last.

    Parameters
    ----------
    out : str or Path
    force : bool
        Allow replacing a non-empty folder recoilsim wrote (`refuse_existing`).
    kind : str
        The folder's kind for its marker (`write_marker`).
    folders : list of str, optional
        Sub-folders written into the stage (each with its own marker).

    Yields
    ------
    Path
        The stage folder (`sim.io.atomic.staged_folder`).

    Raises
    ------
    OutputExists
        Before anything runs (and again before the swap), if `out` may not be replaced.
    """
    refuse_existing(out, force)
    with staged_folder(out, before_install=lambda: refuse_existing(out, force)) as stage:
        yield stage
        write_marker(stage, kind, folders=folders)


def _cell(value) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return str(int(value))
    value = float(value)
    return "nan" if math.isnan(value) else repr(value) if value.is_integer() else f"{value:.12g}"


def csv_text(columns: dict[str, np.ndarray | list]) -> str:
    """A CSV table: header row of column names, one row per entry.

    Parameters
    ----------
    columns : dict
        Column name -> values (equal lengths); integers are written as integers, nan as "nan",
        other numbers with 12 significant digits.

    Returns
    -------
    str
    """
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    names = list(columns)
    writer.writerow(names)
    for row in zip(*(columns[n] for n in names)):
        writer.writerow([_cell(v) for v in row])
    return buffer.getvalue()


def json_safe(value):
    """A value made JSON-safe: nan and inf as None, numpy scalars and arrays as Python values.

    Parameters
    ----------
    value : any
        Nested dicts, lists, tuples, numpy arrays and scalars.

    Returns
    -------
    any
        The same structure in plain Python types.
    """
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, np.ndarray):
        return json_safe(value.tolist())
    if isinstance(value, (np.floating, float)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def snapshot_column(t: float) -> str:
    """Column name of a momentum snapshot in momentum.csv.

    Parameters
    ----------
    t : float
        The snapshot time (output units).

    Returns
    -------
    str
        "t=<time>" with 6 significant digits.
    """
    return f"t={t:.6g}"


def result_tables(result: Result) -> dict[str, dict[str, np.ndarray]]:
    """The CSV tables of a result, in output units.

    Parameters
    ----------
    result : Result

    Returns
    -------
    dict
        File stem -> column -> values: population (t, excited), recoil (t, p_mean, p_var, x_var,
        x_var_transverse where the run has it, purity), momentum (p, then one density column per snapshot), coherence (t, coherence)
        when the run reports the spatial coherence, and the method's own tables;
        times, momenta, variances and densities in the output units of a scenario with units
        (natural units otherwise).
    """
    units = result.scenario.units
    conv = (lambda column, values: units.to_output(column, values)) if units else (
        lambda column, values: np.asarray(values))
    t = conv("t", result.times)
    tables = {
        "population": {"t": t, "excited": result.excited},
        "recoil": {column: (conv(column, values) if column != "purity" else values)
                   for column, values in result.recoil_columns().items()},
    }
    momentum = {"p": conv("p", result.momentum_grid)}
    for j, ts in enumerate(result.snapshot_times):
        name = snapshot_column(float(conv("t", np.array([ts]))[0]))
        momentum[name] = conv("density", result.momentum_density[:, j])
    tables["momentum"] = momentum
    if result.coherence is not None:
        tables["coherence"] = {"t": t, "coherence": result.coherence}
    for name, columns in result.tables.items():
        tables[name] = {c: (conv(c, v) if c != "trajectory" else v) for c, v in columns.items()}
    return tables


def file_summary(result: Result, extra_summary: dict | None = None) -> dict:
    """The summary as written to summary.json.

    Parameters
    ----------
    result : Result
    extra_summary : dict, optional
        Entries added to it (e.g. "convergence", "sweep_point").

    Returns
    -------
    dict
        In natural units, plus the output-unit entries (`unit_entries`) for a scenario with units.
    """
    summary = dict(result.summary)
    if extra_summary:
        summary.update(extra_summary)
    units = result.scenario.units
    if units is not None:
        summary.update(unit_entries(units, result))
    return summary


def unit_entries(units: UnitSystem, result: Result) -> dict:
    """summary.json entries of a run in physical units.

    Parameters
    ----------
    units : UnitSystem
        The scenario's output units.
    result : Result

    Returns
    -------
    dict
        "units" (every column written -> its unit), recoil_velocity_m_s (m/s), the natural energy
        unit (eV), rate_golden_rule, rate_fitted, lamb_shift (inverse output time unit) and
        t_max (output time unit), and "fit" with its t_start, t_end (output time unit) and
        line_rate (inverse output time unit).
    """
    columns = {c for table in result_tables(result).values() for c in table}
    names = {c: units.column_unit(c) for c in sorted(columns)}
    entries: dict[str, Any] = {}
    for key in SUMMARY_KEYS:
        if key in result.summary:
            value = result.summary[key]  # None: withheld with its reason (e.g. rate_fitted)
            entries[key] = None if value is None else float(units.to_output(key, value))
            names[key] = units.column_unit(key)
    fit = result.summary.get("fit")
    if fit is not None:  # the fit window and its line in output units too
        entries["fit"] = {**fit, **{key: float(units.to_output(key, fit[key]))
                                    for key in SUMMARY_FIT_KEYS if fit.get(key) is not None}}
        names.update({f"fit.{key}": units.column_unit(key) for key in SUMMARY_FIT_KEYS})
    names["recoil_velocity_m_s"] = "m/s"
    names["natural_energy_unit_eV"] = "eV"
    names["resolved"] = ("natural units: hbar = c = 1, energy unit E0 = detector.gap = "
                         f"{units.energy_joule / const.e:.10g} eV")
    return {"units": names, "recoil_velocity_m_s": recoil_velocity(result.scenario),
            "natural_energy_unit_eV": units.energy_joule / const.e, **entries}


def write_tables(result: Result, folder: str | Path, extra_summary: dict | None = None) -> dict:
    """Write every CSV table of a run into `folder`.

    Parameters
    ----------
    result : Result
    folder : str or Path
    extra_summary : dict, optional
        Entries for the summary (`file_summary`).

    Returns
    -------
    dict
        The summary to be written with the tables (summary.json is the caller's last file).
    """
    folder = Path(folder)
    for name, columns in result_tables(result).items():
        atomic_write_text(folder / f"{name}.csv", csv_text(columns))
    return file_summary(result, extra_summary)


def write_json(path: str | Path, data) -> None:
    """Write `data` as indented JSON (nan and inf as null), atomically.

    Parameters
    ----------
    path : str or Path
    data : dict or list
    """
    atomic_write_text(path, json.dumps(json_safe(data), indent=2) + "\n")
