"""The figures of one run (the FIGURES registry): every one builds for 1D and 3D runs, carries
units in mathtext, keeps its "simulated" stamp inside the saved canvas, and draws what the
run computed (Var x on its own axis, the purity, the recoil map)."""

from __future__ import annotations

import re

import numpy as np
import pytest
from matplotlib.collections import QuadMesh
from matplotlib.text import Text

from sim.plotting import FIGURES, STAMP, result_figures

#: what the labels of dimensionless axes say; every other axis label must carry a unit
DIMENSIONLESS = ("population", "purity", r"\Delta P_e", "counts per bin", "P_e - P_e")


def outside_mathtext(text: str) -> str:
    """The parts of a label outside $...$ (matplotlib's mathtext delimiters)."""
    return "".join(re.split(r"(?<!\\)\$", text)[0::2])


def figure_texts(fig) -> list[str]:
    """Every visible text of a figure: titles, axis labels, legends, notes and figure texts."""
    return [t.get_text() for t in fig.findobj(Text) if t.get_visible() and t.get_text()]


def built(result) -> dict:
    """Figure name -> built figure, for every registered figure the run has data for."""
    return {name: f.build(result) for name, f in FIGURES.items() if f.applies(result)}


def check_units_and_stamp(fig) -> None:
    """Units in mathtext on every dimensional axis, no caret outside mathtext, the stamp inside
    the canvas (and inside a tight bounding box) and clear of every axes."""
    for ax in fig.axes:
        for label in (ax.get_xlabel(), ax.get_ylabel()):
            if label and not any(word in label for word in DIMENSIONLESS):
                assert re.search(r"\[\$[^$]+\$\]", label), label
    for text in figure_texts(fig):
        assert "^" not in outside_mathtext(text), text
        for match in re.finditer(r"\bt = ([-+.\deE]+)(.?)", outside_mathtext(text)):
            if float(match.group(1)) != 0:  # zero needs no unit
                assert match.group(2) == " ", f"time without unit: {text!r}"
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    stamps = [t for t in fig.texts if t.get_text() == STAMP]
    assert len(stamps) == 1
    box = stamps[0].get_window_extent(renderer)
    assert 0 <= box.x0 and box.x1 <= fig.bbox.width and 0 <= box.y0 and box.y1 <= fig.bbox.height
    tight = fig.get_tightbbox(renderer)  # inches: what bbox_inches="tight" would keep
    inches = box.transformed(fig.dpi_scale_trans.inverted())
    assert tight.x0 <= inches.x0 and inches.x1 <= tight.x1 and tight.y0 <= inches.y0
    for ax in fig.axes:
        assert not ax.get_tightbbox(renderer).overlaps(box), "stamp overlaps an axes"


@pytest.mark.parametrize("name", ["exact-1d", "exact-3d", "perturbative-3d",
                                  "fock-1d-truncated", "markov-1d-trajectories",
                                  "markov-1d-lab"])
def test_every_figure_builds_with_units_and_stamp(results, name):
    figures = built(results[name])
    assert {"decay", "momentum", "recoil_map", "variance"} <= set(figures)
    for fig in figures.values():
        check_units_and_stamp(fig)

@pytest.mark.parametrize("name, figure", [("fock-1d-truncated", "counter_rotating.png"),
                                          ("markov-1d-trajectories", "trajectories.png")])
def test_method_tables_bring_their_figures(results, tmp_path, name, figure):
    names = result_figures(results[name], tmp_path)
    assert figure in names and sorted(names) == sorted(p.name for p in tmp_path.iterdir())


def test_lab_units_reach_every_label(results):
    """t_max = "60 ns", momenta in eV/c: the labels say so and the time axis ends at 60."""
    figures = built(results["markov-1d-lab"])
    decay = figures["decay"].axes[0]
    assert r"\mathrm{ns}" in decay.get_xlabel()
    assert decay.get_xlim()[1] == pytest.approx(60.0 * 1.05, rel=0.02)  # matplotlib's 5% margin
    momentum = figures["momentum"].axes[0]
    assert r"\mathrm{eV}/c" in momentum.get_xlabel() and r"c/\mathrm{eV}" in momentum.get_ylabel()
    legend = " ".join(t.get_text() for t in momentum.get_legend().get_texts())
    assert "t = 60 $\\mathrm{ns}$" in legend


def test_golden_rule_line_stays_visible_over_the_decay(results):
    ax = built(results["exact-1d"])["decay"].axes[0]
    method, golden = ax.get_lines()[:2]
    assert (method.get_linestyle(), method.get_color()) != (golden.get_linestyle(),
                                                            golden.get_color())
    assert golden.get_zorder() > method.get_zorder()  # drawn on top, dashes let the other show
    notes = figure_texts(ax.figure)
    assert any("golden rule" in n and ("difference" in n) for n in notes)


def test_variance_has_var_x_on_its_own_axis_and_the_purity_below(results):
    result = results["exact-1d"]
    assert np.all(np.isfinite(result.x_var)) and np.all(np.isfinite(result.purity))
    fig = FIGURES["variance"].build(result)
    variance, purity = fig.axes[0], fig.axes[1]
    twin = [ax for ax in fig.axes[2:] if ax.get_shared_x_axes().joined(ax, variance)]
    assert len(twin) == 1 and "Var" in twin[0].get_ylabel() and "x" in twin[0].get_ylabel()
    labels = [t.get_text() for t in variance.get_legend().get_texts()]
    assert any("Var" in t and "x" in t for t in labels) and any("p" in t for t in labels)
    assert np.allclose(purity.get_lines()[0].get_ydata(), result.purity)
    assert result.purity[0] == pytest.approx(1.0, abs=1e-6)  # a pure packet at t = 0


def test_variance_says_what_a_run_does_not_compute(results):
    result = results["perturbative-3d"]
    assert not np.any(np.isfinite(result.purity))
    fig = FIGURES["variance"].build(result)
    assert len(fig.axes) == 1
    assert any("does not compute" in t and "purity" in t for t in figure_texts(fig))


@pytest.mark.parametrize("name", ["exact-1d", "exact-3d", "markov-1d-lab"])
def test_recoil_map_shows_every_snapshot_over_the_run(results, name):
    result = results[name]
    ax = result.plot(figure="recoil_map")
    meshes = [c for c in ax.collections if isinstance(c, QuadMesh)]
    assert len(meshes) == 1
    assert meshes[0].get_array().shape == result.momentum_density.shape
    t_max = 60.0 if name == "markov-1d-lab" else float(result.times[-1])  # "60 ns" as written
    assert ax.get_xlim() == pytest.approx((0.0, t_max))
    colourbar = [a for a in ax.figure.axes if a is not ax][0]
    assert "density" in colourbar.get_ylabel() and "[$" in colourbar.get_ylabel()
    if result.scenario.dimensions == 3:
        assert "packet axis" in ax.get_ylabel()


def test_purity_is_a_drawer_of_result_plot(results):
    ax = results["exact-1d"].plot(figure="purity")
    assert ax.get_lines() and "purity" in ax.get_ylabel()


def test_a_withheld_quantity_is_named_as_withheld_not_as_uncomputed():
    # a purity the run withheld (its reason in the warnings) is not "not computed" by the method
    from types import SimpleNamespace

    from sim.plotting.run_figures import missing_note

    run = SimpleNamespace(method="exact", warnings=["purity: withheld: the emitted line moves"])
    assert missing_note(run, ["the purity"]) == ("the purity withheld (see the summary's "
                                                 "warnings) for this run")
    assert missing_note(run, ["Var x", "the purity"]) == (
        "the purity withheld (see the summary's warnings); exact does not compute Var x for this run")
    assert missing_note(SimpleNamespace(method="fock", warnings=[]), ["Var x"]) == (
        "fock does not compute Var x for this run")
