"""Quantum trajectories: the Monte Carlo unravelling of the markov solver's Lindblad generator.

Each trajectory evolves a state vector under H_eff = H - (i/2) Sum_J L_J^dag L_J and jumps with
L_J at the rate <L_J^dag L_J> (QuTiP 5 `mcsolve`); the average over trajectories converges to the
master-equation solution with the statistical error sqrt(P (1 - P) / N) of a fraction.  A jump of
an emission family L_{c,m} (see sim.solvers.markov) is one emitted quantum; its recoil kick along
the packet axis is the lattice shift m dp.  In 3D every trajectory first draws its transverse
momentum node with the node weights, then runs in that sector.

Output: `emissions` table {trajectory, t, kick} (one row per emission) and the figure
trajectories.png (`trajectories_figure`).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import qutip

from .models import EXCITED
from .solvers.markov import SOLVER_OPTIONS

#: trajectories drawn in the figure's left panel
SHOWN_TRAJECTORIES = 6
#: histogram bins of first-emission times
HISTOGRAM_BINS = 30


@dataclass(frozen=True)
class TrajectoryRecord:
    """Emissions of `count` trajectories (columns trajectory, t, kick) and the seed used."""

    table: dict
    count: int
    seed: int | None

    def summary(self, times, excited) -> dict:
        """Count, seed, emissions and the largest deviation of the surviving fraction from the
        master-equation excited population in units of its binomial standard error."""
        surviving = surviving_fraction(self.table, times, self.count)
        error = binomial_error(excited, self.count)
        return {"count": self.count, "seed": self.seed, "emissions": int(len(self.table["t"])),
                "max_deviation_in_std_errors": float(np.max(np.abs(surviving - excited) / error))}


def binomial_error(fraction, count: int):
    """Standard error sqrt(P (1 - P) / N) of a fraction of N trials, floored at P (1 - P) = 1/N
    so that it stays finite where P is 0 or 1 (common practice)."""
    fraction = np.asarray(fraction, dtype=float)
    return np.sqrt(np.maximum(fraction * (1 - fraction), 1.0 / count) / count)


def unravel(sectors, grid, amplitudes, times, count: int, seed: int | None) -> TrajectoryRecord:
    """`count` trajectories of the sectors' generator from the packet state `amplitudes`."""
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


def first_emissions(table) -> np.ndarray:
    """Time of each trajectory's first emission (trajectories that emitted)."""
    traj, t = np.asarray(table["trajectory"]), np.asarray(table["t"])
    if len(t) == 0:
        return np.array([])
    order = np.lexsort((t, traj))
    traj, t = traj[order], t[order]
    return t[np.r_[True, traj[1:] != traj[:-1]]]


def surviving_fraction(table, times, count: int) -> np.ndarray:
    """Fraction of the `count` trajectories that have not emitted by each time."""
    firsts = np.sort(first_emissions(table))
    return 1.0 - np.searchsorted(firsts, times, side="right") / count


def trajectories_figure(result, path: str | Path) -> None:
    """trajectories.png: a few trajectories' momentum against time, and the first-emission
    histogram with the golden-rule exponential N Gamma exp(-Gamma t) dt expected per bin."""
    import matplotlib.pyplot as plt

    from .figures import stamp, time_label
    from .output import atomic_save_figure

    table = result.tables["emissions"]
    count = int(result.summary.get("stats", {}).get("trajectories", {}).get(
        "count", len(np.unique(table["trajectory"]))))
    times = result.times
    fig, (left, right) = plt.subplots(1, 2, figsize=(11, 4.2), constrained_layout=True)
    p0 = result.scenario.mean_momentum
    traj, t, kick = (np.asarray(table[c]) for c in ("trajectory", "t", "kick"))
    emitted = list(np.unique(traj)[:SHOWN_TRAJECTORIES - 1])
    quiet = sorted(set(range(count)) - set(np.unique(traj).tolist()))[:1]
    for j in emitted + quiet:
        mine = traj == j
        steps = np.r_[0.0, t[mine], times[-1]]
        path_p = p0 + np.r_[0.0, np.cumsum(kick[mine])]
        left.step(steps, np.r_[path_p, path_p[-1]], where="post", lw=1.2, label=f"trajectory {j}")
    left.set_xlabel(time_label(result))
    left.set_ylabel("packet-centre momentum + emission kicks")
    left.set_title("quantum trajectories (simulated)", fontsize=10)
    left.legend(fontsize=7)
    firsts = first_emissions(table)
    edges = np.linspace(0.0, times[-1], HISTOGRAM_BINS + 1)
    counts, _ = np.histogram(firsts, edges)
    centres = 0.5 * (edges[1:] + edges[:-1])
    shown = counts > 0
    right.errorbar(centres[shown], counts[shown], yerr=np.sqrt(counts[shown]), fmt="o", ms=3,
                   color="tab:purple", label=f"first emissions, {count} trajectories (simulated)")
    rate = result.summary.get("rate_golden_rule")
    if rate:
        expected = count * (np.exp(-rate * edges[:-1]) - np.exp(-rate * edges[1:]))
        right.semilogy(centres, expected, "k--", lw=1,
                       label=fr"golden rule $N\,e^{{-\Gamma t}}$, $\Gamma$={rate:.4g}")
    right.set_yscale("log")
    right.set_xlabel(time_label(result))
    right.set_ylabel("counts per bin")
    right.set_title("first-emission times (simulated decay measurement)", fontsize=10)
    right.legend(fontsize=8)
    fig.suptitle(result.scenario.title, fontsize=11)
    stamp(fig)
    atomic_save_figure(fig, path, dpi=130)
    plt.close(fig)
