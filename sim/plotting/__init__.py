"""Plotting layer: every figure recoilsim draws, each stamped "simulated".

A run folder's figures are chosen through one registry, `FIGURES` (file stem -> how it is drawn
and what it needs), by `result_figures`; `rates_figure`, `compare_figure` and `sweep_figure`
draw the `rates`, `compare` and `sweep` commands' figures, and `save` writes any of them as
png, pdf or svg.  Solvers never draw: they return data.  Importing this package does not import
matplotlib (each figure does, when drawn) and never switches its backend.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from ..result.result import DRAWERS
from .compare import coherence_compare_figure, compare_figure
from .counter_rotating import counter_rotating_figure
from .rates import rates_figure
from .run_figures import (draw_coherence, draw_decay, draw_momentum, draw_purity,
                          draw_recoil_map, draw_variance, has_coherence, has_snapshots,
                          variance_figure)
from .style import (DPI, FORMATS, METHOD_COLOURS, MODEL_COLOURS, STAMP, figure_dpi,
                    figure_format, figure_path, save, stamp)
from .sweep import sweep_figure
from .trajectories import trajectories_figure


@dataclass(frozen=True)
class Figure:
    """One figure of a run folder: `build(result)` returns the figure; drawn only when the
    result has the table `needs` (None: any) and `drawable(result)` holds (None: always)."""

    build: Callable
    needs: str | None = None
    drawable: Callable | None = None

    def applies(self, result) -> bool:
        """Whether the result has what this figure draws.

        Parameters
        ----------
        result : Result

        Returns
        -------
        bool
        """
        return ((self.needs is None or self.needs in result.tables)
                and (self.drawable is None or bool(self.drawable(result))))


def _single(draw: Callable) -> Callable:
    """A draw_*(result, ax) function as a builder of its own stamped figure."""
    def build(result):
        return draw(result, None).figure
    return build


#: file stem -> figure, in the order they are written
FIGURES: dict[str, Figure] = {
    "decay": Figure(_single(draw_decay)),
    "momentum": Figure(_single(draw_momentum)),
    "recoil_map": Figure(_single(draw_recoil_map), drawable=has_snapshots),
    "variance": Figure(variance_figure),
    "coherence": Figure(_single(draw_coherence), drawable=has_coherence),
    "counter_rotating": Figure(counter_rotating_figure, needs="counter_rotating"),
    "trajectories": Figure(trajectories_figure, needs="emissions"),
}

DRAWERS.update(decay=draw_decay, momentum=draw_momentum, variance=draw_variance,
               purity=draw_purity, recoil_map=draw_recoil_map, coherence=draw_coherence)


def result_figures(result, folder: str | Path, *, fmt: str = "png", dpi: float = DPI) -> list[str]:
    """Draw every registered figure the result has data for into `folder` as NAME.<fmt>.

    Parameters
    ----------
    result : Result
    folder : str or Path
        An existing folder (a run folder's stage).
    fmt : str
        "png", "pdf" or "svg".
    dpi : float
        Dots per inch (`sim.plotting.style.DPI_RANGE`).

    Returns
    -------
    list of str
        The file names written, in registry order.

    Raises
    ------
    UsageError
        For an unknown format or a resolution out of range, before anything is drawn.
    """
    fmt, dpi = figure_format(fmt), figure_dpi(dpi)
    names = []
    for name, figure in FIGURES.items():
        if figure.applies(result):
            names.append(save(figure.build(result), Path(folder) / name, fmt, dpi).name)
    return names


__all__ = ["DPI", "FIGURES", "FORMATS", "METHOD_COLOURS", "MODEL_COLOURS", "STAMP",
           "coherence_compare_figure", "compare_figure", "counter_rotating_figure", "draw_coherence", "draw_decay",
           "draw_momentum",
           "draw_purity", "draw_recoil_map", "draw_variance", "figure_dpi", "figure_format",
           "figure_path", "rates_figure", "result_figures", "save", "stamp", "sweep_figure",
           "trajectories_figure", "variance_figure"]
