"""`recoilsim demo`: the bundled default scenario end to end, and the README's figures.

The demo folder holds
    rates.json, rates.png   golden-rule template functions of the three models
    exact/                  the exact time evolution (population, recoil, momentum, figures)
    compare/                perturbative, markov and exact side by side
    sweep/                  packet-averaged and fitted rates against packet width
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from ..io.atomic import atomic_copy
from ..io.writers import output_folder, write_json
from ..physics.checks import load_scenario
from ..config.registry import METHOD_NAMES
from ..errors import ScenarioError
from ..plotting import DPI, coherence_compare_figure, figure_dpi, figure_format, save
from ..result import run
from .compare import compare_to_folder
from .rates import rates_report, write_rates_figure
from .run import write_result
from .sweep import parse_vary, run_sweep

#: the demo's sweep: packet widths in Compton wavelengths (four points, log-spaced)
DEMO_SWEEP = "packet.width=2:50:4log"
#: the demo folder's sub-folders (each a recoilsim folder with its own marker)
DEMO_FOLDERS = ["exact", "compare", "sweep"]
#: figures the README shows: file stem in figures/ -> where it comes from in the demo folder
#: (stems: the suffix is the figure format)
README_FIGURES = {
    "rates": "rates",
    "decay": "exact/decay",
    "momentum": "exact/momentum",
    "recoil_map": "exact/recoil_map",
    "variance": "exact/variance",
    "compare": "compare/compare",
    "sweep": "sweep/sweep",
}


def default_scenario():
    """The bundled default scenario (sim/data/default.toml).

    Returns
    -------
    Scenario
        Loaded and validated (natural units).
    """
    return load_scenario(bundled("default"))


def bundled(name: str) -> Path:
    """Path of a scenario shipped inside the package (sim/data/NAME.toml).

    Parameters
    ----------
    name : str
        File stem of the scenario, e.g. "default".

    Returns
    -------
    Path
        The file's path (its existence is not checked).
    """
    return Path(__file__).parents[1] / "data" / f"{name}.toml"


def build_demo(folder: Path, scenario=None, *, progress: bool = False, quiet: bool = True,
               fmt: str = "png", dpi: float = DPI) -> dict:
    """Write the demo's files into an existing empty `folder`; returns a short report.

    Parameters
    ----------
    folder : Path
        An existing empty folder; its sub-folders are written atomically one by one, the
        folder itself is not staged (`run_demo` does that).
    scenario : Scenario, optional
        The scenario to demonstrate; default: `default_scenario()`.
    progress : bool
        Progress bars inside long solver runs and the sweep.
    quiet : bool
        No status lines on stderr.
    fmt : str
        Figure file format: "png", "pdf" or "svg".
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    dict
        {"rate": packet-averaged golden-rule rate (inverse time; output units for a scenario
        with units, natural units otherwise), "exact": the exact run's Result summary
        (natural units), "sweep": the counts of `run_sweep`}.

    Raises
    ------
    ScenarioError
        If a method refuses `scenario`, or a point of the packet-width sweep is invalid.
    """
    fmt, dpi = figure_format(fmt), figure_dpi(dpi)  # refused before anything runs
    scenario = scenario or default_scenario()
    report = rates_report(scenario, None)
    write_json(folder / "rates.json", report)
    write_rates_figure(scenario, folder / "rates", fmt, dpi)
    comparison = compare_to_folder(scenario, folder / "compare", progress=progress, quiet=quiet,
                                   fmt=fmt, dpi=dpi)
    exact = comparison.results.get("exact") or run(scenario, method="exact")  # run once, reused
    write_result(exact, folder / "exact", fmt=fmt, dpi=dpi)
    counts = run_sweep(scenario, [parse_vary(DEMO_SWEEP)], folder / "sweep", workers=2,
                       progress=progress, fmt=fmt, dpi=dpi)
    return {"rate": report["rate"], "exact": exact.summary, "sweep": counts}


def run_demo(out: Path, force: bool = False, *, progress: bool = False, quiet: bool = True,
             fmt: str = "png", dpi: float = DPI) -> dict:
    """`recoilsim demo`: build the demo into `out` (atomically as a whole).

    Parameters
    ----------
    out : Path
        The demo folder, replaced as a whole once complete.
    force : bool
        Replace a non-empty `out` that recoilsim wrote (`sim.io.writers.refuse_existing`).
    progress : bool
        Progress bars inside long solver runs and the sweep.
    quiet : bool
        No status lines on stderr.
    fmt : str
        Figure file format: "png", "pdf" or "svg".
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    dict
        {"title", "rate" (golden rule, inverse time, natural units), "exact" (the exact run's
        summary), "sweep" (counts)}.

    Raises
    ------
    OutputExists
        If `out` is a file or the current folder, or a non-empty folder and `force` is not
        given, or not recoilsim's own (or holding files it did not write).
    """
    scenario = default_scenario()
    with output_folder(out, force=force, kind="demo", folders=DEMO_FOLDERS) as stage:
        report = build_demo(stage, scenario, progress=progress, quiet=quiet, fmt=fmt, dpi=dpi)
    return {"title": scenario.title, **report}


def make_readme_figures(out: Path, fmt: str = "png", dpi: float = DPI) -> list[Path]:
    """Regenerate the figures the README shows into `out` (by building the demo once).

    Parameters
    ----------
    out : Path
        Folder of the figures, created if missing; each figure is replaced atomically.
    fmt : str
        Figure file format: "png" (what the README shows), "pdf" or "svg".
    dpi : float
        Figure resolution (dots per inch).

    Returns
    -------
    list of Path
        The figures written, one per entry of `README_FIGURES` (NAME.<fmt>), and the
        which-path coherence of every method (coherence.<fmt>, `which_path_figure`).
    """
    fmt, dpi = figure_format(fmt), figure_dpi(dpi)
    out.mkdir(parents=True, exist_ok=True)
    written = []
    with tempfile.TemporaryDirectory() as tmp:
        build_demo(Path(tmp), fmt=fmt, dpi=dpi)
        for name, source in README_FIGURES.items():
            atomic_copy(Path(tmp) / f"{source}.{fmt}", out / f"{name}.{fmt}")
            written.append(out / f"{name}.{fmt}")
        figure = save(which_path_figure(), Path(tmp) / "coherence", fmt, dpi)
        atomic_copy(figure, out / figure.name)
        written.append(out / figure.name)
    return written


def which_path_figure():
    """The spatial coherence of the bundled which-path scenario by every method, one figure.

    Each method runs on sim/data/which_path_1d.toml (`coherence_compare_figure`; a method that
    refuses it is named in the figure).

    Returns
    -------
    matplotlib Figure
        Stamped simulated.
    """
    scenario = load_scenario(bundled("which_path_1d"))
    results, left_out = {}, {}
    for method in METHOD_NAMES:
        try:
            results[method] = run(scenario, method=method)
        except ScenarioError as exc:
            left_out[method] = "; ".join(exc.problems)
    return coherence_compare_figure(scenario, results, left_out)
