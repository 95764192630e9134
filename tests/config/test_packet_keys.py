"""The [packet] shape keys and run.coherence_at: defaults, units, combination problems, and the
refusal of a shape by a method that does not evolve it."""

from pathlib import Path

import numpy as np
import pytest

from sim import ScenarioError, load_scenario
from sim.physics.coherence import coherence_distance, static_kick_visibility
from sim.physics.golden_rule import rest_emitted_momentum, rest_rate
from sim.solvers import METHODS, solver_for

from ..builders import build_scenario

#: a small 1D scenario of a heavy detector (invented numbers)
KEYS = dict(model="newton-wigner", ground_mass=1000.0, gap=1.0, strength=0.03, width=1.0,
            momentum=0.0, method="perturbative", t_max=100.0, samples=11)


def problems_of(**changes) -> list[str]:
    with pytest.raises(ScenarioError) as info:
        load_scenario(build_scenario(KEYS, **changes))
    return info.value.problems


def test_defaults_keep_the_gaussian_and_no_coherence():
    s = load_scenario(build_scenario(KEYS))
    assert (s.packet.shape, s.packet.separation, s.packet.phase, s.packet.amplitude_file) == (
        "gaussian", None, 0.0, None)
    assert s.run.coherence_at is None and coherence_distance(s) is None


def test_two_lobe_keys_load_and_set_the_coherence_distance():
    s = load_scenario(build_scenario(KEYS, packet__shape="two-lobe", packet__separation=8.5,
                                     packet__phase=1.5))
    assert (s.packet.shape, s.packet.separation, s.packet.phase) == ("two-lobe", 8.5, 1.5)
    assert coherence_distance(s) == (8.5, "packet.separation")
    s = load_scenario(build_scenario(KEYS, packet__shape="two-lobe", packet__separation=8.5,
                                     run__coherence_at=3.0))
    assert coherence_distance(s) == (3.0, "run.coherence_at")  # the explicit key wins
    s = load_scenario(build_scenario(KEYS, run__coherence_at=2.0))
    assert coherence_distance(s) == (2.0, "run.coherence_at")


def test_lengths_take_unit_strings():
    # with the gap as energy unit E0, a length L is L E0 / (hbar c); hbar c = 197.3269804 MeV fm
    # = 197.3269804 eV nm (CODATA 2018; from memory), so with a 1 eV gap 197.3269804 nm is one
    # natural length
    s = load_scenario(build_scenario(KEYS, gap="1 eV", ground_mass="1 GeV", width="50 nm",
                                     packet__shape="two-lobe", packet__separation="197.3269804 nm",
                                     run__coherence_at="394.6539608 nm", t_max="100 fs"))
    assert s.packet.separation == pytest.approx(1.0, rel=1e-9)
    assert s.run.coherence_at == pytest.approx(2.0, rel=1e-9)


@pytest.mark.parametrize("changes, line", [
    (dict(packet__shape="three-lobe"),
     'packet.shape = \'three-lobe\': allowed: "gaussian" | "two-lobe" | "file"'),
    (dict(packet__shape="two-lobe", packet__separation=0.0),
     'packet.separation = 0.0: allowed: > 0 (packet.shape = "two-lobe" only)'),
    (dict(packet__shape="two-lobe", packet__separation=-2.0),
     'packet.separation = -2.0: allowed: > 0 (packet.shape = "two-lobe" only)'),
    (dict(packet__shape="two-lobe"),
     'packet.separation: missing; allowed: > 0, the distance between the lobe centres (required '
     'by packet.shape = "two-lobe")'),
    (dict(packet__separation=3.0),
     'packet.separation = 3.0: applies only to packet.shape = "two-lobe" (shape is "gaussian"); '
     'remove it'),
    (dict(packet__phase=1.0),
     'packet.phase = 1.0: applies only to packet.shape = "two-lobe" (shape is "gaussian"); '
     'remove it'),
    (dict(packet__amplitude_file="a.csv"),
     'packet.amplitude_file = "a.csv": applies only to packet.shape = "file" (shape is '
     '"gaussian"); remove it'),
    (dict(packet__shape="two-lobe", packet__separation=2.0, packet__amplitude_file="a.csv"),
     'packet.amplitude_file = "a.csv": applies only to packet.shape = "file" (shape is '
     '"two-lobe"); remove it'),
    (dict(packet__shape="file"),
     'packet.amplitude_file: missing; allowed: a CSV file with columns p,re,im (required by '
     'packet.shape = "file")'),
    (dict(packet__shape="file", packet__amplitude_file="a.csv", momentum=0.3),
     'packet.momentum = 0.3: a 1D packet.shape = "file" takes its momenta from '
     'packet.amplitude_file; remove it (in 3D it gives the direction of the packet axis)'),
    (dict(packet__shape="file", packet__amplitude_file="  "),
     "packet.amplitude_file = '  ': allowed: a CSV file with columns p,re,im (packet.shape = "
     '"file" only)'),
    (dict(packet__phase="1 rad"), "packet.phase = '1 rad': expected a finite number"),
    (dict(run__coherence_at=0.0),
     "run.coherence_at = 0.0: allowed: > 0 (omit for packet.separation of a two-lobe packet, "
     "else no coherence)"),
])
def test_each_problem_names_key_value_and_what_is_allowed(changes, line):
    assert any(p.startswith(line) for p in problems_of(**changes)), problems_of(**changes)


def test_combination_problems_are_listed_together():
    problems = problems_of(packet__separation=3.0, packet__phase=0.5,
                           packet__amplitude_file="a.csv")
    assert [p.split(" =")[0] for p in problems] == [
        "packet.separation", "packet.phase", "packet.amplitude_file"]


def test_3d_file_packet_keeps_its_momentum_as_the_axis_direction(tmp_path, monkeypatch):
    # the amplitude file is read when the scenario loads (a relative path: the current folder)
    monkeypatch.chdir(tmp_path)
    (tmp_path / "a.csv").write_text("p,re,im\n-2,0,0\n0,1,0\n2,0,0\n")
    s = load_scenario(build_scenario(KEYS, dims=3, momentum=[0.0, 0.3, 0.4],
                                     packet__shape="file", packet__amplitude_file="a.csv"))
    assert s.packet_axis == pytest.approx((0.0, 0.6, 0.8))


class TwoLobeSolver:
    """A stand-in solver that declares the two-lobe shape."""

    packet_shapes = ("gaussian", "two-lobe")

    def __init__(self, scenario, **options):
        self.scenario = scenario


class GaussianOnlySolver(TwoLobeSolver):
    """A stand-in solver that declares no shapes (gaussian only, the default)."""

    packet_shapes = ("gaussian",)


def test_a_method_without_the_shape_refuses_it_and_names_those_with_it(monkeypatch):
    raw = build_scenario(KEYS, packet__shape="two-lobe", packet__separation=8.5)
    for name in METHODS:
        monkeypatch.setitem(METHODS, name, f"{__name__}:GaussianOnlySolver")
    with pytest.raises(ScenarioError) as info:
        solver_for(raw)
    assert str(info.value) == ('packet.shape = "two-lobe": method "perturbative" evolves only '
                               'gaussian packets so far; no method evolves it yet; use '
                               'packet.shape = "gaussian"')
    monkeypatch.setitem(METHODS, "exact", f"{__name__}:TwoLobeSolver")
    monkeypatch.setitem(METHODS, "fock", f"{__name__}:TwoLobeSolver")
    with pytest.raises(ScenarioError) as info:
        solver_for(raw, "markov")
    assert str(info.value) == ('packet.shape = "two-lobe": method "markov" evolves only '
                               'gaussian packets so far; use run.method = "exact" or "fock"')
    assert isinstance(solver_for(raw, "exact"), TwoLobeSolver)
    # a Gaussian scenario is never refused for its shape, and coherence_at is no refusal
    assert solver_for(build_scenario(KEYS, run__coherence_at=2.0)).scenario.run.coherence_at == 2.0


def test_bundled_which_path_scenario_shows_a_visible_loss_of_coherence():
    # the two copies are one file; the relativistic two-body decay M_e -> M_g + a quantum of mass
    # m at rest (common practice) gives k* = sqrt((M_e^2 - (M_g + m)^2)(M_e^2 - (M_g - m)^2)) /
    # (2 M_e), here (1001 -> 1000 + 0.3) |cos(k* d)| = 0.247 at d = 8.5, and the emitted wave
    # train (length 1 / Gamma, c = 1) is far longer than d
    root = Path(__file__).resolve().parents[2]
    bundled = root / "scenarios" / "which_path_1d.toml"
    assert bundled.read_bytes() == (root / "sim" / "data" / "which_path_1d.toml").read_bytes()
    s = load_scenario(bundled)
    assert s.packet.shape == "two-lobe" and s.run.method == "exact"
    k = rest_emitted_momentum(s)
    e, g, m = 1001.0, 1000.0, 0.3
    assert k == pytest.approx(np.sqrt((e * e - (g + m) ** 2) * (e * e - (g - m) ** 2)) / (2 * e),
                              rel=1e-9)
    d, key = coherence_distance(s)
    assert key == "packet.separation"
    assert float(static_kick_visibility(k, d, 1)) == pytest.approx(abs(np.cos(k * 8.5)), abs=1e-12)
    assert float(static_kick_visibility(k, d, 1)) == pytest.approx(0.2474, abs=1e-3)
    assert rest_rate(s) * d < 0.01


def test_a_relative_amplitude_file_is_read_beside_the_scenario_file(tmp_path, monkeypatch):
    # a scenario file's relative amplitude_file is taken from the file's own folder, whatever
    # the current folder is (a dict scenario keeps the current folder)
    folder = tmp_path / "scenarios"
    folder.mkdir()
    (folder / "a.csv").write_text("p,re,im\n-2,0,0\n0,1,0\n2,0,0\n")
    (folder / "s.toml").write_text(
        'title = "file packet"\n[detector]\nmodel = "newton-wigner"\nground_mass = 1.0\n'
        'gap = 0.5\n[field]\ndimensions = 1\n[coupling]\nstrength = 0.05\n[packet]\n'
        'shape = "file"\namplitude_file = "a.csv"\nwidth = 1.0\ninternal = "excited"\n')
    monkeypatch.chdir(tmp_path)
    s = load_scenario(folder / "s.toml")
    assert Path(s.packet.amplitude_file) == (folder / "a.csv").resolve()
