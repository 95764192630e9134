"""trajectories.png: quantum trajectories of a markov run and their first-emission times."""

from __future__ import annotations

import numpy as np

from ..solvers.markov.emissions import first_emissions
from .style import pyplot, stamp, time_label

#: trajectories drawn in the figure's left panel
SHOWN_TRAJECTORIES = 6
#: histogram bins of first-emission times
HISTOGRAM_BINS = 30


def trajectories_figure(result):
    """Quantum trajectories of a markov run and their first-emission times.

    Left: a few trajectories' packet-centre momentum plus their emission kicks against time; right:
    the histogram of first-emission times with the golden-rule expectation
    N [exp(-Gamma t_a) - exp(-Gamma t_b)] per bin [t_a, t_b].

    Parameters
    ----------
    result : Result
        A markov result with quantum trajectories (its table "emissions").

    Returns
    -------
    matplotlib Figure
        Stamped simulated.
    """
    plt = pyplot()
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
    left.set_xlabel(time_label(result.scenario))
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
    right.set_xlabel(time_label(result.scenario))
    right.set_ylabel("counts per bin")
    right.set_title("first-emission times (simulated decay measurement)", fontsize=10)
    right.legend(fontsize=8)
    fig.suptitle(result.scenario.title, fontsize=11)
    stamp(fig)
    return fig
