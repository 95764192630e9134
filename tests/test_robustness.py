"""Robustness of runs and their output: interruptions, overwrites, dry runs, the memory guard,
one-line errors for bad input, and numerical warnings in summary.json and at the end of a run.

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

import sim.solvers.base
import sim.solvers.common
from sim.cli import main
from sim.workflows.run import write_result
from sim import run

RECOILSIM = [sys.executable, "-m", "sim.cli"]


def raw_scenario(method="perturbative", strength=0.1, **keys):
    """A small fast scenario dict (1D galilean, heavy detector); keys "table__key" = value."""
    raw = {"title": "robustness test",
           "detector": {"model": "galilean", "ground_mass": 10.0, "gap": 0.5},
           "field": {"dimensions": 1},
           "coupling": {"strength": strength},
           "packet": {"width": 20.0, "momentum": 0.1},
           "run": {"method": method, "t_max": 300.0, "samples": 51}}
    for dotted, value in keys.items():
        table, key = dotted.split("__")
        raw.setdefault(table, {})[key] = value
    return raw


def toml_text(raw: dict) -> str:
    """The scenario dict as TOML (flat tables of numbers, strings and booleans only)."""
    lines = [f'title = {json.dumps(raw.get("title", "test"))}']
    for table, keys in raw.items():
        if table == "title":
            continue
        lines.append(f"[{table}]")
        for key, value in keys.items():
            text = json.dumps(value) if not isinstance(value, bool) else str(value).lower()
            lines.append(f"{key} = {text}")
    return "\n".join(lines) + "\n"


def write_scenario(folder: Path, raw: dict, name="s.toml") -> Path:
    path = folder / name
    path.write_text(toml_text(raw))
    return path


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under `folder` (relative path -> bytes)."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


def assert_complete_run(folder: Path, samples: int) -> None:
    """A finished run folder: the contract files, parseable, the population table whole."""
    names = {p.name for p in folder.iterdir()}
    assert {"population.csv", "recoil.csv", "momentum.csv", "summary.json"} <= names
    assert not [n for n in names if n.endswith(".part") or n.startswith(".")], names
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
def results():
    """An old and a new result of different scenarios (so a mixture of files shows)."""
    return run(raw_scenario(strength=0.1)), run(raw_scenario(strength=0.12))


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


def test_interrupt_while_writing_figures_leaves_previous(results, tmp_path):
    # figures are written between the CSV tables and summary.json: interrupt at the first
    # figure steps and at the final swap of the folders
    check_interrupted_writes(*results, tmp_path, True, figures=True, ks=[11, -3, -2, -1])


def test_cli_interrupt_exits_130_with_one_line(tmp_path, monkeypatch, capsys):
    path = write_scenario(tmp_path, raw_scenario())
    Interrupt(monkeypatch, 3)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 130
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "interrupted" in err[0]
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("delay", [0.0, 0.5] + [pytest.param(d, marks=pytest.mark.slow)
                                   for d in (0.05, 1.5, 4.0)])
def test_sigkill_during_the_write_leaves_previous_or_complete_output(tmp_path, delay):
    # the process is killed `delay` seconds after its staging folder appears (mid-write), or
    # never sees it (killed on a timeout); either the previous run stays whole or the new
    # one is complete, and no temporary folder is visible as a result
    samples = 51
    previous = tmp_path / "out"
    path = write_scenario(tmp_path, raw_scenario())
    assert main(["run", str(path), "--out", str(previous)]) == 0
    before = snapshot(previous)
    newer = write_scenario(tmp_path, raw_scenario(strength=0.12), "newer.toml")
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


# --- overwriting, dry runs, the memory guard --------------------------------------------------


def one_line(err: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1, lines
    assert "Traceback" not in err
    return lines[0]


def test_rerun_into_a_full_folder_asks_for_force_before_running(tmp_path, monkeypatch, capsys):
    path = write_scenario(tmp_path, raw_scenario())
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out)]) == 0
    before = snapshot(out)
    capsys.readouterr()

    def must_not_run(self):
        raise AssertionError("the run started although its output would be refused")

    monkeypatch.setattr(sim.solvers.base.Solver, "run", must_not_run)
    assert main(["run", str(path), "--out", str(out)]) == 2
    assert "--force" in one_line(capsys.readouterr().err)
    assert snapshot(out) == before


def test_dry_run_prints_the_estimate_and_writes_nothing(tmp_path, capsys):
    raw = raw_scenario("exact", field__mass=0.05, bath__modes=300)
    path = write_scenario(tmp_path, raw)
    out = tmp_path / "out"
    assert main(["run", str(path), "--dry-run", "--out", str(out)]) == 0
    text = capsys.readouterr().out.strip()
    assert len(text.splitlines()) == 1
    assert "states" in text and "GiB" in text and "bath.modes" in text
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.toml"]


@pytest.mark.parametrize("method, key", [("exact", "bath.modes"), ("fock", "bath."),
                                         ("perturbative", "run.samples")])
def test_memory_guard_refuses_with_one_line_naming_a_key(tmp_path, monkeypatch, capsys, method,
                                                         key):
    keys = {"field__mass": 0.05}
    if method == "fock":
        keys.update(coupling__rotating_wave=False, bath__fock_modes=4)
    path = write_scenario(tmp_path, raw_scenario(method, **keys))
    monkeypatch.setattr(sim.solvers.base, "available_memory", lambda: 1000.0)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 2
    line = one_line(capsys.readouterr().err)
    assert line.startswith("recoilsim: ") and key in line and "GiB" in line, line
    assert not (tmp_path / "out").exists()


@pytest.mark.xfail(strict=True, reason="markov.py has no estimate(): the base estimate ignores "
                                       "grid.points, so the memory guard cannot see a huge grid")
def test_markov_estimate_grows_with_the_momentum_grid():
    from sim.solvers import solver_for

    small = solver_for(raw_scenario("markov", grid__points=21)).estimate()
    large = solver_for(raw_scenario("markov", grid__points=20001)).estimate()
    # a density matrix over 2 x points states needs at least 16 (2 points)^2 bytes
    assert large.memory_bytes >= 16 * (2 * 20001) ** 2 > small.memory_bytes
    assert "grid.points" in large.keys


# --- bad input: every command, one line, exit 2 ----------------------------------------------


BAD_SCENARIOS = {
    "range": raw_scenario(packet__width=-1.0),
    "unknown key": raw_scenario(packet__colour="red"),
    "unit": raw_scenario(detector__gap="0.5 m/s"),
}


@pytest.mark.parametrize("command", ["rates", "run", "run --dry-run", "compare", "sweep"])
@pytest.mark.parametrize("problem", list(BAD_SCENARIOS))
def test_every_command_refuses_a_bad_scenario_in_one_line(tmp_path, capsys, command, problem):
    path = write_scenario(tmp_path, BAD_SCENARIOS[problem])
    argv = command.split() + [str(path)]
    if command != "rates":
        argv += ["--out", str(tmp_path / "out")]
    if command == "sweep":
        argv += ["--vary", "packet.width=10,20"]
    assert main(argv) == 2
    line = one_line(capsys.readouterr().err)
    assert line.startswith("recoilsim: ")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.toml"]


@pytest.mark.parametrize("command", ["rates", "run", "compare", "sweep"])
def test_missing_and_binary_files_in_one_line(tmp_path, capsys, command):
    binary = tmp_path / "b.toml"
    binary.write_bytes(b"\x89PNG\r\n\x1a\n\x00\xff")
    for path in (tmp_path / "missing.toml", binary):
        argv = [command, str(path)]
        if command != "rates":
            argv += ["--out", str(tmp_path / "out")]
        if command == "sweep":
            argv += ["--vary", "packet.width=10,20"]
        assert main(argv) == 2
        assert str(path.name) in one_line(capsys.readouterr().err)
    assert not (tmp_path / "out").exists()


def test_a_method_that_cannot_honour_a_key_is_refused_in_one_line(tmp_path, capsys):
    path = write_scenario(tmp_path, raw_scenario("exact", field__temperature=0.1))
    for argv in (["run", str(path), "--out", str(tmp_path / "out")], ["run", str(path), "--dry-run"]):
        assert main(argv) == 2
        assert "field.temperature" in one_line(capsys.readouterr().err)
    assert not (tmp_path / "out").exists()


def test_command_line_process_prints_no_traceback(tmp_path):
    path = write_scenario(tmp_path, BAD_SCENARIOS["range"])
    done = subprocess.run(RECOILSIM + ["run", str(path), "--out", str(tmp_path / "out")],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert "packet.width" in one_line(done.stderr)


# --- numerical warnings: in summary.json and printed at the end of the run -------------------


WARNING_CASES = {
    # Gamma / Omega large: strength 2 in 1D gives Gamma = lambda^2 / Omega-ish >> 0.05 Omega
    "perturbation parameter": raw_scenario(strength=0.6, run__t_max=10.0, run__samples=201),
    # a galilean detector at v = p / M = 1.5 under the RWA
    "rotating-wave approximation": raw_scenario(detector__ground_mass=1.0, packet__momentum=1.5,
                                                packet__width=50.0, run__t_max=50.0),
    # a 1D box shorter than the distance the emitted wave travels by t_max
    "bath recurrence before t_max": raw_scenario("exact", field__mass=0.05, bath__box_length=60.0,
                                                 packet__width=5.0),
}


@pytest.mark.parametrize("start", list(WARNING_CASES))
def test_warnings_in_summary_and_printed_last(tmp_path, capsys, start):
    path = write_scenario(tmp_path, WARNING_CASES[start])
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out)]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert any(w.startswith(start) for w in summary["warnings"]), summary["warnings"]
    lines = capsys.readouterr().out.strip().splitlines()
    warned = [i for i, line in enumerate(lines) if line.strip().startswith(f"warning: {start}")]
    assert warned, lines
    # the warnings come after the results, only the folder line follows them
    assert all(line.strip().startswith("warning:") for line in lines[warned[0]:-1])
    assert lines[-1].strip().startswith("files in")


def test_quiet_run_has_no_warnings(tmp_path, capsys):
    # the control: a weakly coupled heavy detector at rest, perturbative, gives none
    path = write_scenario(tmp_path, raw_scenario(strength=0.05))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["warnings"] == []
    assert "warning:" not in capsys.readouterr().out
