"""The fock solver's packet shapes, spatial coherence chi(t) and convergence record.

References: the Gaussian characteristic function and the two-lobe density written out here
(integrated with scipy.integrate.quad, common practice); the static-limit visibility after one
emission, |cos(k* d)| in 1D (common practice; T. Pfau et al., Phys. Rev. Lett. 73, 1223 (1994),
from memory) with the Lorentzian line's factor exp(-Gamma d / 2) (the Fourier transform of a
Lorentzian of half width Gamma / 2, common practice), and the static 1D golden-rule rate
Gamma = lambda^2 / Omega (/work/shared/physics.md section 3).
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from sim import run
from sim.physics.checks import load_scenario
from sim.solvers import solver_for
from sim.solvers.fock.solver import FockSolver

#: a heavy (static-limit) detector in a two-lobe packet, massless 1D field, RWA (invented numbers)
HEAVY = dict(title="fock which-path test", model="newton-wigner", ground_mass=1000.0, gap=0.5,
             dims=1, field__mass=0.0, strength=0.1, coupling__rotating_wave=True, width=1.0,
             momentum=0.0, internal="excited", method="fock", t_max=400.0, samples=101,
             packet__shape="two-lobe", packet__separation=2.0, packet__phase=0.7)

#: a small 1D run with all terms (invented numbers)
SMALL = dict(title="fock convergence test", model="newton-wigner", ground_mass=1.0, gap=0.5,
             dims=1, field__mass=0.1, strength=0.2, coupling__rotating_wave=False, width=20.0,
             momentum=0.3, internal="excited", method="fock", t_max=30.0, samples=61,
             bath__box_length=40.0, bath__fock_modes=6, bath__max_quanta=2, bath__sectors=1)


def two_lobe_characteristic(sigma, mean, d, phase, s):
    """Int n(p) exp(i p s) dp for n = N(mean, sigma^2)(p) 2 (1 + cos(p d + phase)) / N^2,
    N^2 = 2 (1 + cos(mean d + phase) exp(-sigma^2 d^2 / 2)), by scipy quad on +-12 sigma."""
    def density(p):
        gauss = math.exp(-0.5 * ((p - mean) / sigma) ** 2) / (math.sqrt(2 * math.pi) * sigma)
        return gauss * 2 * (1 + math.cos(p * d + phase))
    norm = 2 * (1 + math.cos(mean * d + phase) * math.exp(-0.5 * (sigma * d) ** 2))
    lo, hi = mean - 12 * sigma, mean + 12 * sigma
    re = quad(lambda p: density(p) * math.cos(p * s), lo, hi, limit=200, epsabs=1e-13)[0]
    im = quad(lambda p: density(p) * math.sin(p * s), lo, hi, limit=200, epsabs=1e-13)[0]
    return (re + 1j * im) / norm


def test_fock_declares_the_packet_shapes():
    assert set(FockSolver.packet_shapes) == {"gaussian", "two-lobe", "file"}


@pytest.mark.parametrize("dims", [1, 3])
def test_initial_coherence_is_the_packet_characteristic_function(make_scenario, dims):
    """chi(0) = Int |psi|^2 exp(i p d) dp of the two-lobe density, integrated here (quad)."""
    extra = {} if dims == 1 else dict(dims=3, bath__fock_modes=6, field__cutoff=1.0)
    s = load_scenario(make_scenario(HEAVY, t_max=5.0, samples=6, **extra))
    evo = solver_for(s).run()
    expected = two_lobe_characteristic(0.5, 0.0, 2.0, 0.7, 2.0)
    assert abs(expected) > 0.3
    assert abs(evo.coherence[0] - expected) < 1e-8  # the axial rule: 3e-9 (SHAPED_AXIAL_NODES)
    assert evo.coherence.shape == evo.excited.shape


def test_gaussian_coherence_at_a_distance(make_scenario):
    """run.coherence_at with a Gaussian: chi(0) = exp(i p0 d - sigma^2 d^2 / 2) (the normal
    characteristic function, common practice), from the lattice sectors of the 1D box."""
    s = load_scenario(make_scenario(SMALL, run__coherence_at=3.0, bath__sectors=None,
                                    width=2.0, t_max=2.0, samples=3))
    evo = solver_for(s).run()
    expected = np.exp(1j * 0.3 * 3.0 - 0.5 * (0.25 * 3.0) ** 2)
    assert abs(evo.coherence[0] - expected) < 1e-8


def test_no_coherence_unless_asked(make_scenario):
    evo = solver_for(load_scenario(make_scenario(SMALL))).run()
    assert evo.coherence is None


def test_which_path_visibility_after_complete_decay_in_1d(make_scenario):
    """Heavy detector, all box modes kept (RWA, one quantum: the truncation is exact), decay to
    P_e(t_max) ~ 1e-3: |chi(t_max)| / |chi(0)| = |cos(k* d)| exp(-Gamma d / 2) (+ the
    undecayed P_e, whose coherence is whole), Gamma = lambda^2 / Omega, to 2e-3 (the line's
    Lamb shift and its non-Lorentzian wings; measured 1e-3).

    With only the 24 box modes nearest the line kept (bath.fock_modes = 24, |k -+ k*| <~ 0.17),
    the Lorentzian's wings, which carry exp(-Gamma d / 2), are cut: the visibility rises to
    |cos(k* d)| itself (to 2e-3; measured 5e-4) -- the truncation's effect on the coherence."""
    k_star = (1000.5 ** 2 - 1000.0 ** 2) / (2 * 1000.5)
    rate = 0.1 ** 2 / 0.5
    full = solver_for(load_scenario(make_scenario(HEAVY, bath__fock_modes=1000))).run()
    cut = solver_for(load_scenario(make_scenario(HEAVY, bath__fock_modes=24))).run()
    assert full.details["truncation"]["kept"] == full.details["truncation"]["of"]
    assert full.excited[-1] < 2e-3
    visibility = abs(full.coherence[-1]) / abs(full.coherence[0])
    line = abs(math.cos(k_star * 2.0)) * math.exp(-rate * 2.0 / 2)
    residual = full.excited[-1]
    assert abs(visibility - (residual + (1 - residual) * line)) < 2e-3
    kept = abs(cut.coherence[-1]) / abs(cut.coherence[0])
    assert cut.details["truncation"]["kept"] == 24 < cut.details["truncation"]["of"]
    assert abs(kept - abs(math.cos(k_star * 2.0))) < 2e-3
    assert abs(visibility - abs(math.cos(k_star * 2.0))) > 5e-3  # the two are told apart


@pytest.mark.slow
def test_file_packet_evolves_like_the_same_gaussian(make_scenario, tmp_path):
    """A "file" packet tabulating the Gaussian amplitude finely (401 rows, resampled to 96
    Gauss-Legendre sectors) decays as the Gaussian packet on the unthinned box lattice, all box
    modes kept under the RWA (so only the packet rules differ), to 1e-6."""
    p = np.linspace(0.3 - 8 * 0.025, 0.3 + 8 * 0.025, 401)
    amplitude = np.exp(-0.25 * ((p - 0.3) / 0.025) ** 2)
    path = tmp_path / "packet.csv"
    path.write_text("p,re,im\n" + "".join(f"{float(a)!r},{float(b)!r},0\n" for a, b in zip(p, amplitude)))
    same = dict(bath__box_length=400.0, coupling__rotating_wave=True, bath__max_quanta=None,
                bath__fock_modes=1000)
    gaussian = run(load_scenario(make_scenario(SMALL, bath__sectors=100, **same)))
    table = run(load_scenario(make_scenario(SMALL, bath__sectors=None, **same,
                                            packet__shape="file",
                                            packet__amplitude_file=str(path), momentum=None)))
    assert gaussian.excited.min() < 0.9
    np.testing.assert_allclose(table.excited, gaussian.excited, atol=1e-6)


def test_convergence_record_names_each_refinement(make_scenario):
    """convergence(): one more quantum, 1.5 x modes (1D: no directions), each with its key, the
    values compared, the changes and a verdict; the run's truncation record takes the verdict.
    With max_quanta = 2 at lambda = 0.2 the next quantum changes P_e visibly (> 1e-3)."""
    solver = FockSolver(load_scenario(make_scenario(SMALL)))
    evo = solver.run()
    report = solver.convergence(evo.times, evo)
    checks = {c["key"]: c for c in report["checks"]}
    assert set(checks) == {"bath.max_quanta", "bath.fock_modes"}
    assert checks["bath.max_quanta"]["values"] == [2, 3]
    assert checks["bath.fock_modes"]["values"] == [6, 9]
    assert checks["bath.max_quanta"]["max_change_excited"] > 1e-3
    assert checks["bath.max_quanta"]["converged"] is False
    assert report["verdict"] == "not converged" and report["tolerance"] == 1e-3
    assert evo.details["convergence"] is report
    assert evo.details["truncation"]["converged"] is False
    finer = FockSolver(load_scenario(make_scenario(SMALL, bath__max_quanta=3,
                                                   bath__max_occupation=3)))
    change = np.max(np.abs(finer.run().excited - evo.excited))
    assert math.isclose(change, checks["bath.max_quanta"]["max_change_excited"], rel_tol=1e-9)


def test_convergence_in_3d_includes_the_directions(make_scenario):
    """3D, RWA: the quantum check does not apply (the sector is complete), the direction check
    moves from the octahedron to the order-3 product rule at the same radial nodes and reports
    the golden-rule rate on both rules."""
    s = load_scenario(make_scenario(HEAVY, dims=3, packet__shape=None, packet__separation=None,
                                    packet__phase=None, ground_mass=1.0,
                                    strength=0.5, momentum=1.0, width=20.0, t_max=40.0,
                                    samples=41, field__cutoff=1.2, bath__fock_modes=24,
                                    bath__sectors=1))
    report = FockSolver(s).convergence(np.linspace(0.0, 40.0, 41))
    checks = {c["key"]: c for c in report["checks"]}
    assert "skipped" in checks["bath.max_quanta"]
    directions = checks["bath.directions"]
    assert directions["values"] == [None, 3]
    coarse, fine = directions["rate_golden_directions"]
    assert coarse > 0 and fine > 0 and directions["relative_change_golden"] > 1e-2
    assert report["verdict"] == "not converged"


def test_too_few_sectors_for_the_coherence_are_named(make_scenario):
    """One lattice sector cannot hold the packet's exp(-sigma^2 d^2 / 2): a warning names
    bath.sectors and the count that resolves it."""
    s = load_scenario(make_scenario(SMALL, run__coherence_at=3.0, width=2.0, t_max=2.0,
                                    samples=3, bath__sectors=1))
    evo = solver_for(s).run()
    assert any(w.startswith("bath.sectors = 1: too few packet sectors") for w in evo.warnings)
    assert abs(abs(evo.coherence[0]) - 1.0) < 1e-12  # one sector: a single momentum, |chi| = 1
