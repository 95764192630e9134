"""rates.png: golden-rule template functions of the models and packet-averaged rates."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..physics.field import packet_for
from ..physics.golden_rule import packet_rate, template_rate
from ..physics.models import MODELS
from .style import MODEL_COLOURS, pyplot, stamp


def rates_figure(scenario):
    """Golden-rule rates of every model: template functions and packet averages.

    Left: Gamma(p) of each model against p / (M_g c) with the packet's momentum density shaded;
    right: the packet-averaged rate against packet width from 0.1 to 100 Compton wavelengths 1/M_g.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    matplotlib Figure
        Rates in inverse time units (natural); stamped simulated.
    """
    plt = pyplot()
    mass = scenario.detector.ground_mass
    packet = packet_for(scenario)
    fig, (left, right) = plt.subplots(1, 2, figsize=(11, 4.2), constrained_layout=True)
    centre, spread = scenario.mean_momentum, packet.momentum_std
    hi = abs(centre) + max(5 * spread, 1.5 * mass)
    p = np.linspace(0.0 if scenario.dimensions == 3 else -hi, hi, 121)
    for name in MODELS:
        left.plot(p / mass, template_rate(scenario, np.abs(p), name), color=MODEL_COLOURS[name],
                  label=name)
    density = (packet.axis_density(p) if scenario.dimensions == 1 else packet.magnitude_density(p))
    shade = left.twinx()
    shade.fill_between(p / mass, density, color="0.85", zorder=0)
    shade.set_yticks([])
    left.set_zorder(shade.get_zorder() + 1)
    left.patch.set_visible(False)
    left.set_xlabel("p / (M_g c)" + ("" if scenario.dimensions == 1 else "  (|p|)"))
    left.set_ylabel(r"template function $\Gamma(p)$")
    left.set_title("golden-rule rate vs momentum (packet shaded)", fontsize=10)
    left.legend(fontsize=8)
    widths = np.geomspace(0.1, 100, 25) / mass
    for name in MODELS:
        rates = [packet_rate(replace(scenario, packet=replace(scenario.packet, width=w)), name,
                             nodes=48) for w in widths]
        right.semilogx(widths * mass, rates, "o-", ms=3, color=MODEL_COLOURS[name], label=name)
    right.axvline(scenario.packet.width * mass, color="0.5", ls=":", lw=1, label="this packet")
    right.set_xlabel(r"packet width / Compton wavelength $\hbar/(M_g c)$")
    right.set_ylabel("packet-averaged rate")
    right.set_title("packet-averaged golden-rule rate", fontsize=10)
    right.legend(fontsize=8)
    fig.suptitle(scenario.title, fontsize=11)
    stamp(fig)
    return fig
