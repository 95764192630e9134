"""Interrupted writes of a run's output: a KeyboardInterrupt at every file-system step of a write,
and SIGKILL mid-write, leave the previous output byte for byte or a complete new one, never a
mixture and never temporary files.

Every scenario here is invented for the test.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest

from sim.cli import main
from sim.workflows.run import write_result
from sim import run

RECOILSIM = [sys.executable, "-m", "sim.cli"]

#: this module's scenario defaults for `make_scenario`: a small fast 1D galilean run of a heavy
#: detector (invented numbers)
ROBUST = dict(title="robustness test", model="galilean", ground_mass=10.0, gap=0.5, dims=1,
              strength=0.1, width=20.0, momentum=0.1, method="perturbative", t_max=300.0,
              samples=51)


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under `folder` (relative path -> bytes)."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


def assert_complete_run(folder: Path, samples: int) -> None:
    """A finished run folder: the contract files, parseable, the population table whole."""
    names = {p.name for p in folder.iterdir()}
    assert {"population.csv", "recoil.csv", "momentum.csv", "summary.json"} <= names
    # no temporary files; the one hidden file is recoilsim's marker
    assert not [n for n in names if n.endswith(".part") or (n.startswith(".") and
                                                            n != ".recoilsim.json")], names
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["simulated"] is True
    assert len((folder / "population.csv").read_text().splitlines()) == samples + 1


# --- interrupted writes -----------------------------------------------------------------------


class Interrupt:
    """Counts calls of the file-system steps of a write and raises KeyboardInterrupt at call k."""

    def __init__(self, monkeypatch, k: int | None):
        self.k, self.calls = k, 0
        for owner, name in ((os, "replace"), (os, "fsync"), (tempfile, "mkstemp"),
                            (tempfile, "mkdtemp")):
            monkeypatch.setattr(owner, name, self.wrap(getattr(owner, name)))

    def wrap(self, function):
        def counted(*args, **kwargs):
            self.calls += 1
            if self.calls == self.k:
                raise KeyboardInterrupt
            return function(*args, **kwargs)
        return counted


@pytest.fixture(scope="module")
def results(make_scenario):
    """An old and a new result of different scenarios (so a mixture of files shows)."""
    return (run(make_scenario(ROBUST, strength=0.1)),
            run(make_scenario(ROBUST, strength=0.12)))


def write_steps(write, folder: Path) -> int:
    """How many counted file-system steps `write(folder)` takes when not interrupted."""
    with pytest.MonkeyPatch.context() as patch:
        counter = Interrupt(patch, None)
        write(folder)
    return counter.calls


def check_interrupted_writes(old, new, parent: Path, previous: bool, figures: bool, ks=None):
    """Interrupt `write_result(new, out, force=True)` at each step k (all steps, or `ks`
    counted from the end when negative): `out` must afterwards hold the previous output
    byte for byte, or not exist; nothing else may be left in its parent folder."""
    def prepare(folder: Path) -> dict | None:
        if previous:
            write_result(old, folder, figures=False)
            return snapshot(folder)
        return None

    def write(folder: Path) -> None:
        write_result(new, folder, force=True, figures=figures)

    probe = parent / "probe" / "out"
    prepare(probe)
    steps = write_steps(write, probe)
    assert steps >= 10  # population, recoil, momentum, summary: temp file, fsync, rename each
    for k in (range(1, steps + 1) if ks is None else [k % (steps + 1) for k in ks]):
        out = parent / f"k{k}" / "out"
        before = prepare(out)
        with pytest.MonkeyPatch.context() as patch:
            Interrupt(patch, k)
            with pytest.raises(KeyboardInterrupt):
                write(out)
        if previous:
            assert out.is_dir(), f"interrupt at step {k} of {steps} lost the previous output"
            assert snapshot(out) == before, f"step {k} of {steps}: previous output changed"
        else:
            assert not out.exists(), f"step {k} of {steps}: half output left behind"
        folder = out.parent
        leftovers = sorted(p.name for p in folder.iterdir() if p.name != "out") if folder.exists() else []
        assert leftovers == [], f"step {k} of {steps}: temporary files left behind: {leftovers}"


@pytest.mark.parametrize("previous", [True, False], ids=["over-previous", "fresh"])
def test_interrupt_at_every_write_step_leaves_previous_or_nothing(results, tmp_path, previous):
    check_interrupted_writes(*results, tmp_path, previous, figures=False)


@pytest.mark.slow  # interrupting a figure write in a subprocess (about 5 s)
def test_interrupt_while_writing_figures_leaves_previous(results, tmp_path):
    # figures are written between the CSV tables and summary.json: interrupt at the first
    # figure steps and at the final swap of the folders
    check_interrupted_writes(*results, tmp_path, True, figures=True, ks=[11, -3, -2, -1])


def test_cli_interrupt_exits_130_with_one_line(make_scenario, write_scenario, tmp_path,
                                               monkeypatch, capsys):
    path = write_scenario(make_scenario(ROBUST))
    Interrupt(monkeypatch, 3)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 130
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "interrupted" in err[0]
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("delay", [0.0] + [pytest.param(d, marks=pytest.mark.slow)
                                   for d in (0.05, 0.5, 1.5, 4.0)])
def test_sigkill_during_the_write_leaves_previous_or_complete_output(make_scenario,
                                                                     write_scenario, tmp_path,
                                                                     delay):
    # the process is killed `delay` seconds after its staging folder appears (mid-write), or
    # never sees it (killed on a timeout); either the previous run stays whole or the new
    # one is complete, and no temporary folder is visible as a result
    samples = 51
    previous = tmp_path / "out"
    path = write_scenario(make_scenario(ROBUST))
    assert main(["run", str(path), "--out", str(previous)]) == 0
    before = snapshot(previous)
    newer = write_scenario(make_scenario(ROBUST, strength=0.12), "newer.toml")
    process = subprocess.Popen(RECOILSIM + ["run", str(newer), "--out", str(previous), "--force"],
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and process.poll() is None:
        if any(p.name.endswith(".part") for p in tmp_path.iterdir()):
            break
        time.sleep(0.002)
    time.sleep(delay)
    process.send_signal(signal.SIGKILL)
    process.wait()
    visible = sorted(p.name for p in tmp_path.iterdir() if not p.name.startswith("."))
    assert visible == sorted(["out", "s.toml", "newer.toml"]) or visible == ["newer.toml", "s.toml"]
    if previous.exists():
        after = snapshot(previous)
        if after != before:
            assert_complete_run(previous, samples)
            assert json.loads(after["summary.json"])["scenario"]["coupling"]["strength"] == 0.12
