"""Sweeps that answer questions: rates-only points, no figures, the extra columns and their
units, keys that do not apply at a point."""

import copy
import csv
import json
import math
from pathlib import Path

import pytest

from sim.cli import main
from sim.physics.checks import load_scenario, with_keys
from sim.physics.golden_rule import packet_rate
from sim.result import run
from sim.workflows.sweep import parse_vary, run_sweep

#: invented numbers: a one-particle detector whose matching key applies only to its own model
BASE = dict(title="sweep questions", model="one-particle", ground_mass=5.0, gap=0.5, dims=1,
            field__mass=0.05, strength=0.05, coupling__matching="rest-frame", width=10.0,
            momentum=0.3, internal="excited", method="perturbative", t_max=60.0, samples=11)
MODELS = "detector.model=galilean,newton-wigner,one-particle"


def read_table(folder: Path) -> list[dict]:
    with open(folder / "sweep.csv") as handle:
        return list(csv.DictReader(handle))


def test_rates_only_points_run_no_evolution_and_draw_nothing(make_scenario, tmp_path):
    base = load_scenario(make_scenario(BASE))
    counts = run_sweep(base, [parse_vary(MODELS), parse_vary("packet.width=4,40")],
                       tmp_path / "s", mode="rates-only")
    assert counts["ok"] == counts["points"] == 6
    rows = read_table(tmp_path / "s")
    for row, point in zip(rows, sorted((tmp_path / "s").glob("point-*"))):
        assert sorted(p.name for p in point.iterdir() if not p.name.startswith(".")) \
            == ["summary.json"]
        assert row["rate_fitted"] == row["final_excited"] == "nan"  # no time evolution
        # the row holds the golden-rule rate of the point's own scenario, built here directly
        # (matching removed where the model is not one-particle)
        raw = copy.deepcopy(dict(base.source))
        raw["detector"]["model"] = row["detector.model"]
        raw["packet"]["width"] = float(row["packet.width"])
        if row["detector.model"] != "one-particle":
            del raw["coupling"]["matching"]
        expected = packet_rate(load_scenario(raw))
        assert float(row["rate_golden_rule"]) == pytest.approx(expected, rel=1e-11)
        assert float(row["gamma_over_omega"]) == pytest.approx(expected / 0.5, rel=1e-11)
    definition = json.loads((tmp_path / "s" / "sweep.json").read_text())
    assert definition["mode"] == "rates-only"
    assert set(definition["units"]) == set(rows[0])  # every column has its unit


def test_a_key_that_does_not_apply_is_dropped_at_that_point_and_listed(make_scenario, tmp_path,
                                                                        write_scenario, capsys):
    scenario_file = write_scenario(make_scenario(BASE), "base.toml")
    assert main(["sweep", str(scenario_file), "--vary", MODELS, "--out", str(tmp_path / "s"),
                 "--no-figures", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "coupling.matching does not apply at 2 points and was dropped there" in out
    rows = read_table(tmp_path / "s")
    assert [r["dropped"] for r in rows] == ["coupling.matching", "coupling.matching", ""]
    assert all(r["status"] == "ok" for r in rows)
    for point in (tmp_path / "s").glob("point-*"):
        assert not list(point.glob("*.png"))  # --no-figures


@pytest.mark.slow  # time-evolving sweep points through the CLI (about 3 s)
def test_run_points_report_final_population_gamma_over_omega_and_warnings(make_scenario,
                                                                         tmp_path):
    base = load_scenario(make_scenario(BASE, model="newton-wigner", coupling__matching=None))
    run_sweep(base, [parse_vary("packet.width=4,40")], tmp_path / "s", figures=False)
    for row in read_table(tmp_path / "s"):
        point = with_keys(base, {"packet.width": float(row["packet.width"])})
        direct = run(point)
        assert float(row["final_excited"]) == pytest.approx(direct.excited[-1], rel=1e-10)
        assert float(row["gamma_over_omega"]) == pytest.approx(
            direct.summary["rate_golden_rule"] / point.detector.gap, rel=1e-10)
        assert int(row["warnings"]) == len(direct.warnings)
        shift = direct.summary.get("lamb_shift", math.nan)
        assert float(row["lamb_shift"]) == pytest.approx(shift, rel=1e-10, nan_ok=True)
