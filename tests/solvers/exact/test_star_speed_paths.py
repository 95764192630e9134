"""The factorised phase tables of `sim.solvers.exact.star` against dense diagonalisation.

`StarSpectrum.level_amplitude` on a uniform grid and the level amplitude at the Duhamel nodes
(`StarSpectrum.mode_series`) build exp(-i z t) as products of two exponential tables; these
grids are chosen so that the last coarse block is only partly used and the grid starts away from
t = 0 (the reference is scipy.linalg.eigh of the full Hamiltonian: reference library).
"""

from __future__ import annotations

import numpy as np
import pytest

from sim.solvers.exact.star import level_amplitude, star_spectrum

from .test_level_amplitude import dense_amplitudes, random_star


@pytest.mark.parametrize("start, count", [(0.0, 451), (-3.7, 38), (12.5, 5)])
def test_level_amplitude_on_offset_grids_matches_dense_diagonalisation(start, count):
    rng = np.random.default_rng(41)
    star = random_star(rng, 60, degenerate=4, uncoupled=3)
    times = np.linspace(start, start + 40.0, count)
    reference = dense_amplitudes(*star, times)[0]
    assert np.max(np.abs(level_amplitude(*star, times) - reference)) < 1e-10


def test_mode_series_on_a_long_grid_matches_dense_diagonalisation():
    # sum_k |c_k(t)|^2 = 1 - |c(t)|^2 (the norm) and the amplitudes at a few rows, from the
    # Duhamel recurrence fed by the level amplitude at the quadrature nodes.
    rng = np.random.default_rng(42)
    star = random_star(rng, 400)
    times = np.linspace(0.0, 60.0, 131)
    spectrum = star_spectrum(*star)
    rows = np.array([0, 7, 64, 130])
    series, bright, _ = spectrum.mode_series(times, np.ones((star[1].size, 1)), rows)
    level_ref, modes_ref = dense_amplitudes(*star, times)
    assert np.max(np.abs(series[:, 0] - np.sum(np.abs(modes_ref) ** 2, axis=1))) < 1e-10
    assert np.max(np.abs(spectrum.modes_from_bright(bright) - modes_ref[rows])) < 1e-10
