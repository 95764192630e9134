"""Figures of simulated results, each marked as simulated.

Every figure carries the stamp "simulated (recoilsim)" so that a decay curve never passes for
measured data.  Functions named draw_* draw into given axes; *_figure functions build a figure.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .output import atomic_save_figure  # noqa: E402

STAMP = "simulated (recoilsim)"
MODEL_COLOURS = {"galilean": "tab:orange", "newton-wigner": "tab:blue", "one-particle": "tab:green"}
METHOD_COLOURS = {"perturbative": "tab:gray", "markov": "tab:purple", "exact": "tab:blue",
                  "fock": "tab:red"}


def stamp(fig) -> None:
    """Mark a figure as simulated."""
    fig.text(0.995, 0.995, STAMP, ha="right", va="top", fontsize=8, color="0.4", style="italic")


def time_label(result) -> str:
    units = result.scenario.units
    return f"t [{units.column_unit('t')}]" if units else "t [1/energy unit]"


def output_times(result):
    units = result.scenario.units
    return units.to_output("t", result.times) if units else result.times


def draw_decay(result, ax=None):
    """Excited population on a log axis with the golden-rule exponential beside it."""
    if ax is None:
        fig, ax = plt.subplots(figsize=(6, 4), constrained_layout=True)
        stamp(fig)
    t = output_times(result)
    ax.semilogy(t, np.clip(result.excited, 1e-300, None), color=METHOD_COLOURS.get(result.method),
                label=f"{result.method} (simulated)")
    rate = result.summary.get("rate_golden_rule")  # natural units in memory
    if rate and result.scenario.packet.internal == "excited":
        units = result.scenario.units
        shown = f"{rate:.4g}" if units is None else (
            f"{float(units.to_output('rate_golden_rule', rate)):.4g} "
            f"{units.column_unit('rate_golden_rule')}")
        ax.semilogy(t, np.exp(-rate * result.times), "k--", lw=1,
                    label=fr"golden rule $e^{{-\Gamma t}}$, $\Gamma$ = {shown}")
    floor = max(1e-6, float(np.nanmin(result.excited[result.excited > 0])) / 2) if np.any(
        result.excited > 0) else 1e-6
    ax.set_ylim(floor, 1.2)
    ax.set_xlabel(time_label(result))
    ax.set_ylabel("excited population $P_e(t)$")
    ax.set_title(result.scenario.title, fontsize=10)
    ax.legend(fontsize=8)
    return ax


def _momenta(result, values):
    units = result.scenario.units
    return units.to_output("p", values) if units else values


def momentum_label(result) -> str:
    units = result.scenario.units
    return f"p along packet axis [{units.column_unit('p')}]" if units else "p along packet axis"


def draw_momentum(result, ax):
    """Packet momentum density at t = 0 and the ground-state density at the last snapshot."""
    p = _momenta(result, result.momentum_grid)
    scale = result.momentum_grid[1] - result.momentum_grid[0]
    scale /= (p[1] - p[0]) if len(p) > 1 and p[1] != p[0] else 1.0
    ax.fill_between(p, result.initial_density * scale, color="0.8", label="packet, t = 0")
    last = result.snapshot_times[-1]
    ax.plot(p, result.momentum_density[:, -1] * scale, color="tab:red",
            label=f"ground state, t = {float(_times_value(result, last)):.3g}")
    ax.set_xlabel(momentum_label(result))
    ax.set_ylabel("momentum density")
    ax.set_title("recoil broadening (simulated)", fontsize=10)
    ax.legend(fontsize=8)


def _times_value(result, t):
    units = result.scenario.units
    return units.to_output("t", np.array([t]))[0] if units else t


def draw_variance(result, ax):
    """Momentum variance (and position variance where computed) against time."""
    t = output_times(result)
    units = result.scenario.units
    p_var = units.to_output("p_var", result.p_var) if units else result.p_var
    ax.plot(t, p_var, color="tab:blue", label="momentum variance")
    ax.set_xlabel(time_label(result))
    ax.set_ylabel("Var p" + (f" [{units.column_unit('p_var')}]" if units else ""))
    if np.any(np.isfinite(result.x_var)):
        twin = ax.twinx()
        x_var = units.to_output("x_var", result.x_var) if units else result.x_var
        twin.plot(t, x_var, color="tab:green", label="position variance")
        twin.set_ylabel("Var x" + (f" [{units.column_unit('x_var')}]" if units else ""),
                        color="tab:green")
    ax.set_title("packet spreading (simulated)", fontsize=10)
    ax.legend(fontsize=8, loc="upper left")


def result_figures(result, folder: str | Path) -> list[str]:
    """decay.png, momentum.png and variance.png for one run; returns the file names."""
    folder = Path(folder)
    names = []
    for name, draw in (("decay.png", lambda ax: draw_decay(result, ax)),
                       ("momentum.png", lambda ax: draw_momentum(result, ax)),
                       ("variance.png", lambda ax: draw_variance(result, ax))):
        fig, ax = plt.subplots(figsize=(6, 4), constrained_layout=True)
        draw(ax)
        stamp(fig)
        atomic_save_figure(fig, folder / name, dpi=130)
        plt.close(fig)
        names.append(name)
    if "counter_rotating" in result.tables:
        from .solvers.fock import counter_rotating_figure

        fig = counter_rotating_figure(result)
        atomic_save_figure(fig, folder / "counter_rotating.png", dpi=130)
        plt.close(fig)
        names.append("counter_rotating.png")
    if "emissions" in result.tables:
        from .trajectories import trajectories_figure

        trajectories_figure(result, folder / "trajectories.png")
        names.append("trajectories.png")
    return names


def rates_figure(scenario, path: str | Path) -> None:
    """Template functions of all three models with the packet shaded, and packet-averaged rates
    against packet width from 0.1 to 100 Compton wavelengths 1/M_g."""
    from dataclasses import replace

    from .field import packet_for
    from .models import MODELS
    from .rates import packet_rate, template_rate

    mass = scenario.detector.ground_mass
    packet = packet_for(scenario)
    fig, (left, right) = plt.subplots(1, 2, figsize=(11, 4.2), constrained_layout=True)
    centre, spread = scenario.mean_momentum, packet.momentum_std
    hi = abs(centre) + max(5 * spread, 1.5 * mass)
    p = np.linspace(0.0 if scenario.dimensions == 3 else -hi, hi, 121)
    for name in MODELS:
        left.plot(p / mass, template_rate(scenario, np.abs(p), name), color=MODEL_COLOURS[name],
                  label=name)
    density = (packet.density_1d(p) if scenario.dimensions == 1 else packet.magnitude_density(p))
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
    atomic_save_figure(fig, path, dpi=130)
    plt.close(fig)
