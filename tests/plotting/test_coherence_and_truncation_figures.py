"""The spatial-coherence figures (a run's coherence.png, compare's compare_coherence.png) draw
every method's curve, the static-detector reference and the truncation verdict; a 3D fock run is
labelled truncated from its solver's record."""

from __future__ import annotations

import dataclasses

import numpy as np

from sim.physics.checks import load_scenario
from sim.plotting import coherence_compare_figure, draw_coherence
from sim.result import run

RAW = {"title": "coherence figure", "detector": {"model": "newton-wigner", "ground_mass": 1000.0,
                                                 "gap": 1.0},
       "field": {"dimensions": 1, "mass": 0.3}, "coupling": {"lifetime": 100.0},
       "packet": {"shape": "two-lobe", "width": 1.0, "separation": 3.0, "momentum": 0.0,
                  "internal": "excited"},
       "run": {"method": "perturbative", "t_max": 800.0, "samples": 41}}


def test_run_coherence_figure_draws_the_curve_and_the_static_limit():
    result = run(load_scenario(RAW))
    ax = draw_coherence(result)
    labels = [line.get_label() for line in ax.get_lines()]
    assert labels[0] == "perturbative (simulated)"
    assert any("static detector after one emission" in label for label in labels)
    drawn = ax.get_lines()[0].get_ydata()
    assert np.allclose(drawn, result.coherence[np.isfinite(result.coherence)])
    assert "simulated" in ax.get_title()


def test_compare_coherence_figure_has_one_curve_per_method_and_names_the_missing():
    first = run(load_scenario(RAW))
    without = dataclasses.replace(first, method="markov", coherence=None)
    fig = coherence_compare_figure(first.scenario, {"perturbative": first, "markov": without},
                                   {"fock": "estimated 900 s, over the budget"})
    ax = fig.axes[0]
    labels = [line.get_label() for line in ax.get_lines()]
    assert labels[0] == "perturbative (simulated)" and len(labels) == 2  # curve + reference
    notes = " ".join(a.txt.get_text() for a in ax.artists if hasattr(a, "txt"))  # AnchoredText
    assert "markov left out: no coherence computed" in notes and "fock left out" in notes


def test_a_3d_fock_run_is_labelled_truncated(make_scenario):
    # in 3D the fock modes equal its box modes, so the truncation is read from the solver's
    # record (modes a cubic box resolving the run would hold), not from the box count
    from sim.plotting.style import method_label, truncation_converged

    raw = make_scenario(title="fock 3D label", model="newton-wigner", ground_mass=1.0, gap=0.5,
                        dims=3, field__mass=0.0, strength=0.5, width=1000.0, momentum=1.0,
                        internal="excited", method="fock", t_max=20.0, samples=21,
                        field__cutoff=1.2, bath__sectors=1)
    result = run(load_scenario(raw))
    record = result.summary["stats"]["truncation"]
    assert record["kept"] < record["of"]
    assert method_label("fock", result) == (f"fock, truncated: {record['kept']} of {record['of']} "
                                            "modes (convergence not checked)")
    assert not truncation_converged(result)
    assert any(w.startswith(f"3D bath truncated to {record['kept']} modes") for w in result.warnings)
