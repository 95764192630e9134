"""The truncated Fock-space solver (method = "fock") against independent references.

References: the exact single-excitation solver on identical modes (sim.solvers.exact, itself
checked against closed forms), second-order time-dependent perturbation theory (Sakurai, Modern
Quantum Mechanics, sec. 5.6, from memory), and an independent QuTiP build of the full
Hamiltonian on a tensor-product space (COM momentum register x level x modes) that uses no momentum
sectors.
"""

import csv
import itertools
import math
import re
from pathlib import Path

import numpy as np
import pytest
import qutip

from sim.solvers.exact.star import level_amplitude
from sim.workflows.run import write_result
from sim.errors import ScenarioError
from sim.physics.checks import load_scenario, with_keys
from sim import run
from sim.plotting import counter_rotating_figure
from sim.solvers.fock.basis import fock_basis, occupation_counts, state_count
from sim.solvers.fock.solver import FockSolver

ROOT = Path(__file__).resolve().parents[3]


#: this module's scenario defaults for `make_scenario`: a small 1D fock run (invented numbers)
FOCK = dict(title="fock test", model="newton-wigner", ground_mass=1.0, gap=0.5, dims=1,
            field__mass=0.1, strength=0.1, coupling__rotating_wave=False, width=20.0,
            momentum=0.3, internal="excited", method="fock", t_max=40.0, samples=81,
            bath__box_length=60.0, bath__fock_modes=10)


# --- independent closed forms, written out here from the model definitions -----------------------
# (the module docstrings of sim.physics.models.galilean, .newton_wigner and .one_particle; the
# dispersions p^2/2M and sqrt(p^2 + M^2) and the 1/sqrt(2E) normalisation of relativistic
# one-particle states are common practice)

def energies(model, mass_g, gap, p):
    """E_g(p), E_e(p) - M_g of the model: p^2/2M (+ Omega), or sqrt(p^2 + M_g,e^2) - M_g."""
    p = np.abs(np.asarray(p, dtype=float))
    if model == "galilean":
        return p ** 2 / (2 * mass_g), p ** 2 / (2 * mass_g) + gap
    return np.sqrt(p ** 2 + mass_g ** 2) - mass_g, np.sqrt(p ** 2 + (mass_g + gap) ** 2) - mass_g


def vertex(model, mass_g, gap, p_e, p_g):
    """V(p_e, p_g): 1, or 1/sqrt(2E_e 2E_g) for one-particle (relativistic normalisation)."""
    if model != "one-particle":
        return np.ones(np.broadcast(p_e, p_g).shape)
    e_g = np.sqrt(np.square(p_g) + mass_g ** 2)
    e_e = np.sqrt(np.square(p_e) + (mass_g + gap) ** 2)
    return 1 / np.sqrt(4 * e_e * e_g)


def box_couplings(s, k):
    """c F(k) / sqrt(L 2 w_k) in the 1D box (Int dk/2pi -> (1/L) sum)."""
    c = s.coupling.strength
    if s.detector.model == "one-particle":  # nonrelativistic matching lambda_2^2 = 4 M_g M_e lambda^2
        c *= math.sqrt(4 * s.detector.ground_mass * s.detector.excited_mass)
    w = np.sqrt(k ** 2 + s.field.mass ** 2)
    return c * np.exp(-0.5 * (k * s.field.smearing) ** 2) / np.sqrt(s.bath.box_length * 2 * w)


def octahedral_bath(s, radial_nodes):
    """3D modes written out here: the six octahedron directions +-x, +-y, +-z (a spherical
    3-design, weight 4 pi / 6 each; common practice) times Gauss-Legendre |k| nodes on [0, K]
    (numpy leggauss; Abramowitz & Stegun, Handbook of Mathematical Functions, sec. 25.4.29),
    each of measure mu = W_r k_r^2 F^2 / ((2 pi)^3 2 w) x 4 pi / 6.  Only |k| and |P - k| enter
    the tests, so the frame is taken with P along z.  Returns (momenta (6R, 3), mu (6R,))."""
    x, w = np.polynomial.legendre.leggauss(radial_nodes)
    cutoff = s.field.cutoff
    k, w = cutoff * (x + 1) / 2, w * cutoff / 2
    freq = np.sqrt(k ** 2 + s.field.mass ** 2)
    mu = w * k ** 2 * np.exp(-(k * s.field.smearing) ** 2) / ((2 * np.pi) ** 3 * 2 * freq) * (4 * np.pi / 6)
    directions = np.vstack([np.eye(3), -np.eye(3)])
    return (k[:, None, None] * directions[None]).reshape(-1, 3), np.repeat(mu, 6)


def axial_sectors(s):
    """(P vectors, weights) of the 3D packet sectors written out here: Gauss-Hermite nodes of the
    axial marginal N(|p0|, sigma^2), sigma = 1 / (2 width) (numpy hermegauss, weight
    exp(-x^2/2); Abramowitz & Stegun, Handbook of Mathematical Functions, sec. 25.4.46), weights
    normalised to 1, times the two-node Gauss-Laguerre rule of the 2D Gaussian's transverse
    magnitude, rho = sigma sqrt(2 x_b) (numpy laggauss; A&S sec. 25.4.45), as the
    sim.solvers.fock.solver docstring defines them.  The axis is z and the transverse momentum
    lies along x (the octahedron is symmetric under that choice)."""
    x, w = np.polynomial.hermite_e.hermegauss(s.bath.sectors)
    sigma = 0.5 / s.packet.width
    along = float(np.linalg.norm(s.packet.momentum)) + sigma * x
    nodes, weights = np.polynomial.laguerre.laggauss(2)
    rho = sigma * np.sqrt(2 * nodes)
    P = [[r, 0.0, a] for a in along for r in rho]
    return np.array(P), np.outer(w / w.sum(), weights / weights.sum()).ravel()


# --- tests ----------------------------------------------------------------------------------------

@pytest.mark.parametrize("model", ["newton-wigner", "one-particle", "galilean"])
def test_rotating_wave_reproduces_exact_star_on_identical_modes(make_scenario, model):
    """RWA: the sector sesolve equals the exact secular solution (sim.solvers.exact.star) to
    1e-8."""
    s = load_scenario(make_scenario(FOCK, coupling__rotating_wave=True, model=model,
                                    bath__sectors=12, field__smearing=0.5, width=5.0))
    result = run(s)
    plan = FockSolver(s).plan
    k = plan.modes.momenta[:, 0]
    d = s.detector
    expected = 0.0
    for (P,), weight in zip(plan.sector_momenta, plan.sector_weights):
        e_g, _ = energies(model, d.ground_mass, d.gap, P - k)
        _, level = energies(model, d.ground_mass, d.gap, P)
        g = box_couplings(s, k) * vertex(model, d.ground_mass, d.gap, P, P - k)
        modes = e_g + np.sqrt(k ** 2 + s.field.mass ** 2)
        expected = expected + weight * np.abs(level_amplitude(level, modes, g, result.times)) ** 2
    assert len(plan.sector_weights) >= 9 and expected.min() < 0.8  # a real decay, many sectors
    np.testing.assert_allclose(result.excited, expected, rtol=0, atol=1e-8)


def test_rotating_wave_reproduces_method_exact_on_the_same_box(make_scenario):
    """RWA with every box mode kept: method "fock" equals method "exact" (the box of
    sim.solvers.exact.baths) to 1e-8, for the decay and for the recoil moments."""
    s = load_scenario(make_scenario(FOCK, coupling__rotating_wave=True, bath__sectors=12,
                                    bath__fock_modes=1000, width=5.0))
    fock, exact = run(s), run(s, method="exact")
    assert exact.excited.min() < 0.5 and exact.summary["stats"]["sectors"] >= 9
    for name in ("excited", "p_mean", "p_var"):
        np.testing.assert_allclose(getattr(fock, name), getattr(exact, name), rtol=0, atol=1e-8)


def test_thermal_field_is_refused(make_scenario):
    with pytest.raises(ScenarioError, match="field.temperature"):
        run(load_scenario(make_scenario(FOCK, field__temperature=0.1)))


def test_rotating_wave_reproduces_exact_star_in_3d(make_scenario):
    """3D octahedral bath, RWA: agreement with sim.solvers.exact.star on modes and packet
    sectors written out here (octahedral_bath, axial_sectors) to 1e-8."""
    s = load_scenario(make_scenario(FOCK, coupling__rotating_wave=True, dims=3, momentum=0.2,
                                    strength=0.5, bath__box_length=None, bath__fock_modes=18,
                                    field__cutoff=1.1, bath__sectors=3))
    result = run(s)
    plan = FockSolver(s).plan
    k, mu = octahedral_bath(s, 3)
    d = s.detector
    expected = 0.0
    for P, weight in zip(*axial_sectors(s)):
        size = np.linalg.norm(P)
        after = np.linalg.norm(P - k, axis=1)
        e_g, _ = energies("newton-wigner", d.ground_mass, d.gap, after)
        _, level = energies("newton-wigner", d.ground_mass, d.gap, size)
        g = s.coupling.strength * np.sqrt(mu)
        modes = e_g + np.sqrt((k ** 2).sum(1) + s.field.mass ** 2)
        expected = expected + weight * np.abs(level_amplitude(level, modes, g, result.times)) ** 2
    assert plan.modes.count == 18 and expected.min() < 0.9
    np.testing.assert_allclose(result.excited, expected, rtol=0, atol=1e-8)


def independent_qutip_evolution(s, plan, times):
    """Full H on COM register (x) level (x) truncated modes, built with qutip.tensor, no sectors.

    Returns P_e(t), <N>(t), <p>(t) and <P_total>(t), Var P_total(t) for the single sector of `plan`.
    """
    d, model = s.detector, s.detector.model
    (P,), k = plan.sector_momenta[0], plan.modes.momenta[:, 0]
    step = 2 * np.pi / s.bath.box_length
    shifts = np.rint(k / step).astype(int)
    n_max = plan.max_occupation
    low = round(P / step) - n_max * shifts[shifts > 0].sum()
    high = round(P / step) - n_max * shifts[shifts < 0].sum()
    q = np.arange(low, high + 1) * step  # every reachable COM momentum
    R, M = len(q), len(k)
    g_levels = [qutip.basis(2, 0), qutip.basis(2, 1)]  # 0 = g, 1 = e
    e_g, e_e = energies(model, d.ground_mass, d.gap, q)
    h_free = (qutip.tensor(qutip.Qobj(np.diag(e_g)), g_levels[0].proj())
              + qutip.tensor(qutip.Qobj(np.diag(e_e)), g_levels[1].proj()))
    field_dims = [n_max + 1] * M
    eye_field = qutip.qeye(field_dims) if M > 1 else qutip.qeye(n_max + 1)
    H = qutip.tensor(h_free, eye_field)
    couplings = box_couplings(s, k)

    def mode_op(op, j):
        ops = [qutip.qeye(n_max + 1)] * M
        ops[j] = op
        return qutip.tensor(ops)

    w = np.sqrt(k ** 2 + s.field.mass ** 2)
    number = 0
    field_momentum = 0
    for j in range(M):
        n_j = mode_op(qutip.num(n_max + 1), j)
        H += w[j] * qutip.tensor(qutip.qeye(R), qutip.qeye(2), n_j)
        number += qutip.tensor(qutip.qeye(R), qutip.qeye(2), n_j)
        field_momentum += k[j] * qutip.tensor(qutip.qeye(R), qutip.qeye(2), n_j)
        emit = np.zeros((2 * R, 2 * R))  # on COM (x) level: q -> q - k_j with a level flip
        for r in range(R):
            t = r - shifts[j]
            if 0 <= t < R:
                emit[2 * t + 1, 2 * r] = vertex(model, d.ground_mass, d.gap, q[t], q[r])  # g -> e
                emit[2 * t, 2 * r + 1] = vertex(model, d.ground_mass, d.gap, q[r], q[t])  # e -> g
        E = qutip.Qobj(emit, dims=[[R, 2], [R, 2]])
        H += couplings[j] * (qutip.tensor(E, mode_op(qutip.create(n_max + 1), j))
                             + qutip.tensor(E.dag(), mode_op(qutip.destroy(n_max + 1), j)))
    com = qutip.tensor(qutip.Qobj(np.diag(q)), qutip.qeye(2), eye_field)
    excited = qutip.tensor(qutip.qeye(R), g_levels[1].proj(), eye_field)
    total = com + field_momentum
    start = qutip.tensor(qutip.basis(R, round(P / step) - low), g_levels[plan.start_level],
                         qutip.basis(field_dims, [0] * M))
    out = qutip.sesolve(H, start, times, e_ops=[excited, number, com, total, total * total],
                        options={"atol": 1e-12, "rtol": 1e-10, "nsteps": 10 ** 6})
    pe, n, p, pt, pt2 = (np.real(np.asarray(x)) for x in out.expect)
    return pe, n, p, pt, pt2 - pt ** 2


@pytest.mark.parametrize("model, internal", [("one-particle", "excited"), ("galilean", "ground")])
def test_counter_rotating_dynamics_match_independent_qutip_build(make_scenario, model, internal):
    """All terms, three asymmetric modes: sectors vs a tensor-product QuTiP build (QuTiP reference).

    The reference also checks total-momentum conservation, since its H is not built sector-wise.
    """
    s = load_scenario(make_scenario(FOCK, model=model, internal=internal, bath__fock_modes=4,
                                    bath__max_occupation=2, bath__max_quanta=8, strength=0.4,
                                    field__smearing=0.8, bath__box_length=25.0, t_max=30.0))
    result = run(s)
    plan = FockSolver(s).plan
    k = plan.modes.momenta[:, 0]
    assert len(plan.sector_weights) == 1 and not np.isclose(k.sum(), 0.0)  # asymmetric bath
    pe, n, p, pt, pt_var = independent_qutip_evolution(s, plan, result.times)
    P = plan.sector_momenta[0, 0]
    np.testing.assert_allclose(pt, P, atol=1e-9)  # conservation of total momentum
    np.testing.assert_allclose(pt_var, 0.0, atol=1e-9)
    assert np.ptp(pe) > 0.05 and np.ptp(p) > 1e-3  # the dynamics and the recoil are not trivial
    np.testing.assert_allclose(result.excited, pe, atol=1e-7)
    np.testing.assert_allclose(result.tables["field"]["quanta"], n, atol=1e-7)
    np.testing.assert_allclose(result.p_mean, p, atol=1e-7)


def second_order_excitation(s, plan, times):
    """P_e(t) = sum_k |g_k|^2 4 sin^2(D_k t/2) / D_k^2, D_k = E_e(p-k) + w_k - E_g(p), sector sum.

    Standard second-order time-dependent perturbation theory (Sakurai, Modern Quantum Mechanics,
    sec. 5.6) for |g, p; vac> -> |e, p - k; 1_k> through the counter-rotating term sigma+ a_k^dag.
    """
    d, model = s.detector, s.detector.model
    k = plan.modes.momenta[:, 0]
    w = np.sqrt(k ** 2 + s.field.mass ** 2)
    total = np.zeros_like(times)
    for (P,), weight in zip(plan.sector_momenta, plan.sector_weights):
        e_g, _ = energies(model, d.ground_mass, d.gap, P)
        _, e_e = energies(model, d.ground_mass, d.gap, P - k)
        g2 = (box_couplings(s, k) * vertex(model, d.ground_mass, d.gap, P - k, P)) ** 2
        D = e_e + w - e_g
        total += weight * (4 * np.sin(np.outer(times, D) / 2) ** 2 / D ** 2) @ g2
    return total


def test_vacuum_excitation_matches_second_order_and_scales_as_lambda_squared(make_scenario):
    """Ground start, weak coupling: P_e(t) from the counter-rotating terms (Sakurai sec. 5.6).

    The residual is the fourth-order term: it must shrink as lambda^2 relative to P_e.
    """
    weak = load_scenario(make_scenario(FOCK, internal="ground", strength=0.0025,
                                       model="one-particle", bath__sectors=3))
    doubled = with_keys(weak, {"coupling.strength": 0.005})
    r1, r2 = run(weak), run(doubled)
    plan = FockSolver(weak).plan
    expected = second_order_excitation(weak, plan, r1.times)
    late = r1.times > 5
    assert r1.excited[0] == 0 and expected[late].min() > 1e-6  # excitation from the vacuum
    residual_1 = np.max(np.abs(r1.excited[late] / expected[late] - 1))
    residual_2 = np.max(np.abs(r2.excited[late] / (4 * expected[late]) - 1))
    assert residual_1 < 1e-3
    assert 3.6 < residual_2 / residual_1 < 4.4  # fourth order: relative residual ~ lambda^2
    np.testing.assert_allclose(r2.excited[late] / r1.excited[late], 4.0, rtol=3e-3)
    # the reference table written with the run is the same formula
    np.testing.assert_allclose(r1.tables["counter_rotating"]["excited_second_order"], expected,
                               rtol=1e-10, atol=1e-16)


def test_vacuum_excitation_in_3d_matches_second_order(make_scenario):
    """3D octahedral bath, ground start, weak coupling: second order (Sakurai sec. 5.6, from
    memory) on modes, measures mu_j and packet sectors written out here (octahedral_bath,
    axial_sectors), with the vector recoil |P - k|."""
    s = load_scenario(make_scenario(FOCK, internal="ground", dims=3, momentum=0.2,
                                    strength=0.01, bath__box_length=None, bath__fock_modes=12,
                                    bath__max_quanta=3, field__cutoff=1.1, bath__sectors=3))
    result = run(s)
    d = s.detector
    k, mu = octahedral_bath(s, 2)
    w = np.sqrt((k ** 2).sum(1) + s.field.mass ** 2)
    expected = np.zeros_like(result.times)
    for P, weight in zip(*axial_sectors(s)):
        size = np.linalg.norm(P)
        e_g, _ = energies("newton-wigner", d.ground_mass, d.gap, size)
        _, e_e = energies("newton-wigner", d.ground_mass, d.gap, np.linalg.norm(P - k, axis=1))
        D = e_e + w - e_g
        g2 = s.coupling.strength ** 2 * mu
        expected += weight * (4 * np.sin(np.outer(result.times, D) / 2) ** 2 / D ** 2) @ g2
    late = result.times > 5
    assert expected[late].min() > 1e-7
    np.testing.assert_allclose(result.excited[late], expected[late], rtol=1e-3)


def test_rotating_wave_keeps_a_ground_detector_in_the_vacuum(make_scenario):
    """Under the RWA, |g, vac> is an eigenstate: no excitation (excitation number conserved)."""
    r = run(load_scenario(make_scenario(FOCK, internal="ground", coupling__rotating_wave=True)))
    assert np.all(r.excited == 0) and np.all(r.tables["field"]["quanta"] == 0)


def test_norm_is_conserved(make_scenario):
    """Strong coupling, all terms: the total probability stays 1 (sesolve does not renormalise)."""
    result = run(load_scenario(make_scenario(FOCK, strength=0.3, bath__sectors=3)))
    assert result.summary["stats"]["norm_drift"] < 1e-8
    assert not any("norm drift" in w for w in result.warnings)
    assert result.excited.min() < 0.9  # the run did evolve


def test_fock_cutoff_convergence_and_refined(make_scenario):
    """Raising max_quanta converges: each step changes P_e less than the one before."""
    base = load_scenario(make_scenario(FOCK, strength=0.2, bath__fock_modes=6))
    curves = [run(with_keys(base, {"bath.max_quanta": q})).excited for q in (1, 2, 3, 4)]
    changes = [np.max(np.abs(b - a)) for a, b in zip(curves, curves[1:])]
    assert changes[0] > 1e-4  # the counter-rotating terms matter at this coupling
    assert changes[0] > 3 * changes[1] > 9 * changes[2]
    solver = FockSolver(with_keys(base, {"bath.max_quanta": 3}))
    finer = solver.refined()
    assert (finer.plan.max_quanta, finer.plan.max_occupation) == (4, 4)
    rotating = load_scenario(make_scenario(FOCK, coupling__rotating_wave=True))
    assert FockSolver(rotating).refined() is None


def test_state_count_matches_enumeration(make_scenario):
    """The closed count (generating polynomial) equals brute-force enumeration with itertools."""
    for modes, occupation, quanta in [(4, 2, 3), (5, 1, 4), (3, 3, 3), (6, 4, 2)]:
        brute = [0] * (quanta + 1)
        for n in itertools.product(range(occupation + 1), repeat=modes):
            if sum(n) <= quanta:
                brute[sum(n)] += 1
        assert list(occupation_counts(modes, occupation, quanta)) == brute
        s = load_scenario(make_scenario(FOCK, bath__fock_modes=modes,
                                        bath__max_occupation=occupation, bath__max_quanta=quanta))
        plan = FockSolver(s).plan
        assert state_count(plan) == len(fock_basis(plan).levels) == sum(brute)


def test_oversized_truncation_is_refused_before_allocating(make_scenario, capsys, tmp_path):
    """A clear refusal naming the keys, the state count and the memory; no traceback in the CLI."""
    s = load_scenario(make_scenario(FOCK, bath__fock_modes=60, bath__max_quanta=12,
                                    bath__box_length=400.0))
    with pytest.raises(ScenarioError) as info:
        run(s)
    message = str(info.value)
    assert "bath.max_quanta" in message and "states" in message and "GiB" in message
    from sim.cli import main

    path = tmp_path / "big.toml"
    text = (ROOT / "scenarios" / "vacuum_excitation.toml").read_text()
    text = re.sub(r"(?m)^fock_modes = .*$", "fock_modes = 60", text)
    text = re.sub(r"(?m)^max_quanta = .*$", "max_quanta = 12", text)
    path.write_text(re.sub(r"(?m)^box_length = .*$", "box_length = 400.0", text))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "bath.max_quanta" in err and "Traceback" not in err


def test_files_and_figure(make_scenario, tmp_path):
    """field.csv (t, quanta) is written; the counter-rotating figure is stamped as simulated."""
    result = run(load_scenario(make_scenario(FOCK, strength=0.2)))
    write_result(result, tmp_path / "out")
    with open(tmp_path / "out" / "field.csv") as f:
        rows = list(csv.reader(f))
    assert rows[0][:2] == ["t", "quanta"] and len(rows) == len(result.times) + 1
    fig = counter_rotating_figure(result)
    assert any("simulated" in t.get_text() for t in fig.texts)
    correction = result.excited - result.tables["counter_rotating"]["excited_rotating_wave"]
    assert np.max(np.abs(correction)) > 1e-3  # visible at this coupling


def test_bundled_vacuum_excitation_scenario():
    """The bundled scenario: a ground-state detector gets excited from the vacuum, converged."""
    s = load_scenario(ROOT / "scenarios" / "vacuum_excitation.toml")
    assert s.packet.internal == "ground" and not s.coupling.rotating_wave
    result = run(s)
    assert result.excited[0] == 0 and result.excited.max() > 1e-3
    assert not any("Fock cutoff" in w for w in result.warnings)
