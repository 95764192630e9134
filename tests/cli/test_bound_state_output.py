"""A trapped run reports its bound state beside trapped_population, in summary.json and on the
terminal (the bundled strong-coupling scenario; the bound state's energy and weight are checked
against a quadrature of the self-energy in tests/solvers/exact/test_bound_states.py)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from sim.cli import main

ROOT = Path(__file__).resolve().parents[2]


def test_strong_coupling_run_reports_its_bound_state(tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["run", str(ROOT / "scenarios" / "strong_coupling_1d.toml"), "--out", str(out),
                 "--quiet"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    below = summary["bound_states"]["below"]
    assert below["energy_from_level"] < 0 and 0 < below["weight"] < 1
    # the dressed state keeps |<e|b>|^4 of P_e (averaged over the packet's sectors, so equal to
    # the squared mean weight only up to the weight's small spread); the late-time plateau is
    # that, up to the oscillation the continuum's edge leaves in the last quarter of the run
    assert below["trapped_population"] == pytest.approx(below["weight"] ** 2, rel=1e-4)
    assert summary["trapped_population"] == pytest.approx(below["trapped_population"], abs=2e-3)
    assert "bound state below the band" in capsys.readouterr().out
