"""Golden-rule rates against the closed forms of physics.md section 3.

Sources: static-detector 3D rate lambda^2 Omega / (2 pi) is the standard textbook result for a
monopole (Unruh-DeWitt-type) detector; the 1D static rate, the rest-frame rates of the two
relativistic models, the Lorentz-covariance laws Gamma(p) = Gamma(0) E/M and Gamma(0) M/E, and the
Galilean 3D rate with recoil are the closed forms of physics.md sec. 3 (derived from energy and
momentum conservation).  Detailed balance is the KMS condition (common practice).
"""

import math

import numpy as np
import pytest

from sim import load_scenario, packet_rate, rest_rate, template_rate
from sim.physics.field import Field
from sim.physics.models import MODELS
from sim.physics.golden_rule import EMISSION, kick_moments

RTOL = 1e-6


def scenario(model="newton-wigner", dims=3, mass=1.0, gap=0.5, strength=0.1, momentum=0.0,
             width=100.0, internal="excited", **field):
    return load_scenario({
        "detector": {"model": model, "ground_mass": mass, "gap": gap},
        "field": {"dimensions": dims, **field},
        "coupling": {"strength": strength},
        "packet": {"width": width, "momentum": momentum, "internal": internal},
    })


def k_star(mass, gap):
    """k* = (M_e^2 - M_g^2) / (2 M_e), written without cancellation."""
    return gap * (2 * mass + gap) / (2 * (mass + gap))


POINTS = [(1.0, 0.5), (2.0, 0.3), (1.0, 2.0), (1e4, 1.0)]
MOMENTA = [0.0, 0.3, 1.0, 5.0]


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", MOMENTA)
def test_newton_wigner_3d_rest_rate_and_covariance(mass, gap, p):
    # physics.md sec. 3: Gamma(0) = lambda^2 k* E_g* / (2 pi M_e), Gamma(p) = Gamma(0) E_e(p)/M_e
    lam, me = 0.1, mass + gap
    ks = k_star(mass, gap)
    expected = lam ** 2 * ks * (me - ks) / (2 * math.pi * me) * math.hypot(p, me) / me
    assert template_rate(scenario("newton-wigner", 3, mass, gap, lam), p) == pytest.approx(
        expected, rel=RTOL)


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", MOMENTA)
def test_one_particle_3d_rest_rate_and_time_dilation(mass, gap, p):
    # physics.md sec. 3: Gamma(0) = lambda_2^2 k* / (8 pi M_e^2), Gamma(p) = Gamma(0) M_e / E_e(p),
    # with the nonrelativistic matching lambda_2^2 = 4 M_g M_e lambda^2 (physics.md sec. 1)
    lam, me = 0.1, mass + gap
    lam2_sq = 4 * mass * me * lam ** 2
    expected = lam2_sq * k_star(mass, gap) / (8 * math.pi * me ** 2) * me / math.hypot(p, me)
    assert template_rate(scenario("one-particle", 3, mass, gap, lam), p) == pytest.approx(
        expected, rel=RTOL)


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", [0.3, 1.0, 5.0])
def test_galilean_3d_with_recoil(mass, gap, p):
    # physics.md sec. 3: Gamma(v) = lambda^2 (k+ - k-) / (4 pi v),
    # k+- = M[-(1 -+ v) + sqrt((1 -+ v)^2 + 2 Omega/M)] (rationalised to avoid cancellation)
    lam, v = 0.1, p / mass
    k_plus = 2 * gap / ((1 - v) + math.sqrt((1 - v) ** 2 + 2 * gap / mass))
    k_minus = 2 * gap / ((1 + v) + math.sqrt((1 + v) ** 2 + 2 * gap / mass))
    expected = lam ** 2 * (k_plus - k_minus) / (4 * math.pi * v)
    assert template_rate(scenario("galilean", 3, mass, gap, lam), p) == pytest.approx(
        expected, rel=RTOL)


def test_galilean_faster_than_light_still_emits():
    # physics.md sec. 1: Galilean COM with a relativistic field emits for |v| > 1 as well;
    # same closed form as above at v = 2
    mass, gap, lam, p = 1.0, 0.5, 0.1, 2.0
    v = p / mass
    k_plus = 2 * gap / ((1 - v) + math.sqrt((1 - v) ** 2 + 2 * gap / mass))
    k_minus = 2 * gap / ((1 + v) + math.sqrt((1 + v) ** 2 + 2 * gap / mass))
    assert template_rate(scenario("galilean", 3, mass, gap, lam), p) == pytest.approx(
        lam ** 2 * (k_plus - k_minus) / (4 * math.pi * v), rel=RTOL)


@pytest.mark.parametrize("model", list(MODELS))
@pytest.mark.parametrize("dims,expected", [(3, lambda lam, gap: lam ** 2 * gap / (2 * math.pi)),
                                           (1, lambda lam, gap: lam ** 2 / gap)])
@pytest.mark.parametrize("gap", [0.3, 1.0])
def test_static_limit_of_all_models(model, dims, expected, gap):
    # physics.md sec. 3: static detector, 3D lambda^2 Omega / (2 pi) (standard textbook result),
    # 1D lambda^2 / Omega.  An infinitely heavy detector: the recoil corrections are O(Omega/M).
    lam, mass = 0.2, 1e9
    rate = rest_rate(scenario(model, dims, mass, gap, lam))
    assert rate == pytest.approx(expected(lam, gap), rel=RTOL)


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", [0.3, 1.0, 5.0])
@pytest.mark.parametrize("model,law", [("newton-wigner", 1), ("one-particle", -1)])
def test_1d_lorentz_covariance(mass, gap, p, model, law):
    # physics.md sec. 3: the covariance laws hold in any dimension
    s = scenario(model, 1, mass, gap)
    me = mass + gap
    ratio = (math.hypot(p, me) / me) ** law
    assert template_rate(s, p) == pytest.approx(rest_rate(s) * ratio, rel=RTOL)


def test_rest_frame_matching_equals_newton_wigner_rest_rate():
    # physics.md sec. 1: rest-frame matching lambda_2^2 = 4 M_e E_g* lambda^2 equalises Gamma(0)
    raw = {"detector": {"model": "one-particle", "ground_mass": 1.0, "gap": 0.7},
           "field": {"dimensions": 3}, "coupling": {"strength": 0.1, "matching": "rest-frame"},
           "packet": {"width": 10.0}}
    nw = scenario("newton-wigner", 3, 1.0, 0.7, 0.1)
    assert rest_rate(load_scenario(raw)) == pytest.approx(rest_rate(nw), rel=1e-12)


@pytest.mark.parametrize("dims", [1, 3])
@pytest.mark.parametrize("temperature", [0.1, 0.5, 2.0])
def test_detailed_balance_static_detector(dims, temperature):
    # KMS / detailed balance (physics.md sec. 3): Gamma_up / Gamma_down = exp(-Omega / T) for a
    # static detector; the heavy mass leaves an O(Omega/M) = 5e-10 Doppler correction
    gap = 0.5
    down = rest_rate(scenario(dims=dims, mass=1e9, gap=gap, temperature=temperature))
    up = rest_rate(scenario(dims=dims, mass=1e9, gap=gap, temperature=temperature,
                            internal="ground"))
    assert up / down == pytest.approx(math.exp(-gap / temperature), rel=RTOL)


@pytest.mark.parametrize("dims", [1, 3])
def test_thermal_emission_is_stimulated(dims):
    # Einstein relations (common practice): emission x (1 + n(Omega)) for a static detector
    gap, temperature = 0.5, 0.4
    vacuum = rest_rate(scenario(dims=dims, mass=1e9, gap=gap))
    thermal = rest_rate(scenario(dims=dims, mass=1e9, gap=gap, temperature=temperature))
    assert thermal / vacuum == pytest.approx(1 + 1 / math.expm1(gap / temperature), rel=RTOL)


def test_ground_state_in_vacuum_never_gets_excited_under_rwa():
    assert rest_rate(scenario(internal="ground")) == 0.0


@pytest.mark.parametrize("dims", [1, 3])
@pytest.mark.parametrize("smearing", [0.5, 2.0])
def test_smearing_multiplies_static_rate_by_form_factor(dims, smearing):
    # physics.md sec. 1: Gaussian smearing F(k) = exp(-k^2 s^2 / 2) enters the rate as |F(k*)|^2
    gap, mass = 0.6, 1e9
    point = rest_rate(scenario(dims=dims, mass=mass, gap=gap))
    smeared = rest_rate(scenario(dims=dims, mass=mass, gap=gap, smearing=smearing))
    assert smeared / point == pytest.approx(math.exp(-(gap * smearing) ** 2), rel=RTOL)


def test_cutoff_below_emitted_momentum_is_refused():
    # a truncated bath with |k| <= K < k* has no resonant mode: a scenario error, not a zero rate
    from sim import ScenarioError

    with pytest.raises(ScenarioError, match=r"field.cutoff = 0.3: .* allowed: > 0.41666"):
        scenario(dims=3, gap=0.5, cutoff=0.3)


def test_cutoff_cuts_forward_emission_of_a_moving_detector():
    # above k0 but below the Doppler-shifted forward momentum: only part of the emission remains
    full = template_rate(scenario(dims=1, gap=0.5), 1.0)
    cut = template_rate(scenario(dims=1, gap=0.5, cutoff=0.45), 1.0)
    assert 0 < cut < full


def test_massive_field_1d_rest_rate():
    # static detector, 1D, field mass m: two roots |k| = sqrt(Omega^2 - m^2), each contributing
    # lambda^2 / (2 w) / (2 pi) * 2 pi / |dw/dk| = lambda^2 / (2 k)  => Gamma = lambda^2 / k
    gap, m, lam = 0.5, 0.2, 0.1
    k = math.sqrt(gap ** 2 - m ** 2)
    assert rest_rate(load_scenario({
        "detector": {"model": "newton-wigner", "ground_mass": 1e9, "gap": gap},
        "field": {"dimensions": 1, "mass": m}, "coupling": {"strength": lam},
        "packet": {"width": 100.0}})) == pytest.approx(lam ** 2 / k, rel=RTOL)


def test_packet_average_of_a_narrow_packet_is_the_template_at_its_mean():
    s = scenario("newton-wigner", 1, momentum=0.4, width=1e5)
    assert packet_rate(s) == pytest.approx(template_rate(s, 0.4), rel=1e-8)


def test_packet_average_matches_independent_quadrature_3d():
    # Int |psi|^2 Gamma with Gamma(p) = Gamma(0) E_e(p)/M_e (newton-wigner) over a 3D Gaussian:
    # independent Monte Carlo-free check by a dense 3D product grid in (p_perp, p_z)
    s = scenario("newton-wigner", 3, momentum=0.5, width=1.0)
    me, sigma = 1.5, 0.5
    g0 = rest_rate(s)
    z = np.linspace(0.5 - 9 * sigma, 0.5 + 9 * sigma, 1201)
    r = np.linspace(0, 9 * sigma, 1201)
    Z, R = np.meshgrid(z, r, indexing="ij")
    weight = np.exp(-((Z - 0.5) ** 2 + R ** 2) / (2 * sigma ** 2)) * R  # 2 pi r dr dz
    gamma = g0 * np.sqrt(Z ** 2 + R ** 2 + me ** 2) / me
    expected = np.trapezoid(np.trapezoid(weight * gamma, r, axis=1), z) / np.trapezoid(
        np.trapezoid(weight, r, axis=1), z)
    assert packet_rate(s) == pytest.approx(expected, rel=1e-6)


@pytest.mark.parametrize("dims,share", [(1, 1.0), (3, 1 / 3)])
def test_recoil_moments_of_a_static_detector(dims, share):
    # physics.md sec. 3: isotropic emission of k*: variance grows by k*^2 (1D), k*^2/3 per axis (3D)
    from sim.physics.models import model_for

    s = scenario(dims=dims, mass=1e9, gap=0.5)
    field = Field(dims, 0.0, 0.0, np.inf, 0.0)
    m = kick_moments(model_for(s), field, EMISSION, 0.0)
    assert m.mean == pytest.approx(0.0, abs=1e-12 * m.rate)
    assert m.square / m.rate == pytest.approx(share * 0.5 ** 2, rel=RTOL)
