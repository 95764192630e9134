"""sweep.png: one column of a sweep's table against the first swept key, one line per value of
the other swept keys.

The table is sweep.csv's (a column per swept dotted key, then the result columns): swept keys
are the columns whose names are dotted scenario keys.  A swept value may be a number, a number
with a unit ("50 nm"; a column mixing units is converted to the unit of its first row) or a
name (a model, true/false), drawn as categories.
"""

from __future__ import annotations

import csv
import math
import textwrap
from dataclasses import dataclass
from itertools import cycle
from pathlib import Path

import numpy as np

from ..config.schema import SCHEMA
from ..config.units import QUANTITY_TEXT, parse_quantity
from ..errors import UsageError
from .style import (
    COLUMN_POWERS,
    LEGEND_SIZE,
    NATURAL_NOTE,
    OKABE_ITO,
    coincidence_lines,
    line_style,
    new_figure,
    power_unit,
    stamp,
    unit_symbol,
    unit_symbols,
)

#: how result columns are named on the axis
COLUMN_NAMES = {"rate_golden_rule": r"golden-rule rate $\Gamma$",
                "rate_fitted": r"fitted decay rate $\Gamma_{\mathrm{fit}}$"}
#: a scenario key's dimension -> powers of (time, momentum, length) in natural units
DIMENSION_POWERS = {"time": (1, 0, 0), "momentum": (0, 1, 0), "length": (0, 0, 1),
                    "energy": (0, 1, 0)}
#: an axis is logarithmic when its positive values span at least this ratio
LOG_RATIO = 20.0
#: colours, dashes and markers of the lines, in order (Okabe-Ito; common practice); "--" is
#: kept for curves that are not converged (`style.NOT_CONVERGED`)
SWEEP_LINES = tuple(zip(("blue", "vermillion", "bluish green", "reddish purple", "orange",
                         "sky blue", "black"),
                        ("-", ":", "-.", (0, (3, 1, 1, 1, 1, 1)), "-", ":", "-."),
                        ("o", "s", "^", "D", "v", "P", "X")))
#: the reference column's thin dotted line
REFERENCE_DOTS = (0, (1, 1.5))
#: note lines in the legend are wrapped at this many characters
NOTE_WIDTH = 42
#: the swept values themselves are the x ticks when there are at most this many
MAX_VALUE_TICKS = 8


@dataclass(frozen=True)
class SweptValues:
    """One swept key's values as drawn: numbers (nan where a row has none) or category
    positions, the unit (mathtext) and, for categories, their names."""

    numbers: np.ndarray
    unit: str
    categories: tuple = ()


def read_table(path: str | Path) -> dict[str, list[str]]:
    """A CSV table (sweep.csv) as column name -> cells.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict
        Column -> list of cell texts, in file order.
    """
    with open(path, newline="") as handle:
        rows = list(csv.reader(handle))
    names = rows[0] if rows else []
    return {name: [row[i] for row in rows[1:]] for i, name in enumerate(names)}


def _number(cell) -> float | None:
    """A cell as a float (True/False as 1/0), or None when it is not a bare number."""
    if isinstance(cell, (bool, int, float, np.number)):
        return float(cell)
    text = str(cell).strip()
    if text.lower() in ("true", "false"):
        return float(text.lower() == "true")
    try:
        return float(text)
    except ValueError:
        return None


def key_unit(key: str) -> str:
    """Mathtext unit of a swept scenario key given as bare numbers (natural units: in a
    scenario with units too, where E is then detector.gap).

    Parameters
    ----------
    key : str
        A dotted scenario key, e.g. "packet.width".

    Returns
    -------
    str
        The natural unit of the key's dimension ("" for a dimensionless key).
    """
    table, _, name = key.partition(".")
    dimension = getattr(SCHEMA.get(table, {}).get(name), "dimension", None)
    return power_unit(unit_symbols(None), DIMENSION_POWERS.get(dimension, (0, 0, 0)))


def swept_values(key: str, cells) -> SweptValues:
    """The values of one swept key as drawn.

    Parameters
    ----------
    key : str
        The dotted key (its dimension gives the unit of bare numbers, `key_unit`).
    cells : sequence
        Its column: numbers, "number unit" strings, or names.

    Returns
    -------
    SweptValues
        Numbers in the unit of the first row ("number unit" strings converted with pint),
        else category positions 0, 1, ... in order of first appearance.
    """
    numbers = [_number(c) for c in cells]
    if all(n is not None for n in numbers):
        return SweptValues(np.array(numbers, dtype=float), key_unit(key))
    texts = [str(c).strip() for c in cells]
    matches = [QUANTITY_TEXT.match(t) for t in texts]
    if all(m and m.group(2) for m in matches):
        first = parse_quantity(texts[0])
        values = [parse_quantity(t).to(first.units).magnitude for t in texts]
        return SweptValues(np.array(values, dtype=float),
                           f"${unit_symbol(matches[0].group(2))}$")
    categories = tuple(dict.fromkeys(texts))
    return SweptValues(np.array([categories.index(t) for t in texts], dtype=float), "",
                       categories)


def column_unit(column: str, units) -> str:
    """Mathtext unit of a result column of the sweep table.

    Parameters
    ----------
    column : str
    units : UnitSystem or None
        The output units the table's numbers are in (None: natural units).

    Returns
    -------
    str
        From the column's powers (`style.COLUMN_POWERS`); "" for an unknown column.
    """
    return power_unit(unit_symbols(units), COLUMN_POWERS.get(column, (0, 0, 0)))


def numbers_of(cells) -> np.ndarray:
    """A column's cells as floats, nan where a cell is not a number (a failed point).

    Parameters
    ----------
    cells : sequence

    Returns
    -------
    ndarray
    """
    return np.array([math.nan if (n := _number(c)) is None else n for c in cells], dtype=float)


def on_grid(grid, x, y) -> np.ndarray:
    """The values y at x placed on a grid of x values (nan where a grid point has none).

    Parameters
    ----------
    grid : ndarray
        Sorted distinct x values.
    x, y : ndarray
        One line's points (the last of repeated x wins).

    Returns
    -------
    ndarray
        len(grid) values.
    """
    out = np.full(len(grid), math.nan)
    inside = np.isin(x, grid)
    out[np.searchsorted(grid, x[inside])] = y[inside]
    return out


def _scales(ax, x: SweptValues, y) -> None:
    """Categories, or ticks at the swept values on a log or linear axis; log y when it spans
    LOG_RATIO."""
    if x.categories:
        ax.set_xticks(range(len(x.categories)), x.categories)
    else:
        values = np.unique(x.numbers[np.isfinite(x.numbers)])
        if _log_worthy(values):
            ax.set_xscale("log")
            ax.xaxis.set_minor_formatter("")
        if len(values) <= MAX_VALUE_TICKS:
            ax.set_xticks(values, [f"{v:.3g}" for v in values])
    if _log_worthy(y):
        ax.set_yscale("log")


def _axis_label(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def _log_worthy(values) -> bool:
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    return bool(v.size) and bool(np.all(v > 0)) and float(v.max() / v.min()) >= LOG_RATIO


def _line_label(values: tuple, single: str) -> str:
    return ", ".join(values) or single


def sweep_figure(table, column: str, units=None, *, reference: str | None = None,
                 title: str | None = None):
    """One column of a sweep table against its first swept key, a line per value of the rest.

    Parameters
    ----------
    table : mapping or str or Path
        Column name -> cells (sweep.csv's columns, as `sim.io.writers.csv_text` takes them), or
        the path of sweep.csv.  Swept keys are the dotted column names, in column order.
    column : str
        The column drawn on the vertical axis, e.g. "rate_fitted" (rows where it is not a
        number, e.g. failed points, are left out and counted in a note).
    units : UnitSystem, optional
        The output units the table's results are in (a scenario's `units`); None: natural
        units.
    reference : str, optional
        Another column drawn as a thin line of the same colour, e.g. "rate_golden_rule".
    title : str, optional
        The figure's title (e.g. the scenario's).

    Returns
    -------
    matplotlib Figure
        Stamped simulated.

    Raises
    ------
    UsageError
        If `column` or `reference` is not a column, or the table has no swept key or no row.
    """
    table = read_table(table) if isinstance(table, (str, Path)) else dict(table)
    keys = [name for name in table if "." in name]
    for name in (column, reference):
        if name is not None and name not in table:
            raise UsageError(f"sweep figure: no column {name!r}; allowed: "
                             + ", ".join(n for n in table if n not in keys))
    if not keys or not table[keys[0]]:
        raise UsageError("sweep figure: the table has no swept key or no row")
    x = swept_values(keys[0], table[keys[0]])
    y = numbers_of(table[column])
    ref = numbers_of(table[reference]) if reference else None
    others = keys[1:]
    member = list(zip(*(map(str, table[k]) for k in others))) if others else [()] * len(y)
    grid = np.unique(x.numbers[np.isfinite(y)])
    fig, ax = new_figure()
    curves = {}
    for group, (colour, dash, marker) in zip(dict.fromkeys(member), cycle(SWEEP_LINES)):
        rows = np.array([m == group for m in member])
        label = _line_label(group, COLUMN_NAMES.get(column, column))
        curves[label] = on_grid(grid, x.numbers[rows], y[rows])
        shown = np.isfinite(curves[label])
        ax.plot(grid[shown], curves[label][shown], label=label,
                **line_style(OKABE_ITO[colour], dash, marker) | {"markevery": None})
        if ref is not None:
            reference_values = on_grid(grid, x.numbers[rows], ref[rows])
            ax.plot(grid[shown], reference_values[shown], color=OKABE_ITO[colour], lw=1.0,
                    ls=REFERENCE_DOTS)
    if ref is not None:
        ax.plot([], [], color="0.3", lw=1.0, ls=REFERENCE_DOTS,
                label=f"thin dotted: {COLUMN_NAMES.get(reference, reference)}")
    _scales(ax, x, np.r_[y, ref if ref is not None else []])
    notes = coincidence_lines(curves, ax)
    missing = int(np.sum(~np.isfinite(y)))
    if missing:
        notes.append(f"{missing} point{'s' if missing > 1 else ''} without a value left out "
                     "(failed or not finished)")
    for line in notes:  # in the legend's box, which is placed clear of the lines
        ax.plot([], [], " ", label=textwrap.fill(line, NOTE_WIDTH))
    ax.set_xlabel(_axis_label(keys[0], x.unit))
    ax.set_ylabel(_axis_label(COLUMN_NAMES.get(column, column), column_unit(column, units)))
    ax.set_title(((title + ": ") if title else "") + "sweep (simulated)", fontsize=10)
    ax.legend(fontsize=LEGEND_SIZE, loc="best", title=", ".join(others) or None,
              title_fontsize=LEGEND_SIZE)
    stamp(fig, NATURAL_NOTE if units is None else "")
    return fig
