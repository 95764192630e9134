"""The figures of one run: decay curve, recoil broadening, packet spreading.

Each `draw_*` draws into given axes (a new stamped figure when None) and returns them; the
figure registry (`sim.plotting.FIGURES`) turns them into decay.png, momentum.png and
variance.png.
"""

from __future__ import annotations

import numpy as np

from ..physics.models import EXCITED, level_of
from .style import (
    METHOD_COLOURS,
    in_output_units,
    new_axes,
    output_times,
    time_label,
    unit_suffix,
)


def draw_decay(result, ax=None):
    """Excited population P_e(t) on a log axis with the golden-rule exponential exp(-Gamma t).

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
    """
    ax = new_axes(ax)
    scenario = result.scenario
    t = output_times(result)
    ax.semilogy(t, np.clip(result.excited, 1e-300, None), color=METHOD_COLOURS.get(result.method),
                label=f"{result.method} (simulated)")
    rate = result.summary.get("rate_golden_rule")  # natural units in memory
    if rate and level_of(scenario.packet.internal) == EXCITED:
        shown = f"{float(in_output_units(scenario, 'rate_golden_rule', rate)):.4g}"
        if scenario.units is not None:
            shown += f" {scenario.units.column_unit('rate_golden_rule')}"
        ax.semilogy(t, np.exp(-rate * result.times), "k--", lw=1,
                    label=fr"golden rule $e^{{-\Gamma t}}$, $\Gamma$ = {shown}")
    positive = result.excited[result.excited > 0]
    floor = max(1e-6, float(np.nanmin(positive)) / 2) if positive.size else 1e-6
    ax.set_ylim(floor, 1.2)
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel("excited population $P_e(t)$")
    ax.set_title(scenario.title, fontsize=10)
    ax.legend(fontsize=8)
    return ax


def draw_momentum(result, ax=None):
    """Packet axis-momentum density at t = 0 and the ground-state density at the last snapshot.

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
    """
    ax = new_axes(ax)
    scenario = result.scenario
    p = in_output_units(scenario, "p", result.momentum_grid)
    scale = result.momentum_grid[1] - result.momentum_grid[0]
    scale /= (p[1] - p[0]) if len(p) > 1 and p[1] != p[0] else 1.0
    ax.fill_between(p, result.initial_density * scale, color="0.8", label="packet, t = 0")
    last = float(in_output_units(scenario, "t", np.array([result.snapshot_times[-1]]))[0])
    ax.plot(p, result.momentum_density[:, -1] * scale, color="tab:red",
            label=f"ground state, t = {last:.3g}")
    ax.set_xlabel("p along packet axis" + unit_suffix(scenario, "p"))
    ax.set_ylabel("momentum density")
    ax.set_title("recoil broadening (simulated)", fontsize=10)
    ax.legend(fontsize=8)
    return ax


def draw_variance(result, ax=None):
    """Momentum variance (and position variance where computed) against time.

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
    """
    ax = new_axes(ax)
    scenario = result.scenario
    t = output_times(result)
    ax.plot(t, in_output_units(scenario, "p_var", result.p_var), color="tab:blue",
            label="momentum variance")
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel("Var p" + unit_suffix(scenario, "p_var"))
    if np.any(np.isfinite(result.x_var)):
        twin = ax.twinx()
        twin.plot(t, in_output_units(scenario, "x_var", result.x_var), color="tab:green",
                  label="position variance")
        twin.set_ylabel("Var x" + unit_suffix(scenario, "x_var"), color="tab:green")
    ax.set_title("packet spreading (simulated)", fontsize=10)
    ax.legend(fontsize=8, loc="upper left")
    return ax
