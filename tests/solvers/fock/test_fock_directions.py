"""The fock solver's 3D direction rule, its golden-rule limit, the packet's transverse spread and
the truncation record.

References: exact integrals of spherical harmonics (orthonormality, common practice; SciPy's
``scipy.special.sph_harm_y``) and of monomials over the unit sphere (G. B. Folland, "How to
integrate a polynomial over a sphere", Amer. Math. Monthly 108, 446 (2001), from memory); the
golden-rule decay rate of a moving `newton-wigner` detector in 3D, Gamma(p) = Gamma(0) E_e(p) / M_e
with Gamma(0) = lambda^2 k* E_g* / (2 pi M_e) (/work/shared/physics.md section 3, "Perturbative
rates"); the exact RWA star (sim.solvers.exact.star, itself checked against closed forms).
"""

import itertools
import math

import numpy as np
import pytest
from scipy.special import gamma, sph_harm_y

from sim import run
from sim.physics.checks import load_scenario
from sim.physics.field import field_for
from sim.solvers.exact.star import level_amplitude
from sim.solvers.fock.basis import direction_degree, direction_rule
from sim.solvers.fock.solver import (DIRECTIONS_KEY, FockSolver, direction_golden_rate,
                                     fock_box_length)

#: a moving newton-wigner detector in a massless, point-like 3D field under the RWA (invented
#: numbers); the momentum spread is negligible (width 1000), so the packet rate is Gamma(p0)
MOVING = dict(title="fock 3D test", model="newton-wigner", ground_mass=1.0, gap=0.5, dims=3,
              field__mass=0.0, strength=0.5, coupling__rotating_wave=True, width=1000.0,
              momentum=1.0, internal="excited", method="fock", t_max=70.0, samples=201,
              field__cutoff=1.2, bath__sectors=1)
KEY = DIRECTIONS_KEY.split(".")[1]


def rest_frame_rate(strength, mass_g, gap):
    """Gamma(0) = lambda^2 k* E_g* / (2 pi M_e), k* = (M_e^2 - M_g^2) / (2 M_e), E_g* = M_e - k*
    (physics.md section 3, newton-wigner, 3D)."""
    m_e = mass_g + gap
    k = (m_e ** 2 - mass_g ** 2) / (2 * m_e)
    return strength ** 2 * k * (m_e - k) / (2 * np.pi * m_e)


def moving_rate(strength, mass_g, gap, p):
    """Gamma(p) = Gamma(0) E_e(p) / M_e (physics.md section 3, newton-wigner)."""
    m_e = mass_g + gap
    return rest_frame_rate(strength, mass_g, gap) * math.hypot(p, m_e) / m_e


def sphere_monomial(a, b, c):
    """Int over the unit sphere of x^a y^b z^c: 0 if any power is odd, else
    2 G(A) G(B) G(C) / G(A + B + C), A = (a + 1) / 2 ... (Folland 2001, from memory)."""
    if a % 2 or b % 2 or c % 2:
        return 0.0
    A, B, C = (a + 1) / 2, (b + 1) / 2, (c + 1) / 2
    return 2 * gamma(A) * gamma(B) * gamma(C) / gamma(A + B + C)


@pytest.mark.parametrize("order", [None, 2, 3, 5])
def test_direction_rule_integrates_spherical_harmonics_to_its_degree(order):
    """Sum W Y_lm(n) = sqrt(4 pi) delta_l0 for l <= degree (orthonormality of Y_lm, common
    practice); the degree is tight: some harmonic of degree + 1 is missed."""
    n, weights = direction_rule(order)
    degree = direction_degree(order)
    assert np.allclose(np.linalg.norm(n, axis=1), 1.0, atol=1e-14)
    theta, phi = np.arccos(np.clip(n[:, 2], -1, 1)), np.arctan2(n[:, 1], n[:, 0])
    for l in range(degree + 1):
        for m in range(-l, l + 1):
            value = weights @ sph_harm_y(l, m, theta, phi)
            assert abs(value - (math.sqrt(4 * np.pi) if l == 0 else 0.0)) < 1e-12, (l, m)
    above = degree + 1
    missed = max(abs(weights @ sph_harm_y(above, m, theta, phi)) for m in range(-above, above + 1))
    assert missed > 1e-3


@pytest.mark.parametrize("order", [None, 2, 4])
def test_direction_rule_integrates_monomials_to_its_degree(order):
    """Sum W x^a y^b z^c equals the exact sphere integral (Folland 2001) for a + b + c <= degree."""
    n, weights = direction_rule(order)
    degree = direction_degree(order)
    for a, b, c in itertools.product(range(degree + 1), repeat=3):
        if a + b + c <= degree:
            value = weights @ (n[:, 0] ** a * n[:, 1] ** b * n[:, 2] ** c)
            assert abs(value - sphere_monomial(a, b, c)) < 1e-12, (a, b, c)


def test_golden_rate_on_the_directions_tends_to_the_3d_golden_rule(make_scenario):
    """The on-shell rate summed over the direction rule approaches Gamma(p) of physics.md
    section 3 as the rule's degree grows (exponentially: the angular integrand is smooth)."""
    expected = moving_rate(0.5, 1.0, 0.5, 1.0)
    errors = []
    for order in (None, 2, 4, 8):
        s = load_scenario(make_scenario(MOVING, **{f"bath__{KEY}": order}))
        solver = FockSolver(s)
        rate = direction_golden_rate(solver.model, field_for(s, solver.model), solver.plan)
        errors.append(abs(rate / expected - 1))
    assert errors[0] > 1e-2 and errors[1] > 1e-2  # degree 3: a few percent for v = 0.55
    assert errors[1] > errors[2] > errors[3] and errors[3] < 1e-5


def test_fock_decay_rate_approaches_the_3d_golden_rule_as_directions_grow(make_scenario):
    """RWA, 30 |k| nodes on [0, 1.2] (mode spacing ~0.06: the discrete bath mimics the continuum
    until about t = 100), a line fitted to ln P_e on 10 <= t <= 65: the fitted rate tends to
    Gamma(p) of physics.md section 3 as the direction rule grows.  The floor (measured 0.1%) is
    the Lamb shift and the non-Markovian start, O(lambda^2) at lambda = 0.5."""
    expected = moving_rate(0.5, 1.0, 0.5, 1.0)
    errors = []
    for order, directions in ((None, 6), (2, 8), (3, 18)):
        s = load_scenario(make_scenario(MOVING, bath__fock_modes=30 * directions,
                                        **{f"bath__{KEY}": order}))
        result = run(s)
        window = (result.times >= 10) & (result.times <= 65)
        rate = -np.polyfit(result.times[window], np.log(result.excited[window]), 1)[0]
        errors.append(abs(rate / expected - 1))
    assert errors[0] > 1e-2 and errors[1] > 1e-2
    assert errors[2] < 3e-3 and errors[2] < errors[1] < errors[0]


def test_transverse_spread_of_the_packet_is_included(make_scenario):
    """A wide 3D packet (sigma_p = 0.125, at rest) under the RWA: P_e agrees with the exact star
    averaged over the full 3D momentum density (here: 12 Gauss-Hermite axial x 12
    Gauss-Laguerre transverse nodes, numpy hermegauss / laggauss; Abramowitz & Stegun
    sec. 25.4.45-46; the transverse momentum along the bath's first direction, as the solver
    places it) far better than the same star with the packet on its axis (the transverse
    spread dropped): two transverse nodes are exact to cubic order in |p_perp|^2."""
    s = load_scenario(make_scenario(MOVING, width=4.0, momentum=0.0, strength=0.5,
                                    bath__fock_modes=60, bath__sectors=8, t_max=40.0,
                                    samples=81))
    result = run(s)
    plan = FockSolver(s).plan
    sigma = 0.125
    x, wx = np.polynomial.hermite_e.hermegauss(12)
    r, wr = np.polynomial.laguerre.laggauss(12)
    k, mu = plan.modes.momenta, plan.modes.weights  # the bath is not under test here
    w_k = np.linalg.norm(k, axis=1)

    def star(P):
        """|c_e|^2 of the RWA star at P: E_g = sqrt(p^2 + 1) - 1, E_e = sqrt(p^2 + 1.5^2) - 1."""
        e_g = np.sqrt(np.sum((P - k) ** 2, axis=1) + 1.0) - 1.0
        level = math.sqrt(P @ P + 2.25) - 1.0
        g = s.coupling.strength * np.sqrt(mu)
        return np.abs(level_amplitude(level, e_g + w_k, g, result.times)) ** 2

    axis = plan.axis / np.linalg.norm(plan.axis)
    e1 = k[0] / np.linalg.norm(k[0])  # the first octahedron direction, transverse to the axis
    assert abs(e1 @ axis) < 1e-12
    full = sum(a * b * star(sigma * xa * axis + sigma * math.sqrt(2 * rb) * e1)
               for xa, a in zip(x, wx / wx.sum()) for rb, b in zip(r, wr / wr.sum()))
    on_axis = sum(a * star(sigma * xa * axis) for xa, a in zip(x, wx / wx.sum()))
    kept = np.max(np.abs(result.excited - full))
    dropped = np.max(np.abs(on_axis - full))
    assert dropped > 5e-2 and kept < 0.05 * dropped  # measured: 0.083 and 0.0009
    assert not any("transverse" in w for w in result.warnings)


def test_truncation_record_in_1d_and_3d(make_scenario):
    """details["truncation"]: in 1D "of" is the box's lattice modes 2 pi n / L, 0 < |k| <= K,
    counted here; in 3D the lattice points of a cubic box of side L (the default fock box,
    1.1 (1 + v) t_max) inside |k| <= K, counted here by brute force, to within the surface term."""
    s1 = load_scenario(make_scenario(MOVING, dims=1, momentum=0.1, width=20.0,
                                     bath__box_length=60.0, bath__fock_modes=10,
                                     field__cutoff=1.0, bath__sectors=None))
    record = run(s1).summary["stats"]["truncation"]
    n = np.arange(-100, 101)
    lattice = np.count_nonzero((n != 0) & (np.abs(2 * np.pi * n / 60.0) <= 1.0))
    assert record == {"kept": 10, "of": int(lattice), "what": "modes", "converged": None,
                      "key": "bath.fock_modes"}
    s3 = load_scenario(make_scenario(MOVING, t_max=20.0, samples=21, bath__fock_modes=24))
    solver = FockSolver(s3)
    record = solver.truncation()
    side = fock_box_length(s3, solver.model)
    top = int(1.2 * side / (2 * np.pi)) + 1
    grid = np.arange(-top, top + 1) * 2 * np.pi / side
    kx, ky, kz = np.meshgrid(grid, grid, grid, indexing="ij")
    brute = np.count_nonzero(kx ** 2 + ky ** 2 + kz ** 2 <= 1.2 ** 2)
    assert record["kept"] == 24 and record["converged"] is None
    assert brute > 1000 and abs(record["of"] / brute - 1) < 0.1
