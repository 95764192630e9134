"""What a markov run costs before it runs: memory (bytes) and wall time (seconds) per sector.

A sector is sized by its lattice closure (`SectorSize`): n states, J jump entries, the distinct
(target, source) pairs of the rate equation, the Liouvillian's N_L = n^2 + sum_J m_J^2 entries
(the superoperator stores the diagonal n^2 and one L (x) L* block of m_J^2 per jump operator),
and the counts the closure's build works through.  The cost model (seconds on the machine the
constants were measured on):

    build       = C_BATCH batches + C_JUMP J                                             (all)
    populations = MATVECS_PER_SAMPLE T (C_MATVEC + C_PAIR (pairs + n))                   (3D)
    density     = C_LIOUVILLIAN N_L + R (C_ENTRY N_L + C_ELEMENT n^2)
                  + T (C_SAMPLE + C_DENSE n^2),                                          (1D)
    R           = RHS_PER_SEGMENT segments
                  + (RHS_PER_RADIAN spread + RHS_PER_DECAY Gamma_max) t_max,

with T the sample times, R the right-hand-side evaluations of mesolve's Adams integrator (at
its tolerances it takes a roughly fixed number of steps per radian of the fastest phase, the
energy spread of one level's states, and per decay), and

    memory = JUMP_BYTES sum J + max over sectors of
             (RATE_PAIR_BYTES (pairs + n) + 8 n (T / segments + 1))                      (3D)
    memory = LIOUVILLIAN_BUILD_FACTOR (LIOUVILLIAN_ENTRY_BYTES N_L + 8 n^2)
             + 16 ODE_VECTORS n^2 + JUMP_BYTES J                                         (1D)

plus SAMPLE_BYTES per sample time and sector.  The constants were measured on a 2-core x86-64
container (Python 3.11, numpy 2.4, scipy 1.17, qutip 5.3; shared with other jobs): wall times
of the closure's build (`MarkovSolver.setup`) and of `MarkovSolver.evolve`, mesolve's counted
right-hand sides, and the tracemalloc peak of `Solver.run`, over the
bundled thermal scenario (t_max 60 to 600, 16 to 48 directions, 19 or 37 points), the 3D recoil
and light-detector scenarios and the 1D default, strong-coupling and waveguide scenarios run with
method "markov" (37 to 301 points, 151 to 2001 samples); each time constant is the least-squares
fit of its term (relative errors) rounded to the middle of two such calibrations, which differed
by up to 30% with the machine's load; the single-kernel ones (C_LIOUVILLIAN, C_ENTRY) were timed
alone.  Estimate / measured stayed within 0.6-1.3 for the wall time and 0.7-1.25 for the memory.
A slower machine needs new constants: a tiny timed kernel did not track these workloads (its
per-process timings spread by 2x while the runs' spread by 1.3x), so none scales them.

Units: hbar = c = 1; rates in the inverse time unit, energies in the energy unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...physics.golden_rule import ABSORPTION, EMISSION, kick_moments
from ...physics.models import EXCITED, GROUND
from ..base import CSR_ENTRY_SECONDS, SAMPLE_BYTES
from .lattice import MAX_STATES, MarkovGrid, Sector

# --- memory (bytes) --------------------------------------------------------------------------
#: bytes per stored entry of the CSR Liouvillian (complex value + 64-bit column index)
LIOUVILLIAN_ENTRY_BYTES = 24
#: peak memory while the Liouvillian is assembled (COO triplets, then the CSR), in final sizes
LIOUVILLIAN_BUILD_FACTOR = 3.0
#: n^2-long complex vectors alive while mesolve runs: the ODE's work arrays, the state, the dense
#: copy for the COM purity, the expectation values and qutip's copies of them (measured: a
#: tracemalloc peak of 1.36-1.42 kB per density-matrix element on 1D runs of 82 to 357 states)
ODE_VECTORS = 80
#: bytes per jump entry: the jump operators' (target, source, amplitude) arrays of every sector,
#: kept for the run, and the closure's per-jump work arrays while a sector is built (measured:
#: 63-64 bytes per jump at the peak of the thermal runs)
JUMP_BYTES = 64.0
#: bytes per entry of the rate matrix while it is assembled (COO triplets, their sum, the CSR)
RATE_PAIR_BYTES = 48.0

# --- wall time (seconds on the machine of the module docstring) --------------------------------
#: one vectorised evaluation of the jumps of a batch of states (root brackets, rate normalisation)
C_BATCH = 6.0e-3
#: one jump entry: its on-shell root, its lattice split, the closure's bookkeeping, its family
C_JUMP = 1.6e-6
#: expm_multiply's sparse products per sample time (Taylor terms of its steps, measured 11-19)
MATVECS_PER_SAMPLE = 15.0
#: one sparse product of the rate matrix: its fixed cost and its cost per stored entry
C_MATVEC = 2.3e-5
C_PAIR = 1.2e-9
#: building the Liouvillian (`Sector.liouvillian`), per entry (0.23 s for 976,328 entries)
C_LIOUVILLIAN = 2.4e-7
#: one right-hand side of mesolve: per Liouvillian entry (a complex CSR product, timed alone)
#: and per density-matrix element (the Adams integrator's vector work)
C_ENTRY = CSR_ENTRY_SECONDS
C_ELEMENT = 1.4e-8
#: one sample time of mesolve's output: fixed, and per density-matrix element (expectation
#: values, the dense copy and the COM purity)
C_SAMPLE = 2.7e-4
C_DENSE = 2.0e-8
#: floating-point operations per jump entry of the build (its root: about 100 mismatch values)
ROOT_FLOPS = 3000.0
#: Adams right-hand sides per output segment (its start-up), per radian of the fastest phase
#: and per decay of the fastest state (measured: 460-890 on the 1D runs)
RHS_PER_SEGMENT = 112.0
RHS_PER_RADIAN = 3.0
RHS_PER_DECAY = 15.0


@dataclass(frozen=True)
class SectorSize:
    """The counts that size one sector's run.

    Parameters
    ----------
    states : int
        n, the closure's states.
    jumps : int
        J, the entries of all jump operators.
    pairs : int
        Distinct (target, source) pairs of the jumps: the off-diagonal entries of the rate matrix.
    liouvillian : int
        N_L = n^2 + sum_J m_J^2, the entries of the Lindblad superoperator.
    top_rate : float
        Largest total jump rate out of one state (1 / time units).
    spread : float
        Largest energy spread of one level's states (energy units).
    batches : int
        Vectorised jump evaluations of the closure's build (one per generation).
    """

    states: int
    jumps: int
    pairs: int
    liouvillian: int
    top_rate: float
    spread: float
    batches: int

    @classmethod
    def of(cls, sector: Sector, grid: MarkovGrid, thermal: bool) -> "SectorSize":
        """The counts of a built sector.

        Parameters
        ----------
        sector : Sector
        grid : MarkovGrid
        thermal : bool
            The field is warm (both levels jump).

        Returns
        -------
        SectorSize
            batches = generations + 1 in a thermal field (the edge included), else 1.
        """
        n = sector.size
        entries = [len(amps) for _, _, amps in sector.families.values()]
        out, pairs = np.zeros(n), 0
        if entries:
            targets, sources, amps = (np.concatenate(x) for x in zip(*sector.families.values()))
            np.add.at(out, sources, amps * amps)
            pairs = int(np.unique(targets.astype(np.int64) * n + sources).size)
        spread = max((float(np.ptp(sector.energies[sector.levels == level]))
                      for level in (GROUND, EXCITED) if np.any(sector.levels == level)),
                     default=0.0)
        return cls(n, int(sum(entries)), pairs, n * n + sum(m * m for m in entries),
                   float(out.max(initial=0.0)), spread, _batches(sector.generations, thermal))

    @classmethod
    def bound(cls, model, field, grid: MarkovGrid, rho: float) -> "SectorSize":
        """The counts of a closure too large to build for an estimate (grid.points > MAX_STATES).

        The closure is cut after the generation that passes MAX_STATES, so it holds about
        n = max(MAX_STATES, 2 points) states; 2 x directions (x 2 processes in a thermal field)
        jump operators of n / 2 entries each; the top rate is the golden-rule rate at the
        window's largest momentum and the spread that of the window's energies.

        Parameters
        ----------
        model : COMModel
        field : Field
        grid : MarkovGrid
        rho : float
            Transverse momentum of the sector (momentum units).

        Returns
        -------
        SectorSize
        """
        thermal = field.temperature > 0
        n = max(MAX_STATES, 2 * grid.points)
        families = 2 * (len(grid.directions) or 2) * (2 if thermal else 1)
        p = np.hypot(grid.momentum(np.array([0, grid.points - 1])), rho)
        rate = max(float(np.max(kick_moments(model, field, process, p).rate))
                   for process in ((EMISSION, ABSORPTION) if thermal else (EMISSION,)))
        spread = float(np.ptp(model.energy(EXCITED, p)))
        jumps = families * (n // 2)
        return cls(n, jumps, jumps, n * n + families * (n // 2) ** 2, rate, spread,
                   _batches(grid.generations, thermal))


def _batches(generations: int, thermal: bool) -> int:
    """Vectorised jump evaluations of a closure: generations + 1 thermal (every jump flips the
    level, so each generation's frontier has one level; the edge is one more), else 1."""
    return generations + 1 if thermal else 1


def build_seconds(size: SectorSize) -> float:
    """Wall time of one sector's closure.

    Parameters
    ----------
    size : SectorSize

    Returns
    -------
    float
        C_BATCH batches + C_JUMP J (seconds).
    """
    return C_BATCH * size.batches + C_JUMP * size.jumps


def evolution_seconds(size: SectorSize, samples: int, segments: int, t_max: float,
                      density: bool) -> float:
    """Wall time of one sector's evolution.

    Parameters
    ----------
    size : SectorSize
    samples : int
        T, the sample times.
    segments : int
        Output segments between snapshots.
    t_max : float
        The last sample time (time units).
    density : bool
        The density matrix by mesolve (1D), else the populations by expm_multiply (3D).

    Returns
    -------
    float
        The module docstring's `density` or `populations` term (seconds).
    """
    n = size.states
    if not density:
        return MATVECS_PER_SAMPLE * samples * (C_MATVEC + C_PAIR * (size.pairs + n))
    rhs = rhs_count(size, segments, t_max)
    return (C_LIOUVILLIAN * size.liouvillian
            + rhs * (C_ENTRY * size.liouvillian + C_ELEMENT * n * n)
            + samples * (C_SAMPLE + C_DENSE * n * n))


def rhs_count(size: SectorSize, segments: int, t_max: float) -> float:
    """Right-hand-side evaluations of mesolve's Adams integrator over one sector's run.

    Parameters
    ----------
    size : SectorSize
    segments : int
        Output segments between snapshots (each restarts the integrator).
    t_max : float
        The last sample time (time units).

    Returns
    -------
    float
        R = RHS_PER_SEGMENT segments + (RHS_PER_RADIAN spread + RHS_PER_DECAY Gamma_max) t_max
        (a count).
    """
    return (RHS_PER_SEGMENT * segments
            + (RHS_PER_RADIAN * size.spread + RHS_PER_DECAY * size.top_rate) * t_max)


def run_work(sizes, samples: int, segments: int, t_max: float, density: bool) -> float:
    """Floating-point operations of a run, roughly.

    Parameters
    ----------
    sizes : sequence of SectorSize
    samples : int
        T, the sample times.
    segments : int
        Output segments between snapshots.
    t_max : float
        The last sample time (time units).
    density : bool
        Evolve the density matrix (1D) rather than the populations.

    Returns
    -------
    float
        Sum over sectors of 8 N_L R (1D: complex products of the Liouvillian) or
        8 (pairs + n) MATVECS_PER_SAMPLE T (3D), plus ROOT_FLOPS J for the build (a count).
    """
    evolution = (8.0 * size.liouvillian * rhs_count(size, segments, t_max) if density
                 else 8.0 * (size.pairs + size.states) * MATVECS_PER_SAMPLE * samples
                 for size in sizes)
    return sum(evolution) + ROOT_FLOPS * sum(size.jumps for size in sizes)


def run_seconds(sizes, samples: int, segments: int, t_max: float, density: bool) -> float:
    """Estimated wall time of a run: build and evolution of every sector.

    Parameters
    ----------
    sizes : sequence of SectorSize
    samples : int
        T, the sample times.
    segments : int
        Output segments between snapshots.
    t_max : float
        The last sample time (time units).
    density : bool
        Evolve the density matrix (1D) rather than the populations.

    Returns
    -------
    float
        Sum over sectors of `build_seconds` + `evolution_seconds` (seconds).
    """
    total = sum(build_seconds(size) + evolution_seconds(size, samples, segments, t_max, density)
                for size in sizes)
    return total


def peak_bytes(sizes, samples: int, segments: int, density: bool) -> float:
    """Estimated peak memory of a run, without the per-sample series (bytes).

    Parameters
    ----------
    sizes : sequence of SectorSize
    samples : int
        T, the sample times.
    segments : int
        Output segments between snapshots.
    density : bool
        Evolve the density matrix (1D) rather than the populations.

    Returns
    -------
    float
        The module docstring's memory of the chosen path (bytes).
    """
    held = JUMP_BYTES * sum(size.jumps for size in sizes)
    if density:
        return held + max(LIOUVILLIAN_BUILD_FACTOR * (LIOUVILLIAN_ENTRY_BYTES * size.liouvillian
                                                      + 8.0 * size.states ** 2)
                          + 16.0 * ODE_VECTORS * size.states ** 2 for size in sizes)
    per_segment = math.ceil(samples / max(segments, 1)) + 1
    return held + max(RATE_PAIR_BYTES * (size.pairs + size.states)
                      + 8.0 * size.states * per_segment for size in sizes)


def series_bytes(samples: int, sectors: int) -> float:
    """Memory of the series over the sample times (bytes): SAMPLE_BYTES per sample and sector.

    Parameters
    ----------
    samples : int
    sectors : int

    Returns
    -------
    float
        SAMPLE_BYTES x samples x sectors (bytes).
    """
    return SAMPLE_BYTES * samples * sectors
