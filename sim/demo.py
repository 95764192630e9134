"""`recoilsim demo`: the bundled default scenario end to end, and the README's figures.

The demo folder holds
    rates.json, rates.png   golden-rule template functions of the three models
    exact/                  the exact time evolution (population, recoil, momentum, figures)
    compare/                perturbative, markov and exact side by side
    sweep/                  packet-averaged and fitted rates against packet width
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

from .output import atomic_write_text, staged_folder, write_result
from .scenario import load_scenario

#: the demo's sweep: packet widths in Compton wavelengths (four points, log-spaced)
DEMO_SWEEP = "packet.width=2:50:4log"
#: figures the README shows: (file in figures/, where it comes from in the demo folder)
README_FIGURES = {
    "rates.png": "rates.png",
    "decay.png": "exact/decay.png",
    "momentum.png": "exact/momentum.png",
    "compare.png": "compare/compare.png",
}


def default_scenario():
    """The bundled default scenario (sim/data/default.toml)."""
    return load_scenario(Path(__file__).parent / "data" / "default.toml")


def build_demo(folder: Path, scenario=None) -> dict:
    """Write the demo's files into an existing empty `folder`; returns a short report."""
    from .cli import rates_report
    from .compare import compare_to_folder
    from .figures import rates_figure
    from .solvers import run
    from .sweep import parse_vary, run_sweep

    scenario = scenario or default_scenario()
    report = rates_report(scenario, None)
    atomic_write_text(folder / "rates.json", json.dumps(report, indent=2) + "\n")
    rates_figure(scenario, folder / "rates.png")
    exact = run(scenario, method="exact")
    write_result(exact, folder / "exact")
    compare_to_folder(scenario, folder / "compare")
    counts = run_sweep(scenario, [parse_vary(DEMO_SWEEP)], folder / "sweep", workers=2)
    return {"rate": report["rate"], "exact": exact.summary, "sweep": counts}


def run_demo(out: Path, force: bool = False) -> int:
    """`recoilsim demo`: build the demo into `out` (atomically) and say where everything is."""
    scenario = default_scenario()
    with staged_folder(out, force=force) as stage:
        report = build_demo(stage, scenario)
    summary = report["exact"]
    print(f"{scenario.title} (simulated)")
    print(f"  golden-rule rate {report['rate']:.6g}; exact fitted rate {summary['rate_fitted']:.6g}")
    for w in summary.get("warnings", []):
        print(f"  warning: {w}")
    print(f"  figures: {out}/rates.png, {out}/exact/decay.png, {out}/exact/momentum.png, "
          f"{out}/exact/variance.png, {out}/compare/compare.png")
    print(f"  data: {out}/exact/*.csv, {out}/compare/compare.csv, {out}/sweep/sweep.csv")
    return 0


def make_readme_figures(out: Path) -> list[Path]:
    """Regenerate the figures the README shows into `out` (by building the demo once)."""
    import tempfile

    out.mkdir(parents=True, exist_ok=True)
    written = []
    with tempfile.TemporaryDirectory() as tmp:
        build_demo(Path(tmp))
        for name, source in README_FIGURES.items():
            staged = out / f".{name}.part"
            shutil.copyfile(Path(tmp) / source, staged)
            os.replace(staged, out / name)
            written.append(out / name)
    return written
