"""The command line: the rates contract, run files, and one-line errors with exit status 2."""

import csv
import json
import subprocess
import sys
from pathlib import Path

import pytest

from sim.cli import main

ROOT = Path(__file__).resolve().parents[2]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.toml"))

#: this module's scenario defaults for `make_scenario`: a small fast perturbative 1D run of a heavy
#: galilean detector (invented numbers)
CLI = dict(title="cli test", model="galilean", ground_mass=10.0, gap=0.5, dims=1, strength=0.1,
           width=20.0, momentum=0.1, method="perturbative", t_max=300.0, samples=51)


def test_rates_json_contract(make_scenario, write_scenario, capsys):
    scenario_file = write_scenario(make_scenario(CLI))
    assert main(["rates", str(scenario_file), "--json", "--at", "0,0.5,1"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert set(report) == {"rate", "rest_rate", "template"}
    assert report["template"]["p"] == [0.0, 0.5, 1.0]
    assert len(report["template"]["rate"]) == 3
    assert report["rest_rate"] == report["template"]["rate"][0]
    assert report["rate"] > 0


def test_rates_table_and_plot(make_scenario, write_scenario, tmp_path, capsys):
    scenario_file = write_scenario(make_scenario(CLI))
    figure = tmp_path / "rates.png"
    assert main(["rates", str(scenario_file), "--plot", str(figure)]) == 0
    out = capsys.readouterr().out
    assert "packet-averaged golden-rule rate" in out and figure.stat().st_size > 10_000


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.name for p in SCENARIOS])
def test_every_bundled_scenario_gives_rates(path, capsys):
    assert main(["rates", str(path), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["rate"] >= 0 and len(report["template"]["p"]) > 1


def test_run_writes_contract_files(make_scenario, write_scenario, tmp_path):
    scenario_file = write_scenario(make_scenario(CLI))
    out = tmp_path / "out"
    assert main(["run", str(scenario_file), "--out", str(out)]) == 0
    with open(out / "population.csv") as f:
        rows = list(csv.reader(f))
    assert rows[0] == ["t", "excited"] and len(rows) == 52
    with open(out / "recoil.csv") as f:
        assert next(csv.reader(f)) == ["t", "p_mean", "p_var", "x_var", "purity"]
    with open(out / "momentum.csv") as f:
        assert next(csv.reader(f))[0] == "p"
    summary = json.loads((out / "summary.json").read_text())
    for key in ("rate_golden_rule", "rate_fitted", "lamb_shift", "warnings", "scenario", "versions"):
        assert key in summary
    assert summary["simulated"] is True
    assert summary["rate_fitted"] == pytest.approx(summary["rate_golden_rule"], rel=1e-3)
    assert not list(tmp_path.glob(".*part*"))


def test_run_refuses_to_overwrite_without_force(make_scenario, write_scenario, tmp_path, capsys):
    scenario_file = write_scenario(make_scenario(CLI))
    out = tmp_path / "out"
    assert main(["run", str(scenario_file), "--out", str(out)]) == 0
    before = (out / "summary.json").read_text()
    assert main(["run", str(scenario_file), "--out", str(out)]) == 2
    assert "--force" in capsys.readouterr().err
    assert (out / "summary.json").read_text() == before
    assert main(["run", str(scenario_file), "--out", str(out), "--force"]) == 0


def test_bad_scenario_one_line_per_problem_exit_2(make_scenario, write_scenario):
    bad = write_scenario(make_scenario(CLI, gap=-0.5), "bad.toml")
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "rates", str(bad)],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert proc.stdout == ""
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "detector.gap = -0.5" in lines[0] and "> 0" in lines[0]
    assert "Traceback" not in proc.stderr


def test_bad_at_option(make_scenario, write_scenario, capsys):
    scenario_file = write_scenario(make_scenario(CLI))
    assert main(["rates", str(scenario_file), "--at", "a,b"]) == 2
    assert "--at" in capsys.readouterr().err
