"""The exact solver's fast mode amplitudes (the Duhamel recurrence on the sample grid) and its
1D momentum densities.

`StarSpectrum.mode_series` computes the mode amplitudes c_k(t) of a star sector at every time of
a uniform grid from t = 0 by the Duhamel recurrence, with the level amplitude at Gauss-Legendre
nodes; checked here against dense diagonalisation of the same Hamiltonian by scipy.linalg.eigh
(reference library) and against QuTiP's sesolve of a whole discretised run.  The 1D momentum
density of a lab-unit scenario whose sectors are far apart on the mode lattice is checked for
what a density must be: no isolated zeros inside its support, and an integral equal to the
ground-state population.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import trapezoid

from sim.physics.checks import load_scenario, with_keys
from sim.solvers.common import sample_times
from sim.solvers.exact.solver import ExactSolver
from sim.solvers.exact.star import duhamel_quadrature, duhamel_rule, star_spectrum

from .test_level_amplitude import dense_amplitudes, random_star

ROOT = __import__("pathlib").Path(__file__).resolve().parents[3]


@pytest.mark.parametrize("size, t_max", [(400, 30.0), (300, 400.0)])
def test_duhamel_mode_amplitudes_match_dense_diagonalisation(size, t_max):
    # A random star (degenerate and uncoupled modes included) on a uniform grid from 0; the second
    # case has steps of several radians of the spectral span, so each step is split in parts.
    rng = np.random.default_rng(size)
    star = random_star(rng, size, degenerate=5, uncoupled=7)
    spectrum = star_spectrum(*star)
    times = np.linspace(0.0, t_max, 81)
    parts, nodes = duhamel_rule(spectrum.eigenvalues, times[1])
    assert parts * nodes < spectrum.modes.energies.size
    if t_max > 100:
        assert parts > 1
    level, modes = dense_amplitudes(*star, times)
    rows = np.array([0, 17, 80])
    values = np.stack([np.ones(size), np.linspace(-1, 1, size)], axis=1)
    series, bright, _ = spectrum.mode_series(times, values, rows)
    fast = spectrum.modes_from_bright(bright)
    # c_k for the uncoupled modes stays 0; for degenerate modes the bright combination carries it
    scale = np.max(np.abs(modes))
    assert np.max(np.abs(fast - modes[rows])) <= 1e-10 * max(scale, 1.0)
    expected = (np.abs(modes) ** 2) @ values
    assert np.max(np.abs(series - expected)) <= 1e-10
    # probability is conserved: |c|^2 + sum_k |c_k|^2 = 1 at every time
    assert np.max(np.abs(series[:, 0] + np.abs(spectrum.level_amplitude(times)) ** 2 - 1)) <= 1e-11


def test_full_run_observables_match_sesolve():
    # The whole discretised 1D run (every |e, P> and |g, P - k; 1_k>) solved by qutip.sesolve
    # (reference library) with the COM momentum p and p^2 as expectation operators; the exact
    # solver's <p> and <p^2> at every sample time, tolerance set by sesolve's own (atol 1e-12).
    import qutip

    scenario = with_keys(load_scenario(ROOT / "scenarios" / "default.toml"),
                         {"coupling.strength": 0.05, "bath.sectors": 3, "bath.modes": 300,
                          "run.t_max": 200.0, "run.samples": 41})
    solver = ExactSolver(scenario)
    times = sample_times(scenario)
    evolution = solver.evolve(times)
    H, psi0, projector, momentum = sparse_hamiltonian(solver.bath())
    options = {"atol": 1e-12, "rtol": 1e-10, "nsteps": 10 ** 6}
    reference = qutip.sesolve(qutip.Qobj(H), qutip.Qobj(psi0), times,
                              e_ops=[qutip.qdiags(projector, 0), qutip.qdiags(momentum, 0),
                                     qutip.qdiags(momentum ** 2, 0)], options=options)
    excited, mean, second = (np.real(e) for e in reference.expect)
    assert np.max(np.abs(evolution.excited - excited)) <= 1e-8
    assert np.max(np.abs(evolution.p_mean - mean)) <= 1e-8 * np.max(np.abs(mean))
    assert np.max(np.abs(evolution.p_var + evolution.p_mean ** 2 - second)) <= 1e-8 * np.max(second)
    assert np.max(np.abs(evolution.norm - 1)) <= 1e-12


LAB_VARIANT = {"detector.ground_mass": "87 u", "detector.gap": "780 nm",
               "coupling.lifetime": "26 ns", "packet.width": "100 nm", "run.samples": 31}


@pytest.mark.parametrize("keys", [{"run.samples": 31}, LAB_VARIANT], ids=["bundled", "87 u"])
def test_lab_unit_1d_momentum_density_is_a_density(keys):
    # The bundled lab-unit waveguide scenario keeps sectors millions of lattice points apart
    # (a resonance window of modes): its density used to be a comb of isolated zeros.
    base = load_scenario(ROOT / "scenarios" / "waveguide_atom_1d.toml")
    scenario = with_keys(load_scenario(base.source), keys)
    evolution = ExactSolver(scenario).run()
    grid, density = evolution.momentum_grid, evolution.momentum_density
    assert solver_stride(scenario) > 1000
    for column in range(1, density.shape[1]):
        values = density[:, column]
        support = np.flatnonzero(values > 1e-3 * values.max())
        inside = values[support[0]:support[-1] + 1]
        neighbours = np.maximum(np.r_[inside[1:], 0], np.r_[0, inside[:-1]])
        assert not np.any(inside < 1e-2 * neighbours), f"isolated dips at snapshot {column}"
        ground = 1 - evolution.excited[np.searchsorted(evolution.times, evolution.snapshot_times[column])]
        assert trapezoid(values, grid) == pytest.approx(ground, rel=1e-3)


def sparse_hamiltonian(bath):
    """(H, psi(0), excited projector, COM momentum) over every |e, P> and |g, P - k; 1_k>."""
    import scipy.sparse

    blocks, states, projector, momentum = [], [], [], []
    for sector in bath.sectors:
        size = sector.mode_energies.size + 1
        block = np.diag(np.concatenate(([sector.level_energy], sector.mode_energies))).astype(complex)
        block[0, 1:] = sector.couplings
        block[1:, 0] = np.conj(sector.couplings)
        blocks.append(block)
        states.append(np.r_[np.sqrt(sector.weight), np.zeros(size - 1)])
        projector.append(np.r_[1.0, np.zeros(size - 1)])
        momentum.append(np.r_[sector.momentum, sector.momentum - sector.quanta])
    H = scipy.sparse.block_diag(blocks, format="csr")
    return H, np.concatenate(states), np.concatenate(projector), np.concatenate(momentum)


def solver_stride(scenario) -> int:
    """The 1D sector stride of the scenario's automatic exact bath."""
    return ExactSolver(scenario).bath().stride


def test_coarse_sectors_are_named_in_a_warning():
    # three sectors over +-6 sigma_p sit 4 sigma_p apart: the density is interpolated over that
    # spacing, and the warning names bath.sectors
    scenario = with_keys(load_scenario(ROOT / "scenarios" / "default.toml"),
                         {"bath.sectors": 3, "run.t_max": 50.0, "run.samples": 11})
    warnings = ExactSolver(scenario).run().warnings
    assert any(w.startswith("momentum density: the sectors sit") and "raise bath.sectors" in w
               for w in warnings)


@pytest.mark.parametrize("phase", [0.3, 4.0, 13.0, 19.9, 20.1, 55.0])
def test_duhamel_rule_integrates_the_fastest_phase_to_rounding(phase):
    # The recurrence's nodes and weights on one step h must integrate exp(i w s) over [0, h] for
    # every |w| up to the span W, against the closed form (exp(i w h) - 1) / (i w) (calculus),
    # within 1e-13 h.
    step = 2.5
    eigenvalues = np.array([0.0, 0.4, phase / step])
    parts, nodes = duhamel_rule(eigenvalues, step)
    offsets, weights = duhamel_quadrature(step, (parts, nodes))
    assert offsets.min() > 0 and offsets.max() < step and abs(weights.sum() - step) < 1e-14 * step
    for frequency in np.linspace(0.05, 1.0, 40) * phase / step:
        exact = (np.exp(1j * frequency * step) - 1) / (1j * frequency)
        assert abs(np.exp(1j * frequency * offsets) @ weights - exact) <= 1e-13 * step
    # fewer nodes than the most where the phase allows it
    assert nodes < 16 if phase / parts < 17 else nodes == 16
