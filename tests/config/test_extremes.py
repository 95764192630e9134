"""Extreme values of every numeric key: each is loaded or refused, quickly, with a message that
names the key -- never an internal error or a numpy warning.  Every number is invented."""

from __future__ import annotations

import math
import subprocess
import sys
import time
import warnings

import pytest

from sim import ScenarioError, load_scenario
from sim.config.schema import SCHEMA

#: wrong-dimension unit strings, by the dimension a key expects
WRONG_UNIT = {"energy": "3 s", "length": "3 eV", "momentum": "3 s", "time": "3 m", None: "3 ns"}
#: keys that only make sense with other keys set (the base scenario is changed to allow them)
NEEDS = {("run", "trajectories"): {"run__method": "markov"},
         ("run", "seed"): {"run__method": "markov", "run__trajectories": 2}}

NUMERIC_KEYS = [(t, k) for t, keys in SCHEMA.items() for k, spec in keys.items()
                if spec.kind in ("float", "int", "momentum")]


def _cli(*args: str, stdin: str | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "sim.cli", *args], input=stdin,
                          capture_output=True, text=True, timeout=120)


def _attempt(make_scenario, table: str, key: str, value) -> None:
    """Load the base scenario with table.key = value: it loads, or names that key."""
    raw = make_scenario(**NEEDS.get((table, key), {}), **{f"{table}__{key}": value})
    start = time.monotonic()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # any numpy warning fails the attempt
        try:
            load_scenario(raw)
        except ScenarioError as exc:
            assert any(f"{table}.{key}" in p for p in exc.problems), exc.problems
    assert time.monotonic() - start < 5.0, (table, key, value)


def _values(magnitudes) -> list:
    out = [0, 0.0, math.nan, math.inf, -math.inf]
    for m in magnitudes:
        out += [m, -m]
    return out


@pytest.mark.parametrize("table,key", NUMERIC_KEYS, ids=[f"{t}.{k}" for t, k in NUMERIC_KEYS])
def test_extreme_values_load_or_name_their_key(make_scenario, table, key):
    for value in _values([1e-300, 1e-30, 1e30, 1e300]) + [WRONG_UNIT[SCHEMA[table][key].dimension]]:
        _attempt(make_scenario, table, key, value)


@pytest.mark.slow
@pytest.mark.parametrize("table,key", NUMERIC_KEYS, ids=[f"{t}.{k}" for t, k in NUMERIC_KEYS])
def test_extreme_values_full_grid(make_scenario, table, key):
    magnitudes = [10.0 ** e for e in range(-300, 301, 10)] + [10 ** 20, 2 ** 70]
    for value in _values(magnitudes) + [WRONG_UNIT[SCHEMA[table][key].dimension]]:
        _attempt(make_scenario, table, key, value)


def test_wrong_unit_of_the_mass_names_the_mass(write_scenario, make_scenario):
    # a length at an energy key is read as a vacuum wavelength: 12 pc is a mass 1e-24 gaps
    raw = make_scenario(ground_mass="12 parsecs", gap="780 nm", width="100 nm", t_max=None,
                        coupling__lifetime="26 ns", strength=None, momentum=0.0)
    done = _cli("rates", str(write_scenario(raw)))
    assert done.returncode == 2, done.stdout
    assert "detector.ground_mass = '12 parsecs'" in done.stderr
    assert "detector.gap" not in done.stderr.split(":")[1]


def test_narrow_packet_refused_before_any_work(write_scenario, make_scenario):
    path = write_scenario(make_scenario(width=1e-9, method="exact"))
    start = time.monotonic()
    done = _cli("run", str(path), "--dry-run")
    assert time.monotonic() - start < 30
    assert done.returncode == 2
    assert done.stderr.startswith("recoilsim: packet.width = 1e-09")
    assert "allowed" in done.stderr
    assert "RuntimeWarning" not in done.stderr and "internal error" not in done.stderr


def test_bare_number_in_a_lab_scenario_is_said_aloud(write_scenario, make_scenario):
    raw = make_scenario(ground_mass="0.5 eV", gap="0.2 eV", width="5 nm", t_max=130,
                        samples=21, momentum=0.0)
    done = _cli("rates", str(write_scenario(raw)))
    assert done.returncode == 0, done.stderr
    line = next(x for x in done.stderr.splitlines() if "run.t_max" in x)
    assert line.startswith("recoilsim: warning: run.t_max = 130 taken as 130 hbar / gap = ")
    assert line.endswith("ns; write '130 ns'?")


@pytest.mark.slow  # a subprocess run (about 3 s)
def test_scenario_from_standard_input(write_scenario, make_scenario):
    text = write_scenario(make_scenario()).read_text()
    dash = _cli("rates", "-", stdin=text)
    assert dash.returncode == 0, dash.stderr
    pipe = subprocess.run(f"cat '{write_scenario(make_scenario())}' | {sys.executable} -m sim.cli "
                          "rates /dev/stdin", shell=True, capture_output=True, text=True,
                          timeout=120)
    assert pipe.returncode == 0, pipe.stderr
    assert pipe.stdout == dash.stdout
    empty = _cli("rates", "-", stdin="")
    assert empty.returncode == 2 and "nothing was read" in empty.stderr


def test_scenario_from_standard_input_keeps_the_size_limit():
    done = _cli("rates", "-", stdin="#" * 1_000_001)
    assert done.returncode == 2 and "at most 1000000 bytes" in done.stderr
