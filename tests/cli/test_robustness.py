"""Robustness of the command line: overwrites, dry runs, the memory guard, one-line errors for bad
input, and numerical warnings in summary.json and at the end of a run.  (Interrupted writes are
tested in tests/io/test_interrupted_writes.py.)

Every scenario here is invented for the test.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

import sim.solvers.base
import sim.solvers.common
from sim.cli import main

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


# --- overwriting, dry runs, the memory guard --------------------------------------------------


def one_line(err: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1, lines
    assert "Traceback" not in err
    return lines[0]


def test_rerun_into_a_full_folder_asks_for_force_before_running(make_scenario, write_scenario,
                                                                tmp_path, monkeypatch, capsys):
    path = write_scenario(make_scenario(ROBUST))
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


def test_dry_run_prints_the_estimate_and_writes_nothing(make_scenario, write_scenario, tmp_path,
                                                        capsys):
    raw = make_scenario(ROBUST, method="exact", field__mass=0.05, bath__modes=300)
    path = write_scenario(raw)
    out = tmp_path / "out"
    assert main(["run", str(path), "--dry-run", "--out", str(out)]) == 0
    text = capsys.readouterr().out.strip()
    assert len(text.splitlines()) == 1
    assert "states" in text and "GiB" in text and "bath.modes" in text
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.toml"]


@pytest.mark.parametrize("method, key", [("exact", "bath.modes"), ("fock", "bath."),
                                         ("perturbative", "run.samples")])
def test_memory_guard_refuses_with_one_line_naming_a_key(make_scenario, write_scenario, tmp_path,
                                                         monkeypatch, capsys, method, key):
    keys = {"field__mass": 0.05}
    if method == "fock":
        keys.update(coupling__rotating_wave=False, bath__fock_modes=4)
    path = write_scenario(make_scenario(ROBUST, method=method, **keys))
    monkeypatch.setattr(sim.solvers.base, "available_memory", lambda: 1000.0)
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 2
    line = one_line(capsys.readouterr().err)
    assert line.startswith("recoilsim: ") and key in line and "GiB" in line, line
    assert not (tmp_path / "out").exists()


# --- bad input: every command, one line, exit 2 ----------------------------------------------


#: bad scenarios as `make_scenario` keywords on top of ROBUST
BAD_SCENARIOS = {
    "range": dict(packet__width=-1.0),
    "unknown key": dict(packet__colour="red"),
    "unit": dict(detector__gap="0.5 m/s"),
}


@pytest.mark.parametrize("command", ["rates", "run", "run --dry-run", "compare", "sweep"])
@pytest.mark.parametrize("problem", list(BAD_SCENARIOS))
def test_every_command_refuses_a_bad_scenario_in_one_line(make_scenario, write_scenario, tmp_path,
                                                          capsys, command, problem):
    path = write_scenario(make_scenario(ROBUST, **BAD_SCENARIOS[problem]))
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


def test_a_method_that_cannot_honour_a_key_is_refused_in_one_line(make_scenario, write_scenario,
                                                                  tmp_path, capsys):
    path = write_scenario(make_scenario(ROBUST, method="exact", field__temperature=0.1))
    for argv in (["run", str(path), "--out", str(tmp_path / "out")], ["run", str(path), "--dry-run"]):
        assert main(argv) == 2
        assert "field.temperature" in one_line(capsys.readouterr().err)
    assert not (tmp_path / "out").exists()


def test_command_line_process_prints_no_traceback(make_scenario, write_scenario, tmp_path):
    path = write_scenario(make_scenario(ROBUST, **BAD_SCENARIOS["range"]))
    done = subprocess.run(RECOILSIM + ["run", str(path), "--out", str(tmp_path / "out")],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert "packet.width" in one_line(done.stderr)


# --- numerical warnings: in summary.json and printed at the end of the run -------------------


#: scenarios that must warn, as `make_scenario` keywords on top of ROBUST
WARNING_CASES = {
    # Gamma / Omega large: strength 2 in 1D gives Gamma = lambda^2 / Omega-ish >> 0.05 Omega
    "perturbation parameter": dict(strength=0.6, t_max=10.0, samples=201),
    # a galilean detector at v = p / M = 2.5 under the RWA, above the anomalous-Doppler threshold
    # 1 + sqrt(2 Omega / M) = 2 of this gap-0.5, mass-1 detector
    "rotating-wave approximation": dict(ground_mass=1.0, momentum=2.5, width=50.0, t_max=50.0),
    # a 1D box shorter than the distance the emitted wave travels by t_max
    "bath recurrence before t_max": dict(method="exact", field__mass=0.05, bath__box_length=60.0,
                                         width=5.0),
}


@pytest.mark.parametrize("start", list(WARNING_CASES))
def test_warnings_in_summary_and_printed_last(make_scenario, write_scenario, tmp_path, capsys,
                                              start):
    path = write_scenario(make_scenario(ROBUST, **WARNING_CASES[start]))
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


def test_quiet_run_has_no_warnings(make_scenario, write_scenario, tmp_path, capsys):
    # the control: a weakly coupled heavy detector at rest, perturbative, gives none
    path = write_scenario(make_scenario(ROBUST, strength=0.05))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["warnings"] == []
    assert "warning:" not in capsys.readouterr().out
