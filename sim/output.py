"""Writing a Result to a folder: CSV tables, summary.json and figures, all atomically.

Every file is written to a temporary name in its folder and renamed into place, and a run's
folder is assembled as a temporary sibling and renamed as a whole, so an interrupted run leaves
either the previous complete output or none — never a half-written file.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from .result import Result


class OutputExists(FileExistsError):
    """The output folder already holds a run and overwriting was not asked for."""


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write `text` to `path` through a temporary file in the same folder and a rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "w", newline="") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def atomic_save_figure(fig, path: str | Path, **kwargs) -> None:
    """Save a matplotlib figure through a temporary file and a rename."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=path.suffix, dir=path.parent)
    os.close(fd)
    try:
        fig.savefig(tmp, **kwargs)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def refuse_existing(out: str | Path, force: bool = False) -> None:
    """Raise OutputExists if `out` is a file, or a non-empty folder and `force` is not given."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise OutputExists(f"--out {str(out)!r}: exists and is not a folder")
    if out.exists() and any(out.iterdir()) and not force:
        raise OutputExists(f"--out {str(out)!r}: folder exists and is not empty; pass --force to "
                           "replace it, or choose another folder")


@contextmanager
def staged_folder(out: str | Path, force: bool = False):
    """Yield a temporary folder that replaces `out` as a whole when the block succeeds.

    If `out` exists and is not empty, OutputExists is raised unless `force`; with `force` the old
    folder is swapped out only after the new one is complete.
    """
    out = Path(out)
    refuse_existing(out, force)
    out.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".part", dir=out.parent))
    try:
        yield stage
        _install(stage, out)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise


def _install(stage: Path, out: Path) -> None:
    """Rename the complete `stage` to `out`.  An existing `out` is set aside first and put back
    if the second rename fails; Ctrl-C and SIGTERM wait until both renames are done."""
    with _signals_deferred():
        if not out.exists():
            os.replace(stage, out)
            return
        old = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".old", dir=out.parent))
        previous = old / "previous"
        try:
            os.replace(out, previous)
            os.replace(stage, out)
        except BaseException:
            if previous.exists() and not out.exists():
                os.replace(previous, out)
            if not previous.exists():
                old.rmdir()
            raise
        shutil.rmtree(old, ignore_errors=True)


@contextmanager
def _signals_deferred():
    """Block SIGINT and SIGTERM in the block (POSIX); a pending one is delivered after it."""
    import signal

    if not hasattr(signal, "pthread_sigmask"):
        yield
        return
    deferred = {signal.SIGINT, signal.SIGTERM}
    blocked = signal.pthread_sigmask(signal.SIG_BLOCK, deferred)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, blocked)


def _cell(value) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return str(int(value))
    value = float(value)
    return "nan" if math.isnan(value) else repr(value) if value.is_integer() else f"{value:.12g}"


def csv_text(columns: dict[str, np.ndarray | list]) -> str:
    """A CSV table: header row of column names, one row per entry."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    names = list(columns)
    writer.writerow(names)
    for row in zip(*(columns[n] for n in names)):
        writer.writerow([_cell(v) for v in row])
    return buffer.getvalue()


def json_safe(value):
    """Recursively replace nan/inf by None and numpy scalars/arrays by Python values."""
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
    """Column name of a momentum snapshot in momentum.csv."""
    return f"t={t:.6g}"


def result_tables(result: Result) -> dict[str, dict[str, np.ndarray]]:
    """The CSV tables of a result, in output units: file stem -> column -> values."""
    units = result.scenario.units
    conv = (lambda column, values: units.to_output(column, values)) if units else (
        lambda column, values: np.asarray(values))
    t = conv("t", result.times)
    tables = {
        "population": {"t": t, "excited": result.excited},
        "recoil": {"t": t, "p_mean": conv("p_mean", result.p_mean),
                   "p_var": conv("p_var", result.p_var), "x_var": conv("x_var", result.x_var),
                   "purity": result.purity},
    }
    momentum = {"p": conv("p", result.momentum_grid)}
    for j, ts in enumerate(result.snapshot_times):
        name = snapshot_column(float(conv("t", np.array([ts]))[0]))
        momentum[name] = conv("density", result.momentum_density[:, j])
    tables["momentum"] = momentum
    for name, columns in result.tables.items():
        tables[name] = {c: (conv(c, v) if c != "trajectory" else v) for c, v in columns.items()}
    return tables


def file_summary(result: Result, extra_summary: dict | None = None) -> dict:
    """The summary as written to summary.json: in output units when the scenario has units."""
    summary = dict(result.summary)
    if extra_summary:
        summary.update(extra_summary)
    units = result.scenario.units
    if units is not None:
        summary.update(units.summary_entries(result))
    return summary


def write_result(result: Result, out: str | Path, *, force: bool = False, figures: bool = True,
                 extra_summary: dict | None = None) -> dict:
    """Write every file of a run into `out` (atomically as a whole); returns the summary written."""
    out = Path(out)
    with staged_folder(out, force) as stage:
        for name, columns in result_tables(result).items():
            atomic_write_text(stage / f"{name}.csv", csv_text(columns))
        summary = file_summary(result, extra_summary)
        if figures:
            from .figures import result_figures

            summary["figures"] = result_figures(result, stage)
        atomic_write_text(stage / "summary.json", json.dumps(json_safe(summary), indent=2) + "\n")
    return summary
