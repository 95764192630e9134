"""Physical units in scenarios (sim.config.units): conversions, output units, bad strings.

Check values written here from memory (not computed with the module's own constants):
  hbar c = 197.3269804 MeV fm and 1 u c^2 = 931.49410242 MeV (CODATA 2018, from memory);
  k_B = 8.617333262e-5 eV/K and h = 4.135667696e-15 eV s (exact SI 2019 values, from memory).
"""

import csv
import json
import math

import numpy as np
import pytest

from sim.workflows.run import write_result
from sim.physics.golden_rule import packet_rate, rest_rate
from sim.config.schema import SCHEMA
from sim.errors import ScenarioError
from sim.physics.checks import load_scenario
from sim import run
from sim.config.units import UnitSystem, resolve_units
from sim.physics.golden_rule import recoil_velocity

HBAR_C_EV_NM = 197.3269804  # eV nm (CODATA, from memory)
U_EV = 931.49410242e6  # eV (CODATA 2018, from memory)
K_B_EV = 8.617333262e-5  # eV / K (exact, from memory)
H_EV_S = 4.135667696e-15  # eV s (exact, from memory)
HBAR_EV_S = H_EV_S / (2 * math.pi)


#: Rb-87 D2 line as check values (Steck, "Rubidium 87 D Line Data"; from memory), as
#: `make_scenario` keywords; the packet is invented
RB87 = dict(title="Rb-87 D2 check", model="newton-wigner", ground_mass="86.909180527 u",
            gap="780.241209686 nm", dims=3, strength=None, coupling__lifetime="26.2 ns",
            width="50 nm", momentum="0 eV/c", internal=None, method="perturbative", t_max=None,
            samples=None)


@pytest.mark.parametrize("model", ["galilean", "newton-wigner", "one-particle"])
@pytest.mark.parametrize("dims", [1, 3])
def test_rubidium_d2_recoil_velocity(make_scenario, model, dims):
    # v = h / (m lambda) = 5.8845 mm/s for Rb-87 on its D2 line (D. A. Steck, "Rubidium 87 D
    # Line Data", from memory); 4 digits.
    v = recoil_velocity(load_scenario(make_scenario(RB87, dims=dims, model=model)))
    assert round(v * 1e3, 4) == 5.8845


def test_energy_readings_of_one_gap():
    # a wavelength, a frequency, an angular frequency, an energy and a temperature naming the
    # same energy E0 = 1.9 eV all give gap = 1 (E0 is the natural unit)
    e0 = 1.9
    for text in (f"{HBAR_C_EV_NM * 2 * math.pi / e0!r} nm", f"{e0 / H_EV_S / 1e12!r} THz",
                 f"{e0 / HBAR_EV_S!r} rad/s", "1.9 eV", f"{e0 / K_B_EV!r} K"):
        raw = {"detector": {"gap": text, "ground_mass": "40 u"}, "field": {"temperature": "300 K"}}
        numeric, units, problems = resolve_units(raw, SCHEMA)
        assert problems == []
        assert numeric["detector"]["gap"] == pytest.approx(1.0, rel=1e-9), text
        assert numeric["detector"]["ground_mass"] == pytest.approx(40 * U_EV / e0, rel=1e-8)
        assert numeric["field"]["temperature"] == pytest.approx(300 * K_B_EV / e0, rel=1e-9)
        assert units.energy_joule > 0


def test_momentum_length_time_readings():
    raw = {"detector": {"gap": "2 eV"},
           "packet": {"width": "50 nm", "momentum": ["3 eV/c", 0.25, "2 1/nm"]},
           "run": {"t_max": "30 ns"}, "field": {"cutoff": "4 eV"}}
    numeric, units, problems = resolve_units(raw, SCHEMA)
    assert problems == []
    px, py, pz = numeric["packet"]["momentum"]
    assert px == pytest.approx(1.5, rel=1e-12)  # 3 eV/c in units of 2 eV
    assert py == 0.25  # a bare number stays in natural units
    assert pz == pytest.approx(2 * HBAR_C_EV_NM / 2, rel=1e-9)  # p = hbar k
    assert numeric["field"]["cutoff"] == pytest.approx(2.0)
    assert numeric["packet"]["width"] == pytest.approx(50 * 2 / HBAR_C_EV_NM, rel=1e-9)
    assert numeric["run"]["t_max"] == pytest.approx(30e-9 * 2 / HBAR_EV_S, rel=1e-9)


def test_conversions_round_trip():
    raw = {"detector": {"gap": "1.3 keV"}, "packet": {"width": "7 pm", "momentum": "5 keV/c"},
           "run": {"t_max": "0.4 fs"}}
    numeric, units, _ = resolve_units(raw, SCHEMA)
    assert (units.time_label, units.momentum_label, units.length_label) == ("fs", "keV/c", "pm")
    assert units.to_output("t", numeric["run"]["t_max"]) == pytest.approx(0.4, rel=1e-13)
    assert units.to_output("p", numeric["packet"]["momentum"]) == pytest.approx(5, rel=1e-13)
    assert units.to_output("x_var", numeric["packet"]["width"] ** 2) == pytest.approx(49, rel=1e-13)
    values = np.array([0.5, 2.0])
    for column in ("t", "p_mean", "p_var", "x_var", "density", "rate_fitted", "t=3"):
        back = units.to_output(column, values) / units.to_output(column, 1.0)
        np.testing.assert_allclose(back, values, rtol=1e-15)
    rate = 1 / numeric["run"]["t_max"]
    assert units.to_output("rate_golden_rule", rate) == pytest.approx(1 / 0.4, rel=1e-13)


def test_column_units():
    u = UnitSystem(energy_joule=1.0, time_label="us", length_label="um")
    assert [u.column_unit(c) for c in ("t", "p", "p_var", "x_var", "density", "t=0.5",
                                       "rate_golden_rule", "excited", "no_such_column")] == [
        "us", "eV/c", "(eV/c)^2", "um^2", "1/(eV/c)", "1/(eV/c)", "1/us", "1", "1"]


def test_units_and_natural_numbers_give_the_same_rates():
    e0 = 1.7  # eV
    mass = "0.2 MeV"
    in_units = {"detector": {"model": "one-particle", "ground_mass": mass, "gap": f"{e0} eV"},
                "field": {"dimensions": 3, "temperature": "4000 K", "smearing": "0.02 nm"},
                "coupling": {"strength": 0.2, "matching": "rest-frame"},
                "packet": {"width": "0.05 nm", "momentum": "300 eV/c"}}
    natural = {"detector": {"model": "one-particle", "ground_mass": 0.2e6 / e0, "gap": 1.0},
               "field": {"dimensions": 3, "temperature": 4000 * K_B_EV / e0,
                         "smearing": 0.02 * e0 / HBAR_C_EV_NM},
               "coupling": {"strength": 0.2, "matching": "rest-frame"},
               "packet": {"width": 0.05 * e0 / HBAR_C_EV_NM, "momentum": 300 / e0}}
    a, b = load_scenario(in_units), load_scenario(natural)
    assert b.units is None and a.units is not None
    assert packet_rate(a) == pytest.approx(packet_rate(b), rel=1e-8)
    assert rest_rate(a) == pytest.approx(rest_rate(b), rel=1e-8)


def test_lifetime_string_sets_the_rest_frame_rate(make_scenario):
    s = load_scenario(make_scenario(RB87, dims=3))
    assert s.units.to_output("rate_golden_rule", rest_rate(s)) == pytest.approx(1 / 26.2, rel=1e-10)


def test_written_run_is_in_output_units(make_scenario, tmp_path):
    result = run(make_scenario(RB87, dims=1, t_max="80 ns", samples=41))
    out = tmp_path / "run"
    write_result(result, out, figures=False)
    summary = json.loads((out / "summary.json").read_text())
    written = {}
    for name in ("population", "recoil", "momentum"):
        with open(out / f"{name}.csv") as handle:
            rows = list(csv.reader(handle))
        written[name] = rows
        for column in rows[0]:
            assert column in summary["units"], column
    assert summary["units"]["t"] == "ns" and summary["units"]["p_var"] == "(eV/c)^2"
    assert float(written["population"][-1][0]) == pytest.approx(80.0)
    # momentum variance at t = 0: (hbar / (2 width))^2 in (eV/c)^2
    p_var0 = float(written["recoil"][1][written["recoil"][0].index("p_var")])
    assert p_var0 == pytest.approx((HBAR_C_EV_NM / 100) ** 2, rel=1e-9)
    # Newton-Wigner rate of a packet at rest: Gamma(0) = 1/26.2 ns to O((p / M)^2)
    assert summary["rate_golden_rule"] == pytest.approx(1 / 26.2, rel=1e-9)
    assert summary["units"]["rate_golden_rule"] == "1/ns"
    assert round(summary["recoil_velocity_m_s"] * 1e3, 4) == 5.8845
    assert summary["t_max"] == pytest.approx(80.0)


def dimensional_keys():
    return [(t, k, spec.dimension) for t, keys in SCHEMA.items() for k, spec in keys.items()
            if spec.dimension]


@pytest.mark.parametrize("table,key,dimension", dimensional_keys())
@pytest.mark.parametrize("text", ["12 parsecs per fish", "3 kg*m^2/s^3/K/A", "42", "9**9**9 s"])
def test_bad_string_gives_one_line_naming_key_value_and_units(make_scenario, table, key,
                                                               dimension, text):
    raw = make_scenario(RB87, dims=3)
    raw.setdefault(table, {})[key] = text
    with pytest.raises(ScenarioError) as info:
        load_scenario(raw)
    lines = [p for p in info.value.problems if p.startswith(f"{table}.{key}")]
    assert len(lines) == 1, info.value.problems
    assert repr(text) in lines[0] and "allowed: " in lines[0]


def test_units_need_the_gap_with_a_unit(make_scenario):
    raw = make_scenario(RB87, dims=3)
    raw["detector"]["gap"] = 1.5
    with pytest.raises(ScenarioError, match="detector.gap = 1.5: a scenario that writes units"):
        load_scenario(raw)


def test_natural_scenario_has_no_unit_system():
    raw = {"detector": {"model": "galilean", "ground_mass": 5.0, "gap": 1.0},
           "field": {"dimensions": 1}, "coupling": {"strength": 0.1}, "packet": {"width": 3.0}}
    numeric, units, problems = resolve_units(raw, SCHEMA)
    assert numeric is raw and units is None and problems == []
