"""Fuzzed input: whatever a scenario holds, loading it either succeeds or raises ScenarioError
with one line per problem — never another exception."""

import copy
import tomllib

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sim import ScenarioError, load_scenario
from sim.config.scenario import read_scenario_file
from sim.config.schema import SCHEMA

from ..builders import build_scenario

#: the valid scenario every mutation starts from (invented numbers); a module constant, since the
#: hypothesis strategy below uses it and cannot take fixtures
VALID = build_scenario(title=None, model="galilean", ground_mass=2.0, gap=0.4, dims=3,
                       strength=0.1, width=5.0, momentum=0.1, method="perturbative", t_max=50.0,
                       samples=21)

scalars = st.one_of(st.none(), st.booleans(), st.integers(-10 ** 20, 10 ** 20),
                    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8))
values = st.recursive(scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(st.text(max_size=6), inner, max_size=3)),
    max_leaves=8)
keys = st.sampled_from([f"{t}.{k}" for t, ks in SCHEMA.items() for k in ks]
                       + ["title", "detector", "field.nope", "extra.key", "run"])


@st.composite
def mutated(draw):
    raw = copy.deepcopy(VALID)
    for _ in range(draw(st.integers(1, 4))):
        dotted = draw(keys)
        value = draw(values)
        if "." in dotted:
            table, key = dotted.split(".", 1)
            if not isinstance(raw.get(table), dict):
                raw[table] = {}
            raw[table][key] = value
        else:
            raw[dotted] = value
    if draw(st.booleans()):
        raw.pop(draw(st.sampled_from(list(VALID))), None)
    return raw


def mutation_loads_or_names_its_problems(raw):
    """A mutated scenario either loads or raises ScenarioError naming its problems."""
    try:
        load_scenario(raw)
    except ScenarioError as exc:
        assert exc.problems and all(isinstance(p, str) and p.strip() for p in exc.problems)
        assert all("\n" not in p for p in exc.problems)


@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
@given(mutated())
def test_any_mutation_loads_or_names_its_problems(raw):
    mutation_loads_or_names_its_problems(raw)


@pytest.mark.slow  # the heavy fuzz count
@settings(max_examples=3000, deadline=None, suppress_health_check=list(HealthCheck))
@given(mutated())
def test_any_mutation_loads_or_names_its_problems_many(raw):
    mutation_loads_or_names_its_problems(raw)


@settings(max_examples=500, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.binary(max_size=300))
def test_any_bytes_file_loads_or_raises_scenario_error(tmp_path_factory, data):
    path = tmp_path_factory.mktemp("fuzz") / "s.toml"
    path.write_bytes(data)
    try:
        read_scenario_file(path)
    except ScenarioError as exc:
        assert exc.problems
    except tomllib.TOMLDecodeError:  # pragma: no cover - must never escape
        raise AssertionError("TOML error escaped")


def test_enormous_file_is_refused_without_reading(tmp_path):
    path = tmp_path / "huge.toml"
    with open(path, "wb") as handle:
        handle.truncate(50_000_000)
    try:
        load_scenario(path)
    except ScenarioError as exc:
        assert "bytes" in str(exc)
    else:
        raise AssertionError("an enormous file was accepted")
