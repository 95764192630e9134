"""compare.png: coinciding curves stay distinguishable and are named, a truncated bath is drawn
dashed with the modes it kept, every method gets its own difference panel, and a method left
out is named with its reason."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from matplotlib.text import Text

from sim.plotting import compare_figure
from sim.plotting.style import NOT_CONVERGED


def texts(fig) -> str:
    return "\n".join(t.get_text() for t in fig.findobj(Text) if t.get_text())


def top_lines(fig) -> dict:
    """Legend label's method name -> Line2D of the main panel."""
    return {line.get_label().split()[0].rstrip(","): line for line in fig.axes[0].get_lines()}


@pytest.fixture
def curves(results):
    """Three methods on common times: perturbative and markov identical, exact distinct."""
    times = results["exact-1d"].times
    decay = np.exp(-0.02 * times)
    return times, {"perturbative": decay, "markov": decay.copy(),
                   "exact": decay * (1 + 0.3 * np.sin(times / 5) ** 2)}


def test_coinciding_curves_keep_distinct_styles_and_are_named(results, curves):
    times, drawn = curves
    fig = compare_figure(results["exact-1d"].scenario, times, drawn)
    lines = top_lines(fig)
    styles = {m: (lines[m].get_linestyle(), lines[m].get_marker()) for m in drawn}
    assert len(set(styles.values())) == len(drawn)
    assert "perturbative and markov coincide" in texts(fig)
    assert "exact coincide" not in texts(fig) and "and exact" not in texts(fig)


def test_curves_apart_get_no_coincidence_note(results, curves):
    times, drawn = curves
    drawn = {**drawn, "markov": drawn["markov"] * 0.5}  # 0.3 decades below
    fig = compare_figure(results["exact-1d"].scenario, times, drawn)
    assert "coincide" not in texts(fig)


def test_one_difference_panel_per_method_against_exact(results, curves):
    times, drawn = curves
    fig = compare_figure(results["exact-1d"].scenario, times, drawn)
    panels = fig.axes[1:]
    assert len(panels) == 2  # perturbative and markov; exact is the reference
    for panel, method in zip(panels, ("perturbative", "markov")):
        assert panel.get_title(loc="left").startswith(f"{method} − exact")
        y = panel.get_lines()[0].get_ydata()
        assert np.allclose(y, drawn[method] - drawn["exact"])
    assert "[$" in panels[-1].get_xlabel()  # the time axis, with its unit, at the bottom


def test_truncated_fock_bath_is_dashed_and_labelled(results):
    fock = results["fock-1d-truncated"]  # bath.fock_modes = 6 of the box's modes
    stats = fock.summary["stats"]
    assert stats["fock_modes"] == 6 < stats["box_modes"]
    curves = {"exact": np.exp(-0.02 * fock.times), "fock": fock.excited}
    fig = compare_figure(fock.scenario, fock.times, curves, results={"fock": fock})
    line = top_lines(fig)["fock"]
    assert line.get_linestyle() == NOT_CONVERGED
    assert f"truncated: 6 of {stats['box_modes']} modes" in line.get_label()
    assert fig.axes[1].get_lines()[0].get_linestyle() == NOT_CONVERGED
    assert top_lines(fig)["exact"].get_linestyle() != NOT_CONVERGED


def with_truncation(result, **record):
    """The result with its stats' truncation record changed."""
    stats = result.summary["stats"]
    stats = dict(stats, truncation=dict(stats["truncation"], **record))
    return dataclasses.replace(result, summary=dict(result.summary, stats=stats))


def test_fock_keeping_every_mode_is_drawn_as_converged(results):
    fock = results["fock-1d-truncated"]
    whole = with_truncation(fock, of=fock.summary["stats"]["truncation"]["kept"])
    curves = {"exact": np.exp(-0.02 * fock.times), "fock": fock.excited}
    fig = compare_figure(fock.scenario, fock.times, curves, results={"fock": whole})
    line = top_lines(fig)["fock"]
    assert line.get_linestyle() != NOT_CONVERGED and "truncated" not in line.get_label()


@pytest.mark.parametrize("converged, dashed, verdict", [
    (True, False, "(converged)"), (False, True, "(not converged)"),
    (None, True, "(convergence not checked)")])
def test_a_truncated_bath_is_drawn_by_its_convergence_verdict(results, converged, dashed, verdict):
    fock = with_truncation(results["fock-1d-truncated"], converged=converged)
    curves = {"exact": np.exp(-0.02 * fock.times), "fock": fock.excited}
    fig = compare_figure(fock.scenario, fock.times, curves, results={"fock": fock})
    line = top_lines(fig)["fock"]
    assert (line.get_linestyle() == NOT_CONVERGED) == dashed
    assert line.get_label().endswith(verdict) and "truncated: 6 of" in line.get_label()


def test_a_method_left_out_is_named_with_its_reason(results, curves):
    times, drawn = curves
    fig = compare_figure(results["exact-1d"].scenario, times, drawn,
                         left_out={"fock": "estimated 900 s, over the 600 s budget"})
    assert "fock left out: estimated 900 s, over the 600 s budget" in texts(fig)


def test_without_exact_there_are_no_difference_panels(results, curves):
    times, drawn = curves
    drawn = {m: v for m, v in drawn.items() if m != "exact"}
    fig = compare_figure(results["exact-1d"].scenario, times, drawn)
    assert len(fig.axes) == 1 and "no exact run" in texts(fig)
