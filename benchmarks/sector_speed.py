"""Timing and accuracy of the star-sector solver `sim.solvers.exact.star` against bath size.

Bath: N modes evenly spread over energies [0, 2] around a level at E0 = 1, with a smooth coupling
|g(e)|^2 = (rate / 2 pi) exp(-e) * spacing (golden-rule rate ~ `rate` at the level), 400 times up
to the box recurrence time 2 pi / spacing.  For N <= DENSE_LIMIT the amplitudes are compared with a
dense scipy.linalg.eigh diagonalisation.

Run:  python benchmarks/sector_speed.py [N ...]
"""

from __future__ import annotations

import sys
import time

import numpy as np
import scipy.linalg

from sim.solvers.exact.star import star_spectrum

DEFAULT_SIZES = (1_000, 3_000, 10_000, 30_000, 100_000)
DENSE_LIMIT = 3_000
TIME_COUNT = 400
LEVEL_ENERGY = 1.0
RATE = 0.05


def smooth_bath(size):
    """Mode energies (evenly spaced on [0, 2]) and real couplings of the benchmark bath."""
    energies = np.linspace(0.0, 2.0, size)
    spacing = energies[1] - energies[0]
    couplings = np.sqrt(RATE / (2 * np.pi) * np.exp(-energies) * spacing)
    return energies, couplings, spacing


def dense_level_amplitude(energies, couplings, times):
    """c(t) = <e|exp(-iHt)|e> by dense diagonalisation of the star Hamiltonian."""
    hamiltonian = np.diag(np.concatenate(([LEVEL_ENERGY], energies)))
    hamiltonian[0, 1:] = couplings
    hamiltonian[1:, 0] = couplings
    values, vectors = scipy.linalg.eigh(hamiltonian)
    return np.exp(-1j * np.outer(times, values)) @ np.abs(vectors[0]) ** 2


def timed(function, *args):
    """(result, wall seconds) of one call."""
    start = time.perf_counter()
    result = function(*args)
    return result, time.perf_counter() - start


def report(size):
    """Print roots / c(t) / final-time c_k timings, the norm checks and the dense deviation."""
    energies, couplings, spacing = smooth_bath(size)
    times = np.linspace(0.0, 2 * np.pi / spacing, TIME_COUNT)
    spectrum, root_seconds = timed(star_spectrum, LEVEL_ENERGY, energies, couplings)
    amplitude, level_seconds = timed(spectrum.level_amplitude, times)
    modes, mode_seconds = timed(spectrum.mode_amplitudes, times[-1:])
    norm_defect = abs(abs(amplitude[-1]) ** 2 + np.sum(np.abs(modes) ** 2) - 1.0)
    line = (
        f"N={size:>7d}  roots {root_seconds:8.3f} s  c(t) x{TIME_COUNT} {level_seconds:7.3f} s"
        f"  c_k(t_final) {mode_seconds:7.3f} s  |sum w - 1| {abs(spectrum.residue_sum - 1):.1e}"
        f"  norm defect {norm_defect:.1e}"
    )
    if size <= DENSE_LIMIT:
        reference, dense_seconds = timed(dense_level_amplitude, energies, couplings, times)
        line += f"  dense {dense_seconds:6.2f} s, max|c - c_dense| {np.max(np.abs(amplitude - reference)):.1e}"
    print(line, flush=True)


if __name__ == "__main__":
    for size in [int(float(arg)) for arg in sys.argv[1:]] or DEFAULT_SIZES:
        report(size)
