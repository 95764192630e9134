"""What a fock run costs before it runs: memory (bytes) and wall time (seconds).

With S the states of one sector (`basis.state_count`), E = S + 2 links its Hamiltonian's
stored entries (`basis.link_count`), M the modes, K the packet sectors, T the sample times and
t_max the last one (seconds on the machine the constants were measured on):

    seconds = C_BASIS S M + K [C_HAMILTONIAN E + R (C_RHS + C_ENTRY E + C_STATE S)],
    R       = RHS_PER_SECTOR + RHS_PER_RADIAN w_top t_max,
    memory  = BYTES_PER_ENTRY E + BYTES_PER_STATE S + BYTES_PER_SECTOR_STATE K S,

R being the right-hand sides of sesolve's Adams integrator in one sector (at its tolerances
it takes a roughly fixed number of steps per radian of the fastest phase, whose frequency is
bounded by w_top, `fastest_frequency`).  The constants were measured on a 2-core x86-64
container (Python 3.11, numpy 2.4, scipy 1.17, qutip 5.3; shared with other jobs): wall times
of `FockSolver.evolve` (the basis and one Hamiltonian timed alone), sesolve's counted
right-hand sides and the tracemalloc peak of `Solver.run`, over
vacuum_excitation.toml and counter_rotating_decay.toml (1,771 to 46,376 states, 81 to 961
samples, with and without the rotating-wave approximation) and 3D and 9-sector variants; each
is the least-squares fit of its term (relative errors), rounded.  Estimate / measured stayed
within 0.7-1.5 for the wall time and 0.9-1.1 for the memory (0.6 for runs under 1 MB).

Units: hbar = c = 1; frequencies in the energy unit, times in its inverse.
"""

from __future__ import annotations

import numpy as np

from ..base import CSR_ENTRY_SECONDS
from .basis import FockPlan, allowed_level

# --- memory (bytes) --------------------------------------------------------------------------
#: per Hamiltonian entry: the COO build and CSR of one sector, and qutip's copies of -iH
BYTES_PER_ENTRY = 82.0
#: per basis state: occupations, lookup keys, diagonal observables
BYTES_PER_STATE = 72.0
#: per state and sector: the Adams work arrays and state copies of each sector's solve, held
#: until the garbage collector frees the solver
BYTES_PER_SECTOR_STATE = 337.0

# --- wall time (seconds on the machine of the module docstring) ------------------------------
#: enumerating the basis, per state and mode
C_BASIS = 5.0e-8
#: building one sector's Hamiltonian, per entry
C_HAMILTONIAN = 7.0e-7
#: one right-hand side of sesolve: fixed, per Hamiltonian entry (a complex CSR product, timed
#: alone) and per state (the Adams integrator's vector work); reading the observables off
#: |psi|^2 at the sample times fitted to no measurable cost beside them
C_RHS = 7.8e-6
C_ENTRY = CSR_ENTRY_SECONDS
C_STATE = 2.0e-8
#: Adams right-hand sides per sector (start-up) and per radian of the fastest phase: a fit of
#: the logarithm of the counted ones, 587 to 6,723 per sector (within 0.66-1.64 of the counts)
RHS_PER_SECTOR = 240.0
RHS_PER_RADIAN = 6.9


def fastest_frequency(model, plan: FockPlan) -> float:
    """An upper bound of the largest diagonal energy of the sector Hamiltonians.

    A state with N quanta has E_level(|P - sum n k|) + sum n w <= E_level(P_max + N k_max) +
    N w_max, taken over the quanta numbers N <= max_quanta with an allowed level.

    Parameters
    ----------
    model : COMModel
    plan : FockPlan

    Returns
    -------
    float
        w_top (energy units).
    """
    k_max = float(np.max(np.linalg.norm(plan.modes.momenta, axis=1), initial=0.0))
    w_max = float(plan.modes.frequencies.max(initial=0.0))
    p_max = float(np.max(np.linalg.norm(plan.sector_momenta, axis=1), initial=0.0))
    top = 0.0
    for quanta in range(plan.max_quanta + 1):
        level = allowed_level(quanta, plan.start_level, plan.rotating_wave)
        if level is not None:
            top = max(top, float(model.energy(level, p_max + quanta * k_max)) + quanta * w_max)
    return top


def rhs_count(frequency: float, t_max: float) -> float:
    """Right-hand sides of sesolve's Adams integrator in one sector.

    Parameters
    ----------
    frequency : float
        w_top (energy units, `fastest_frequency`).
    t_max : float
        The last sample time (time units).

    Returns
    -------
    float
        R = RHS_PER_SECTOR + RHS_PER_RADIAN w_top t_max (a count).
    """
    return RHS_PER_SECTOR + RHS_PER_RADIAN * frequency * t_max


def run_seconds(states: int, entries: int, modes: int, sectors: int, frequency: float,
                t_max: float) -> float:
    """Estimated wall time of `FockSolver.evolve`.

    Parameters
    ----------
    states, entries, modes, sectors : int
        S, E, M and K of the module docstring.
    frequency : float
        w_top (energy units).
    t_max : float
        The last sample time (time units).

    Returns
    -------
    float
        The module docstring's seconds.
    """
    rhs = rhs_count(frequency, t_max)
    per_sector = C_HAMILTONIAN * entries + rhs * (C_RHS + C_ENTRY * entries + C_STATE * states)
    return C_BASIS * states * modes + sectors * per_sector


def space_bytes(states: int, entries: int, sectors: int) -> float:
    """Estimated peak memory of the Fock spaces, without the series over the sample times.

    Parameters
    ----------
    states, entries, sectors : int
        S, E and K of the module docstring.

    Returns
    -------
    float
        BYTES_PER_ENTRY E + BYTES_PER_STATE S + BYTES_PER_SECTOR_STATE K S (bytes).
    """
    return (BYTES_PER_ENTRY * entries + BYTES_PER_STATE * states
            + BYTES_PER_SECTOR_STATE * sectors * states)


def run_work(states: int, entries: int, sectors: int, frequency: float, t_max: float) -> float:
    """Floating-point operations of the run, roughly: 8 E R complex products per sector.

    Parameters
    ----------
    states, entries, sectors : int
        S, E and K of the module docstring.
    frequency : float
        w_top (energy units).
    t_max : float
        The last sample time (time units).

    Returns
    -------
    float
        K (8 E + 30 S) R (a count: the products and the integrator's vector updates).
    """
    return sectors * (8.0 * entries + 30.0 * states) * rhs_count(frequency, t_max)
