"""`recoilsim new` templates and the bundled scenarios/ files."""

import json
import math
import re
import tomllib
from pathlib import Path

import pytest

from sim.cli import main
from sim.errors import OutputExists
from sim.physics.golden_rule import rest_rate
from sim.config.schema import SCHEMA
from sim.errors import ScenarioError
from sim.physics.checks import load_scenario
from sim.config.template import MEANINGS, template_text
from sim.workflows.new import write_template

ROOT = Path(__file__).resolve().parents[2]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.toml"))
#: keys whose example value conflicts with the template's other settings when set alone
COMBINATION_KEYS = {"coupling.lifetime", "coupling.matching", "run.seed", "packet.separation",
                    "packet.amplitude_file"}


def test_every_schema_key_is_explained():
    assert set(MEANINGS) == {f"{t}.{k}" for t, keys in SCHEMA.items() for k in keys}


def test_template_loads_and_lists_every_key(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["new", "mine"]) == 0
    path = tmp_path / "mine.toml"
    assert "wrote mine.toml" in capsys.readouterr().out
    text = path.read_text()
    scenario = load_scenario(path)
    assert scenario.title == "mine"
    for table, keys in SCHEMA.items():
        assert f"\n[{table}]\n" in text
        for key in keys:
            assert re.search(rf"^(# )?{key} = ", text, re.M), key
    assert max(len(line) for line in text.splitlines()) <= 100
    assert main(["new", "mine"]) == 2  # no overwrite without --force
    assert main(["new", "mine", "--force"]) == 0


def test_each_commented_key_is_valid_alone():
    text = template_text("each")
    table = None
    lines = text.splitlines()
    tried = 0
    for i, line in enumerate(lines):
        if line.startswith("["):
            table = line.strip("[]")
        match = re.match(r"^# (\w+) = (.*)$", line)
        if not match or table is None:  # the header's examples are not assignments
            continue
        changed = "\n".join(lines[:i] + [line[2:]] + lines[i + 1:])
        dotted = f"{table}.{match.group(1)}"
        tried += 1
        try:
            load_scenario(tomllib.loads(changed))
        except ScenarioError as exc:
            assert dotted in COMBINATION_KEYS, exc.problems
    assert tried >= 20


def test_template_path_rules(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert write_template("a.toml") == Path("a.toml")
    assert write_template(str(tmp_path / "b")) == tmp_path / "b.toml"
    with pytest.raises(OutputExists):
        write_template("a")


@pytest.mark.parametrize("path", SCENARIOS, ids=[p.name for p in SCENARIOS])
def test_bundled_scenario_loads_and_rates_json_works(path, capsys):
    text = path.read_text()
    assert text.startswith("#") and "invented" in text.split("\n\n")[0].lower()
    load_scenario(path)
    assert main(["rates", str(path), "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    # finite; zero is allowed (a ground-state packet in the vacuum has no golden-rule rate)
    assert math.isfinite(report["rate"]) and report["rate"] >= 0
    assert all(math.isfinite(r) for r in report["template"]["rate"])


def test_bundled_scenarios_include_the_lab_light_strong_and_thermal_cases():
    names = {p.name for p in SCENARIOS}
    assert {"waveguide_atom_1d.toml", "light_detector_3d.toml", "strong_coupling_1d.toml",
            "thermal_excitation_3d.toml"} <= names


def test_waveguide_atom_is_in_lab_units():
    s = load_scenario(ROOT / "scenarios" / "waveguide_atom_1d.toml")
    assert s.units is not None and s.units.time_label == "ns"
    # coupling.lifetime = "30 ns" fixes the rest-frame golden-rule rate at 1/30 per ns
    assert s.units.to_output("rate_golden_rule", rest_rate(s)) == pytest.approx(1 / 30, rel=1e-10)


def test_strong_coupling_scenario_is_strong():
    s = load_scenario(ROOT / "scenarios" / "strong_coupling_1d.toml")
    assert rest_rate(s) > s.detector.gap


def test_thermal_scenario_is_thermal():
    s = load_scenario(ROOT / "scenarios" / "thermal_excitation_3d.toml")
    assert s.field.temperature > 0 and s.packet.internal == "ground"
