"""method = "perturbative": counter-rotating channels, packet shapes and the spatial coherence.

References: the galilean energy balance of g(p) -> e(p - k) + quantum solved here as a quadratic
(tests/physics/test_counter_rotating_rates.py derives it: Fermi's golden rule, Sakurai, Modern
Quantum Mechanics, sec. 5.6, from memory); method "fock" (a truncated Fock space of box modes
evolved by qutip.sesolve, itself checked against second-order perturbation theory and an
independent QuTiP build in tests/solvers/fock); the static-limit visibilities |cos(k* d)| (1D)
and |sin(k* d) / (k* d)| (3D) after one emission (common practice; Pfau et al., Phys. Rev. Lett.
73, 1223 (1994), from memory); scipy.integrate.quad for the packet's characteristic function.
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from sim import run
from sim.errors import ScenarioError
from sim.physics.checks import load_scenario
from sim.physics.field import packet_for
from sim.solvers import solver_for
from sim.solvers.common import physics_warnings

#: a galilean detector above the anomalous-Doppler threshold (invented numbers): M = 100,
#: Omega = 0.5, v = 1.5 > 1 + sqrt(2 Omega / M) = 1.1, ground start, massless 1D field
FAST = dict(model="galilean", ground_mass=100.0, gap=0.5, dims=1, strength=0.01, width=100.0,
            momentum=150.0, internal="ground", coupling__rotating_wave=False, t_max=60.0,
            samples=61)


def slow_root_rate(p, mass=100.0, gap=0.5, lam=0.01):
    """Gamma of the forward root k_- of k^2 - 2 (p - M) k + 2 M Omega = 0: lambda^2 M / (2 k sqrt D)."""
    b = p - mass
    disc = b * b - 2 * mass * gap
    k = 2 * mass * gap / (b + math.sqrt(disc))
    return lam ** 2 * mass / (2 * k * math.sqrt(disc))


def early_slope(times, excited, lo, hi):
    pick = (times >= lo) & (times <= hi)
    return np.polyfit(times[pick], excited[pick], 1)[0]


def test_counter_rotating_excitation_above_the_threshold(make_scenario):
    with_cr = run(load_scenario(make_scenario(FAST, field__cutoff=10.0)))
    # cutoff 10 keeps only the slow forward root k_- ~ 1.01 (the fast one is ~ 99): the initial
    # slope is its rate, to the packet spread and the O(Gamma t) decay of P_e
    assert early_slope(with_cr.times, with_cr.excited, 0, 5) == pytest.approx(slow_root_rate(150.0),
                                                                              rel=2e-3)
    # the recoil of g -> e + k is -k: the mean momentum drops by k_- per excitation
    evo = solver_for(load_scenario(make_scenario(FAST, field__cutoff=10.0))).run()
    k_minus = 2 * 100 * 0.5 / (50 + math.sqrt(50 ** 2 - 100))
    assert evo.p_mean[1] - evo.p_mean[0] == pytest.approx(-k_minus * evo.excited[1], rel=2e-2)
    rwa = run(load_scenario(make_scenario(FAST, coupling__rotating_wave=True)))
    assert np.all(rwa.excited == 0)
    assert any(w.startswith("rotating-wave approximation") and "1.1" in w
               for w in rwa.summary["warnings"])


def test_rwa_warning_uses_the_recoil_corrected_threshold(make_scenario):
    # v_t = 1 + sqrt(2 Omega / M) = 1.1: a packet reaching 1.05 is below it (no warning, the old
    # rule warned above 1), one reaching 1.2 above it
    below = load_scenario(make_scenario(FAST, momentum=105.0, coupling__rotating_wave=True))
    above = load_scenario(make_scenario(FAST, momentum=120.0, coupling__rotating_wave=True))
    assert not any("rotating-wave" in w for w in physics_warnings(below, 1e-6))
    assert any("rotating-wave" in w for w in physics_warnings(above, 1e-6))
    # no warning once the counter-rotating terms are kept
    assert not physics_warnings(with_keys_false(above), 1e-6)


def with_keys_false(scenario):
    from sim.physics.checks import with_keys
    return with_keys(scenario, {"coupling.rotating_wave": False})


def test_counter_rotating_rate_matches_fock_at_weak_coupling(make_scenario):
    # fock: 120 box modes nearest the resonance of g -> e + k in a box of 400 (recurrence far
    # beyond t_max), max_quanta 1 (the transition is first order in the amplitude), one sector.
    # The slope of P_e over t = 10..60 (past the 1 / bandwidth transient) against the
    # perturbative slope; tolerance 5% (measured 1.4%: the finite band's Si(B t) ripple)
    fock = run(load_scenario(make_scenario(FAST, method="fock", field__cutoff=10.0,
                                           bath__box_length=400.0, bath__fock_modes=120,
                                           bath__max_quanta=1, bath__sectors=1)))
    golden = run(load_scenario(make_scenario(FAST, field__cutoff=10.0)))
    ratio = (early_slope(fock.times, fock.excited, 10, 60)
             / early_slope(golden.times, golden.excited, 10, 60))
    assert ratio == pytest.approx(1.0, abs=0.05)


def test_every_method_refuses_or_keeps_counter_rotating_terms(make_scenario):
    with pytest.raises(ScenarioError, match="rotating_wave"):
        solver_for(load_scenario(make_scenario(FAST, internal="excited", method="exact")))


# --- packet shapes ----------------------------------------------------------------------------

HEAVY = dict(model="newton-wigner", ground_mass=1000.0, gap=1.0, strength=0.03, width=1.0,
             momentum=0.0, internal="excited", samples=41, t_max=30000.0)


@pytest.mark.parametrize("dims", [1, 3])
def test_two_lobe_packet_decays_and_loses_coherence_to_the_static_visibility(make_scenario, dims):
    d = 3.7
    s = load_scenario(make_scenario(HEAVY, dims=dims, packet__shape="two-lobe",
                                    packet__separation=d, t_max=None, lifetimes=30))
    evo = solver_for(s).run()
    assert evo.excited[-1] < 1e-12  # complete decay
    k_star = 1.0 * (2 * 1000.0 + 1.0) / (2 * 1001.0)
    expected = (abs(math.cos(k_star * d)) if dims == 1
                else abs(math.sin(k_star * d) / (k_star * d)))
    # tolerance 1e-3: the packet's momentum spread (sigma_p = 0.5 on M = 1000) moves k by ~1e-3
    assert abs(evo.coherence[-1]) / abs(evo.coherence[0]) == pytest.approx(expected, abs=1e-3)


@pytest.mark.parametrize("dims", [1, 3])
def test_initial_coherence_is_the_packet_characteristic_function(make_scenario, dims):
    d = 2.2
    s = load_scenario(make_scenario(HEAVY, dims=dims, packet__shape="two-lobe",
                                    packet__separation=4.0, packet__phase=0.6,
                                    run__coherence_at=d, momentum=0.3 if dims == 1 else [0, 0, 0.3]))
    evo = solver_for(s).run()
    packet = packet_for(s)
    lo, hi = packet.axis_range()
    re = quad(lambda p: abs(packet.axis_amplitude(p)) ** 2 * math.cos(p * d), lo, hi, limit=200)[0]
    im = quad(lambda p: abs(packet.axis_amplitude(p)) ** 2 * math.sin(p * d), lo, hi, limit=200)[0]
    assert evo.coherence[0] == pytest.approx(re + 1j * im, abs=1e-9)


def test_no_coherence_asked_gives_none(make_scenario):
    assert solver_for(load_scenario(make_scenario(HEAVY))).run().coherence is None


def test_file_packet_sampled_from_a_gaussian_matches_the_gaussian(make_scenario, tmp_path):
    width, p0 = 1.0, 0.4
    sigma = 0.5 / width
    p = np.linspace(p0 - 9 * sigma, p0 + 9 * sigma, 2001)
    amplitude = np.exp(-0.25 * ((p - p0) / sigma) ** 2)
    table = tmp_path / "amp.csv"
    table.write_text("p,re,im\n" + "\n".join(f"{a:.17g},{b:.17g},0" for a, b in zip(p, amplitude)))
    light = dict(HEAVY, model="galilean", ground_mass=5.0, t_max=3000.0, momentum=p0)
    gauss = solver_for(load_scenario(make_scenario(light))).run()
    filed = solver_for(load_scenario(make_scenario(light, packet__shape="file", momentum=None,
                                                   packet__amplitude_file=str(table)))).run()
    # linear interpolation of the table: O(h^2) ~ 1e-5 relative (h = 0.0045 sigma)
    np.testing.assert_allclose(filed.excited, gauss.excited, atol=1e-5)
    np.testing.assert_allclose(filed.p_mean, gauss.p_mean, atol=1e-5)
    np.testing.assert_allclose(filed.p_var, gauss.p_var, rtol=1e-4)
