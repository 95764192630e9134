"""Overwriting through the command line: `--force` replaces only folders recoilsim wrote (their
.recoilsim.json marker lists every file), `--out .` and nested paths are handled, outputs follow
the user's umask, `sweep --force`, and stale staging folders of killed runs are cleared.

Every scenario here is invented for the test.
"""

from __future__ import annotations

import json
import os
import stat
from pathlib import Path

import pytest

from sim.cli import main

#: this module's scenario defaults for `make_scenario`: a small fast 1D perturbative run
QUICK = dict(title="overwrite test", model="galilean", ground_mass=10.0, gap=0.5, dims=1,
             strength=0.1, width=20.0, momentum=0.1, method="perturbative", t_max=300.0,
             samples=31)


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under `folder` (relative path -> bytes)."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


def one_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert "internal error" not in err[0] and "Traceback" not in err[0]
    return err[0]


@pytest.fixture
def scenario_file(make_scenario, write_scenario):
    return write_scenario(make_scenario(QUICK))


# --- 1. --force replaces only recoilsim's own folders ----------------------------------------


@pytest.mark.parametrize("command", ["run", "compare"])
def test_force_refuses_a_folder_recoilsim_did_not_write(scenario_file, tmp_path, capsys, command):
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("my own notes\n")
    assert main([command, str(scenario_file), "--out", str(out), "--force"]) == 2
    line = one_line(capsys)
    assert "--out" in line and "--force" in line and ".recoilsim.json" in line
    assert snapshot(out) == {"notes.txt": b"my own notes\n"}


def test_force_refuses_a_recoilsim_folder_that_gained_files_and_names_them(scenario_file,
                                                                          tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["run", str(scenario_file), "--out", str(out)]) == 0
    marker = json.loads((out / ".recoilsim.json").read_text())
    assert marker["kind"] == "run" and "summary.json" in marker["files"]
    assert marker["simulated"] is True
    (out / "notes.txt").write_text("mine\n")
    (out / "extra").mkdir()
    (out / "extra" / "data.csv").write_text("1\n")
    before = snapshot(out)
    capsys.readouterr()
    assert main(["run", str(scenario_file), "--out", str(out), "--force"]) == 2
    line = one_line(capsys)
    assert "notes.txt" in line and "extra/" in line and "did not write" in line
    assert snapshot(out) == before


def test_force_replaces_a_recoilsim_folder_and_an_empty_one(scenario_file, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["run", str(scenario_file), "--out", str(out)]) == 0
    assert main(["run", str(scenario_file), "--out", str(out)]) == 2  # not without --force
    assert main(["run", str(scenario_file), "--out", str(out), "--force"]) == 0
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["run", str(scenario_file), "--out", str(empty)]) == 0
    assert (empty / "summary.json").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["empty", "out", "s.toml"]


def test_demo_force_refuses_a_foreign_folder(tmp_path, capsys):
    out = tmp_path / "demo"
    out.mkdir()
    (out / "notes.txt").write_text("keep\n")
    assert main(["demo", "--out", str(out), "--force"]) == 2
    assert ".recoilsim.json" in one_line(capsys)
    assert snapshot(out) == {"notes.txt": b"keep\n"}


# --- 2. --out ., nested paths, trailing slashes ------------------------------------------------


@pytest.mark.parametrize("force", [[], ["--force"]])
def test_out_dot_is_refused_cleanly_and_touches_nothing(scenario_file, tmp_path, monkeypatch,
                                                        capsys, force):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "notes.txt").write_text("keep\n")
    before = snapshot(tmp_path)
    for out in (".", "./", str(tmp_path), ".."):
        assert main(["run", str(scenario_file), "--out", out, *force]) == 2
        assert "current folder" in one_line(capsys)
    assert snapshot(tmp_path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt", "s.toml"]


@pytest.mark.slow
def test_nested_out_with_trailing_slash_is_written(scenario_file, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["run", str(scenario_file), "--out", "a/b/c/"]) == 0
    assert (tmp_path / "a/b/c/summary.json").is_file()
    assert main(["run", str(scenario_file), "--out", "a/b/c/", "--force"]) == 0
    assert sorted(p.name for p in (tmp_path / "a/b").iterdir()) == ["c"]


# --- 3. modes follow the umask -----------------------------------------------------------------


@pytest.fixture
def umask_022():
    previous = os.umask(0o022)
    yield
    os.umask(previous)


def test_outputs_follow_the_umask(scenario_file, tmp_path, monkeypatch, umask_022):
    out = tmp_path / "out"
    assert main(["run", str(scenario_file), "--out", str(out)]) == 0
    assert stat.S_IMODE(out.stat().st_mode) == 0o755
    files = list(out.iterdir())
    assert any(p.suffix == ".png" for p in files) and any(p.suffix == ".csv" for p in files)
    for path in files:
        assert stat.S_IMODE(path.stat().st_mode) == 0o644, path.name
    monkeypatch.chdir(tmp_path)
    assert main(["new", "mine"]) == 0
    assert stat.S_IMODE((tmp_path / "mine.toml").stat().st_mode) == 0o644


# --- 4. sweep --force --------------------------------------------------------------------------


@pytest.mark.slow  # three sweeps through the CLI (about 4 s)
def test_sweep_force_replaces_only_recoilsim_sweeps(scenario_file, tmp_path, capsys):
    out = tmp_path / "sweep"
    first = ["sweep", str(scenario_file), "--vary", "packet.width=10,20", "--out", str(out),
             "--workers", "1"]
    second = ["sweep", str(scenario_file), "--vary", "packet.width=15", "--out", str(out),
              "--workers", "1"]
    assert main(first) == 0
    capsys.readouterr()
    assert main(second) == 2
    assert "--force" in one_line(capsys)
    assert main([*second, "--force"]) == 0
    assert json.loads((out / "sweep.json").read_text())["vary"] == [["packet.width", [15]]]
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == [
        "point-0000", "sweep.csv", "sweep.json", "sweep.png"]
    # a sweep folder that gained a file of the user's is not replaced
    (out / "notes.txt").write_text("keep\n")
    capsys.readouterr()
    assert main([*first, "--force"]) == 2
    assert "notes.txt" in one_line(capsys)
    assert (out / "notes.txt").read_text() == "keep\n"
    assert json.loads((out / "sweep.json").read_text())["vary"] == [["packet.width", [15]]]
    # and a folder that is no recoilsim output, with or without --force, gets no lock file
    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / "notes.txt").write_text("keep\n")
    for force in ([], ["--force"]):
        assert main(["sweep", str(scenario_file), "--vary", "packet.width=10",
                     "--out", str(foreign), *force]) == 2
        one_line(capsys)
    assert snapshot(foreign) == {"notes.txt": b"keep\n"}


# --- 6. stale stages of a killed run -----------------------------------------------------------


def test_stale_stages_recoilsim_made_are_removed_and_nothing_else(scenario_file, tmp_path):
    out = tmp_path / "out"
    stale_part = tmp_path / ".out.k3x9_q2a.part"
    stale_old = tmp_path / ".out.abcdefgh.old"
    for stage in (stale_part, stale_old / "previous"):
        stage.mkdir(parents=True)
        (stage / "population.csv").write_text("t,excited\n")
    kept = [tmp_path / ".out.notes.part", tmp_path / ".other.abcdefgh.part",
            tmp_path / ".out.abcdefgh.part.bak"]
    for path in kept:
        path.mkdir()
        (path / "mine.txt").write_text("keep\n")
    assert main(["run", str(scenario_file), "--out", str(out)]) == 0
    assert not stale_part.exists() and not stale_old.exists()
    for path in kept:
        assert (path / "mine.txt").read_text() == "keep\n"
