"""counter_rotating.png: a fock run with all terms against the rotating-wave approximation."""

from __future__ import annotations

import numpy as np

from .style import (
    LEGEND_SIZE,
    REFERENCE_STYLE,
    add_note,
    truncation_converged,
    coincidence_lines,
    method_label,
    method_style,
    new_figure,
    output_times,
    stamp_for,
    time_label,
)

#: line of second-order perturbation theory (thin, grey, dotted)
SECOND_ORDER_STYLE = {"color": "0.45", "lw": 1.3, "ls": ":", "zorder": 4}


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
        Stamped simulated; a truncated bath is drawn dashed and named in the legend.
    """
    table = result.tables["counter_rotating"]
    t = output_times(result)
    fig, (top, bottom) = new_figure(2, 1, figsize=(6.4, 5.8), sharex=True, height_ratios=(2, 1))
    style = method_style(result.method, truncation_converged(result))
    label = method_label(result.method, result).replace(" (simulated)", "")
    top.plot(t, table["excited"], label=f"{label}, all terms (simulated)", **style)
    top.plot(t, table["excited_rotating_wave"], label="rotating-wave approximation",
             **REFERENCE_STYLE)
    second = np.asarray(table["excited_second_order"], dtype=float)
    valid = (second >= 0) & (second <= 1)  # the expansion of an excited start fails at late times
    top.plot(t, np.where(valid, second, np.nan), label="second-order perturbation theory",
             **SECOND_ORDER_STYLE)
    add_note(top, coincidence_lines({"all terms": table["excited"],
                                     "rotating-wave": table["excited_rotating_wave"]}, top))
    top.set_ylabel("excited population $P_e$")
    top.set_title(result.scenario.title, fontsize=10)
    top.legend(fontsize=LEGEND_SIZE)
    bottom.plot(t, table["excited"] - table["excited_rotating_wave"], **style)
    bottom.axhline(0.0, color="0.7", lw=0.8)
    bottom.set_ylabel(r"$P_e - P_e^{\mathrm{RWA}}$")
    bottom.set_xlabel(time_label(result.scenario))
    bottom.set_title("counter-rotating correction (simulated)", fontsize=10)
    stamp_for(fig, result.scenario)
    return fig
