"""Plotting layer: every figure recoilsim draws, each stamped "simulated".

A run folder's figures are chosen through one registry, `FIGURES` (file stem -> how it is drawn
and the table it needs), by `result_figures`; `rates_figure` and `compare_figure` draw the
`rates` and `compare` commands' figures.  Solvers never draw: they return data.  Importing this
package does not import matplotlib (each figure does, when drawn) and never switches its backend.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from ..result.result import DRAWERS
from .compare import compare_figure
from .counter_rotating import counter_rotating_figure
from .rates import rates_figure
from .run_figures import draw_decay, draw_momentum, draw_variance
from .style import METHOD_COLOURS, MODEL_COLOURS, STAMP, save, stamp
from .trajectories import trajectories_figure


@dataclass(frozen=True)
class Figure:
    """One figure of a run folder: `build(result)` returns the figure; drawn only when the
    result has the table `needs` (None: always)."""

    build: Callable
    needs: str | None = None


def _single(draw: Callable) -> Callable:
    """A draw_*(result, ax) function as a builder of its own stamped figure."""
    def build(result):
        return draw(result, None).figure
    return build


#: file stem -> figure, in the order they are written
FIGURES: dict[str, Figure] = {
    "decay": Figure(_single(draw_decay)),
    "momentum": Figure(_single(draw_momentum)),
    "variance": Figure(_single(draw_variance)),
    "counter_rotating": Figure(counter_rotating_figure, needs="counter_rotating"),
    "trajectories": Figure(trajectories_figure, needs="emissions"),
}

DRAWERS.update(decay=draw_decay, momentum=draw_momentum, variance=draw_variance)


def result_figures(result, folder: str | Path) -> list[str]:
    """Draw every registered figure the result has data for into `folder` as NAME.png.

    Parameters
    ----------
    result : Result
    folder : str or Path
        An existing folder (a run folder's stage).

    Returns
    -------
    list of str
        The file names written, in registry order.
    """
    names = []
    for name, figure in FIGURES.items():
        if figure.needs is None or figure.needs in result.tables:
            save(figure.build(result), Path(folder) / f"{name}.png")
            names.append(f"{name}.png")
    return names


__all__ = ["FIGURES", "METHOD_COLOURS", "MODEL_COLOURS", "STAMP", "compare_figure",
           "counter_rotating_figure", "draw_decay", "draw_momentum", "draw_variance",
           "rates_figure", "result_figures", "stamp", "trajectories_figure"]
