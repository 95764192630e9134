"""rates.png: golden-rule template functions of the models and packet-averaged rates, in the
scenario's output units."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..physics.field import packet_for
from ..physics.golden_rule import packet_rate, template_rate
from ..physics.models import MODELS
from .style import (
    LEGEND_SIZE,
    add_note,
    coincidence_lines,
    in_output_units,
    labelled,
    model_style,
    new_figure,
    output_scale,
    quantity_text,
    stamp_for,
)

#: the momentum panel reaches this many packet standard deviations either side of the mean
MOMENTUM_REACH = 6.0
#: momenta of the template-function panel
MOMENTUM_POINTS = 121
#: the width panel spans the packet's width divided and multiplied by this factor
WIDTH_SPAN = 100.0
#: packet widths of the width panel, and quadrature nodes of each packet average
WIDTH_POINTS = 25
WIDTH_NODES = 48


def momentum_range(scenario) -> np.ndarray:
    """Momenta that cover the packet and the detector at rest (natural units).

    1D: from min(0, p0 - R sigma_p) to max(0, p0 + R sigma_p) along the axis; 3D: magnitudes
    from 0 to |p0| + R sigma_p; R = MOMENTUM_REACH, sigma_p = 1 / (2 width).

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    ndarray
        MOMENTUM_POINTS equally spaced momenta (momentum units).
    """
    packet = packet_for(scenario)
    reach = MOMENTUM_REACH * packet.momentum_std
    centre = packet.axis_mean
    if scenario.dimensions == 3:
        return np.linspace(0.0, centre + reach, MOMENTUM_POINTS)
    return np.linspace(min(0.0, centre - reach), max(0.0, centre + reach), MOMENTUM_POINTS)


def width_range(scenario) -> np.ndarray:
    """Packet widths about the scenario's own: width / WIDTH_SPAN to width * WIDTH_SPAN.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    ndarray
        WIDTH_POINTS geometrically spaced widths (length units, natural).
    """
    w = scenario.packet.width
    return np.geomspace(w / WIDTH_SPAN, w * WIDTH_SPAN, WIDTH_POINTS)


def flat_axis(ax, curves: dict) -> list[str]:
    """Plain tick labels, and for curves flat to 1e-3 of their size a range of +-10% about
    them (instead of magnifying rounding) and a note saying so.

    Parameters
    ----------
    ax : matplotlib Axes
    curves : dict
        Name -> values drawn in `ax` (positive rates).

    Returns
    -------
    list of str
        The note's line (none when the curves vary visibly).
    """
    ax.ticklabel_format(axis="y", useOffset=False)
    values = np.concatenate([np.asarray(v, dtype=float) for v in curves.values()])
    level = float(np.max(np.abs(values)))
    spread = float(np.ptp(values))
    if not level or spread >= 1e-3 * level:
        return []
    ax.set_ylim(0.9 * float(values.min()), 1.1 * level)
    return [f"flat here: varies by less than {max(spread / level, 1e-16):.1g} of its value"]


def _template_panel(ax, scenario) -> None:
    """Gamma(p) of every model over `momentum_range`, the packet's density shaded behind."""
    p = momentum_range(scenario)
    p_out = in_output_units(scenario, "p", p)
    rates = {name: in_output_units(scenario, "rate", template_rate(scenario, np.abs(p), name))
             for name in MODELS}
    packet = packet_for(scenario)
    density = packet.axis_density(p) if scenario.dimensions == 1 else packet.magnitude_density(p)
    shade = ax.twinx()
    shade.fill_between(p_out, density, color="0.88", zorder=0)
    shade.set_yticks([])
    shade.set_ylim(0, 1.5 * float(np.max(density)))
    ax.set_zorder(shade.get_zorder() + 1)
    ax.patch.set_visible(False)
    ax.fill_between([], [], color="0.88", label="packet density (shaded)")
    for name, values in rates.items():
        ax.plot(p_out, values, label=name, **model_style(name))
    notes = flat_axis(ax, rates)
    add_note(ax, coincidence_lines(rates, ax) + notes, loc="lower left")
    name = "momentum $p$" if scenario.dimensions == 1 else "momentum magnitude $|p|$"
    ax.set_xlabel(labelled(name, scenario, "p"))
    ax.set_ylabel(labelled(r"golden-rule rate $\Gamma(p)$", scenario, "rate"))
    ax.set_title("rate across the packet's momenta", fontsize=10)
    ax.legend(fontsize=LEGEND_SIZE, loc="best")


def _width_panel(ax, scenario) -> None:
    """Packet-averaged rates of every model against packet width, this packet marked, with
    the width in Compton wavelengths hbar / (M_g c) on the top axis."""
    widths = width_range(scenario)
    w_out = in_output_units(scenario, "length", widths)
    averaged = {}
    for name in MODELS:
        rates = [packet_rate(replace(scenario, packet=replace(scenario.packet, width=w)), name,
                             nodes=WIDTH_NODES) for w in widths]
        averaged[name] = in_output_units(scenario, "rate", rates)
        ax.semilogx(w_out, averaged[name], label=name, **model_style(name))
    notes = flat_axis(ax, averaged)
    add_note(ax, coincidence_lines(averaged, ax) + notes, loc="lower left")
    ax.axvline(float(in_output_units(scenario, "length", scenario.packet.width)), color="0.4",
               ls=":", lw=1.2,
               label="this packet: " + quantity_text(scenario.packet.width, scenario, "length"))
    compton = output_scale(scenario, "length") / scenario.detector.ground_mass
    top = ax.secondary_xaxis("top", functions=(lambda w: w / compton, lambda c: c * compton))
    top.set_xlabel(r"width / Compton wavelength $\hbar/(M_g c)$", fontsize=9)
    ax.set_xlabel(labelled("packet width", scenario, "length"))
    ax.set_ylabel(labelled("packet-averaged rate", scenario, "rate"))
    ax.legend(fontsize=LEGEND_SIZE)


def rates_figure(scenario):
    """Golden-rule rates of every model: template functions and packet averages.

    Left: Gamma(p) of each model over the packet's momenta (`momentum_range`, which includes
    p = 0), the packet's momentum density shaded; right: the packet-averaged rate
    Int |psi(p)|^2 Gamma(p) d^dp against packet width over `width_range`.  Momenta, rates and
    widths are in the scenario's output units (natural units without them).

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    matplotlib Figure
        Stamped simulated.
    """
    fig, (left, right) = new_figure(1, 2, figsize=(11, 4.6))
    _template_panel(left, scenario)
    _width_panel(right, scenario)
    fig.suptitle(scenario.title, fontsize=11)
    stamp_for(fig, scenario)
    return fig
