"""Tests of the exact star-sector solver `sim.solvers.exact.star`."""

from __future__ import annotations

import numpy as np
import pytest
import qutip
import scipy.linalg
from hypothesis import given, settings
from hypothesis import strategies as st

from sim.solvers.exact import star as exact
from sim.solvers.exact.star import bright_modes, level_amplitude, sector_lamb_shift, star_spectrum


def random_star(rng, size, *, degenerate=0, near_degenerate=0, uncoupled=0):
    """E0, mode energies and complex couplings of a random star with the requested special modes."""
    energies = rng.uniform(-2.0, 2.0, size)
    energies[:degenerate] = energies[size - degenerate :]
    energies[degenerate : degenerate + near_degenerate] = energies[size - near_degenerate :] * (1 + 1e-14)
    couplings = 0.4 * (rng.standard_normal(size) + 1j * rng.standard_normal(size))
    couplings[rng.choice(size, uncoupled, replace=False)] = 0.0
    return rng.uniform(-2.5, 2.5), energies, couplings


def star_hamiltonian(level_energy, energies, couplings):
    """Dense H with H[0, k] = g_k, H[k, 0] = conj(g_k): i dc/dt = E0 c + sum g_k c_k."""
    hamiltonian = np.diag(np.concatenate(([level_energy], energies))).astype(complex)
    hamiltonian[0, 1:] = couplings
    hamiltonian[1:, 0] = np.conj(couplings)
    return hamiltonian


def dense_amplitudes(level_energy, energies, couplings, times):
    """(c(t), c_k(t)) by dense diagonalisation with scipy.linalg.eigh (reference library)."""
    values, vectors = scipy.linalg.eigh(star_hamiltonian(level_energy, energies, couplings))
    state = (vectors * np.exp(-1j * np.outer(times, values))[:, None, :]) @ np.conj(vectors[0])
    return state[:, 0], state[:, 1:]


# --- against independent references ---------------------------------------------------------------


@pytest.mark.parametrize("seed", range(6))
def test_amplitudes_match_dense_diagonalisation(seed):
    # Reference: scipy.linalg.eigh on the full (N+1)-dimensional Hamiltonian (reference library).
    rng = np.random.default_rng(seed)
    star = random_star(rng, 30, degenerate=6, near_degenerate=3, uncoupled=5)
    times = np.linspace(0.0, 25.0, 60)
    level, modes = level_amplitude(*star, times, modes=True)
    level_ref, modes_ref = dense_amplitudes(*star, times)
    assert np.max(np.abs(level - level_ref)) < 1e-10
    assert np.max(np.abs(modes - modes_ref)) < 1e-10


def test_eigenvalues_and_residues_match_dense_diagonalisation():
    # Reference: scipy.linalg.eigh (reference library); w_j = |<e|j>|^2.
    rng = np.random.default_rng(11)
    star = random_star(rng, 40)
    spectrum = star_spectrum(*star)
    values, vectors = scipy.linalg.eigh(star_hamiltonian(*star))
    assert np.max(np.abs(spectrum.eigenvalues - values)) < 1e-12
    assert np.max(np.abs(spectrum.residues - np.abs(vectors[0]) ** 2)) < 1e-12
    assert abs(spectrum.residue_sum - 1.0) < 1e-13


def test_amplitudes_match_qutip_sesolve():
    # Reference: qutip.sesolve, an independent ODE integration of the same Hamiltonian (QuTiP).
    rng = np.random.default_rng(5)
    star = random_star(rng, 8, degenerate=2, uncoupled=1)
    times = np.linspace(0.0, 10.0, 41)
    hamiltonian = qutip.Qobj(star_hamiltonian(*star))
    initial = qutip.basis(star[1].size + 1, 0)
    options = {"atol": 1e-13, "rtol": 1e-12, "nsteps": 100000}
    result = qutip.sesolve(hamiltonian, initial, times, options=options)
    reference = np.array([state.full().ravel() for state in result.states])
    level, modes = level_amplitude(*star, times, modes=True)
    assert np.max(np.abs(level - reference[:, 0])) < 1e-8
    assert np.max(np.abs(modes - reference[:, 1:])) < 1e-8


@pytest.mark.parametrize("rate", [0.2, 5.0], ids=["weak", "strong"])
def test_lorentzian_bath_matches_closed_form(rate):
    # Breuer & Petruccione, The Theory of Open Quantum Systems (OUP 2002), sec. 10.1 (from memory):
    # J(w) = (g0/2pi) l^2/((w0-w)^2 + l^2) gives, in the frame rotating at w0,
    # G(t) = exp(-l t/2) [cosh(d t/2) + (l/d) sinh(d t/2)], d = sqrt(l^2 - 2 g0 l).
    # Discretisation: modes w0 + n*spacing, |n*spacing| <= band, |g_n|^2 = J(w_n) spacing.
    # (i) A uniform grid reproduces the kernel sum_n |g_n|^2 exp(-i(w_n - w0)t) exactly up to its
    # aliases at t + 2pi m/spacing (Poisson summation), here suppressed by exp(-width(2pi/spacing - t)).
    # (ii) The cut tails carry weight g0 width^2/(pi band); measured: the error in c scales as
    # band^-3, about 0.1 g0 width^2/band^3, so the tolerance below is g0 width^2/band^3.
    width, centre, band, spacing = 1.0, 3.0, 100.0, 0.1
    times = np.linspace(0.0, 30.0, 121)
    assert 2 * np.pi / spacing - times[-1] > 30 / width  # aliases below exp(-30)
    offsets = spacing * np.arange(-round(band / spacing), round(band / spacing) + 1)
    density = rate / (2 * np.pi) * width**2 / (offsets**2 + width**2)
    amplitude = level_amplitude(centre, centre + offsets, np.sqrt(density * spacing), times)
    d = np.sqrt(complex(width**2 - 2 * rate * width))
    closed_form = np.exp(-width * times / 2) * (np.cosh(d * times / 2) + width / d * np.sinh(d * times / 2))
    tolerance = rate * width**2 / band**3
    assert np.max(np.abs(np.abs(amplitude) - np.abs(closed_form))) < tolerance
    # The band is symmetric about w0, so the discrete Lamb shift vanishes and the phase matches too.
    rotating_frame = amplitude * np.exp(1j * centre * times)
    assert np.max(np.abs(rotating_frame - closed_form)) < tolerance


# --- exact identities -----------------------------------------------------------------------------


def test_norm_is_conserved():
    # Unitarity of the evolution: |c|^2 + sum_k |c_k|^2 = 1.
    rng = np.random.default_rng(2)
    star = random_star(rng, 300, degenerate=40, uncoupled=20)
    times = np.linspace(0.0, 200.0, 50)
    level, modes = level_amplitude(*star, times, modes=True)
    assert np.max(np.abs(np.abs(level) ** 2 + np.sum(np.abs(modes) ** 2, axis=1) - 1.0)) < 1e-12


def test_short_time_expansion():
    # Taylor expansion of <e|exp(-iHt)|e>, derived here by expanding exp(-iht) to fourth order
    # (m_1 = 0; with h = H - E0, m_n = <e|h^n|e>, m_2 = B):
    # |c(t)|^2 = 1 - B t^2 + (B^2/4 + m_4/12) t^4 + O(t^6), B = sum |g_k|^2, m_4 = B^2 + sum |g_k|^2 (eps_k - E0)^2.
    # The t^2 term is the exact Zeno-region law (common practice; Misra & Sudarshan, J. Math.
    # Phys. 18, 756 (1977), from memory); the t^4 term pins its error.
    rng = np.random.default_rng(4)
    level_energy, energies, couplings = random_star(rng, 50)
    strengths = np.abs(couplings) ** 2
    total = np.sum(strengths)
    fourth_moment = total**2 + np.sum(strengths * (energies - level_energy) ** 2)
    times = np.array([2e-3, 5e-3, 1e-2])
    decay = (1.0 - np.abs(level_amplitude(level_energy, energies, couplings, times)) ** 2) / times**2
    assert np.all(np.abs(decay - total) < 1.01 * (total**2 / 4 + fourth_moment / 12) * times**2)
    assert np.all(np.abs(decay - total + (total**2 / 4 + fourth_moment / 12) * times**2) < 1e-6 * total)


def test_lamb_shift_is_second_order_energy_shift():
    # Rayleigh-Schroedinger perturbation theory, second-order energy shift (Sakurai, Modern
    # Quantum Mechanics, sec. 5.1, nondegenerate case, from memory): for a level below the band
    # the dressed level is z = E0 + sum_k |g_k|^2/(E0 - eps_k) + O(g^4).
    rng = np.random.default_rng(8)
    energies = rng.uniform(1.0, 2.0, 40)
    couplings = rng.standard_normal(40) + 1j * rng.standard_normal(40)
    for scale in (1e-2, 1e-3):
        dressed = star_spectrum(0.0, energies, scale * couplings).eigenvalues[0]
        shift = sector_lamb_shift(0.0, energies, scale * couplings)
        assert abs(dressed - shift) < 10 * scale**4 * np.sum(np.abs(couplings) ** 2) ** 2


def test_lamb_shift_excludes_resonant_modes():
    # Definition (discrete principal value): sum over eps_k != E0 of |g_k|^2/(E0 - eps_k).
    shift = sector_lamb_shift(1.0, [0.0, 1.0, 3.0], [1.0, 5.0, 2j])
    assert shift == pytest.approx(1.0 / 1.0 + 4.0 / (-2.0))


@settings(max_examples=150, deadline=None)
@given(
    level_energy=st.floats(-5, 5),
    energies=st.lists(st.sampled_from(np.linspace(-3, 3, 13)) | st.floats(-3, 3), min_size=0, max_size=12),
    seed=st.integers(0, 2**32 - 1),
    time=st.floats(0, 1e3),
)
def test_random_stars_conserve_norm(level_energy, energies, seed, time):
    # Unitarity: |c|^2 + sum |c_k|^2 = 1, hence |c| <= 1, for any star (degenerate modes likely).
    rng = np.random.default_rng(seed)
    couplings = rng.standard_normal(len(energies)) + 1j * rng.standard_normal(len(energies))
    couplings *= rng.choice([0.0, 1e-6, 1.0, 3.0], len(energies))
    level, modes = level_amplitude(level_energy, energies, couplings, [time], modes=True)
    assert abs(abs(level[0]) ** 2 + np.sum(np.abs(modes) ** 2) - 1.0) < 1e-12
    assert abs(level[0]) <= 1.0 + 1e-12


# --- structure and API ----------------------------------------------------------------------------


def test_degenerate_modes_share_one_bright_mode():
    # Equal energies couple through g_eff = sqrt(sum |g|^2) only (common practice: a unitary
    # change of basis among degenerate modes leaves one bright combination coupled and the
    # orthogonal dark ones decoupled; as in the docstring of sim.solvers.exact.star.bright_modes).
    modes = bright_modes([1.0, 0.5, 1.0 + 1e-15, 2.0, 0.7], [3.0, 1j, 4.0, 0.0, 1.0])
    assert np.allclose(modes.energies, [0.5, 0.7, 1.0])
    assert np.allclose(modes.weights, [1.0, 1.0, 25.0])
    assert list(modes.member_of) == [2, 0, 2, -1, 1]


def test_members_of_a_bright_mode_carry_their_coupling():
    # Member k of a bright mode has amplitude conj(g_k)/g_eff times the bright mode's (dark part empty).
    couplings = np.array([0.3 + 0.4j, -0.2j, 0.1])
    spectrum = star_spectrum(0.2, [1.0, 1.0, -0.5], couplings)
    modes = spectrum.mode_amplitudes([3.0])[0]
    bright = np.sqrt(spectrum.modes.weights) * spectrum.bright_mode_amplitudes([3.0])[0]
    coupling_eff = np.sqrt(np.sum(np.abs(couplings[:2]) ** 2))
    assert modes[:2] == pytest.approx(np.conj(couplings[:2]) / coupling_eff * bright[1], abs=1e-15)


def test_snapshot_times_match_full_time_series():
    rng = np.random.default_rng(9)
    star = random_star(rng, 20, degenerate=3)
    times = np.linspace(0.0, 5.0, 11)
    _, modes = level_amplitude(*star, times, modes=True)
    snapshot = star_spectrum(*star).mode_amplitudes(times[[3, -1]])
    assert np.max(np.abs(snapshot - modes[[3, -1]])) < 1e-14


def test_uncoupled_level_oscillates_freely():
    times = np.array([0.0, 0.7, 4.0])
    level, modes = level_amplitude(1.3, [0.5, 2.0], [0.0, 0.0], times, modes=True)
    assert np.allclose(level, np.exp(-1.3j * times), atol=1e-15)
    assert np.all(modes == 0)


def test_blocked_evaluation_matches_single_block(monkeypatch):
    # The block size only bounds memory; results must not depend on it.
    rng = np.random.default_rng(12)
    star = random_star(rng, 60, degenerate=4)
    times = np.linspace(0.0, 8.0, 9)
    level, modes = level_amplitude(*star, times, modes=True)
    monkeypatch.setattr(exact, "_BLOCK_ELEMENTS", 7)
    level_small, modes_small = level_amplitude(*star, times, modes=True)
    assert np.max(np.abs(level_small - level)) < 1e-14
    assert np.max(np.abs(modes_small - modes)) < 1e-14


def test_unconverged_roots_raise(monkeypatch):
    monkeypatch.setattr(exact, "_MAX_STEPS", 1)
    with pytest.raises(RuntimeError, match="not converged"):
        star_spectrum(0.0, [1.0, 2.0], [0.5, 0.5])


@pytest.mark.parametrize(
    "energies, couplings, times",
    [([0.0, 1.0], [1.0], [0.0]), ([0.0, np.nan], [1.0, 1.0], [0.0]), ([0.0], [1.0], [[0.0]])],
)
def test_invalid_input_is_rejected(energies, couplings, times):
    with pytest.raises(ValueError):
        level_amplitude(0.0, energies, couplings, times)


# --- fast paths: they must reproduce the plain sums -----------------------------------------------


def test_uniform_time_grid_matches_direct_sum(monkeypatch):
    # The factorised phases exp(-i z t0 - i z a B dt) exp(-i z b dt) on a linspace must equal the
    # direct sum to rounding of the phase z t (|z t| up to ~1e4 here, ulp ~ 2e-12), at late times too.
    rng = np.random.default_rng(21)
    star = random_star(rng, 300, degenerate=5)
    spectrum = star_spectrum(*star)
    times = np.linspace(-3.0, 4000.0, 1201)
    fast = spectrum.level_amplitude(times)
    monkeypatch.setattr(exact, "_uniform_grid", lambda t: None)
    direct = spectrum.level_amplitude(times)
    assert np.max(np.abs(fast - direct)) < 1e-11
    assert exact._uniform_grid(times) is None  # the patch took effect: `direct` is the plain sum


def test_uneven_times_use_the_direct_sum():
    rng = np.random.default_rng(22)
    star = random_star(rng, 40)
    times = np.array([0.0, 0.5, 1.7, 2.0, 9.0])
    assert exact._uniform_grid(times) is None
    assert exact._uniform_grid(np.linspace(0.0, 9.0, 5)) is not None
    assert np.max(np.abs(level_amplitude(*star, times) - dense_amplitudes(*star, times)[0])) < 1e-10


def test_panelled_pole_sums_match_direct_sums():
    # Near poles direct, far poles from Chebyshev interpolants: the same sums to rounding of the
    # direct sum (scale sum |b_i/(z - e_i)|), on an uneven bath with a dense cluster.
    rng = np.random.default_rng(23)
    poles = np.sort(np.concatenate([rng.uniform(0.0, 2.0, 2500), rng.uniform(0.9, 0.91, 500)]))
    weights = rng.uniform(1e-8, 1e-6, poles.size)
    roots = np.arange(poles.size + 1)
    anchor = np.clip(roots - rng.integers(0, 2, roots.size), 0, poles.size - 1)
    gaps = np.diff(poles)
    offset = np.concatenate(([-0.1], rng.uniform(0.01, 0.99, poles.size - 1), [0.1]))
    interior = slice(1, -1)
    offset[interior] *= np.where(anchor[interior] == roots[interior] - 1, 1.0, -1.0) * gaps
    fast = exact.PanelledPoleSums(poles, weights)(roots, anchor, offset)
    direct = exact._pole_sums(anchor, offset, poles, weights)
    scale = np.abs(exact._cauchy_block(poles[anchor], offset, poles)) @ weights
    assert np.max(np.abs(fast[0] - direct[0]) / scale) < 1e-13
    assert np.max(np.abs(fast[1] - direct[1]) / direct[1]) < 1e-13


@pytest.mark.parametrize("seed", range(3))
def test_panelled_roots_match_dense_diagonalisation(monkeypatch, seed):
    # Reference: scipy.linalg.eigh (reference library), with the panelled sums forced on.
    monkeypatch.setattr(exact, "_PANEL_MIN_POLES", 8)
    rng = np.random.default_rng(30 + seed)
    star = random_star(rng, 400, degenerate=6, uncoupled=5)
    times = np.linspace(0.0, 30.0, 50)
    level, modes = level_amplitude(*star, times, modes=True)
    level_ref, modes_ref = dense_amplitudes(*star, times)
    assert np.max(np.abs(level - level_ref)) < 1e-10
    assert np.max(np.abs(modes - modes_ref)) < 1e-10
    assert isinstance(exact.pole_sums_for(np.arange(10.0), np.ones(10)), exact.PanelledPoleSums)
