"""Atomic files and folders: nothing half-written is ever left on disk.

Every file is written to a temporary name in its folder and renamed into place, and a folder is
assembled as a temporary sibling and renamed as a whole, so an interrupted write leaves either
the previous complete output or none.  Files and folders get the modes the user's umask gives
(0644 and 0755 under umask 022), not the private modes of `tempfile`.  A stage is locked
(`flock`) while it is written, so the stale stages of a killed run, recognised by their name,
can be removed by the next run without touching a live one.  This module imports nothing of
`sim`.
"""

from __future__ import annotations

import fcntl
import os
import re
import shutil
import signal
import tempfile
from contextlib import contextmanager
from pathlib import Path

#: the random part of a `tempfile` name (8 characters of its alphabet)
_RANDOM = r"[a-z0-9_]{8}"


def _umask() -> int:
    """The process's umask (read without changing it where /proc tells it)."""
    try:
        with open("/proc/self/status") as status:
            for line in status:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def file_mode() -> int:
    """Mode of a new output file: 0666 less the umask (0644 under umask 022).

    Returns
    -------
    int
    """
    return 0o666 & ~_umask()


def folder_mode() -> int:
    """Mode of a new output folder: 0777 less the umask (0755 under umask 022).

    Returns
    -------
    int
    """
    return 0o777 & ~_umask()


def stage_pattern(name: str) -> re.Pattern:
    """Names of the staging siblings recoilsim makes for an output called `name`.

    Parameters
    ----------
    name : str
        The output's file or folder name.

    Returns
    -------
    re.Pattern
        Matches ".NAME.XXXXXXXX.part" (a file or folder being written) and ".NAME.XXXXXXXX.old"
        (a replaced folder being removed), XXXXXXXX the random part of a `tempfile` name.
    """
    return re.compile(rf"\.{re.escape(name)}\.{_RANDOM}\.(part|old)")


def _locked(fd: int) -> bool:
    """Whether another process holds the flock of `fd`."""
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        return True
    fcntl.flock(fd, fcntl.LOCK_UN)
    return False


def remove_stale_stages(parent: str | Path, name: str | None = None, *,
                        pattern: re.Pattern | None = None) -> list[Path]:
    """Remove the staging siblings a killed run left for the output `parent/name`.

    Only entries whose name matches `stage_pattern(name)` (or `pattern`) are candidates; a
    folder another live process is writing (its flock is held) and anything that is a
    symbolic link are left alone.

    Parameters
    ----------
    parent : str or Path
        The folder holding the output.
    name : str, optional
        The output's name.
    pattern : re.Pattern, optional
        Instead of `name`: the staging names to remove (matched in full).

    Returns
    -------
    list of Path
        The entries removed.
    """
    parent, removed = Path(parent), []
    pattern = pattern if pattern is not None else stage_pattern(name)
    if not parent.is_dir():
        return removed
    for entry in parent.iterdir():
        if not pattern.fullmatch(entry.name) or entry.is_symlink():
            continue
        if entry.is_dir():
            try:
                fd = os.open(entry, os.O_RDONLY)
            except OSError:
                continue
            try:
                if _locked(fd):
                    continue
                shutil.rmtree(entry, ignore_errors=True)
            finally:
                os.close(fd)
        elif entry.suffix == ".part":
            entry.unlink(missing_ok=True)
        else:
            continue
        removed.append(entry)
    return removed


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write `text` to `path` through a temporary file in the same folder and a rename.

    Parameters
    ----------
    path : str or Path
        The file; its folder is created if needed; the file gets the umask's mode.
    text : str
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    _write_through_temporary(path, lambda handle: handle.write(text.encode()))


def atomic_copy(source: str | Path, path: str | Path) -> None:
    """Copy the file `source` to `path` through a temporary file and a rename.

    Parameters
    ----------
    source : str or Path
    path : str or Path
        The copy; it gets the umask's mode.
    """
    def copy(handle) -> None:
        with open(source, "rb") as original:
            shutil.copyfileobj(original, handle)

    _write_through_temporary(Path(path), copy)


def _write_through_temporary(path: Path, write) -> None:
    """Call write(binary handle) on a temporary file beside `path` (mode from the umask), sync
    it and rename it to `path`; the temporary file is removed on any error."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        os.fchmod(fd, file_mode())
        with os.fdopen(fd, "wb") as handle:
            write(handle)
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
        The file; its suffix chooses the format; it gets the umask's mode.
    **kwargs
        Passed to `Figure.savefig` (e.g. dpi).
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=path.suffix, dir=path.parent)
    try:
        os.fchmod(fd, file_mode())
    finally:
        os.close(fd)
    try:
        fig.savefig(tmp, **kwargs)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _locked_folder(path: Path) -> int:
    """An open descriptor of the folder `path` holding its flock (released on close)."""
    fd = os.open(path, os.O_RDONLY)
    fcntl.flock(fd, fcntl.LOCK_EX)
    return fd


@contextmanager
def staged_folder(out: str | Path, before_install=None):
    """A temporary sibling folder that replaces `out` as a whole when the block succeeds.

    An existing `out` is swapped out only after the new one is complete; on any error (Ctrl-C
    included) the stage is removed and `out` is left as it was.  Whether `out` may be replaced is
    the caller's decision (`sim.io.writers.output_folder`), checked again by `before_install`
    just before the swap.  Stale stages of a killed earlier run into `out` are removed first
    (`remove_stale_stages`).

    Parameters
    ----------
    out : str or Path
        The folder to create or replace.
    before_install : callable, optional
        Called with no arguments after the block and before the swap; an exception from it
        abandons the stage.

    Yields
    ------
    Path
        The stage folder to write into.
    """
    out = Path(os.path.abspath(out))
    out.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_stages(out.parent, out.name)
    stage = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".part", dir=out.parent))
    fd = None
    try:
        fd = _locked_folder(stage)
        os.chmod(stage, folder_mode())
        yield stage
        if before_install is not None:
            before_install()
        _install(stage, out)
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    finally:
        if fd is not None:
            os.close(fd)


def _install(stage: Path, out: Path) -> None:
    """Rename the complete `stage` to `out`.  An existing `out` is set aside first and put back
    if the second rename fails; Ctrl-C and SIGTERM wait until both renames are done."""
    with _signals_deferred():
        if not out.exists():
            os.replace(stage, out)
            return
        old = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".old", dir=out.parent))
        previous = old / "previous"
        fd = _locked_folder(old)
        try:
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
        finally:
            os.close(fd)


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
