"""`recoilsim demo`: the bundled default scenario end to end, and the README's figures."""

from __future__ import annotations

import json
from pathlib import Path

from .output import atomic_write_text, staged_folder
from .scenario import load_scenario


def default_scenario():
    """The bundled default scenario (sim/data/default.toml)."""
    return load_scenario(Path(__file__).parent / "data" / "default.toml")


def run_demo(out: Path, force: bool = False) -> int:
    """Rates, golden-rule table and rates figure of the default scenario into `out`."""
    from .cli import rates_report
    from .figures import rates_figure

    scenario = default_scenario()
    with staged_folder(out, force=force) as stage:
        report = rates_report(scenario, None)
        atomic_write_text(stage / "rates.json", json.dumps(report, indent=2) + "\n")
        rates_figure(scenario, stage / "rates.png")
    print(f"{scenario.title}: packet-averaged golden-rule rate {report['rate']:.6g}")
    print(f"figures and data (simulated) in {out}/: rates.png, rates.json")
    return 0


def make_readme_figures(out: Path) -> list[Path]:
    """Regenerate the figures the README shows into `out`."""
    from .figures import rates_figure

    out.mkdir(parents=True, exist_ok=True)
    path = out / "rates.png"
    rates_figure(default_scenario(), path)
    return [path]
