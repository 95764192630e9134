"""counter_rotating.png: a fock run with all terms against the rotating-wave approximation."""

from __future__ import annotations

import numpy as np

from .style import METHOD_COLOURS, output_times, pyplot, stamp, time_label


def counter_rotating_figure(result):
    """A fock run with all terms against the rotating-wave approximation on the same modes.

    Top: P_e(t) of the fock run, of the RWA star (`sim.solvers.exact.star`) and of second-order
    perturbation theory; bottom: the counter-rotating correction P_e - P_e^RWA.

    Parameters
    ----------
    result : Result
        A fock result with rotating_wave = false (its table "counter_rotating").

    Returns
    -------
    matplotlib Figure
        Stamped simulated.
    """
    plt = pyplot()
    table = result.tables["counter_rotating"]
    t = output_times(result)
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(6, 5.5), sharex=True,
                                      constrained_layout=True, height_ratios=(2, 1))
    top.plot(t, table["excited"], color=METHOD_COLOURS["fock"], label="all terms (simulated)")
    top.plot(t, table["excited_rotating_wave"], "k--", lw=1, label="rotating-wave approximation")
    second = np.asarray(table["excited_second_order"], dtype=float)
    valid = (second >= 0) & (second <= 1)  # the expansion of an excited start fails at late times
    top.plot(t, np.where(valid, second, np.nan), ":", color="0.5", lw=1,
             label="second-order perturbation theory")
    top.set_ylabel("excited population $P_e(t)$")
    top.set_title(result.scenario.title, fontsize=9, loc="left")
    top.legend(fontsize=8)
    bottom.plot(t, table["excited"] - table["excited_rotating_wave"], color=METHOD_COLOURS["fock"])
    bottom.axhline(0.0, color="0.7", lw=0.8)
    bottom.set_ylabel(r"$P_e - P_e^{\mathrm{RWA}}$")
    bottom.set_xlabel(time_label(result.scenario))
    bottom.set_title("counter-rotating correction (simulated)", fontsize=10)
    stamp(fig)
    return fig
