"""`recoilsim demo` end to end in a temporary folder (slow: about a minute on 2 cores)."""

import csv
import json
import subprocess
import sys

import pytest


@pytest.mark.slow
def test_demo_writes_its_figures_and_data(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "sim.cli", "demo"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    out = tmp_path / "recoilsim-demo"
    for figure in ("rates.png", "exact/decay.png", "exact/momentum.png", "exact/variance.png",
                   "compare/compare.png"):
        assert (out / figure).stat().st_size > 10_000, figure
        assert figure in proc.stdout or figure.split("/")[-1] in proc.stdout
    summary = json.loads((out / "exact" / "summary.json").read_text())
    assert summary["simulated"] is True and summary["method"] == "exact"
    with open(out / "compare" / "compare.csv") as handle:
        header = next(csv.reader(handle))
    assert header[:4] == ["t", "perturbative", "markov", "exact"]
    with open(out / "sweep" / "sweep.csv") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == 4 and all(r["status"] == "ok" for r in rows)
    assert not list(tmp_path.glob(".*"))


@pytest.mark.slow  # builds the demo and runs the which-path scenario with every method (minutes)
def test_figures_command_writes_every_readme_figure(tmp_path):
    from sim.cli import main
    from sim.workflows.demo import README_FIGURES

    assert main(["figures", "--out", str(tmp_path / "figures")]) == 0
    written = sorted(p.stem for p in (tmp_path / "figures").glob("*.png"))
    assert written == sorted([*README_FIGURES, "coherence"])
