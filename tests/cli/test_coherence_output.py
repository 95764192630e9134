"""The spatial-coherence output of a run through the CLI: coherence.csv, coherence.png and the
summary's final_coherence, for the bundled which-path scenario (shortened, run by two methods)."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest

from sim.cli import main

ROOT = Path(__file__).resolve().parents[2]


def shortened_which_path(tmp_path: Path, method: str) -> Path:
    """The bundled which-path scenario with `method`, fewer samples and (for exact) sectors."""
    text = (ROOT / "scenarios" / "which_path_1d.toml").read_text()
    text = (text.replace('method = "exact"', f'method = "{method}"')
            .replace("samples = 201", "samples = 41").replace("sectors = 129", "sectors = 43"))
    path = tmp_path / f"which_path_{method}.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("method", ["perturbative", "exact"])
def test_run_writes_the_coherence_files(tmp_path, method, capsys):
    out = tmp_path / "out"
    assert main(["run", str(shortened_which_path(tmp_path, method)), "--out", str(out),
                 "--quiet"]) == 0
    with open(out / "coherence.csv") as handle:
        rows = list(csv.DictReader(handle))
    assert list(rows[0]) == ["t", "coherence"]
    coherence = np.array([float(row["coherence"]) for row in rows])
    assert coherence[0] == pytest.approx(1.0)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["coherence_at"] == pytest.approx(8.5)
    assert summary["final_coherence"] == pytest.approx(coherence[-1])
    # static limit |cos(k* d)| = 0.248 after complete decay (the scenario's own comment; the
    # closed form is checked against each solver in tests/solvers)
    assert summary["final_coherence"] == pytest.approx(0.248, abs=5e-3)
    assert (out / "coherence.png").stat().st_size > 10_000


def test_a_gaussian_run_without_a_distance_writes_no_coherence(make_scenario, write_scenario,
                                                                tmp_path):
    out = tmp_path / "out"
    scenario = write_scenario(make_scenario(method="perturbative"))
    assert main(["run", str(scenario), "--out", str(out), "--quiet"]) == 0
    assert not (out / "coherence.csv").exists() and not (out / "coherence.png").exists()
    assert "final_coherence" not in json.loads((out / "summary.json").read_text())
