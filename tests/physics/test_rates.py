"""Golden-rule rates against closed forms.

Sources: Fermi's golden rule (Sakurai, Modern Quantum Mechanics, revised ed. 1994, sec. 5.6, from
memory) with its delta function resolved by energy and momentum conservation, worked out beside
each test; the static-detector 3D rate lambda^2 Omega / (2 pi) is the rate of a monopole
(Unruh-DeWitt-type) detector at rest in the vacuum (Birrell & Davies, Quantum Fields in Curved
Space, CUP 1982, sec. 3.3, from memory); the one-particle rest rate is the two-body decay rate
|M|^2 k* / (8 pi M^2) (Particle Data Group, Review of Particle Physics, "Kinematics" review, from
memory); the covariance laws Gamma(p) = Gamma(0) E/M and Gamma(0) M/E follow from the Lorentz
invariance of two-body phase space (Peskin & Schroeder, An Introduction to Quantum Field Theory,
1995, sec. 4.5, from memory).  Detailed balance is the KMS condition (common practice).
"""

import math

import numpy as np
import pytest

from sim import load_scenario, packet_rate, rest_rate, template_rate
from sim.physics.field import Field
from sim.physics.models import MODELS
from sim.physics.golden_rule import EMISSION, kick_moments

RTOL = 1e-6

#: this module's scenario defaults for `make_scenario` (invented numbers): no title, no run table
RATES = dict(title=None, model="newton-wigner", ground_mass=1.0, gap=0.5, dims=3, strength=0.1,
             width=100.0, momentum=0.0, internal="excited", method=None, t_max=None, samples=None)


def k_star(mass, gap):
    """k* = (M_e^2 - M_g^2) / (2 M_e), written without cancellation."""
    return gap * (2 * mass + gap) / (2 * (mass + gap))


POINTS = [(1.0, 0.5), (2.0, 0.3), (1.0, 2.0), (1e4, 1.0)]
MOMENTA = [0.0, 0.3, 1.0, 5.0]


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", MOMENTA)
def test_newton_wigner_3d_rest_rate_and_covariance(make_scenario, mass, gap, p):
    # golden rule at rest: Gamma(0) = 2 pi Int d^3k lambda^2 / ((2 pi)^3 2k) delta(M_e - E_g(k) - k)
    # = lambda^2 k* E_g* / (2 pi M_e), E_g* = M_e - k* (derived here; the delta's slope is
    # M_e / E_g*); Gamma(p) = Gamma(0) E_e(p)/M_e: with V = 1 the rate is E_e times a Lorentz
    # invariant (Peskin & Schroeder sec. 4.5, from memory)
    lam, me = 0.1, mass + gap
    ks = k_star(mass, gap)
    expected = lam ** 2 * ks * (me - ks) / (2 * math.pi * me) * math.hypot(p, me) / me
    s = load_scenario(make_scenario(RATES, model="newton-wigner", dims=3, ground_mass=mass,
                                    gap=gap, strength=lam))
    assert template_rate(s, p) == pytest.approx(expected, rel=RTOL)


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", MOMENTA)
def test_one_particle_3d_rest_rate_and_time_dilation(make_scenario, mass, gap, p):
    # two-body decay rate Gamma(0) = lambda_2^2 k* / (8 pi M_e^2) (PDG "Kinematics" review, from
    # memory), Gamma(p) = Gamma(0) M_e / E_e(p) (time dilation; common practice), with the
    # nonrelativistic matching lambda_2^2 = 4 M_g M_e lambda^2 defined in the docstring of
    # sim.physics.models.one_particle
    lam, me = 0.1, mass + gap
    lam2_sq = 4 * mass * me * lam ** 2
    expected = lam2_sq * k_star(mass, gap) / (8 * math.pi * me ** 2) * me / math.hypot(p, me)
    s = load_scenario(make_scenario(RATES, model="one-particle", dims=3, ground_mass=mass,
                                    gap=gap, strength=lam))
    assert template_rate(s, p) == pytest.approx(expected, rel=RTOL)


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", [0.3, 1.0, 5.0])
def test_galilean_3d_with_recoil(make_scenario, mass, gap, p):
    # golden rule with Galilean recoil, derived here: energy conservation
    # Omega = k (1 - v cos theta) + k^2 / 2M fixes cos theta (Int du delta = 1 / (k v)) for k in
    # [k-, k+], the roots at cos theta = +-1, so Gamma(v) = lambda^2 (k+ - k-) / (4 pi v),
    # k+- = M[-(1 -+ v) + sqrt((1 -+ v)^2 + 2 Omega/M)] (rationalised to avoid cancellation)
    lam, v = 0.1, p / mass
    k_plus = 2 * gap / ((1 - v) + math.sqrt((1 - v) ** 2 + 2 * gap / mass))
    k_minus = 2 * gap / ((1 + v) + math.sqrt((1 + v) ** 2 + 2 * gap / mass))
    expected = lam ** 2 * (k_plus - k_minus) / (4 * math.pi * v)
    s = load_scenario(make_scenario(RATES, model="galilean", dims=3, ground_mass=mass, gap=gap,
                                    strength=lam))
    assert template_rate(s, p) == pytest.approx(expected, rel=RTOL)


def test_galilean_faster_than_light_still_emits(make_scenario):
    # a Galilean COM with a relativistic field emits for |v| > 1 as well: the derivation of the
    # closed form above nowhere assumes v < 1; same closed form at v = 2
    mass, gap, lam, p = 1.0, 0.5, 0.1, 2.0
    v = p / mass
    k_plus = 2 * gap / ((1 - v) + math.sqrt((1 - v) ** 2 + 2 * gap / mass))
    k_minus = 2 * gap / ((1 + v) + math.sqrt((1 + v) ** 2 + 2 * gap / mass))
    s = load_scenario(make_scenario(RATES, model="galilean", dims=3, ground_mass=mass, gap=gap,
                                    strength=lam))
    assert template_rate(s, p) == pytest.approx(
        lam ** 2 * (k_plus - k_minus) / (4 * math.pi * v), rel=RTOL)


@pytest.mark.parametrize("model", list(MODELS))
@pytest.mark.parametrize("dims,expected", [(3, lambda lam, gap: lam ** 2 * gap / (2 * math.pi)),
                                           (1, lambda lam, gap: lam ** 2 / gap)])
@pytest.mark.parametrize("gap", [0.3, 1.0])
def test_static_limit_of_all_models(make_scenario, model, dims, expected, gap):
    # static detector, 3D lambda^2 Omega / (2 pi) (Birrell & Davies, Quantum Fields in Curved
    # Space, CUP 1982, sec. 3.3, from memory); 1D lambda^2 / Omega from the golden rule, derived
    # here: two roots k = +-Omega, each 2 pi lambda^2 / (2 pi 2 Omega).  An infinitely heavy
    # detector: the recoil corrections are O(Omega/M).
    lam, mass = 0.2, 1e9
    rate = rest_rate(load_scenario(make_scenario(RATES, model=model, dims=dims, ground_mass=mass,
                                                 gap=gap, strength=lam)))
    assert rate == pytest.approx(expected(lam, gap), rel=RTOL)


@pytest.mark.parametrize("mass,gap", POINTS)
@pytest.mark.parametrize("p", [0.3, 1.0, 5.0])
@pytest.mark.parametrize("model,law", [("newton-wigner", 1), ("one-particle", -1)])
def test_1d_lorentz_covariance(make_scenario, mass, gap, p, model, law):
    # the covariance laws hold in any dimension: two-body phase space is Lorentz invariant in
    # any dimension (Peskin & Schroeder sec. 4.5, from memory)
    s = load_scenario(make_scenario(RATES, model=model, dims=1, ground_mass=mass, gap=gap))
    me = mass + gap
    ratio = (math.hypot(p, me) / me) ** law
    assert template_rate(s, p) == pytest.approx(rest_rate(s) * ratio, rel=RTOL)


def test_rest_frame_matching_equals_newton_wigner_rest_rate(make_scenario):
    # rest-frame matching lambda_2^2 = 4 M_e E_g* lambda^2 (docstring of
    # sim.physics.models.one_particle) equalises Gamma(0): put into the two rest-frame closed
    # forms above, lambda_2^2 k* / (8 pi M_e^2) = lambda^2 k* E_g* / (2 pi M_e)
    raw = make_scenario(RATES, model="one-particle", ground_mass=1.0, gap=0.7, dims=3,
                        strength=0.1, coupling__matching="rest-frame", width=10.0, momentum=None,
                        internal=None)
    nw = load_scenario(make_scenario(RATES, model="newton-wigner", dims=3, ground_mass=1.0,
                                     gap=0.7, strength=0.1))
    assert rest_rate(load_scenario(raw)) == pytest.approx(rest_rate(nw), rel=1e-12)


@pytest.mark.parametrize("dims", [1, 3])
@pytest.mark.parametrize("temperature", [0.1, 0.5, 2.0])
def test_detailed_balance_static_detector(make_scenario, dims, temperature):
    # KMS / detailed balance (common practice): Gamma_up / Gamma_down = n / (1 + n) =
    # exp(-Omega / T) for a static detector; the heavy mass leaves an O(Omega/M) = 5e-10 Doppler
    # correction
    gap = 0.5
    down = rest_rate(load_scenario(make_scenario(RATES, dims=dims, ground_mass=1e9, gap=gap,
                                                 field__temperature=temperature)))
    up = rest_rate(load_scenario(make_scenario(RATES, dims=dims, ground_mass=1e9, gap=gap,
                                               field__temperature=temperature,
                                               internal="ground")))
    assert up / down == pytest.approx(math.exp(-gap / temperature), rel=RTOL)


@pytest.mark.parametrize("dims", [1, 3])
def test_thermal_emission_is_stimulated(make_scenario, dims):
    # Einstein relations (common practice): emission x (1 + n(Omega)) for a static detector
    gap, temperature = 0.5, 0.4
    vacuum = rest_rate(load_scenario(make_scenario(RATES, dims=dims, ground_mass=1e9, gap=gap)))
    thermal = rest_rate(load_scenario(make_scenario(RATES, dims=dims, ground_mass=1e9, gap=gap,
                                                    field__temperature=temperature)))
    assert thermal / vacuum == pytest.approx(1 + 1 / math.expm1(gap / temperature), rel=RTOL)


def test_ground_state_in_vacuum_never_gets_excited_under_rwa(make_scenario):
    assert rest_rate(load_scenario(make_scenario(RATES, internal="ground"))) == 0.0


@pytest.mark.parametrize("dims", [1, 3])
@pytest.mark.parametrize("smearing", [0.5, 2.0])
def test_smearing_multiplies_static_rate_by_form_factor(make_scenario, dims, smearing):
    # the form factor multiplies the coupling, so the golden rule (Sakurai sec. 5.6) gains
    # |F(k*)|^2, k* = Omega for a static detector; Gaussian smearing of length s has
    # F(k) = exp(-k^2 s^2 / 2), its Fourier transform (common practice)
    gap, mass = 0.6, 1e9
    point = rest_rate(load_scenario(make_scenario(RATES, dims=dims, ground_mass=mass, gap=gap)))
    smeared = rest_rate(load_scenario(make_scenario(RATES, dims=dims, ground_mass=mass, gap=gap,
                                                    field__smearing=smearing)))
    assert smeared / point == pytest.approx(math.exp(-(gap * smearing) ** 2), rel=RTOL)


def test_cutoff_below_emitted_momentum_is_refused(make_scenario):
    # a truncated bath with |k| <= K < k* has no resonant mode: a scenario error, not a zero rate
    from sim import ScenarioError

    raw = make_scenario(RATES, dims=3, gap=0.5, field__cutoff=0.3)
    with pytest.raises(ScenarioError, match=r"field.cutoff = 0.3: .* allowed: > 0.41666"):
        load_scenario(raw)


def test_cutoff_cuts_forward_emission_of_a_moving_detector(make_scenario):
    # above k0 but below the Doppler-shifted forward momentum: only part of the emission remains
    full = template_rate(load_scenario(make_scenario(RATES, dims=1, gap=0.5)), 1.0)
    cut = template_rate(load_scenario(make_scenario(RATES, dims=1, gap=0.5, field__cutoff=0.45)),
                        1.0)
    assert 0 < cut < full


def test_massive_field_1d_rest_rate(make_scenario):
    # static detector, 1D, field mass m: two roots |k| = sqrt(Omega^2 - m^2), each contributing
    # lambda^2 / (2 w) / (2 pi) * 2 pi / |dw/dk| = lambda^2 / (2 k)  => Gamma = lambda^2 / k
    gap, m, lam = 0.5, 0.2, 0.1
    k = math.sqrt(gap ** 2 - m ** 2)
    raw = make_scenario(RATES, model="newton-wigner", ground_mass=1e9, gap=gap, dims=1,
                        field__mass=m, strength=lam, width=100.0, momentum=None, internal=None)
    assert rest_rate(load_scenario(raw)) == pytest.approx(lam ** 2 / k, rel=RTOL)


def test_packet_average_of_a_narrow_packet_is_the_template_at_its_mean(make_scenario):
    s = load_scenario(make_scenario(RATES, model="newton-wigner", dims=1, momentum=0.4,
                                    width=1e5))
    assert packet_rate(s) == pytest.approx(template_rate(s, 0.4), rel=1e-8)


def test_packet_average_matches_independent_quadrature_3d(make_scenario):
    # Int |psi|^2 Gamma with Gamma(p) = Gamma(0) E_e(p)/M_e (newton-wigner) over a 3D Gaussian:
    # independent Monte Carlo-free check by a dense 3D product grid in (p_perp, p_z)
    s = load_scenario(make_scenario(RATES, model="newton-wigner", dims=3, momentum=0.5,
                                    width=1.0))
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
def test_recoil_moments_of_a_static_detector(make_scenario, dims, share):
    # isotropic emission of k*: variance grows by k*^2 (1D), k*^2/3 per axis (3D) (common
    # practice: an isotropic unit vector's axial projection is uniform on [-1, 1], variance 1/3)
    from sim.physics.models import model_for

    s = load_scenario(make_scenario(RATES, dims=dims, ground_mass=1e9, gap=0.5))
    field = Field(dims, 0.0, 0.0, np.inf, 0.0)
    m = kick_moments(model_for(s), field, EMISSION, 0.0)
    assert m.mean == pytest.approx(0.0, abs=1e-12 * m.rate)
    assert m.square / m.rate == pytest.approx(share * 0.5 ** 2, rel=RTOL)
