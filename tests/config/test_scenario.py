"""Scenario files: the public keys, defaults, and clear errors for bad input."""

import copy
import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sim import ScenarioError, load_scenario
from sim.config.schema import SCHEMA
from sim.physics.checks import with_keys

from ..builders import build_scenario

#: a scenario that writes every public key (invented numbers); a module constant, since the
#: hypothesis strategies below use it and cannot take fixtures
BASE = build_scenario(title="test", model="newton-wigner", ground_mass=1.0, gap=0.5, dims=1,
                      field__mass=0.0, field__smearing=0.0, field__cutoff=4.0,
                      field__temperature=0.0, strength=0.1, coupling__rotating_wave=True,
                      width=10.0, momentum=0.2, internal="excited", method="perturbative",
                      t_max=100.0, samples=11)


def test_reads_every_public_key():
    s = load_scenario(BASE)
    assert s.detector.model == "newton-wigner" and s.detector.excited_mass == 1.5
    assert s.field.dimensions == 1 and s.field.cutoff == 4.0
    assert s.coupling.strength == 0.1 and s.coupling.rotating_wave is True
    assert s.packet.momentum == (0.2,) and s.packet.internal == "excited"
    assert s.run.method == "perturbative" and s.run.samples == 11
    assert s.source == BASE


def test_defaults():
    raw = {k: v for k, v in copy.deepcopy(BASE).items() if k not in ("run", "title")}
    raw["field"] = {"dimensions": 3}
    raw["packet"] = {"width": 2.0}
    s = load_scenario(raw)
    assert (s.field.mass, s.field.smearing, s.field.cutoff, s.field.temperature) == (0, 0, None, 0)
    assert s.packet.momentum == (0.0, 0.0, 0.0) and s.packet.internal == "excited"
    assert s.coupling.rotating_wave is True and s.run.method == "exact"


def test_3d_momentum_number_is_along_z_and_vector_is_kept():
    raw = copy.deepcopy(BASE)
    raw["field"]["dimensions"] = 3
    assert load_scenario(raw).packet.momentum == (0.0, 0.0, 0.2)
    raw["packet"]["momentum"] = [0.1, 0.0, 0.3]
    s = load_scenario(raw)
    assert s.packet.momentum == (0.1, 0.0, 0.3)
    assert s.mean_momentum == pytest.approx(math.hypot(0.1, 0.3))


def test_one_particle_matching_default_and_nonsense_elsewhere():
    raw = copy.deepcopy(BASE)
    raw["detector"]["model"] = "one-particle"
    assert load_scenario(raw).coupling.matching == "nonrelativistic"
    raw = copy.deepcopy(BASE)
    raw["coupling"]["matching"] = "rest-frame"
    with pytest.raises(ScenarioError, match="coupling.matching"):
        load_scenario(raw)


def test_lifetime_sets_strength_from_rest_frame_golden_rule():
    from sim import rest_rate

    raw = copy.deepcopy(BASE)
    del raw["coupling"]["strength"]
    raw["coupling"]["lifetime"] = 250.0
    s = load_scenario(raw)
    assert 1 / rest_rate(s) == pytest.approx(250.0, rel=1e-10)


def test_all_problems_reported_at_once():
    raw = copy.deepcopy(BASE)
    raw["detector"]["gap"] = -1
    raw["packet"]["width"] = "wide"
    raw["run"]["color"] = "red"
    with pytest.raises(ScenarioError) as info:
        load_scenario(raw)
    text = str(info.value)
    assert "detector.gap = -1" in text and "packet.width" in text and "run.color" in text
    assert len(info.value.problems) == 3


def test_missing_tables_and_keys():
    with pytest.raises(ScenarioError) as info:
        load_scenario({"detector": {"model": "galilean"}})
    text = str(info.value)
    for needle in ("[field]", "[coupling]", "[packet]", "detector.ground_mass", "detector.gap"):
        assert needle in text


def test_coarse_sampling_is_refused():
    raw = copy.deepcopy(BASE)
    raw["run"].update(t_max=1e6, samples=5)
    with pytest.raises(ScenarioError, match="run.samples = 5: .*lifetimes"):
        load_scenario(raw)


def test_with_keys_revalidates():
    s = load_scenario(BASE)
    assert with_keys(s, {"packet.width": 3.0}).packet.width == 3.0
    with pytest.raises(ScenarioError, match="packet.width"):
        with_keys(s, {"packet.width": -3.0})


@pytest.mark.parametrize("text,needle", [
    ("", "empty"), ("this is [not toml", "not valid TOML"), ("\x00\x01\xff\xfe", "not")])
def test_unreadable_files(tmp_path, text, needle):
    path = tmp_path / "bad.toml"
    path.write_bytes(text.encode("latin-1"))
    with pytest.raises(ScenarioError, match=needle):
        load_scenario(path)


def test_missing_file(tmp_path):
    with pytest.raises(ScenarioError, match="cannot be read"):
        load_scenario(tmp_path / "nope.toml")


# --- property-based: every invalid value gives a ScenarioError that names its key -----------

NUMERIC = [(t, k) for t, keys in SCHEMA.items() for k, spec in keys.items()
           if spec.kind in ("float", "int")]


def invalid_values(table, key):
    """Values that break type or range of SCHEMA[table][key]."""
    spec = SCHEMA[table][key]
    wrong_type = st.one_of(st.text(max_size=5), st.booleans(), st.lists(st.integers(), max_size=2),
                           st.just(float("nan")), st.just(float("inf")))
    if spec.kind == "int":
        wrong_type = st.one_of(wrong_type, st.floats(0.1, 0.9))
    out_of_range = st.one_of(st.floats(-1e12, 1e12, allow_nan=False),
                             st.integers(-10 ** 6, 10 ** 6)).filter(
        lambda v: not spec.check(int(v) if spec.kind == "int" and float(v).is_integer() else v)
        if isinstance(v, (int, float)) else True)
    return st.one_of(wrong_type, out_of_range)


@st.composite
def broken_scenario(draw):
    table, key = draw(st.sampled_from(NUMERIC))
    value = draw(invalid_values(table, key))
    raw = copy.deepcopy(BASE)
    raw.setdefault(table, {})[key] = value
    return raw, f"{table}.{key}"


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.filter_too_much])
@given(broken_scenario())
def test_random_invalid_values_name_their_key(case):
    raw, dotted = case
    with pytest.raises(ScenarioError) as info:
        load_scenario(raw)
    assert any(dotted in line for line in info.value.problems), info.value.problems


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(list(SCHEMA)), st.from_regex(r"[A-Za-z_][A-Za-z0-9_]{0,11}", fullmatch=True))
def test_unknown_keys_are_named(table, key):
    if key in SCHEMA[table]:
        return
    raw = copy.deepcopy(BASE)
    raw.setdefault(table, {})[key] = 1.0
    with pytest.raises(ScenarioError, match=f"{table}.{key}: unknown key"):
        load_scenario(raw)


@settings(max_examples=100, deadline=None)
@given(st.sampled_from([("detector", "model"), ("packet", "internal"), ("run", "method"),
                        ("coupling", "matching")]), st.text(max_size=10))
def test_unknown_choices_are_named(where, value):
    table, key = where
    raw = copy.deepcopy(BASE)
    raw[table][key] = value
    if table == "coupling":
        raw["detector"]["model"] = "one-particle"
    if value in ("newton-wigner", "galilean", "one-particle", "excited", "ground",
                 "perturbative", "markov", "exact", "fock", "nonrelativistic", "rest-frame"):
        return
    with pytest.raises(ScenarioError) as info:
        load_scenario(raw)
    assert any(f"{table}.{key}" in line for line in info.value.problems)
