"""The markov solver's position variance, packet shapes and spatial coherence.

Sources named beside each test: the Heisenberg equation of motion of a free particle,
x(t) = x(0) + v(P) t with v = dE/dp (J. J. Sakurai, Modern Quantum Mechanics, sec. 2.2, from
memory), which for a minimum-uncertainty Gaussian gives Var x(t) = Var x(0) + t^2 Var v(P)
(common practice); the characteristic function exp(i m s - sigma^2 s^2 / 2) of a Gaussian
(common practice); the static-limit visibilities |cos(k* d)| (1D) and |sin(k* d) / (k* d)| (3D)
after one emission (common practice; T. Pfau et al., Phys. Rev. Lett. 73, 1223 (1994), from
memory); two-body decay kinematics k* = (M_e^2 - M_g^2) / (2 M_e) (common practice).
"""

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad

from sim import load_scenario
from sim.physics.checks import with_keys
from sim.solvers import solver_for
from sim.solvers.base import refusal
from sim.solvers.markov.solver import MarkovSolver, com_lattice

#: this module's scenario defaults (invented numbers)
BASE = dict(title=None, ground_mass=1.0, gap=0.5, dims=1, width=2.0, momentum=0.0,
            internal="excited", method="markov", samples=11)
#: a static (very heavy) detector that decays completely: Gamma = lambda^2 / Omega = 0.01 in
#: 1D, lambda^2 Omega / (2 pi) = 0.01 in 3D; 15 lifetimes
STATIC = dict(model="newton-wigner", ground_mass=1e6, gap=1.0, t_max=1500.0, samples=16)


def k_star(mass, gap):
    """k* = (M_e^2 - M_g^2) / (2 M_e) (two-body decay at rest, common practice)."""
    return gap * (2 * mass + gap) / (2 * (mass + gap))


def evolve(make_scenario, **keys):
    """(scenario, Evolution) of a markov run of BASE with `keys`."""
    s = load_scenario(make_scenario(BASE, **keys))
    return s, MarkovSolver(s).run()


def velocity_variance(mass, p0, sigma, relativistic):
    """Var v(P) over N(p0, sigma^2), v = p / M or p / sqrt(p^2 + M^2), by scipy.integrate.quad
    (independent of the solver's lattice and of sim.physics)."""
    def v(p):
        return p / math.hypot(p, mass) if relativistic else p / mass

    def moment(n):
        return quad(lambda p: v(p) ** n * math.exp(-0.5 * ((p - p0) / sigma) ** 2)
                    / (math.sqrt(2 * math.pi) * sigma), p0 - 12 * sigma, p0 + 12 * sigma,
                    epsabs=0, epsrel=1e-13)[0]

    return moment(2) - moment(1) ** 2


def two_lobe_characteristic(width, separation, phase, distance):
    """Int n(p) e^{i p s} dp of a 1D two-lobe packet at rest, written out: the density is
    |G|^2 (2 + e^{i(p d + phi)} + e^{-i(p d + phi)}) / N^2 with |G|^2 = N(0, sigma^2) and
    N^2 = 2 (1 + cos(phi) e^{-sigma^2 d^2 / 2}), so with g(s) = e^{-sigma^2 s^2 / 2}
    (the Gaussian's characteristic function, common practice)
    chi(s) = (2 g(s) + e^{i phi} g(s + d) + e^{-i phi} g(s - d)) / N^2."""
    sigma, d = 0.5 / width, separation
    g = lambda s: math.exp(-0.5 * (sigma * s) ** 2)
    norm = 2 * (1 + math.cos(phase) * g(d))
    return (2 * g(distance) + np.exp(1j * phase) * g(distance + d)
            + np.exp(-1j * phase) * g(distance - d)) / norm


# --- Var x: free spreading ---------------------------------------------------------------------


def test_free_galilean_packet_spreads_as_the_closed_form(make_scenario):
    # Var x(t) = w^2 + sigma_p^2 t^2 / M^2 for a minimum-uncertainty Gaussian (Sakurai sec. 2.2,
    # from memory; common practice), zero coupling; to 1e-6 relative (the lattice window cuts the
    # amplitude at 6 sigma_p, e^-9)
    s, evo = evolve(make_scenario, model="galilean", strength=0.0, momentum=0.2, t_max=20.0)
    sigma, mass = 0.5 / s.packet.width, s.detector.ground_mass
    expected = s.packet.width ** 2 + (sigma * evo.times / mass) ** 2
    assert expected[-1] > 4 * expected[0]  # the packet really spreads
    assert np.max(np.abs(evo.x_var / expected - 1)) < 1e-6
    assert np.max(np.abs(evo.purity - 1)) < 1e-9
    assert not evo.warnings


@pytest.mark.parametrize("model", ["one-particle", "newton-wigner"])
def test_free_relativistic_packet_spreads_with_its_velocity_spread(make_scenario, model):
    # x(t) = x(0) + v(P) t (Heisenberg equation, Sakurai sec. 2.2, from memory) with
    # v = p / sqrt(p^2 + M_e^2); for a real momentum amplitude centred at x = 0 the cross term
    # <{x(0), v}> vanishes, so Var x(t) = w^2 + t^2 Var v, Var v by quad over the packet here;
    # to 1e-6 relative.  width 1: sigma_p = 0.5, a third of M_e, so v(p) is far from linear
    s, evo = evolve(make_scenario, model=model, strength=0.0, width=1.0, momentum=0.6,
                    t_max=8.0)
    mass = s.detector.ground_mass + s.detector.gap
    spread = velocity_variance(mass, 0.6, 0.5, relativistic=True)
    assert abs(spread / velocity_variance(mass, 0.6, 0.5, False) - 1) > 0.3  # not galilean
    expected = 1.0 + spread * evo.times ** 2
    assert np.max(np.abs(evo.x_var / expected - 1)) < 1e-6
    assert not evo.warnings


def test_split_kicks_withhold_x_var_and_3d_withholds_it(make_scenario):
    # a light detector's kicks vary over the packet and are split on the lattice: Var x withheld
    # with its reason, the purity kept; in 3D (populations only) both withheld, and a warm 3D
    # field says that the transverse kicks are not followed
    _, evo = evolve(make_scenario, model="newton-wigner", strength=0.05, width=20.0,
                    momentum=0.3, field__mass=0.02, t_max=40.0, samples=5)
    assert evo.x_var is None and evo.purity[-1] < 0.99
    assert any("x_var: not computed" in w and 'run.method = "exact"' in w for w in evo.warnings)
    _, warm = evolve(make_scenario, model="galilean", ground_mass=50.0, gap=1.0, dims=3,
                     strength=0.3, momentum=0.5, width=5.0, internal="ground",
                     field__temperature=0.8, t_max=20.0, samples=5, grid__points=5,
                     grid__directions=2)
    assert warm.x_var is None and warm.purity is None
    text = " ".join(warm.warnings)
    assert "x_var, purity: not computed in 3D" in text and "field.dimensions = 1" in text
    assert "pre-kick transverse momentum" in text and 'run.method = "exact"' in text


# --- packet shapes and the coherence --------------------------------------------------------------


def test_two_lobe_coherence_after_complete_decay_1d(make_scenario):
    # static limit: |chi(t_max)| / |chi(0)| = |cos(k* d)| (common practice; Pfau et al. 1994, from
    # memory), to 2e-3; chi(0) against the two-lobe characteristic function written out here, to
    # 1e-9; the initial state is the pure |psi><psi| (purity 1) whose fringes the default
    # lattice resolves (no warning about them)
    d = 4.0
    s, evo = evolve(make_scenario, **STATIC, strength=0.1, width=1.0, packet__shape="two-lobe",
                    packet__separation=d, packet__phase=0.7)
    assert evo.excited[-1] < 1e-6
    chi = evo.coherence
    assert chi.shape == evo.times.shape and chi.dtype == complex
    assert abs(chi[0] - two_lobe_characteristic(1.0, d, 0.7, d)) < 1e-9
    visibility = abs(math.cos(k_star(1e6, 1.0) * d))
    assert abs(abs(chi[-1]) / abs(chi[0]) - visibility) < 2e-3
    assert evo.purity[0] == pytest.approx(1.0, abs=1e-12)
    assert np.all(np.abs(evo.norm - 1) < 1e-6)
    assert not [w for w in evo.warnings if w.startswith("coherence")]


def test_coherence_after_complete_decay_3d(make_scenario):
    # 3D static limit, Gaussian packet with run.coherence_at = d: |sin(k* d) / (k* d)| (common
    # practice; Pfau et al. 1994, from memory), to 5e-3 (the lattice split of the axial kicks
    # k* cos(theta) lowers it by at most 1 - sqrt(1 - (1 - cos(dp d)) / 2) = 3.5e-3 here); chi(0)
    # is the Gaussian's characteristic function exp(-sigma_p^2 d^2 / 2), to 1e-9
    d = 2.0
    s, evo = evolve(make_scenario, **STATIC, dims=3, strength=0.25, width=2.0,
                    run__coherence_at=d)
    assert evo.excited[-1] < 1e-6
    chi = evo.coherence
    assert abs(chi[0] - math.exp(-0.5 * (0.25 * d) ** 2)) < 1e-9
    kd = k_star(1e6, 1.0) * d
    assert abs(abs(chi[-1]) / abs(chi[0]) - abs(math.sin(kd) / kd)) < 5e-3


def test_file_packet_coherence_starts_at_its_table_integral(make_scenario, tmp_path):
    # a tabulated complex amplitude: chi(0) = Int |a(p)|^2 e^{i p d} dp of the linearly
    # interpolated table, by scipy quad here (np.interp on the rows), to 1e-4; the run conserves
    # the trace and |chi| does not grow (recoil only averages phases)
    p = np.linspace(-2.0, 2.5, 301)
    amplitude = np.exp(-((p - 0.3) / 0.6) ** 2) * (1 + 0.8j * np.sin(3 * p))
    path = tmp_path / "amplitude.csv"
    path.write_text("p,re,im\n" + "".join(f"{a},{b.real},{b.imag}\n"
                                          for a, b in zip(p, amplitude)))
    d = 1.5
    s, evo = evolve(make_scenario, model="newton-wigner", ground_mass=1e6, gap=1.0, strength=0.1,
                    momentum=None, packet__shape="file", packet__amplitude_file=str(path),
                    run__coherence_at=d, t_max=300.0, samples=7)

    def density(x):
        return (np.interp(x, p, amplitude.real) ** 2 + np.interp(x, p, amplitude.imag) ** 2)

    norm = quad(density, p[0], p[-1], points=p[1:-1], limit=1000)[0]
    parts = [quad(lambda x, f=f: density(x) * f(x * d), p[0], p[-1], points=p[1:-1],
                  limit=1000)[0] / norm for f in (np.cos, np.sin)]
    assert abs(evo.coherence[0] - (parts[0] + 1j * parts[1])) < 1e-4
    assert np.all(np.abs(evo.norm - 1) < 1e-6)
    assert np.all(np.abs(evo.coherence) <= abs(evo.coherence[0]) * (1 + 1e-9))


def test_thermal_two_lobe_run_keeps_the_band_and_loses_coherence(make_scenario):
    # a warm field has no closed form here (it is paired with the vacuum closed forms above):
    # the trace stays 1, |chi| falls and never exceeds |chi(0)|, and the structure derived in
    # the sim.solvers.markov.solver docstring holds: rho_COM(p_j, p_j') vanishes for
    # |j - j'| >= grid.points (every jump shifts both momenta of a coherence alike)
    s = load_scenario(make_scenario(BASE, **{**STATIC, "t_max": 100.0}, strength=0.1,
                                    width=1.0, packet__shape="two-lobe", packet__separation=2.0,
                                    field__temperature=0.5))
    solver = MarkovSolver(s)
    evo = solver.run()
    _, _, grid, sectors = solver._sectors(100.0)
    com = com_lattice(sectors[0], evo.final_state.full())
    j = np.arange(com.shape[0])
    assert np.max(np.abs(com[np.abs(j[:, None] - j[None, :]) >= grid.points])) == 0.0
    assert np.all(np.abs(evo.norm - 1) < 1e-6)
    assert abs(evo.coherence[-1]) < 0.99 * abs(evo.coherence[0])
    assert np.all(np.abs(evo.coherence) <= abs(evo.coherence[0]) * (1 + 1e-9))


def test_coarse_lattice_for_the_fringes_is_warned_about_with_its_key(make_scenario):
    # 9 points over +-6 sigma_p with d = 8.5: about 1.2 steps per fringe period 2 pi / d
    _, evo = evolve(make_scenario, **{**STATIC, "t_max": 10.0, "samples": 3}, strength=0.1,
                    width=1.0, packet__shape="two-lobe", packet__separation=8.5, grid__points=9)
    notes = [w for w in evo.warnings if w.startswith("coherence at d = 8.5 (packet.separation)")]
    assert len(notes) == 1 and "raise grid.points to at least" in notes[0]


# --- the memory guard's advice -----------------------------------------------------------------


def test_thermal_1d_refusal_names_the_run_length_first():
    # the 1D thermal closure is set by the thermal walk and cut at MAX_STATES: lowering
    # grid.points from 37 to 19 leaves it at about 3000 states (measured), so the refusal leads
    # with run.t_max
    root = Path(__file__).resolve().parents[3]
    s = with_keys(load_scenario(root / "scenarios" / "thermal_excitation_3d.toml"),
                  {"field.dimensions": 1, "packet.momentum": 0.5, "run.t_max": 60.0})
    estimate = solver_for(s).estimate()
    assert estimate.states > 2000
    reason = refusal(estimate, "markov", available=estimate.memory_bytes / 2)
    assert reason.startswith("run.t_max = 60: ") and "lower run.t_max" in reason


def test_markov_refuses_counter_rotating_terms():
    # markov keeps only the rotating-wave jumps: it refuses rotating_wave = false rather than
    # silently dropping the counter-rotating terms (methods perturbative and fock keep them)
    from sim.errors import ScenarioError
    from sim.physics.checks import load_scenario
    from sim.solvers import solver_for

    raw = {"title": "rwa", "detector": {"model": "galilean", "ground_mass": 100.0, "gap": 0.5},
           "field": {"dimensions": 1}, "coupling": {"strength": 0.1, "rotating_wave": False},
           "packet": {"width": 5.0, "momentum": 150.0, "internal": "ground"},
           "run": {"method": "markov", "t_max": 10.0, "samples": 11}}
    with pytest.raises(ScenarioError, match="rotating_wave = false: method \"markov\""):
        solver_for(load_scenario(raw))
