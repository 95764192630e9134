"""Golden-rule rates at every mass ratio, from atoms (M/Omega = 1e11) to the Compton scale.

Each check is against a closed form or an integral written out in this file, independent of
the code under test (no helper of sim.physics.golden_rule on the reference side):

* two-body decay kinematics (Particle Data Group, Review of Particle Physics, "Kinematics"
  review, from memory): a massless quantum emitted at angle u = cos(k, P) by a relativistic
  level of momentum P and energy E_e carries k(u) = (M_e^2 - M_g^2) / (2 (E_e - P u)), and the
  energy delta has the slope |df/dk|_u = (E_e - P u) / E_g with E_g = E_e - k; with
  |g|^2 = c^2 V^2 F^2 / ((2 pi)^3 2 k) the golden rule (Sakurai, Modern Quantum Mechanics, sec.
  5.6, from memory) becomes the explicit density
      dGamma/du = c^2 V^2 F(k)^2 N(k) k E_g / (4 pi (E_e - P u))          (3D)
      Gamma_d   = c^2 V^2 F(k_d)^2 N(k_d) E_g / (2 k_d (E_e - d P))        (1D, d = +-1);
* the Galilean counterpart (energy conservation with recoil, common practice):
  k(u) = 2 Omega / ((1 - v u) + R), R = sqrt((1 - v u)^2 + 2 Omega / M), |df/dk|_u = R, so
  dGamma/du = lambda^2 F^2 N k / (4 pi R) (3D) and Gamma_d = lambda^2 F^2 N / (2 k_d R_d) (1D);
* Lorentz covariance of two-body phase space (Peskin & Schroeder, An Introduction to Quantum
  Field Theory, 1995, sec. 4.5, from memory): the recoil moments of a moving relativistic
  detector follow from the rest-frame isotropy by boosting the quantum's 4-momentum moments;
* a brute-force 2D quadrature over (|k|, cos theta) of a Gaussian-broadened delta,
  Richardson-extrapolated in the width (common practice).

Tolerances: rates and second moments to 1e-11 relative (1e-12 where the reference is a closed
form evaluated without cancellation); a mean kick of a heavy detector is ~ v k* with
v = P / M down to 1e-14, a difference of +-k* terms, so it is checked to 1e-11 relative or
32 epsilon k Gamma (1 + K / Omega) absolute, whichever is larger (the rounding of the kick
itself, K the kinetic energy; `assert_moments`).
"""

import math
import warnings

import numpy as np
import pytest
from scipy.integrate import IntegrationWarning, quad

from sim import load_scenario, packet_rate, template_rate
from sim.physics.field import Field
from sim.physics.golden_rule import ABSORPTION, EMISSION, kick_moments, packet_rule
from sim.physics.models import MODELS
from sim.physics.packet import Packet

GAP = 0.5
LAM = 0.1
#: M_g / Omega from an atom in lab units down to a detector lighter than its gap
RATIOS = [1e11, 1e6, 10.0, 1.0, 0.2]
#: p / M_e: slow, relativistic, ultra-relativistic (see `momentum`)
SPEEDS = [1e-3, 0.3, 3.0]
RTOL = 1e-11
EPS = np.finfo(float).eps


def k_star(mass):
    """k* = (M_e^2 - M_g^2) / (2 M_e) written without cancellation."""
    return GAP * (2 * mass + GAP) / (2 * (mass + GAP))


def momentum(mass, speed):
    """speed x M_e, capped for heavy detectors at 10 speed sqrt(2 M_e Omega).

    Level energies are kept above M_g, so a detector with kinetic energy K = P^2 / 2M rounds
    the energy balance to eps K: the cap keeps K <= 100 speed^2 Omega (eps K < 1e-13 Omega).
    An atom at relativistic speed is outside every use of this package.
    """
    me = mass + GAP
    return speed * me * min(1.0, 10 * math.sqrt(2 * GAP / me))


def one_particle_coupling(model, mass, energy, ground_energy):
    """c^2 V^2: lambda^2 (newton-wigner), or lambda_2^2 / (4 E_e E_g) with the nonrelativistic
    matching lambda_2^2 = 4 M_g M_e lambda^2 (one-particle; sim.physics.models.one_particle)."""
    if model == "newton-wigner":
        return LAM ** 2
    return 4 * mass * (mass + GAP) * LAM ** 2 / (4 * energy * ground_energy)


def build(model, mass, matching="nonrelativistic"):
    return MODELS[model](mass, GAP, LAM, matching)


def bose(w, temperature):
    return 0.0 if temperature == 0 else 1.0 / math.expm1(w / temperature)


def moments(m):
    return np.array([m.rate, m.mean, m.square, m.transverse])


def assert_moments(got, expected, k_scale, kinetic=0.0, rtol=RTOL):
    """Rates and second moments to rtol; the mean to rtol or 32 eps (1 + K / Omega) k Gamma.

    K is the detector's kinetic energy: the energy balance is rounded to eps (Omega + K), which
    moves each on-shell k by as much (|df/dk| ~ 1), and the mean kick is a difference of such k;
    the reference quadratures round the mean to ~20 eps Gamma Omega (`angular_integrals`).
    """
    got, expected = np.asarray(got), np.asarray(expected)
    assert got[0] == pytest.approx(expected[0], rel=rtol)
    rounding = 32 * EPS * (1 + kinetic / GAP) * k_scale * expected[0]
    assert got[1] == pytest.approx(expected[1], rel=rtol, abs=rounding)
    assert got[2:] == pytest.approx(expected[2:], rel=rtol)


# --- explicit on-shell densities (module docstring), written here from scratch ------------------


def angular_integrals(density):
    """Int_{-1}^{1} density(u, n) du for n = 0..3 by scipy.integrate.quad.

    The mean kick (n = 1) of a slow detector is a near-cancellation of +-k u: quad's error
    estimate stalls at its rounding, ~20 eps Gamma Omega, and says so; that is accepted here
    (and covered by the tolerance of `assert_moments`).
    """
    rate = quad(density, -1, 1, args=(0,), epsabs=0, epsrel=1e-12, limit=200)[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IntegrationWarning)
        return [rate] + [quad(density, -1, 1, args=(n,), epsabs=EPS * rate * GAP ** n,
                              epsrel=1e-12, limit=200)[0] for n in (1, 2, 3)]


def relativistic_3d_moments(model, mass, p, temperature=0.0, smearing=0.0, cutoff=np.inf):
    """Int du dGamma/du x (1, -k u, k^2 u^2, k^2 (1 - u^2)/2) by adaptive quadrature."""
    me = mass + GAP
    energy = math.hypot(p, me)
    splitting = GAP * (2 * mass + GAP)  # M_e^2 - M_g^2

    def density(u, power):
        k = splitting / (2 * (energy - p * u))
        eg = energy - k
        coupling = one_particle_coupling(model, mass, energy, eg)
        weight = (coupling * math.exp(-(k * smearing) ** 2) * (1 + bose(k, temperature))
                  * k * eg / (4 * math.pi * (energy - p * u)) * (k <= cutoff))
        return weight * [1.0, -k * u, (k * u) ** 2, 0.5 * k * k * (1 - u * u)][power]

    return angular_integrals(density)


def galilean_3d_moments(mass, p, temperature=0.0, smearing=0.0):
    v = p / mass

    def density(u, power):
        a = 1 - v * u
        root = math.sqrt(a * a + 2 * GAP / mass)
        k = 2 * GAP / (a + root)
        weight = (LAM ** 2 * math.exp(-(k * smearing) ** 2) * (1 + bose(k, temperature))
                  * k / (4 * math.pi * root))
        return weight * [1.0, -k * u, (k * u) ** 2, 0.5 * k * k * (1 - u * u)][power]

    return angular_integrals(density)


def explicit_1d_moments(model, mass, p, temperature=0.0, smearing=0.0):
    """Sum over d = +-1 of Gamma_d x (1, kick, kick^2, 0), kick = -d k_d (module docstring)."""
    total = np.zeros(4)
    me = mass + GAP
    for d in (+1, -1):
        if model == "galilean":
            a = 1 - d * p / mass
            root = math.sqrt(a * a + 2 * GAP / mass)
            k = 2 * GAP / (a + root)
            rate = LAM ** 2 / (2 * k * root)
        else:
            energy = math.hypot(p, me)
            k = GAP * (2 * mass + GAP) / (2 * (energy - d * p))
            eg = energy - k
            coupling = one_particle_coupling(model, mass, energy, eg)
            rate = coupling * eg / (2 * k * (energy - d * p))
        rate *= math.exp(-(k * smearing) ** 2) * (1 + bose(k, temperature))
        total += rate * np.array([1.0, -d * k, k * k, 0.0])
    return total


# --- closed forms ---------------------------------------------------------------------------------


@pytest.mark.parametrize("ratio", RATIOS)
@pytest.mark.parametrize("model", list(MODELS))
@pytest.mark.parametrize("dims", [1, 3])
def test_rest_rates_and_isotropic_recoil(ratio, model, dims):
    # at rest every quantum carries k0 with E_e(0) = E_g(k0) + k0: k* for the relativistic
    # levels (PDG "Kinematics"), k + k^2 / 2M = Omega for the Galilean one; the golden rule with
    # the delta's slope 1 + v_g(k0) gives, in 3D, lambda^2 k0 / (2 pi (1 + k0 / E_g(k0))) x V^2
    # terms (newton-wigner: lambda^2 k* E_g* / (2 pi M_e); one-particle with lambda_2^2 =
    # 4 M_g M_e lambda^2: lambda_2^2 k* / (8 pi M_e^2)), and in 1D the same over 2 pi k0^2 / 2;
    # isotropic emission: per-axis kick variance k0^2 / 3 in 3D, k0^2 in 1D (common practice)
    mass = ratio * GAP
    me = mass + GAP
    if model == "galilean":
        k0 = 2 * GAP / (1 + math.sqrt(1 + 2 * GAP / mass))
        slope = 1 + k0 / mass
        coupling = LAM ** 2
    else:
        k0 = k_star(mass)
        slope = me / (me - k0)
        coupling = LAM ** 2 if model == "newton-wigner" else mass * LAM ** 2 / (me - k0)
    rate = coupling * k0 / (2 * math.pi * slope) if dims == 3 else coupling / (k0 * slope)
    share = 1 / 3 if dims == 3 else 1.0
    expected = [rate, 0.0, share * k0 * k0 * rate, (share * k0 * k0 * rate) if dims == 3 else 0.0]
    vacuum = Field(dims, 0.0, 0.0, np.inf, 0.0)
    got = moments(kick_moments(build(model, mass), vacuum, EMISSION, 0.0))
    assert_moments(got, expected, k0, rtol=1e-12)


@pytest.mark.parametrize("ratio", RATIOS)
@pytest.mark.parametrize("speed", SPEEDS)
@pytest.mark.parametrize("model", ["newton-wigner", "one-particle"])
@pytest.mark.parametrize("dims", [1, 3])
def test_relativistic_rates_and_moments_follow_from_the_rest_frame(ratio, speed, model, dims):
    # Lorentz covariance (Peskin & Schroeder sec. 4.5, from memory), gamma = E_e / M_e,
    # v = P / E_e, rest-frame moments <k^0 k^0> = k*^2, <k_i k_j> = k*^2 delta_ij / n_d
    # (n_d = 3, or 1 in 1D), boosted along P (derived here):
    #   one-particle: Gamma = Gamma(0) / gamma, <dq_par> = -gamma v k*,
    #     <dq_par^2> = gamma^2 k*^2 (1/n_d + v^2), <dq_perp^2> = k*^2 / 3;
    #   newton-wigner (an extra 2 E_g = 2 (E_e - k^0) in the measure): Gamma = gamma Gamma(0),
    #     3D: <dq_par> = -gamma v k* (M_e - 4 k*/3) / E_g*,
    #         <dq_par^2> = gamma^2 k*^2 (M_e (1 + 3 v^2) - k* (1 + 5 v^2)) / (3 E_g*);
    #     1D: <dq_par> = -gamma v k* (M_e - 2 k*) / E_g*,
    #         <dq_par^2> = gamma^2 k*^2 (M_e (1 + v^2) - k* (1 + 3 v^2)) / E_g*;
    #     <dq_perp^2> = k*^2 / 3.
    mass = ratio * GAP
    me = mass + GAP
    ks, p = k_star(mass), momentum(mass, speed)
    eg = me - ks
    energy = math.hypot(p, me)
    gamma, v = energy / me, p / energy
    field = Field(dims, 0.0, 0.0, np.inf, 0.0)
    rest = kick_moments(build(model, mass), field, EMISSION, 0.0).rate
    if model == "one-particle":
        rate, mean = rest / gamma, -gamma * v * ks
        square = gamma ** 2 * ks ** 2 * ((1 / 3 if dims == 3 else 1.0) + v * v)
    elif dims == 3:
        rate, mean = rest * gamma, -gamma * v * ks * (me - 4 * ks / 3) / eg
        square = gamma ** 2 * ks ** 2 * (me * (1 + 3 * v * v) - ks * (1 + 5 * v * v)) / (3 * eg)
    else:
        rate, mean = rest * gamma, -gamma * v * ks * (me - 2 * ks) / eg
        square = gamma ** 2 * ks ** 2 * (me * (1 + v * v) - ks * (1 + 3 * v * v)) / eg
    transverse = ks * ks / 3 if dims == 3 else 0.0
    got = moments(kick_moments(build(model, mass), field, EMISSION, p))
    assert_moments(got, [rate, rate * mean, rate * square, rate * transverse], ks, energy - me)


@pytest.mark.parametrize("ratio", RATIOS)
@pytest.mark.parametrize("speed", [1e-3, 0.3, 2.0])
def test_galilean_doppler_window_3d(ratio, speed):
    # energy conservation with recoil fixes cos theta for k in [k-, k+] (common practice):
    # Gamma(v) = lambda^2 (k+ - k-) / (4 pi v), k+- = 2 Omega / A-+, A-+ = (1 -+ v) + R-+,
    # R-+ = sqrt((1 -+ v)^2 + 2 Omega / M); rationalised, k+ - k- = 2 Omega v (2 + 4 / (R- + R+))
    # / (A- A+), free of cancellation for v << 1; also beyond v = 1, where it still emits
    mass = ratio * GAP
    v = momentum(mass, speed) / mass
    r_minus, r_plus = (math.sqrt((1 + x) ** 2 + 2 * GAP / mass) for x in (-v, v))
    a_minus, a_plus = 1 - v + r_minus, 1 + v + r_plus
    expected = LAM ** 2 * 2 * GAP * (2 + 4 / (r_minus + r_plus)) / (4 * math.pi * a_minus * a_plus)
    got = kick_moments(build("galilean", mass), Field(3, 0.0, 0.0, np.inf, 0.0), EMISSION, v * mass)
    assert got.rate == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("ratio", RATIOS)
@pytest.mark.parametrize("speed", SPEEDS)
@pytest.mark.parametrize("model", list(MODELS))
@pytest.mark.parametrize("temperature,smearing", [(0.0, 0.0), (0.3, 0.0), (0.0, 1.5), (0.2, 0.8)])
def test_moving_1d_detector_against_explicit_channels(ratio, speed, model, temperature, smearing):
    # the two collinear channels in closed form (module docstring), thermal factor 1 + n and
    # form factor F^2 = exp(-k^2 s^2) (common practice) evaluated at each channel's k_d
    mass = ratio * GAP
    p = momentum(mass, speed)
    field = Field(1, 0.0, smearing, np.inf, temperature)
    got = moments(kick_moments(build(model, mass), field, EMISSION, p))
    assert_moments(got, explicit_1d_moments(model, mass, p, temperature, smearing), GAP,
                   p * p / (2 * mass))


@pytest.mark.parametrize("ratio", RATIOS)
@pytest.mark.parametrize("speed", SPEEDS)
@pytest.mark.parametrize("model", list(MODELS))
@pytest.mark.parametrize("temperature,smearing", [(0.0, 0.0), (0.3, 0.0), (0.0, 1.5), (0.2, 0.8)])
def test_moving_3d_detector_against_explicit_angular_density(ratio, speed, model, temperature,
                                                             smearing):
    # Int du of the explicit on-shell density (module docstring) by scipy.integrate.quad
    mass = ratio * GAP
    p = momentum(mass, speed)
    if model == "galilean":
        expected = galilean_3d_moments(mass, p, temperature, smearing)
    else:
        expected = relativistic_3d_moments(model, mass, p, temperature, smearing)
    field = Field(3, 0.0, smearing, np.inf, temperature)
    got = moments(kick_moments(build(model, mass), field, EMISSION, p))
    assert_moments(got, expected, GAP, p * p / (2 * mass))


@pytest.mark.parametrize("ratio", [1e6, 1.0])
@pytest.mark.parametrize("fraction", [0.3, 0.7])
def test_cutoff_inside_the_doppler_window_3d(ratio, fraction):
    # a hard cutoff K between k- and k+ keeps the quanta with k(u) <= K only (explicit density)
    mass = ratio * GAP
    me = mass + GAP
    p = (0.3 if ratio < 10 else 1e-4) * me
    energy = math.hypot(p, me)
    k_lo, k_hi = (GAP * (2 * mass + GAP) / (2 * (energy + s * p)) for s in (+1, -1))
    cutoff = k_lo + fraction * (k_hi - k_lo)
    expected = relativistic_3d_moments("newton-wigner", mass, p, cutoff=cutoff)
    got = moments(kick_moments(build("newton-wigner", mass), Field(3, 0.0, 0.0, cutoff, 0.0),
                               EMISSION, p))
    # the cutoff's position in u is ill-conditioned at heavy masses: K fixes u only to
    # eps k / (dk/du) ~ eps / v, so the tolerance is eps / v relative there
    rtol = max(RTOL, 64 * EPS * me / p)
    assert_moments(got, expected, GAP, rtol=rtol)


@pytest.mark.parametrize("ratio", [1e11, 1e6, 1.0])
@pytest.mark.parametrize("dims", [1, 3])
@pytest.mark.parametrize("field_mass", [0.0, 0.3])
@pytest.mark.parametrize("temperature", [0.1, 0.4])
def test_thermal_rates_of_a_detector_at_rest(ratio, dims, field_mass, temperature):
    # newton-wigner at rest (two-body kinematics, derived here): emission of w_e =
    # (M_e^2 - M_g^2 + m^2) / (2 M_e) at rate lambda^2 k E_g (1 + n(w_e)) / (2 pi M_e) in 3D,
    # lambda^2 E_g (1 + n) / (k M_e) in 1D, E_g = M_e - w_e; absorption of
    # w_a = (M_e^2 - M_g^2 - m^2) / (2 M_g) at lambda^2 k E_e n(w_a) / (2 pi M_g) in 3D,
    # lambda^2 E_e n / (k M_g) in 1D, E_e = M_g + w_a; Bose-Einstein n = 1 / (e^{w/T} - 1)
    # (common practice).  The massive-field absorption goes through the sign-change scan.
    mass = ratio * GAP
    me = mass + GAP
    splitting = GAP * (2 * mass + GAP)
    w_e = (splitting + field_mass ** 2) / (2 * me)
    w_a = (splitting - field_mass ** 2) / (2 * mass)
    k_e, k_a = math.sqrt(w_e ** 2 - field_mass ** 2), math.sqrt(w_a ** 2 - field_mass ** 2)
    if dims == 3:
        down = LAM ** 2 * k_e * (me - w_e) / (2 * math.pi * me)
        up = LAM ** 2 * k_a * (mass + w_a) / (2 * math.pi * mass)
    else:
        down = LAM ** 2 * (me - w_e) / (k_e * me)
        up = LAM ** 2 * (mass + w_a) / (k_a * mass)
    field = Field(dims, field_mass, 0.0, np.inf, temperature)
    model = build("newton-wigner", mass)
    assert kick_moments(model, field, EMISSION, 0.0).rate == pytest.approx(
        down * (1 + bose(w_e, temperature)), rel=1e-12)
    assert kick_moments(model, field, ABSORPTION, 0.0).rate == pytest.approx(
        up * bose(w_a, temperature), rel=1e-12)


@pytest.mark.parametrize("ratio", [1e11, 1e6, 2.0])
@pytest.mark.parametrize("speed", [1e-3, 0.5, 4.0])
@pytest.mark.parametrize("dims", [1, 3])
@pytest.mark.parametrize("model", ["newton-wigner", "one-particle"])
def test_massive_field_covariance_including_the_two_root_regime(ratio, speed, dims, model):
    # time dilation holds for a massive field too (Peskin & Schroeder sec. 4.5, from memory);
    # fast enough, E_e(P) - E_g(P) drops below the field mass and each collinear mismatch has
    # two roots (both ends of the Doppler-shifted window)
    mass = ratio * GAP
    me = mass + GAP
    field = Field(dims, 0.3, 0.0, np.inf, 0.0)
    com = build(model, mass)
    p = momentum(mass, speed)
    law = math.hypot(p, me) / me
    law = law if model == "newton-wigner" else 1 / law
    expected = kick_moments(com, field, EMISSION, 0.0).rate * law
    assert kick_moments(com, field, EMISSION, p).rate == pytest.approx(expected, rel=RTOL)


def test_against_brute_force_broadened_delta_3d():
    # no closed form: massive, thermal field and a smeared detector near the Compton scale.
    # Reference: Int dk du 2 pi k^2 x 2 pi |g|^2 (1 + n) delta_eps(f(k, u)) with a Gaussian
    # delta of width eps, on a trapezoid grid in k and Gauss-Legendre in u, Richardson-
    # extrapolated twice in eps (error O(eps^6)); all kinematics written here
    mass, lam, p, field_mass, temperature, smearing = 1.0, 0.1, 0.7, 0.15, 0.3, 1.2
    me = mass + GAP
    u, wu = np.polynomial.legendre.leggauss(64)
    k = np.linspace(1e-9, 1.2, 12001)
    K, U = np.meshgrid(k, u, indexing="ij")
    w = np.sqrt(K * K + field_mass ** 2)
    mismatch = math.hypot(p, me) - np.sqrt(p * p + K * K - 2 * p * K * U + mass ** 2) - w
    g2 = (lam ** 2 * np.exp(-(K * smearing) ** 2) / ((2 * np.pi) ** 3 * 2 * w)
          * (1 + 1 / np.expm1(w / temperature)))
    kick = -K * U
    weights = 4 * np.pi ** 2 * K * K * g2 * np.stack([np.ones_like(K), kick, kick ** 2,
                                                      0.5 * K * K * (1 - U * U)])

    def broadened(eps):
        delta = np.exp(-0.5 * (mismatch / eps) ** 2) / (math.sqrt(2 * math.pi) * eps)
        return np.trapezoid(weights * delta, k, axis=1) @ wu

    a, b, c = (broadened(e) for e in (4e-3, 2e-3, 1e-3))
    expected = (16 * (4 * c - b) / 3 - (4 * b - a) / 3) / 15
    got = moments(kick_moments(MODELS["newton-wigner"](mass, GAP, lam),
                               Field(3, field_mass, smearing, np.inf, temperature), EMISSION, p))
    assert got == pytest.approx(expected, rel=1e-10)


def test_below_the_static_ratio_the_exact_momentum_is_used():
    # P = 1e-12 k* seeds the windows at P = 0 but integrates at the actual P: the mean kick of a
    # light one-particle detector is -Gamma gamma v k* (covariance, above), linear in P
    mass = 1.0
    me, ks = mass + GAP, k_star(mass)
    p = 1e-12 * ks
    got = kick_moments(build("one-particle", mass), Field(3, 0.0, 0.0, np.inf, 0.0), EMISSION, p)
    assert got.mean / got.rate == pytest.approx(-p / me * ks, rel=1e-6)


# --- packet averages ----------------------------------------------------------------------------


@pytest.mark.parametrize("momentum", [0.0, 0.3, 1.0, 5.0])
@pytest.mark.parametrize("dims", [1, 3])
def test_packet_rule_integrates_polynomials_in_p_squared(momentum, dims):
    # moments of |p|^2 for a Gaussian packet (noncentral chi-square, common practice):
    # E|p|^2 = a^2 + d sigma^2, E|p|^4 = (a^2 + d sigma^2)^2 + 2 d sigma^4 + 4 a^2 sigma^2
    sigma = 0.5
    packet = Packet(1.0, (momentum,) if dims == 1 else (0.0, 0.0, momentum))
    p, w = packet_rule(packet, 8)  # symmetric form below |p0| = sigma / 10: no longer exact
    a2, m2 = momentum ** 2, momentum ** 2 + dims * sigma ** 2
    assert w @ p ** 2 == pytest.approx(m2, rel=1e-13)
    fourth = m2 ** 2 + 2 * dims * sigma ** 4 + 4 * a2 * sigma ** 2
    assert w @ p ** 4 == pytest.approx(fourth, rel=1e-13)


@pytest.mark.parametrize("momentum", [0.0, 0.2, 0.5, 2.0])
@pytest.mark.parametrize("model", ["newton-wigner", "one-particle"])
def test_packet_rate_near_the_compton_scale(make_scenario, momentum, model):
    # Int |psi|^2 Gamma(0) (E_e / M_e)^(+-1) over a 3D Gaussian packet two Compton wavelengths
    # wide (sigma_p = 1/4): reference by adaptive quadrature over |p| with the noncentral chi
    # density (Johnson, Kotz & Balakrishnan, Continuous Univariate Distributions, from memory)
    s = load_scenario(make_scenario(dict(title=None, method=None, t_max=None, samples=None),
                                    model=model, ground_mass=1.0, gap=GAP, dims=3, strength=LAM,
                                    width=2.0, momentum=momentum, internal="excited"))
    sigma, me, law = 0.25, 1.0 + GAP, 1 if model == "newton-wigner" else -1

    def density(r):
        if momentum == 0:
            return math.sqrt(2 / math.pi) * r * r / sigma ** 3 * math.exp(-0.5 * (r / sigma) ** 2)
        return (r / (momentum * sigma * math.sqrt(2 * math.pi))
                * (math.exp(-0.5 * ((r - momentum) / sigma) ** 2)
                   - math.exp(-0.5 * ((r + momentum) / sigma) ** 2)))

    average = quad(lambda r: density(r) * (math.hypot(r, me) / me) ** law, 0, momentum + 12 * sigma,
                   epsabs=0, epsrel=1e-12, limit=200)[0]
    assert packet_rate(s) == pytest.approx(template_rate(s, 0.0) * average, rel=1e-10)


def test_packet_rate_of_a_heavy_atom(make_scenario):
    # newton-wigner, M/Omega = 1e11: E[sqrt(p^2 + M_e^2)] / M_e = 1 + (a^2 + 3 sigma^2) / (2 M_e^2)
    # to O(p^4 / M^4) ~ 1e-40 (Taylor expansion with the moments above)
    mass, width, momentum = 1e11 * GAP, 3.0, 0.4
    s = load_scenario(make_scenario(dict(title=None, method=None, t_max=None, samples=None),
                                    model="newton-wigner", ground_mass=mass, gap=GAP, dims=3,
                                    strength=LAM, width=width, momentum=momentum,
                                    internal="excited"))
    me, sigma = mass + GAP, 0.5 / width
    expected = template_rate(s, 0.0) * (1 + (momentum ** 2 + 3 * sigma ** 2) / (2 * me * me))
    assert packet_rate(s) == pytest.approx(expected, rel=1e-14)
