"""`recoilsim rates`: the golden-rule template function and packet-averaged rate of a scenario."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..config.registry import FIGURE_DPI
from ..physics.golden_rule import packet_rate, rest_rate, template_grid, template_rate


def rates_report(scenario, at: np.ndarray | None) -> dict:
    """The rates contract: packet-averaged rate, rest rate, template function.

    Parameters
    ----------
    scenario : Scenario
        A loaded scenario.
    at : ndarray, optional
        Momenta along the packet axis (output units with a scenario in physical units, natural
        units otherwise); default: a grid covering the packet (`template_grid`).

    Returns
    -------
    dict
        {"rate", "rest_rate", "template": {"p", "rate"}} in inverse time units (the output
        units listed under "units" with a scenario in physical units).
    """
    units = scenario.units
    rate_out = (lambda r: float(units.to_output("rate_golden_rule", r))) if units else float
    p_out = (lambda p: units.to_output("p", p)) if units else np.asarray
    if at is not None and units:
        at = at / float(units.to_output("p", 1.0))
    p = at if at is not None else template_grid(scenario)
    rates = np.atleast_1d(template_rate(scenario, np.abs(p)))
    report = {"rate": rate_out(packet_rate(scenario)), "rest_rate": rate_out(rest_rate(scenario)),
              "template": {"p": [float(x) for x in np.atleast_1d(p_out(p))],
                           "rate": [rate_out(x) for x in rates]}}
    if units:
        report["units"] = {"rate": units.column_unit("rate_golden_rule"),
                           "rest_rate": units.column_unit("rate_golden_rule"),
                           "p": units.column_unit("p")}
    return report


def write_rates_figure(scenario, path: str | Path, fmt: str | None = None,
                       dpi: float = FIGURE_DPI) -> Path:
    """rates.png of the scenario (`sim.plotting.rates_figure`), written atomically.

    Parameters
    ----------
    scenario : Scenario
        A loaded scenario.
    path : str or Path
        The file to write (replaced if it exists).
    fmt : str, optional
        "png", "pdf" or "svg"; default: from the suffix of `path` (png without one).
    dpi : float
        Dots per inch.

    Returns
    -------
    Path
        The file written (its suffix set by `fmt`).
    """
    from ..plotting import rates_figure, save  # only when drawing: `rates` stays quick

    return save(rates_figure(scenario), path, fmt, dpi)
