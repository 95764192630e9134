"""What every figure shares: the "simulated" stamp, colours from the registries, unit labels,
and saving through an atomic rename.

matplotlib is imported only when a figure is drawn (`pyplot()`), and its backend is never
switched here: a notebook keeps its own; the command line chooses a file backend.
"""

from __future__ import annotations

from itertools import cycle
from pathlib import Path

import numpy as np

from ..config.registry import METHOD_NAMES, MODEL_NAMES
from ..io.atomic import atomic_save_figure

STAMP = "simulated (recoilsim)"
#: colours follow the registries' order (a new method or model gets the next colour)
METHOD_COLOURS = dict(zip(METHOD_NAMES, cycle(("tab:gray", "tab:purple", "tab:blue", "tab:red",
                                               "tab:brown", "tab:olive"))))
MODEL_COLOURS = dict(zip(MODEL_NAMES, cycle(("tab:orange", "tab:blue", "tab:green", "tab:pink"))))
#: resolution of saved figures (dots per inch)
DPI = 130


def pyplot():
    """matplotlib.pyplot, imported on first use.

    Returns
    -------
    module
    """
    import matplotlib.pyplot as plt

    return plt


def stamp(fig) -> None:
    """Mark a figure as simulated (top-right corner text).

    Parameters
    ----------
    fig : matplotlib Figure
    """
    fig.text(0.995, 0.995, STAMP, ha="right", va="top", fontsize=8, color="0.4", style="italic")


def save(fig, path: str | Path) -> None:
    """Save a figure atomically at DPI and close it.

    Parameters
    ----------
    fig : matplotlib Figure
    path : str or Path
    """
    atomic_save_figure(fig, path, dpi=DPI)
    pyplot().close(fig)


def new_axes(ax=None, figsize=(6, 4)):
    """`ax`, or the axes of a new stamped figure when None.

    Parameters
    ----------
    ax : matplotlib Axes, optional
    figsize : (float, float)
        Inches, for a new figure.

    Returns
    -------
    matplotlib Axes
    """
    if ax is None:
        fig, ax = pyplot().subplots(figsize=figsize, constrained_layout=True)
        stamp(fig)
    return ax


def in_output_units(scenario, column: str, values):
    """Natural-unit values of an output column in the scenario's output units.

    Parameters
    ----------
    scenario : Scenario
    column : str
        An output column name (e.g. "t", "p", "p_var", "rate_golden_rule").
    values : float or ndarray
        In natural units.

    Returns
    -------
    ndarray
        In output units (unchanged for a scenario without units).
    """
    units = scenario.units
    return units.to_output(column, values) if units else np.asarray(values)


def unit_suffix(scenario, column: str, natural: str = "") -> str:
    """' [unit]' of an output column for axis labels.

    Parameters
    ----------
    scenario : Scenario
    column : str
    natural : str
        What to show for a scenario without units ('' for nothing).

    Returns
    -------
    str
    """
    units = scenario.units
    if units:
        return f" [{units.column_unit(column)}]"
    return f" [{natural}]" if natural else ""


def time_label(scenario) -> str:
    """Axis label of times, with their unit.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    str
    """
    return "t" + unit_suffix(scenario, "t", "1/energy unit")


def output_times(result):
    """The run's sample times in output units.

    Parameters
    ----------
    result : Result

    Returns
    -------
    ndarray
    """
    return in_output_units(result.scenario, "t", result.times)
