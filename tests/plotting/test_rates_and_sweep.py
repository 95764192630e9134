"""rates.png in the scenario's output units over ranges that hold its packet, and the sweep
figure: a column against the first swept key, one line per value of the second."""

from __future__ import annotations

import math

import numpy as np
import pytest
from matplotlib.text import Text
from scipy import constants as const

from sim.errors import UsageError
from sim.plotting import rates_figure, sweep_figure
from sim.plotting import rates as rates_module


@pytest.fixture(autouse=True)
def fewer_points(monkeypatch):
    """Coarser grids than the figure's own (the ranges, which are tested, stay the same)."""
    monkeypatch.setattr(rates_module, "MOMENTUM_POINTS", 31)
    monkeypatch.setattr(rates_module, "WIDTH_POINTS", 9)


def test_lab_rates_figure_is_in_output_units_around_the_packet(lab_scenario):
    """A 60 nm packet at rest: sigma_p = hbar c / (2 * 60 nm) = 1.64 eV/c (scipy.constants,
    CODATA), rates in 1/ns, widths in nm with 60 nm marked inside the width axis."""
    fig = rates_figure(lab_scenario)
    left, right = fig.axes[:2]  # the subplots; twins and secondary axes come after
    sigma = const.hbar * const.c / (2 * 60e-9) / const.e  # eV/c
    assert r"\mathrm{eV}/c" in left.get_xlabel() and r"\mathrm{ns}^{-1}" in left.get_ylabel()
    lo, hi = left.get_xlim()
    assert lo <= -4 * sigma and hi >= 4 * sigma and hi <= 10 * sigma
    assert r"\mathrm{nm}" in right.get_xlabel() and r"\mathrm{ns}^{-1}" in right.get_ylabel()
    marker = [line for line in right.get_lines() if "this packet" in line.get_label()][0]
    assert marker.get_xdata()[0] == pytest.approx(60.0)
    w_lo, w_hi = right.get_xlim()
    assert w_lo < 60.0 < w_hi and w_lo <= 1.0 and w_hi >= 3600.0
    rates = [line.get_ydata() for line in left.get_lines()]
    assert np.allclose(np.concatenate(rates), 1 / 30.0, rtol=1e-6)  # 1 / (30 ns lifetime)
    notes = "\n".join(t.get_text() for t in fig.findobj(Text))
    assert "coincide" in notes  # the three models agree at 1e-10 c: said, not hidden


def test_natural_rates_figure_covers_packet_and_rest(results):
    """p0 = 0.3, width 20: sigma_p = 1 / 40; the momentum axis holds p = 0 and p0 +- 4 sigma_p."""
    fig = rates_figure(results["exact-1d"].scenario)
    lo, hi = fig.axes[0].get_xlim()
    assert lo <= 0.0 and hi >= 0.3 + 4 / 40
    assert r"\hbar" in fig.axes[0].get_ylabel()  # E / hbar, natural units


def test_sweep_figure_draws_one_line_per_second_key_value(lab_scenario):
    table = {"packet.width": ["50 nm", "100 nm", "0.2 um"] * 2,
             "detector.model": ["galilean"] * 3 + ["one-particle"] * 3,
             "rate_golden_rule": [0.05, 0.04, 0.035, 0.045, 0.04, 0.035],
             "rate_fitted": [0.049, 0.039, 0.034, 0.044, "nan", 0.034],
             "status": ["ok"] * 4 + ["failed: ScenarioError: x"] + ["ok"]}
    fig = sweep_figure(table, "rate_fitted", lab_scenario.units, reference="rate_golden_rule")
    ax = fig.axes[0]
    lines = {line.get_label(): line for line in ax.get_lines()}
    assert {"galilean", "one-particle"} <= set(lines)
    assert list(lines["galilean"].get_xdata()) == pytest.approx([50, 100, 200])  # 0.2 um = 200 nm
    assert list(lines["one-particle"].get_xdata()) == pytest.approx([50, 200])  # failed point out
    assert r"\mathrm{nm}" in ax.get_xlabel() and r"\mathrm{ns}^{-1}" in ax.get_ylabel()
    legend = "\n".join(t.get_text() for t in ax.get_legend().get_texts())
    assert "1 point without a value left out" in legend
    assert ax.get_legend().get_title().get_text() == "detector.model"


def test_sweep_figure_reads_sweep_csv_and_uses_a_log_axis(tmp_path):
    path = tmp_path / "sweep.csv"
    widths = np.geomspace(2, 50, 4)
    path.write_text("packet.width,rate_golden_rule,rate_fitted,status\n" + "".join(
        f"{w},{0.0044 + 0.001 / w},{0.0043 + 0.001 / w},ok\n" for w in widths))
    fig = sweep_figure(path, "rate_golden_rule")
    ax = fig.axes[0]
    assert ax.get_xscale() == "log"
    assert ax.get_lines()[0].get_xdata() == pytest.approx(widths)
    assert r"\hbar c/E" in ax.get_xlabel()  # a length in natural units


def test_sweep_figure_refuses_an_unknown_column():
    table = {"packet.width": [1.0, 2.0], "rate_fitted": [0.1, 0.2], "status": ["ok", "ok"]}
    with pytest.raises(UsageError, match="rate_fited.*allowed: rate_fitted"):
        sweep_figure(table, "rate_fited")


def test_sweep_figure_draws_named_values_as_categories():
    table = {"detector.model": ["galilean", "newton-wigner", "one-particle"],
             "rate_fitted": [0.1, 0.2, math.nan], "status": ["ok", "ok", "failed: x"]}
    ax = sweep_figure(table, "rate_fitted").axes[0]
    assert [t.get_text() for t in ax.get_xticklabels()] == ["galilean", "newton-wigner",
                                                           "one-particle"]
