"""Quantum trajectories: the Monte Carlo unravelling of the markov solver's Lindblad generator.

Each trajectory evolves a state vector under H_eff = H - (i/2) Sum_J L_J^dag L_J and jumps with
L_J at the rate <L_J^dag L_J> (QuTiP 5 `mcsolve`); the average over trajectories converges to the
master-equation solution with the statistical error sqrt(P (1 - P) / N) of a fraction.  A jump of
an emission family L_{c,m} = Sum_p sqrt(gamma_{c,m}(p)) |g, p + m dp><e, p| is one emitted
quantum; its recoil kick along the packet axis is the lattice shift m dp.  In 3D every trajectory
first draws its transverse momentum node with the node weights, then runs in that sector.

Output: the `emissions` table {trajectory, t, kick} (one row per emission), drawn as
trajectories.png by `sim.plotting`.

References: J. Dalibard, Y. Castin & K. Molmer, Phys. Rev. Lett. 68, 580 (1992) (the Monte Carlo
wave-function method); the QuTiP 5 documentation (mcsolve).
"""

from __future__ import annotations

import numpy as np
import qutip

from ...physics.models import EXCITED
from .emissions import TrajectoryRecord
from .lattice import SOLVER_OPTIONS


def unravel(sectors, grid, amplitudes, times, count: int, seed: int | None) -> TrajectoryRecord:
    """`count` trajectories of the sectors' generator from the packet state `amplitudes`.

    The trajectories are shared among the sectors by a multinomial draw with the sectors'
    weights; each sector runs its share with qutip.mcsolve (H, the sector's jump operators, one
    seed from `numpy.random.SeedSequence(seed)` per sector).  Every jump of an emission family
    (process sign +1) is recorded with its time and its kick m dp.

    Parameters
    ----------
    sectors : list of Sector
    grid : MarkovGrid
    amplitudes : dict
        (level, n) -> initial amplitude (`packet_amplitudes`).
    times : ndarray
        Sample times (time units).
    count : int
        Number of trajectories.
    seed : int or None
        Seed of the draws (None: fresh entropy).

    Returns
    -------
    TrajectoryRecord
        The emissions table: trajectory (index), t (time units), kick (momentum units).

    References
    ----------
    J. Dalibard, Y. Castin & K. Molmer, Phys. Rev. Lett. 68, 580 (1992).
    The QuTiP 5 documentation: mcsolve.
    """
    rng = np.random.default_rng(seed)
    weights = np.array([sec.weight for sec in sectors])
    per_sector = rng.multinomial(count, weights / weights.sum())
    children = np.random.SeedSequence(seed).spawn(len(sectors))
    rows = {"trajectory": [], "t": [], "kick": []}
    first = 0
    for sector, n, child in zip(sectors, per_sector, children):
        if n == 0:
            continue
        c_ops, labels = sector.jump_operators()
        if not c_ops:
            first += n
            continue
        result = qutip.mcsolve(sector.hamiltonian(), sector.initial_ket(amplitudes), times, c_ops,
                               e_ops=[sector.diagonal(sector.levels == EXCITED)], ntraj=int(n),
                               seeds=int(child.generate_state(1)[0]),
                               options={**SOLVER_OPTIONS, "map": "serial"})
        for j, (when, which) in enumerate(zip(result.col_times, result.col_which)):
            for t, w in zip(when, which):
                sign, _, shift = labels[w]
                if sign > 0:
                    rows["trajectory"].append(first + j)
                    rows["t"].append(float(t))
                    rows["kick"].append(shift * grid.step)
        first += n
    table = {"trajectory": np.array(rows["trajectory"], dtype=int),
             "t": np.array(rows["t"]), "kick": np.array(rows["kick"])}
    return TrajectoryRecord(table, count, seed)
