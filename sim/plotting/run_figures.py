"""The figures of one run: decay curve, recoil broadening, recoil map, packet spreading, purity
and spatial coherence.

Each `draw_*` draws into given axes (a new stamped figure when None) and returns them; the
figure registry (`sim.plotting.FIGURES`) turns them into decay.png, momentum.png,
recoil_map.png, variance.png and coherence.png.
"""

from __future__ import annotations

import numpy as np

from ..physics.coherence import static_kick_visibility
from ..physics.golden_rule import rest_emitted_momentum
from ..physics.models import EXCITED, level_of
from .style import (
    LEGEND_SIZE,
    REFERENCE_STYLE,
    add_note,
    truncation_converged,
    coincidence_lines,
    in_output_units,
    labelled,
    method_label,
    method_style,
    new_axes,
    new_figure,
    output_times,
    quantity_text,
    stamp_for,
    time_label,
    unit_of,
)

#: the excited population is drawn down to this floor at least (log axis)
POPULATION_FLOOR = 1e-6
#: the recoil map shows momenta where the density exceeds this fraction of its peak
MAP_THRESHOLD = 1e-3
#: colour map of densities: perceptually uniform and readable with colour-vision deficiencies
#: (matplotlib's "cividis"; common practice)
DENSITY_COLOURS = "cividis"
#: colours of the packet-spreading curves (Okabe-Ito blue and vermillion) and of purity
VARIANCE_COLOURS = ("#0072B2", "#D55E00", "#009E73")


def golden_rule_curve(result):
    """The golden-rule exponential exp(-Gamma t) of an excited start, or None.

    Parameters
    ----------
    result : Result

    Returns
    -------
    ndarray or None
        exp(-Gamma t) on the sample times (Gamma = summary rate_golden_rule, natural units);
        None for a ground-state start or a zero rate.
    """
    rate = result.summary.get("rate_golden_rule")
    if not rate or level_of(result.scenario.packet.internal) != EXCITED:
        return None
    return np.exp(-rate * result.times)


def draw_decay(result, ax=None):
    """Excited population P_e(t) on a log axis with the golden-rule exponential exp(-Gamma t).

    When the two lie on top of each other a note gives their largest difference; a truncated
    bath is drawn dashed and named in the legend (`method_label`).

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
    """
    scenario = result.scenario
    ax = new_axes(ax, scenario)
    t = output_times(result)
    converged = truncation_converged(result)
    ax.semilogy(t, np.clip(result.excited, 1e-300, None), label=method_label(result.method, result),
                **method_style(result.method, converged))
    golden = golden_rule_curve(result)
    if golden is not None:
        gamma = quantity_text(result.summary["rate_golden_rule"], scenario, "rate", 4)
        ax.semilogy(t, golden, label=fr"golden rule $e^{{-\Gamma t}}$, $\Gamma$ = {gamma}",
                    **REFERENCE_STYLE)
    positive = result.excited[result.excited > 0]
    floor = max(POPULATION_FLOOR, float(np.nanmin(positive)) / 2) if positive.size else (
        POPULATION_FLOOR)
    ax.set_ylim(floor, 1.3)
    if golden is not None:
        gap = float(np.max(np.abs(result.excited - golden)))
        add_note(ax, coincidence_lines({result.method: result.excited, "golden rule": golden}, ax)
                 or [f"{result.method} − golden rule: largest |difference| {gap:.2g}"])
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel("excited population $P_e$")
    ax.set_title(scenario.title, fontsize=10)
    ax.legend(fontsize=LEGEND_SIZE, loc="upper right")
    return ax


def snapshot_label(result, j: int) -> str:
    """Legend text of snapshot j: "t = 450 $\\hbar/E$" (output units).

    Parameters
    ----------
    result : Result
    j : int
        Index into `result.snapshot_times`.

    Returns
    -------
    str
    """
    return "t = " + quantity_text(result.snapshot_times[j], result.scenario, "t")


def axis_name(result) -> str:
    """What the momentum axis of a run's densities is: p (1D) or its packet-axis component (3D).

    Parameters
    ----------
    result : Result

    Returns
    -------
    str
        Mathtext.
    """
    if result.scenario.dimensions == 1:
        return "momentum $p$"
    return r"momentum along the packet axis $p_\parallel$"


def draw_momentum(result, ax=None):
    """Packet momentum density at t = 0 and the ground-state density at the last snapshot.

    In 3D both are the projections on the packet axis.

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
    """
    scenario = result.scenario
    ax = new_axes(ax, scenario)
    p = in_output_units(scenario, "p", result.momentum_grid)
    ax.fill_between(p, in_output_units(scenario, "density", result.initial_density),
                    color="0.82", label="packet at t = 0")
    last = len(result.snapshot_times) - 1
    final = in_output_units(scenario, "density", result.momentum_density[:, last])
    ax.plot(p, final, label="ground state, " + snapshot_label(result, last),
            **method_style(result.method, truncation_converged(result)))
    shown = np.column_stack([result.initial_density, result.momentum_density[:, last]])
    ax.set_xlim(*momentum_window(p, np.nan_to_num(shown)))
    ax.set_xlabel(labelled(axis_name(result), scenario, "p"))
    ax.set_ylabel(labelled("momentum density", scenario, "density"))
    ax.set_title("recoil broadening (simulated)", fontsize=10)
    ax.legend(fontsize=LEGEND_SIZE)
    return ax


def has_snapshots(result) -> bool:
    """Whether a run has ground-state momentum densities to map.

    Parameters
    ----------
    result : Result

    Returns
    -------
    bool
        At least one snapshot and one finite density value.
    """
    d = np.asarray(result.momentum_density, dtype=float)
    return d.ndim == 2 and d.size > 0 and bool(np.isfinite(d).any())


def momentum_window(p, density, threshold: float = MAP_THRESHOLD) -> tuple[float, float]:
    """The momentum range where a density (over p and time) exceeds `threshold` of its peak.

    Parameters
    ----------
    p : ndarray
        Momentum grid (any unit).
    density : ndarray, shape (len(p), snapshots)
    threshold : float
        Fraction of the peak.

    Returns
    -------
    (float, float)
        That range widened by 5% of its length on each side, within the grid; the whole grid
        when nothing exceeds the threshold.
    """
    peak = np.nanmax(density, axis=1) if density.size else np.zeros_like(p)
    inside = np.flatnonzero(peak > threshold * np.nanmax(peak)) if np.nanmax(peak) > 0 else []
    if len(inside) == 0:
        return float(p[0]), float(p[-1])
    lo, hi = float(p[inside[0]]), float(p[inside[-1]])
    pad = 0.05 * (hi - lo) or 0.05 * (p[-1] - p[0])
    return max(lo - pad, float(p[0])), min(hi + pad, float(p[-1]))


def cell_edges(t):
    """Edges of map cells centred on given points: the midpoints, and the ends mirrored.

    Parameters
    ----------
    t : ndarray
        Increasing points (snapshot times or momenta; at least one).

    Returns
    -------
    ndarray
        len(t) + 1 edges; a single point spans t +- max(|t|, 1) / 2.
    """
    t = np.asarray(t, dtype=float)
    if len(t) == 1:
        half = max(abs(t[0]), 1.0) / 2
        return np.array([t[0] - half, t[0] + half])
    mid = 0.5 * (t[1:] + t[:-1])
    return np.r_[2 * t[0] - mid[0], mid, 2 * t[-1] - mid[-1]]


def draw_recoil_map(result, ax=None):
    """Ground-state momentum density over time and momentum (the packet-axis projection in 3D).

    Each snapshot of the run is one column of the map (drawn to the midpoints between
    snapshots: no values are interpolated; the map spans the run's first to last snapshot);
    the packet's mean momentum at t = 0 is marked.

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
    """
    scenario = result.scenario
    ax = new_axes(ax, scenario)
    p = in_output_units(scenario, "p", result.momentum_grid)
    t = in_output_units(scenario, "t", result.snapshot_times)
    density = in_output_units(scenario, "density", result.momentum_density)
    mesh = ax.pcolormesh(cell_edges(t), cell_edges(p), density, shading="flat",
                         cmap=DENSITY_COLOURS, vmin=0.0, rasterized=True)
    bar = ax.figure.colorbar(mesh, ax=ax, pad=0.02)
    bar.set_label(labelled("ground-state density", scenario, "density"))
    p0 = float(in_output_units(scenario, "p", scenario.mean_momentum))
    ax.axhline(p0, color="white", lw=1.0, ls=(0, (4, 3)),
               label=f"packet centre at t = 0: {p0:.3g} {unit_of(scenario, 'p')}")
    ax.set_ylim(*momentum_window(p, np.nan_to_num(density)))
    if len(t) > 1:
        ax.set_xlim(t[0], t[-1])  # the run's span: the end columns show half their cells
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel(labelled(axis_name(result), scenario, "p"))
    ax.set_title(f"recoil map, {result.method}: {len(t)} snapshots (simulated)", fontsize=10)
    legend = ax.legend(fontsize=LEGEND_SIZE, loc="upper left", facecolor="0.2", labelcolor="white",
                       framealpha=0.7)
    legend.get_frame().set_edgecolor("0.5")
    return ax


def draw_variance(result, ax=None):
    """Momentum variance against time, and the position variance on its own axis where computed.

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
        The momentum-variance axes (a twin holds Var x); one legend lists both curves; a note
        names what the method does not compute (Var x, purity).
    """
    scenario = result.scenario
    ax = new_axes(ax, scenario)
    t = output_times(result)
    both = bool(np.any(np.isfinite(result.x_var)))
    lines = ax.plot(t, in_output_units(scenario, "p_var", result.p_var), color=VARIANCE_COLOURS[0],
                    lw=2, label=r"$\mathrm{Var}\,p$" + (" (left axis)" if both else ""))
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel(labelled(r"momentum variance $\mathrm{Var}\,p$", scenario, "p_var"),
                  color=VARIANCE_COLOURS[0])
    missing = [name for name, values in (("Var x", result.x_var), ("the purity", result.purity))
               if not np.any(np.isfinite(values))]
    if missing:
        add_note(ax, [missing_note(result, missing)], loc="lower right")
    if both:
        twin = ax.twinx()
        known = np.isfinite(result.x_var)  # x_var may be held at a subset of the times
        axial = result.x_var_transverse is not None
        lines += twin.plot(t[known], in_output_units(scenario, "x_var", result.x_var[known]),
                           ls="--", color=VARIANCE_COLOURS[1], lw=2,
                           label=r"$\mathrm{Var}\,x$" + (" along the axis" if axial else "")
                           + " (right axis)")
        if axial:
            lines += twin.plot(t[known], in_output_units(scenario, "x_var_transverse",
                                                         result.x_var_transverse[known]),
                               ls=":", marker="s", markevery=max(1, known.sum() // 12), ms=4,
                               color=VARIANCE_COLOURS[1], lw=2,
                               label=r"$\mathrm{Var}\,x_\perp$ across it (right axis)")
        twin.set_ylabel(labelled(r"position variance $\mathrm{Var}\,x$", scenario, "x_var"),
                        color=VARIANCE_COLOURS[1])
    ax.set_title("packet spreading (simulated)", fontsize=10)
    ax.legend(lines, [line.get_label() for line in lines], fontsize=LEGEND_SIZE, loc="upper left")
    return ax


def missing_note(result, names: list[str]) -> str:
    """The note for quantities a run does not give: withheld (with the warning that says why)
    or not computed by its method.

    Parameters
    ----------
    result : Result
    names : list of str
        What is missing ("Var x", "the purity").

    Returns
    -------
    str
    """
    key = {"Var x": "x_var", "the purity": "purity"}
    withheld = [name for name in names
                if any(w.startswith(f"{key[name]}: withheld") for w in result.warnings)]
    others = [name for name in names if name not in withheld]
    parts = ([f"{' and '.join(withheld)} withheld (see the summary's warnings)"] if withheld else []) + (
        [f"{result.method} does not compute {' or '.join(others)}"] if others else [])
    return "; ".join(parts) + " for this run"


def has_purity(result) -> bool:
    """Whether the run computed the purity of its reduced centre-of-mass state.

    Parameters
    ----------
    result : Result

    Returns
    -------
    bool
    """
    return bool(np.any(np.isfinite(result.purity)))


def draw_purity(result, ax=None):
    """Purity Tr rho_COM^2 of the reduced centre-of-mass state against time.

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
        With a note when the method does not compute the purity.
    """
    scenario = result.scenario
    ax = new_axes(ax, scenario)
    if has_purity(result):
        known = np.isfinite(result.purity)  # held at a subset of the times
        ax.plot(output_times(result)[known], result.purity[known], color=VARIANCE_COLOURS[2],
                lw=2, label=r"purity $\mathrm{Tr}\,\rho_{\mathrm{COM}}^2$ (simulated)")
        ax.legend(fontsize=LEGEND_SIZE)
    else:
        add_note(ax, [missing_note(result, ["the purity"])], loc="center")
    ax.set_ylim(0.0, 1.05)
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel(r"purity $\mathrm{Tr}\,\rho_{\mathrm{COM}}^2$")
    return ax


def variance_figure(result):
    """variance.png: packet spreading, and below it the purity where the method computes it.

    Parameters
    ----------
    result : Result

    Returns
    -------
    matplotlib Figure
        Stamped simulated.
    """
    if not has_purity(result):
        return draw_variance(result).figure
    fig, (top, bottom) = new_figure(2, 1, figsize=(6.4, 6.0), sharex=True, height_ratios=(3, 2))
    draw_variance(result, top)
    top.set_xlabel("")
    draw_purity(result, bottom)
    bottom.set_title("coherence of the centre of mass (simulated)", fontsize=10)
    stamp_for(fig, result.scenario)
    return fig


def has_coherence(result) -> bool:
    """Whether the run reports the spatial coherence at some time.

    Parameters
    ----------
    result : Result

    Returns
    -------
    bool
    """
    return result.coherence is not None and bool(np.any(np.isfinite(result.coherence)))


def static_limit(result) -> float | None:
    """The coherence left after one emission by a static detector, or None where it does not apply.

    |cos(k* d)| in 1D, |sin(k* d) / (k* d)| in 3D (`static_kick_visibility`) with k* the
    momentum emitted at rest (`rest_emitted_momentum`); only for an excited start in the vacuum.

    Parameters
    ----------
    result : Result

    Returns
    -------
    float or None
        The visibility (dimensionless).
    """
    scenario = result.scenario
    k = rest_emitted_momentum(scenario)
    if (k is None or scenario.field.temperature > 0
            or level_of(scenario.packet.internal) != EXCITED):
        return None
    return float(static_kick_visibility(k, result.summary["coherence_at"], scenario.dimensions))


def draw_coherence(result, ax=None):
    """Spatial coherence |Tr(rho_COM(t) e^{iPd})| / |Tr(rho_COM(0) e^{iPd})| against time.

    With the static-limit value after one emission (`static_limit`) as a reference line.

    Parameters
    ----------
    result : Result
    ax : matplotlib Axes, optional
        Axes to draw into; a new stamped figure when None.

    Returns
    -------
    matplotlib Axes
    """
    scenario = result.scenario
    ax = new_axes(ax, scenario)
    t = output_times(result)
    known = np.isfinite(result.coherence)
    distance = quantity_text(result.summary["coherence_at"], scenario, "length")
    ax.plot(t[known], result.coherence[known], color=VARIANCE_COLOURS[0], lw=2,
            label=method_label(result.method, result))
    limit = static_limit(result)
    if limit is not None:
        formula = r"$|\cos k^*d|$" if scenario.dimensions == 1 else r"$|\sin k^*d\,/\,k^*d|$"
        ax.axhline(limit, **REFERENCE_STYLE,
                   label=f"static detector after one emission, {formula} = {limit:.3g}")
    ax.set_ylim(0.0, 1.08)
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel(r"coherence $|\mathrm{Tr}\,\rho_{\mathrm{COM}}\,e^{iPd}|$ (relative to t = 0)")
    ax.set_title(f"spatial coherence at d = {distance} (simulated)", fontsize=10)
    ax.legend(fontsize=LEGEND_SIZE, loc="upper right")
    return ax
