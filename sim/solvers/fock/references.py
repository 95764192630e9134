"""References on the fock solver's own modes: second-order perturbation theory, the
rotating-wave star, and the second-order (Lamb and Bloch-Siegert) shifts.

Units: hbar = 1; energies in the energy unit, times in its inverse.
"""

from __future__ import annotations

import numpy as np

from ...physics.models import EXCITED, GROUND
from ..exact.star import level_amplitude, sector_lamb_shift
from .basis import FockModes, first_links


def second_order_transition(model, modes: FockModes, momentum, level: int, times) -> np.ndarray:
    """Probability to have left |level, P; vac> at time t, to second order in the coupling.

    Standard time-dependent perturbation theory:

        P(t) = sum_j |g_j|^2 4 sin^2(D_j t / 2) / D_j^2,
        D_j  = E_other(P - k_j) + w_j - E_level(P),

    with g_j from `first_links`.  For a ground-state start this is the vacuum excitation
    probability P_e(t) through the counter-rotating terms; for an excited start, 1 - P_e(t).

    Parameters
    ----------
    model : COMModel
    modes : FockModes
    momentum : array_like, shape (d,)
        P (momentum units).
    level : int
        The initial level.
    times : array_like, shape (T,)
        Times (time units).

    Returns
    -------
    ndarray, shape (T,)
        P(t) (dimensionless).

    References
    ----------
    J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6.
    """
    energies, couplings = first_links(model, modes, momentum, level)
    mismatch = energies - model.energy(level, float(np.linalg.norm(momentum)))
    t = np.asarray(times, dtype=float)[:, None]
    half = 0.5 * mismatch[None, :] * t
    # 4 sin^2(D t/2)/D^2 = t^2 sinc^2(D t / 2 pi) (numpy's normalised sinc); finite at D = 0
    return (t * np.sinc(half / np.pi)) ** 2 @ np.abs(couplings) ** 2


def rotating_wave_excited(model, modes: FockModes, momentum, times) -> np.ndarray:
    """|c_e(t)|^2 of the RWA star on the same modes, by the exact secular solver.

    The level E_e(P) coupled to the one-quantum states of `first_links`, solved by
    `sim.solvers.exact.star.level_amplitude`: c_e(t) = sum_j w_j exp(-i z_j t) over the roots z_j
    of f(z) = z - E_e - sum_i b_i / (z - e_i), w_j = 1 / f'(z_j).

    Parameters
    ----------
    model : COMModel
    modes : FockModes
    momentum : array_like, shape (d,)
        P (momentum units).
    times : array_like, shape (T,)
        Times (time units).

    Returns
    -------
    ndarray, shape (T,)
        |c_e(t)|^2 (dimensionless).

    References
    ----------
    G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318.
    """
    energies, couplings = first_links(model, modes, momentum, EXCITED)
    level = model.energy(EXCITED, float(np.linalg.norm(momentum)))
    return np.abs(level_amplitude(level, energies, couplings, times)) ** 2


def transition_shift(model, modes: FockModes, momentum, rotating_wave: bool) -> float:
    """Discrete second-order shift of the transition, Delta_e - Delta_g (energy units).

    Delta_level = sum_j |g_j|^2 / (E_level(P) - E_other(P - k_j) - w_j)
    (`sim.solvers.exact.star.sector_lamb_shift`, exact resonances left out); under the RWA the
    vacuum ground state is not shifted (Delta_g = 0).  The counter-rotating part of Delta_g is
    the Bloch-Siegert-type shift.

    Parameters
    ----------
    model : COMModel
    modes : FockModes
    momentum : array_like, shape (d,)
        P (momentum units).
    rotating_wave : bool
        Leave out Delta_g.

    Returns
    -------
    float
        Delta_e - Delta_g (energy units).
    """
    size = float(np.linalg.norm(momentum))
    shift = sector_lamb_shift(model.energy(EXCITED, size), *first_links(model, modes, momentum,
                                                                         EXCITED))
    if not rotating_wave:
        shift -= sector_lamb_shift(model.energy(GROUND, size),
                                   *first_links(model, modes, momentum, GROUND))
    return shift
