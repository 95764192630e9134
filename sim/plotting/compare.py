"""compare.png: every method's excited population on one scenario, and its difference from exact."""

from __future__ import annotations

import numpy as np

from .style import METHOD_COLOURS, in_output_units, pyplot, stamp, time_label

#: the method the others are measured against
REFERENCE = "exact"


def compare_figure(scenario, times, curves: dict, reference: str = REFERENCE):
    """Every method's excited population and, below, its difference from the reference.

    Parameters
    ----------
    scenario : Scenario
        For the title and the output units.
    times : ndarray
        Common sample times (time units, natural).
    curves : dict
        Method -> P_e on `times` (dimensionless).
    reference : str
        The method the others are measured against (no lower panel without it).

    Returns
    -------
    matplotlib Figure
        Top: P_e(t) on a log axis; bottom: P_e - P_e(reference); stamped simulated.
    """
    plt = pyplot()
    t = in_output_units(scenario, "t", times)
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7, 6.5), sharex=True,
                                      constrained_layout=True, height_ratios=(2, 1))
    for method, values in curves.items():
        top.semilogy(t, np.clip(values, 1e-300, None), color=METHOD_COLOURS.get(method),
                     ls="--" if method == "perturbative" else "-", label=f"{method} (simulated)")
    positive = [v[v > 0] for v in curves.values() if np.any(v > 0)]
    floor = max(1e-8, min(float(v.min()) for v in positive) / 2) if positive else 1e-8
    top.set_ylim(floor, 1.2)
    top.set_ylabel("excited population $P_e(t)$")
    top.set_title(scenario.title, fontsize=10)
    top.legend(fontsize=8)
    baseline = curves.get(reference)
    if baseline is not None:
        for method, values in curves.items():
            if method != reference:
                bottom.plot(t, values - baseline, color=METHOD_COLOURS.get(method), label=method,
                            ls="--" if method == "perturbative" else "-")
        bottom.axhline(0.0, color="0.6", lw=0.8)
        bottom.set_ylabel(r"$P_e - P_e^{\rm exact}$")
        bottom.legend(fontsize=8)
    else:
        bottom.text(0.5, 0.5, "exact solver not available: no differences", ha="center",
                    va="center", transform=bottom.transAxes)
    bottom.set_xlabel(time_label(scenario))
    stamp(fig)
    return fig
