"""trajectories.png: quantum trajectories of a markov run and their first-emission times."""

from __future__ import annotations

import numpy as np

from ..solvers.markov.emissions import first_emissions
from .style import (
    LEGEND_SIZE,
    METHOD_COLOURS,
    OKABE_ITO,
    REFERENCE_STYLE,
    in_output_units,
    labelled,
    new_figure,
    quantity_text,
    stamp_for,
    time_label,
)

#: trajectories drawn in the figure's left panel
SHOWN_TRAJECTORIES = 6
#: histogram bins of first-emission times
HISTOGRAM_BINS = 30
#: colours and dashes of the trajectories shown (Okabe-Ito order; common practice)
TRAJECTORY_LINES = tuple(zip(("blue", "vermillion", "bluish green", "reddish purple", "orange",
                              "sky blue"), ("-", "--", "-.", ":", "-", "--")))


def trajectories_figure(result):
    """Quantum trajectories of a markov run and their first-emission times.

    Left: a few trajectories' packet-centre momentum plus their emission kicks against time; right:
    the histogram of first-emission times with the golden-rule expectation
    N [exp(-Gamma t_a) - exp(-Gamma t_b)] per bin [t_a, t_b].  Times, momenta and the rate in
    the scenario's output units.

    Parameters
    ----------
    result : Result
        A markov result with quantum trajectories (its table "emissions").

    Returns
    -------
    matplotlib Figure
        Stamped simulated.
    """
    scenario = result.scenario
    table = result.tables["emissions"]
    count = int(result.summary.get("stats", {}).get("trajectories", {}).get(
        "count", len(np.unique(table["trajectory"]))))
    times = result.times
    fig, (left, right) = new_figure(1, 2, figsize=(11, 4.6))
    p0 = scenario.mean_momentum
    traj, t, kick = (np.asarray(table[c]) for c in ("trajectory", "t", "kick"))
    emitted = list(np.unique(traj)[:SHOWN_TRAJECTORIES - 1])
    quiet = sorted(set(range(count)) - set(np.unique(traj).tolist()))[:1]
    for j, (colour, dash) in zip(emitted + quiet, TRAJECTORY_LINES):
        mine = traj == j
        steps = in_output_units(scenario, "t", np.r_[0.0, t[mine], times[-1]])
        path_p = in_output_units(scenario, "p", p0 + np.r_[0.0, np.cumsum(kick[mine])])
        left.step(steps, np.r_[path_p, path_p[-1]], where="post", lw=1.4, ls=dash,
                  color=OKABE_ITO[colour], label=f"trajectory {j}")
    left.set_xlabel(time_label(scenario))
    left.set_ylabel(labelled("packet-centre momentum + kicks", scenario, "p"))
    left.set_title("quantum trajectories (simulated)", fontsize=10)
    left.legend(fontsize=LEGEND_SIZE - 1)
    firsts = first_emissions(table)
    edges = np.linspace(0.0, times[-1], HISTOGRAM_BINS + 1)
    counts, _ = np.histogram(firsts, edges)
    centres = in_output_units(scenario, "t", 0.5 * (edges[1:] + edges[:-1]))
    shown = counts > 0
    right.errorbar(centres[shown], counts[shown], yerr=np.sqrt(counts[shown]), fmt="o", ms=4,
                   mfc="white", color=METHOD_COLOURS.get(result.method, "0.3"),
                   label=f"first emissions, {count} trajectories (simulated)")
    rate = result.summary.get("rate_golden_rule")
    if rate:
        expected = count * (np.exp(-rate * edges[:-1]) - np.exp(-rate * edges[1:]))
        gamma = quantity_text(rate, scenario, "rate", 4)
        right.semilogy(centres, expected, **REFERENCE_STYLE,
                       label=fr"golden rule $N\,e^{{-\Gamma t}}$, $\Gamma$ = {gamma}")
    right.set_yscale("log")
    right.set_xlabel(time_label(scenario))
    right.set_ylabel("counts per bin")
    right.set_title("first-emission times (simulated decay measurement)", fontsize=10)
    right.legend(fontsize=LEGEND_SIZE)
    fig.suptitle(scenario.title, fontsize=11)
    stamp_for(fig, scenario)
    return fig
