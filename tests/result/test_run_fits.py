"""The fit verdict through the Python API (`sim.run`) on the bundled scenarios."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg

import sim
from sim.io.writers import json_safe
from sim.physics.checks import load_scenario
from sim.result.fits import EXPONENTIAL, FIT_WINDOW, TRAPPING
from sim.solvers.exact.baths import bath_for

SCENARIOS = Path(__file__).resolve().parents[2] / "scenarios"


def bundled(name: str, **changes) -> dict:
    """A bundled scenario as a raw dict, with ``table__key=value`` changes."""
    raw = tomllib.loads((SCENARIOS / f"{name}.toml").read_text())
    for dotted, value in changes.items():
        table, key = dotted.split("__")
        raw.setdefault(table, {})[key] = value
    return raw


def bound_state_weight(raw: dict, t_max: float) -> float:
    """Sum over the run's momentum sectors of weight x |<e|b>|^4 for the eigenstates b below the
    continuum's threshold: the long-time P_e a bound state keeps (common practice).  Each
    sector's star Hamiltonian (level, modes, couplings) is diagonalised densely with
    scipy.linalg.eigh, independently of sim.solvers.exact."""
    total = 0.0
    for sector in bath_for(load_scenario(raw), t_max).sectors:
        hamiltonian = np.diag(np.concatenate(([sector.level_energy], sector.mode_energies)))
        hamiltonian[0, 1:] = hamiltonian[1:, 0] = sector.couplings.real
        energies, vectors = scipy.linalg.eigh(hamiltonian)
        below = energies < sector.mode_energies.min()
        total += sector.weight * float(np.sum(np.abs(vectors[0, below]) ** 4))
    return total


def check_trapped(raw: dict) -> dict:
    """Run `raw` and check the no-rate verdict of a trapped decay; returns the summary."""
    result = sim.run(raw)
    summary = result.summary
    assert summary["rate_fitted"] is None
    assert summary["fit"]["verdict"] == TRAPPING and "levels off" in summary["fit"]["reason"]
    warned = [w for w in summary["warnings"] if w.startswith("rate_fitted: no exponential fit")]
    assert warned and "coupling.strength" in warned[0], summary["warnings"]
    assert '"rate_fitted": null' in json.dumps(json_safe(summary))
    # the mean of P_e over the last quarter still holds the bound state's beating against the
    # decaying continuum (P_e rings by up to ~8% rms there); its mean is within 5% of the weight
    bound = bound_state_weight(raw, float(result.times[-1]))
    assert bound > 0.01
    assert summary["trapped_population"] == pytest.approx(bound, rel=0.05)
    return summary


def test_strong_coupling_scenario_has_no_rate():
    check_trapped(bundled("strong_coupling_1d", run__samples=61))


@pytest.mark.slow
def test_massive_field_trapped_run_has_no_rate():
    # lambda = 0.5 in a field of mass 0.2, packet at rest, followed to t = 200: P_e sits on its
    # plateau for most of the run (the former fit gave a "rate" of 1e-3 from it)
    check_trapped(bundled("strong_coupling_1d", coupling__strength=0.5, field__mass=0.2,
                          field__cutoff=3.0, packet__momentum=0.0, run__t_max=200.0,
                          run__samples=401))


def test_default_scenario_decays_at_the_golden_rule():
    summary = sim.run(bundled("default", run__t_max=300.0, run__samples=61)).summary
    fit = summary["fit"]
    assert fit["verdict"] == EXPONENTIAL and fit["reason"] is None
    assert fit["population_bounds"] == list(FIT_WINDOW) and fit["samples"] >= 40
    assert 0 < fit["t_start"] < fit["t_end"] <= 300.0 and fit["lifetimes"] > 1
    assert summary["trapped_population"] is None
    assert not any(w.startswith("rate_fitted") for w in summary["warnings"])
    # tests/solvers/exact allow 1% between the exact fitted rate and the golden rule at
    # lambda = 0.03 (test_weak_coupling_rate_1d_massive_field); the departure (dressing of the
    # level) is a relative correction of order lambda^2, so at the default lambda = 0.05 the same
    # allowance is 1% x (0.05 / 0.03)^2 = 2.8% (measured: 1.2% below the golden rule)
    assert summary["rate_fitted"] == pytest.approx(summary["rate_golden_rule"],
                                                   rel=0.01 * (0.05 / 0.03) ** 2)
