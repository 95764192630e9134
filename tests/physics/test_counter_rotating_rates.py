"""Counter-rotating golden-rule channels against closed forms derived here.

Source: Fermi's golden rule (Sakurai, Modern Quantum Mechanics, revised ed. 1994, sec. 5.6, from
memory) applied to the counter-rotating term sigma+ a_k^dag of the monopole coupling
(physics.md sec. 1 of this project lists the term), with the delta function resolved by the
galilean energy balance, worked out beside each test:

    g(p) -> e(p - k) + quantum:  p^2 / 2M = (p - k)^2 / 2M + Omega + |k|   (massless field).

1D, quantum along d = +-1 with |k| = k: k^2 - 2 (d p - M) k + 2 M Omega = 0, so
k_+- = (d p - M) +- sqrt((d p - M)^2 - 2 M Omega), real only for d p - M > sqrt(2 M Omega): the
anomalous-Doppler threshold v > 1 + sqrt(2 Omega / M) (Ginzburg, Theoretical Physics and
Astrophysics, Pergamon 1979, Vavilov-Cherenkov chapter, from memory, without the recoil term).
The mismatch slope there is -+ sqrt(D) / M, D the discriminant, so with |g|^2 = lambda^2 / (4 pi k)
each root carries Gamma_+- = lambda^2 M / (2 k_+- sqrt(D)).
3D: with u = cos(k, p) the delta fixes u, |df/du| = p k / M, and every k in [k_-, k_+] (the 1D
roots at d = +1) is on shell: Gamma = lambda^2 (k_+ - k_-) / (4 pi v), the counterpart of the
ordinary galilean emission rate lambda^2 (k_+ - k_-) / (4 pi v) of physics.md sec. 3.
"""

import math

import numpy as np
import pytest

from sim.physics.field import Field
from sim.physics.golden_rule import (
    ABSORPTION,
    EMISSION,
    EXCITING_EMISSION,
    QUENCHING_ABSORPTION,
    anomalous_doppler_speed,
    channel_table,
    kick_characteristic,
    kick_moments,
    processes_out_of,
)
from sim.physics.models import EXCITED, GROUND
from sim.physics.models.galilean import Galilean
from sim.physics.models.newton_wigner import NewtonWigner

MASS, GAP, LAMBDA = 100.0, 0.5, 0.1
VACUUM_1D = Field(1, 0.0, 0.0, math.inf, 0.0)
VACUUM_3D = Field(3, 0.0, 0.0, math.inf, 0.0)


def on_shell_roots(p, direction, mass=MASS, gap=GAP):
    """k_-, k_+ of k^2 - 2 (d p - M) k + 2 M Omega = 0 (empty below threshold)."""
    b = direction * p - mass
    disc = b * b - 2 * mass * gap
    if b <= 0 or disc < 0:
        return []
    root = math.sqrt(disc)
    return [2 * mass * gap / (b + root), b + root]  # k_- written without cancellation


def test_threshold_speed_is_one_plus_sqrt_two_gap_over_mass():
    model = Galilean(MASS, GAP, LAMBDA)
    assert anomalous_doppler_speed(model, VACUUM_1D) == pytest.approx(1 + math.sqrt(2 * GAP / MASS),
                                                                      rel=1e-14)
    # a field mass m moves the tangency: v_t = k/M + k/w with k^2/2M - m^2/w = Omega
    # (phi = phi' = 0 for phi(k) = v k - k^2/2M - w_k - Omega); checked by evaluating phi
    massive = Field(1, 0.2, 0.0, math.inf, 0.0)
    v = anomalous_doppler_speed(model, massive)
    k = np.linspace(1e-3, 50, 200001)
    phi = v * k - k ** 2 / (2 * MASS) - np.hypot(k, 0.2) - GAP
    assert abs(phi.max()) < 1e-6 and v > 1 + math.sqrt(2 * GAP / MASS)
    # relativistic COM: the invariant mass of e + quantum exceeds M_g, never resonant
    assert anomalous_doppler_speed(NewtonWigner(MASS, GAP, LAMBDA), VACUUM_1D) == math.inf


def test_threshold_with_a_cutoff_below_the_tangency():
    # cutoff K < sqrt(2 M Omega) = 10: phi(K) = 0 gives v = (Omega + K^2/2M + K) / K
    model = Galilean(MASS, GAP, LAMBDA)
    cut = Field(1, 0.0, 0.0, 4.0, 0.0)
    assert anomalous_doppler_speed(model, cut) == pytest.approx((GAP + 16 / 200 + 4) / 4, rel=1e-14)


@pytest.mark.parametrize("p", [150.0, -150.0, 115.0, 400.0])
def test_1d_on_shell_momenta_kicks_and_rates_match_the_quadratic(p):
    model = Galilean(MASS, GAP, LAMBDA)
    table = channel_table(model, VACUUM_1D, EXCITING_EMISSION, [p])
    found = sorted(zip(table.quantum[0], table.kick[0], table.rate[0]), key=lambda r: r[1])
    expected = []
    for d in (+1, -1):
        disc = (d * p - MASS) ** 2 - 2 * MASS * GAP
        for k in on_shell_roots(p, d):
            expected.append((k, -d * k, LAMBDA ** 2 * MASS / (2 * k * math.sqrt(disc))))
    expected.sort(key=lambda r: r[1])
    assert len(found) == len(expected) == 2
    for (k, kick, rate), (k0, kick0, rate0) in zip(found, expected):
        assert k == pytest.approx(k0, rel=1e-12)
        assert kick == pytest.approx(kick0, rel=1e-12)  # the kick of g -> e + k is -k too
        assert rate == pytest.approx(rate0, rel=1e-9)


def test_1d_below_threshold_no_channel():
    model = Galilean(MASS, GAP, LAMBDA)
    v = 1 + math.sqrt(2 * GAP / MASS)
    rates = kick_moments(model, VACUUM_1D, EXCITING_EMISSION, np.array([0.0, 50.0, 0.999 * v * MASS])).rate
    assert np.all(rates == 0)
    assert kick_moments(model, VACUUM_1D, EXCITING_EMISSION, 1.001 * v * MASS).rate > 0


@pytest.mark.parametrize("v", [1.12, 1.5, 3.0])
def test_3d_rate_and_mean_kick_match_the_window_closed_form(v):
    model = Galilean(MASS, GAP, LAMBDA)
    k_lo, k_hi = on_shell_roots(v * MASS, +1)
    moments = kick_moments(model, VACUUM_3D, EXCITING_EMISSION, v * MASS)
    assert moments.rate == pytest.approx(LAMBDA ** 2 * (k_hi - k_lo) / (4 * math.pi * v), rel=1e-9)
    # the kick along p is -k u with u = (k^2/2M + Omega + k) / (v k); dGamma/dk is constant,
    # so <dq_par> = -(1/(v (k_+ - k_-))) Int (k^2/2M + Omega + k) dk over the window
    integral = ((k_hi ** 3 - k_lo ** 3) / (6 * MASS) + GAP * (k_hi - k_lo)
                + (k_hi ** 2 - k_lo ** 2) / 2)
    assert moments.mean / moments.rate == pytest.approx(-integral / (v * (k_hi - k_lo)), rel=1e-9)


def test_static_detector_phase_of_one_emission():
    # heavy detector at rest, massless field: 1D kicks -+k* equally -> cos(k* d); 3D isotropic ->
    # sin(k* d) / (k* d) (common practice; Pfau et al., PRL 73, 1223 (1994), from memory)
    heavy = Galilean(1e9, 1.0, LAMBDA)
    k_star = heavy.rest_emission_momentum()
    d = 2.3
    one = kick_characteristic(heavy, VACUUM_1D, EMISSION, np.array([0.0]), d)[0]
    rate1 = kick_moments(heavy, VACUUM_1D, EMISSION, 0.0).rate
    assert one / rate1 == pytest.approx(math.cos(k_star * d), abs=1e-12)
    for cosine in (1.0, 0.3):
        three = kick_characteristic(heavy, VACUUM_3D, EMISSION, np.array([0.0]), d, cosine)[0]
        rate3 = kick_moments(heavy, VACUUM_3D, EMISSION, 0.0).rate
        assert three / rate3 == pytest.approx(math.sin(k_star * d) / (k_star * d), abs=1e-9)


def test_processes_out_of_each_level():
    assert processes_out_of(EXCITED, True) == (EMISSION,)
    assert processes_out_of(GROUND, True) == (ABSORPTION,)
    assert processes_out_of(GROUND, False) == (ABSORPTION, EXCITING_EMISSION)
    assert processes_out_of(EXCITED, False) == (EMISSION, QUENCHING_ABSORPTION)
    # in the vacuum the absorbing processes have nothing to absorb
    assert processes_out_of(GROUND, False, thermal=False) == (EXCITING_EMISSION,)
    assert processes_out_of(EXCITED, False, thermal=False) == (EMISSION,)


def test_thermal_quenching_absorption_matches_its_quadratic():
    # e(p) + k -> g(p + d k): p^2/2M + Omega + k = (p + d k)^2 / 2M, so
    # k = -(d p - M) + sqrt((d p - M)^2 + 2 M Omega) (one root in each direction), slope
    # |f'| = sqrt((d p - M)^2 + 2 M Omega) / M, rate lambda^2 n(k) M / (2 k sqrt(...))
    mass, gap, temperature, p = 2.0, 0.5, 3.0, 0.7
    model = Galilean(mass, gap, LAMBDA)
    field = Field(1, 0.0, 0.0, math.inf, temperature)
    table = channel_table(model, field, QUENCHING_ABSORPTION, [p])
    got = sorted(zip(table.kick[0], table.rate[0]))
    want = []
    for d in (+1, -1):
        root = math.sqrt((d * p - mass) ** 2 + 2 * mass * gap)
        k = -(d * p - mass) + root
        n = 1 / math.expm1(k / temperature)
        want.append((d * k, LAMBDA ** 2 * n * mass / (2 * k * root)))
    for (kick, rate), (kick0, rate0) in zip(got, sorted(want)):
        assert kick == pytest.approx(kick0, rel=1e-12)
        assert rate == pytest.approx(rate0, rel=1e-9)
