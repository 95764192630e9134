"""Atomic files and folders: nothing half-written is ever left on disk.

Every file is written to a temporary name in its folder and renamed into place, and a folder is
assembled as a temporary sibling and renamed as a whole, so an interrupted write leaves either
the previous complete output or none.  This module imports nothing of `sim`.
"""

from __future__ import annotations

import os
import shutil
import signal
import tempfile
from contextlib import contextmanager
from pathlib import Path


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write `text` to `path` through a temporary file in the same folder and a rename.

    Parameters
    ----------
    path : str or Path
        The file; its folder is created if needed.
    text : str
    """
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
    """Save a matplotlib figure through a temporary file and a rename.

    Parameters
    ----------
    fig : matplotlib Figure
    path : str or Path
        The file; its suffix chooses the format.
    **kwargs
        Passed to `Figure.savefig` (e.g. dpi).
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=path.suffix, dir=path.parent)
    os.close(fd)
    try:
        fig.savefig(tmp, **kwargs)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


@contextmanager
def staged_folder(out: str | Path):
    """A temporary sibling folder that replaces `out` as a whole when the block succeeds.

    An existing `out` is swapped out only after the new one is complete; on any error (Ctrl-C
    included) the stage is removed and `out` is left as it was.  Whether `out` may be replaced is
    the caller's decision (`sim.io.writers.output_folder`).

    Parameters
    ----------
    out : str or Path
        The folder to create or replace.

    Yields
    ------
    Path
        The stage folder to write into.
    """
    out = Path(out)
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
    if not hasattr(signal, "pthread_sigmask"):
        yield
        return
    deferred = {signal.SIGINT, signal.SIGTERM}
    blocked = signal.pthread_sigmask(signal.SIG_BLOCK, deferred)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, blocked)
