"""Parameter sweeps (sim.workflows.sweep): specs, products, resuming after a kill, failures,
Dask."""

import csv
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from sim.cli import main

from sim.errors import UsageError
from sim.physics.golden_rule import packet_rate
from sim.physics.checks import load_scenario, with_keys
from sim.workflows.sweep import parse_vary, run_sweep, sweep_points

#: this module's scenario defaults for `make_scenario` (invented numbers)
SWEEP = dict(title="sweep test", model="newton-wigner", ground_mass=1.0, gap=0.5, dims=1,
             field__mass=0.02, strength=0.05, width=20.0, momentum=0.3, internal="excited",
             method="perturbative", t_max=300.0, samples=31)


def read_table(folder: Path) -> list[dict]:
    with open(folder / "sweep.csv") as handle:
        return list(csv.DictReader(handle))


def test_specs():
    assert parse_vary("packet.width=1:4:4").values == (1.0, 2.0, 3.0, 4.0)
    np.testing.assert_allclose(parse_vary("packet.width=1:100:3log").values, [1, 10, 100])
    assert parse_vary("detector.model=galilean, one-particle").values == ("galilean",
                                                                          "one-particle")
    assert parse_vary("grid.points=11,21").values == (11, 21)
    assert parse_vary("coupling.rotating_wave=true,false").values == (True, False)
    assert parse_vary("packet.width=10 nm:1000 nm:3log").values == ("10 nm", "100 nm", "1000 nm")
    assert parse_vary("packet.width=50 nm,80 nm").values == ("50 nm", "80 nm")
    for bad in ("packet.wdth=1,2", "packet.width", "packet.width=1:2", "packet.width=1:2:0",
                "packet.width=0:2:3log", "packet.width=1 nm:2:3", "packet.width=1,,2"):
        with pytest.raises(UsageError, match="--vary"):
            parse_vary(bad)
    with pytest.raises(UsageError, match="once"):
        sweep_points([parse_vary("packet.width=1,2"), parse_vary("packet.width=3")])


def test_bad_vary_is_one_line_and_exit_2(make_scenario, write_scenario, tmp_path, capsys):
    scenario_file = write_scenario(make_scenario(SWEEP), "base.toml")
    assert main(["sweep", str(scenario_file), "--vary", "packet.wdth=1,2",
                 "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "packet.wdth" in err[0]
    # a value out of range is refused before anything runs
    assert main(["sweep", str(scenario_file), "--vary", "packet.width=-1,2",
                 "--out", str(tmp_path / "o")]) == 2
    assert "packet.width = -1" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


@pytest.mark.slow  # a two-key product sweep with figures (about 5 s)
def test_product_of_two_varies(make_scenario, write_scenario, tmp_path, capsys):
    scenario_file = write_scenario(make_scenario(SWEEP), "base.toml")
    out = tmp_path / "sweep"
    code = main(["sweep", str(scenario_file), "--vary", "packet.width=5:40:2log",
                 "--vary", "detector.model=galilean,newton-wigner", "--out", str(out),
                 "--workers", "2"])
    assert code == 0
    rows = read_table(out)
    assert list(rows[0]) == ["packet.width", "detector.model", "rate_golden_rule",
                             "rate_fitted", "final_excited", "gamma_over_omega", "lamb_shift",
                             "warnings", "dropped", "status"]
    assert [(r["packet.width"], r["detector.model"]) for r in rows] == [
        ("5.0", "galilean"), ("5.0", "newton-wigner"), ("40.0", "galilean"),
        ("40.0", "newton-wigner")]
    base = load_scenario(scenario_file)
    for i, row in enumerate(rows):
        assert row["status"] == "ok"
        point = with_keys(base, {"packet.width": float(row["packet.width"]),
                                 "detector.model": row["detector.model"]})
        assert float(row["rate_golden_rule"]) == pytest.approx(packet_rate(point), rel=1e-10)
        # the perturbative decay of a narrow-spread packet is exponential at the golden rule
        assert float(row["rate_fitted"]) == pytest.approx(packet_rate(point), rel=1e-3)
        summary = json.loads((out / f"point-{i:04d}" / "summary.json").read_text())
        assert summary["sweep_point"]["index"] == i and summary["simulated"] is True
    # a rerun finds everything done and changes nothing
    before = (out / "sweep.csv").read_text()
    assert main(["sweep", str(scenario_file), "--vary", "packet.width=5:40:2log",
                 "--vary", "detector.model=galilean,newton-wigner", "--out", str(out)]) == 0
    assert "4 finished earlier" in capsys.readouterr().out
    assert (out / "sweep.csv").read_text() == before
    # another sweep into the same folder is refused
    assert main(["sweep", str(scenario_file), "--vary", "packet.width=5,6",
                 "--out", str(out)]) == 2


@pytest.mark.slow  # killing and resuming a sweep of worker processes (about 10 s)
def test_killed_sweep_resumes_with_every_point_once(make_scenario, write_scenario, tmp_path):
    scenario_file = write_scenario(make_scenario(SWEEP), "base.toml")
    out = tmp_path / "killed"
    args = ["sweep", str(scenario_file), "--vary", "packet.width=4:40:5log", "--out", str(out),
            "--workers", "2"]
    proc = subprocess.Popen([sys.executable, "-m", "sim.cli", *args], start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    try:
        while not list(out.glob("point-*/summary.json")):
            assert proc.poll() is None and time.monotonic() < deadline, "sweep ended early"
            time.sleep(0.02)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
    finished_at_kill = len(list(out.glob("point-*/summary.json")))
    assert 1 <= finished_at_kill < 5, "the kill must come mid-way"
    counts = run_sweep(load_scenario(scenario_file), [parse_vary(args[3])], out, workers=2)
    assert counts["skipped"] >= finished_at_kill and counts["ok"] == 5
    rows = read_table(out)
    assert len(rows) == 5 and all(r["status"] == "ok" for r in rows)
    widths = sorted(float(r["packet.width"]) for r in rows)
    np.testing.assert_allclose(widths, np.geomspace(4, 40, 5), rtol=1e-11)
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == [
        *(f"point-{i:04d}" for i in range(5)), "sweep.csv", "sweep.json", "sweep.png"]
    assert not list(out.glob(".*.part")) and not list(out.glob(".*.old"))


def test_failing_point_is_recorded_and_the_rest_runs(make_scenario, write_scenario, tmp_path,
                                                      capsys):
    # a ground-state packet in the vacuum has zero golden-rule rate, so with no t_max the run
    # of the T = 0 point fails (no automatic time span); the thermal point runs
    path = write_scenario(make_scenario(SWEEP, internal="ground", t_max=None), "ground.toml")
    out = tmp_path / "sweep"
    argv = ["sweep", str(path), "--vary", "field.temperature=0,0.5", "--out", str(out),
            "--workers", "1"]
    assert main(argv) == 1
    rows = read_table(out)
    assert rows[0]["status"].startswith("failed: ScenarioError: run.t_max")
    assert rows[0]["rate_golden_rule"] == "nan"
    assert rows[1]["status"] == "ok" and float(rows[1]["rate_golden_rule"]) > 0
    assert json.loads((out / "point-0000" / "failed.json").read_text())["status"] == rows[0]["status"]
    assert "1 ok, 1 failed" in capsys.readouterr().out
    # a rerun retries the failed point and still records each point once
    assert main(argv) == 1
    assert read_table(out) == rows


@pytest.mark.slow  # starts a two-worker LocalCluster (~10 s)
def test_dask_cluster_gives_the_same_table_as_local_processes(make_scenario, write_scenario,
                                                              tmp_path):
    scenario_file = write_scenario(make_scenario(SWEEP), "base.toml")
    distributed = pytest.importorskip("distributed")
    base = load_scenario(scenario_file)
    axes = [parse_vary("packet.width=5,40"), parse_vary("detector.model=galilean,one-particle")]
    run_sweep(base, axes, tmp_path / "local", workers=2)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        counts = run_sweep(base, axes, tmp_path / "dask", scheduler=cluster.scheduler_address)
    assert counts["ok"] == 4
    assert (tmp_path / "dask" / "sweep.csv").read_text() == (
        tmp_path / "local" / "sweep.csv").read_text()
