"""compare.png: every method's excited population on one scenario, and per method its
difference from exact; compare_coherence.png: every method's spatial coherence, where the
scenario asks for it.

Curves lying on top of each other keep distinct dashes and markers and are named in a note; a
method whose bath is truncated and not judged converged (`style.truncation_converged`) is drawn
dashed and labelled with the modes it kept; a method that did not run is named with the reason.
"""

from __future__ import annotations

import textwrap

import numpy as np

from .run_figures import static_limit
from .style import (
    LEGEND_SIZE,
    NOT_CONVERGED,
    add_note,
    truncation_converged,
    coincidence_lines,
    in_output_units,
    method_label,
    method_style,
    new_figure,
    stamp_for,
    time_label,
)

#: the method the others are measured against
REFERENCE = "exact"
#: the excited population is drawn down to this floor at least (log axis)
POPULATION_FLOOR = 1e-8
#: a left-out method's reason is wrapped at this many characters, and cut after two lines
NOTE_WIDTH = 70


def left_out_lines(left_out: dict) -> list[str]:
    """Note lines naming each method that gave no curve, with its reason.

    Parameters
    ----------
    left_out : dict
        Method -> reason (one line).

    Returns
    -------
    list of str
        "method left out: reason", wrapped at NOTE_WIDTH characters, at most two lines each.
    """
    lines = []
    for method, reason in left_out.items():
        lines += textwrap.wrap(f"{method} left out: {reason}", NOTE_WIDTH, max_lines=2)
    return lines


def _residual_panel(ax, t, method: str, difference, style: dict) -> None:
    """One method's P_e - P_e(reference) over time, with its largest size in the panel: the
    method's colour, solid unless it is not converged, no markers (the panel names it)."""
    solid = {"color": style["color"], "lw": 1.6}
    ax.plot(t, difference, ls=NOT_CONVERGED if style["ls"] == NOT_CONVERGED else "-", **solid)
    ax.axhline(0.0, color="0.6", lw=0.8)
    largest = float(np.nanmax(np.abs(difference))) if np.isfinite(difference).any() else 0.0
    ax.set_title(f"{method} − {REFERENCE}:  largest |difference| {largest:.2g}", loc="left",
                 fontsize=LEGEND_SIZE, pad=3)
    ax.set_ylabel(r"$\Delta P_e$")
    ax.margins(y=0.15)


def compare_figure(scenario, times, curves: dict, reference: str = REFERENCE, *,
                   results: dict | None = None, left_out: dict | None = None):
    """Every method's excited population and, below, one panel per method of its difference
    from the reference, P_e(t) - P_e^ref(t).

    Parameters
    ----------
    scenario : Scenario
        For the title and the output units.
    times : ndarray
        Common sample times (time units, natural).
    curves : dict
        Method -> P_e on `times` (dimensionless).
    reference : str
        The method the others are measured against (no difference panels without it).
    results : dict, optional
        Method -> its Result: a truncated method not judged converged (`truncation_converged`) is drawn
        dashed and labelled "truncated: K of N modes".
    left_out : dict, optional
        Method -> reason, for methods that gave no curve (skipped or failed): named in a note.

    Returns
    -------
    matplotlib Figure
        Top: P_e(t) on a log axis; below: one difference panel per method; stamped simulated.
    """
    results, left_out = results or {}, left_out or {}
    t = in_output_units(scenario, "t", times)
    baseline = curves.get(reference)
    others = [m for m in curves if m != reference] if baseline is not None else []
    fig, axes = new_figure(1 + len(others), 1, figsize=(6.4, 4.2 + 1.25 * len(others)),
                           sharex=True, height_ratios=(3.2,) + (1,) * len(others), squeeze=False)
    top, panels = axes[0, 0], axes[1:, 0]
    styles = {m: method_style(m, m not in results or truncation_converged(results[m]))
              for m in curves}
    for method, values in curves.items():
        top.semilogy(t, np.clip(values, 1e-300, None),
                     label=method_label(method, results.get(method)), **styles[method])
    positive = [v[v > 0] for v in curves.values() if np.any(v > 0)]
    floor = max(POPULATION_FLOOR, min(float(v.min()) for v in positive) / 2) if positive else (
        POPULATION_FLOOR)
    top.set_ylim(floor, 1.3)
    top.set_ylabel("excited population $P_e$")
    top.set_title(scenario.title, fontsize=10)
    top.legend(fontsize=LEGEND_SIZE, loc="upper right")
    notes = coincidence_lines(curves, top) + left_out_lines(left_out)
    if baseline is None:
        notes.append(f"no {reference} run: differences not drawn")
    add_note(top, notes)
    for ax, method in zip(panels, others):
        _residual_panel(ax, t, method, curves[method] - baseline, styles[method])
    (panels[-1] if len(panels) else top).set_xlabel(time_label(scenario))
    stamp_for(fig, scenario)
    return fig


def coherence_compare_figure(scenario, results: dict, left_out: dict | None = None):
    """compare_coherence.png: the spatial coherence of every method that reports it.

    coherence(t) = |Tr(rho_COM(t) e^{iPd})| / |Tr(rho_COM(0) e^{iPd})| at the scenario's d, one
    curve per method in its own style (dashed where its truncation is not judged converged), the
    static-detector value after one emission as a reference where it applies, and a note naming
    the methods without a curve.

    Parameters
    ----------
    scenario : Scenario
    results : dict
        Method -> its Result (those with a coherence are drawn).
    left_out : dict, optional
        Method -> why it gave no result.

    Returns
    -------
    matplotlib Figure
        Stamped simulated.
    """
    fig, ax = new_figure()
    drawn = {m: r for m, r in results.items() if r.coherence is not None}
    for index, (method, result) in enumerate(drawn.items()):
        known = np.isfinite(result.coherence)
        style = method_style(method, truncation_converged(result))
        ax.plot(in_output_units(scenario, "t", result.times[known]), result.coherence[known],
                label=method_label(method, result), **style)
    first = next(iter(drawn.values()), None)
    limit = static_limit(first) if first is not None else None
    if limit is not None:
        ax.axhline(limit, color="0.35", lw=1.2, ls=":", label="static detector after one "
                   f"emission: {limit:.3g}")
    missing = {m: "no coherence computed" for m in results if m not in drawn}
    lines = left_out_lines({**(left_out or {}), **missing})
    if lines:
        add_note(ax, lines, loc="center right")
    ax.set_ylim(0.0, 1.08)
    ax.set_xlabel(time_label(scenario))
    ax.set_ylabel(r"coherence $|\mathrm{Tr}\,\rho_{\mathrm{COM}}\,e^{iPd}|$ (relative to t = 0)")
    ax.set_title("spatial coherence, every method (simulated)", fontsize=10)
    ax.legend(fontsize=LEGEND_SIZE, loc="upper right")
    stamp_for(fig, scenario)
    return fig
