"""What every figure shares: the "simulated" stamp, colours and line styles from the registries,
unit labels in mathtext, notes on coinciding curves, and saving in a chosen format.

matplotlib is imported only when a figure is drawn (`pyplot()`), and its backend is never
switched here: a notebook keeps its own; the command line chooses a file backend.

Every figure is drawn with a constrained layout that keeps a strip along its bottom edge for
the stamp (right) and, for a scenario in natural units, the note saying what the unit E is
(left): the stamp never overlaps a title or an axis label and always lies inside the saved
canvas.
"""

from __future__ import annotations

import math
import re
from itertools import cycle
from pathlib import Path

import numpy as np

from ..config.registry import (FIGURE_DPI, FIGURE_DPI_RANGE, FIGURE_FORMATS, METHOD_NAMES,
                               MODEL_NAMES)
from ..config.units import COLUMN_POWERS
from ..errors import UsageError
from ..io.atomic import atomic_save_figure
from ..result.result import truncation_verdict

STAMP = "simulated (recoilsim)"
#: written into the saved file's metadata as well
SIMULATED_NOTE = "simulated data from recoilsim, not a measurement"
#: the Okabe-Ito palette, distinguishable with the common colour-vision deficiencies (M. Okabe
#: and K. Ito, "Color Universal Design", 2008; common practice)
OKABE_ITO = {"black": "#000000", "orange": "#E69F00", "sky blue": "#56B4E9",
             "bluish green": "#009E73", "yellow": "#F0E442", "blue": "#0072B2",
             "vermillion": "#D55E00", "reddish purple": "#CC79A7"}
#: colours follow the registries' order (a new method or model gets the next colour)
METHOD_COLOURS = dict(zip(METHOD_NAMES, cycle(
    OKABE_ITO[c] for c in ("orange", "sky blue", "black", "vermillion", "bluish green",
                           "blue"))))
MODEL_COLOURS = dict(zip(MODEL_NAMES, cycle(
    OKABE_ITO[c] for c in ("blue", "vermillion", "bluish green", "reddish purple"))))
#: (line style, marker) per method, in registry order: two methods giving the same curve stay
#: told apart by their markers and dashes.  "--" is kept for curves that are not converged.
METHOD_LINES = dict(zip(METHOD_NAMES, cycle(
    (("-", "s"), (":", "o"), ("-", None), ("-.", "^"), ("-", "D"), (":", "v")))))
MODEL_LINES = dict(zip(MODEL_NAMES, cycle((("-", None), (":", "o"), ("-.", "s"), ("-", "^")))))
#: the line style of a curve that is not converged (a truncated bath)
NOT_CONVERGED = "--"
#: reference curves (golden rule, rotating-wave approximation): dash-dotted, in a colour no method
#: has, drawn on top so that a method's curve under it still shows between the dashes
REFERENCE_STYLE = {"color": OKABE_ITO["reddish purple"], "lw": 1.5, "ls": (0, (7, 2, 1.5, 2)),
                   "zorder": 5}
#: markers every this fraction of the axes diagonal; each line starts at a different offset
MARK_SPACING = 0.09

#: formats a figure may be saved in; default resolution (dots per inch) and the range accepted
FORMATS, DPI, DPI_RANGE = FIGURE_FORMATS, FIGURE_DPI, FIGURE_DPI_RANGE
#: size of a one-panel figure (inches): 960 x 630 pixels at DPI, readable on a slide
FIGSIZE = (6.4, 4.2)
#: font sizes (points) of legends and notes, of the stamp strip
LEGEND_SIZE = 8.5
STRIP_SIZE = 7.5
#: two curves closer than this fraction of the axis span look like one line (about a line
#: width on a 4-inch axis; an estimate)
RESOLUTION = 1 / 200

#: symbols of the natural units (hbar = c = 1) of time, momentum and length, E being the
#: scenario's own energy unit
NATURAL_SYMBOLS = (r"\hbar/E", r"E/c", r"\hbar c/E")
NATURAL_NOTE = "natural units: ħ = c = 1, E = the energy unit of the scenario's numbers"

def pyplot():
    """matplotlib.pyplot, imported on first use.

    Returns
    -------
    module
    """
    import matplotlib.pyplot as plt

    return plt


# ---------------------------------------------------------------------------------------------
# figures, the stamp and saving
# ---------------------------------------------------------------------------------------------


def new_figure(rows: int = 1, cols: int = 1, figsize=FIGSIZE, **kwargs):
    """A figure with a constrained layout and a grid of axes (`pyplot.subplots`), unstamped.

    Parameters
    ----------
    rows, cols : int
        The grid of axes.
    figsize : (float, float)
        Inches.
    **kwargs
        Passed to `pyplot.subplots` (sharex, height_ratios, ...).

    Returns
    -------
    (Figure, Axes or array of Axes)
    """
    return pyplot().subplots(rows, cols, figsize=figsize, layout="constrained", **kwargs)


def stamp(fig, note: str = "") -> None:
    """Mark a figure as simulated: the stamp in its bottom-right corner, in a strip the layout
    keeps free, and `note` (e.g. `NATURAL_NOTE`) at the strip's left.

    The strip is STRIP_SIZE points of text plus a margin, as a fraction 1.7 STRIP_SIZE / 72 / h
    of the figure height h (inches); a figure with a constrained layout keeps its axes above it.

    Parameters
    ----------
    fig : matplotlib Figure
    note : str
        Plain text for the strip's left end ('' for none).
    """
    strip = 1.7 * STRIP_SIZE / 72 / fig.get_figheight()
    engine = fig.get_layout_engine()
    if engine is not None and hasattr(engine, "set"):
        engine.set(rect=(0, strip, 1, 1 - strip))
    style = {"fontsize": STRIP_SIZE, "color": "0.35", "va": "bottom"}
    fig.text(0.995, 0.15 * strip, STAMP, ha="right", style="italic", **style)
    if note:
        fig.text(0.005, 0.15 * strip, note, ha="left", **style)


def stamp_for(fig, scenario) -> None:
    """Stamp a figure of one scenario: `stamp`, with `NATURAL_NOTE` when it has no units.

    Parameters
    ----------
    fig : matplotlib Figure
    scenario : Scenario or None
        None: a figure whose units are not a scenario's (no note).
    """
    stamp(fig, NATURAL_NOTE if scenario is not None and scenario.units is None else "")


def new_axes(ax=None, scenario=None, figsize=FIGSIZE):
    """`ax`, or the axes of a new stamped one-panel figure when None.

    Parameters
    ----------
    ax : matplotlib Axes, optional
    scenario : Scenario, optional
        For the stamp's unit note (`stamp_for`).
    figsize : (float, float)
        Inches, for a new figure.

    Returns
    -------
    matplotlib Axes
    """
    if ax is None:
        fig, ax = new_figure(figsize=figsize)
        stamp_for(fig, scenario)
    return ax


def figure_format(fmt: str) -> str:
    """A figure format name, checked.

    Parameters
    ----------
    fmt : str
        "png", "pdf" or "svg" (any case, a leading dot allowed).

    Returns
    -------
    str
        The format in lower case.

    Raises
    ------
    UsageError
        For any other format, naming the value and the allowed ones.
    """
    name = str(fmt).lower().lstrip(".")
    if name not in FORMATS:
        raise UsageError(f"--format {fmt!r}: unknown figure format; allowed: {', '.join(FORMATS)}")
    return name


def figure_dpi(dpi) -> float:
    """A resolution, checked.

    Parameters
    ----------
    dpi : float
        Dots per inch of saved raster images (pdf and svg embed only the colour maps).

    Returns
    -------
    float

    Raises
    ------
    UsageError
        Outside DPI_RANGE (or not a number), naming the value and the allowed range.
    """
    lo, hi = DPI_RANGE
    try:
        value = float(dpi)
    except (TypeError, ValueError):
        value = math.nan
    if not lo <= value <= hi:
        raise UsageError(f"--dpi {dpi!r}: allowed: {lo} to {hi} dots per inch")
    return value


def figure_path(path: str | Path, fmt: str | None = None) -> Path:
    """The file a figure is saved to: `path` with the suffix of `fmt`.

    Parameters
    ----------
    path : str or Path
        The file asked for, e.g. DIR/decay.png or rates (no suffix).
    fmt : str, optional
        A format of FORMATS.  It replaces a suffix that names a format and is appended to any
        other.  None: the format the suffix names, else png (appended).

    Returns
    -------
    Path

    Raises
    ------
    UsageError
        For an unknown `fmt`, or with `fmt` None a suffix that names no format (".jpg").
    """
    path = Path(path)
    suffix = path.suffix.lower().lstrip(".")
    if fmt is None:
        if not suffix:
            return path.with_name(path.name + ".png")
        if suffix not in FORMATS:
            raise UsageError(f"{str(path)!r}: unknown figure format {suffix!r}; allowed: "
                             f"{', '.join(FORMATS)}")
        return path
    fmt = figure_format(fmt)
    if suffix in FORMATS:
        return path.with_suffix("." + fmt)
    return path.with_name(path.name + "." + fmt)


#: metadata key that carries the "simulated" note, per format
_NOTE_KEY = {"png": "Description", "pdf": "Subject", "svg": "Description"}


def save(fig, path: str | Path, fmt: str | None = None, dpi: float = DPI) -> Path:
    """Save a figure atomically and close it.

    Parameters
    ----------
    fig : matplotlib Figure
    path : str or Path
        The file; its suffix is set by `fmt` (`figure_path`).
    fmt : str, optional
        "png", "pdf" or "svg"; None: from the suffix of `path` (png without one).
    dpi : float
        Dots per inch (DPI_RANGE): a FIGSIZE figure at the default DPI is 960 x 630 pixels.

    Returns
    -------
    Path
        The file written (its metadata say the figure is simulated).

    Raises
    ------
    UsageError
        For an unknown format or a resolution outside DPI_RANGE (nothing is written).
    """
    try:
        target = figure_path(path, fmt)
        fmt = target.suffix.lstrip(".").lower()
        atomic_save_figure(fig, target, dpi=figure_dpi(dpi), format=fmt,
                           metadata={_NOTE_KEY[fmt]: SIMULATED_NOTE})
    finally:
        pyplot().close(fig)
    return target


# ---------------------------------------------------------------------------------------------
# units
# ---------------------------------------------------------------------------------------------


def unit_symbol(label: str) -> str:
    """A unit label (as pint writes it, e.g. "eV/c", "µm", "kg*m/s") as mathtext without $.

    Parameters
    ----------
    label : str

    Returns
    -------
    str
        Unit names upright, c (the speed of light) italic, the micro prefix as mu.
    """
    parts = re.split(r"([/*])", label)
    out = []
    for part in parts:
        if part in ("/", "*"):
            out.append("/" if part == "/" else r"\,")
        elif part == "c" or not part:
            out.append(part)
        else:
            micro = part[0] in "µμ" and len(part) > 1
            body = part[1:] if micro else part
            out.append((r"\mu" if micro else "") + r"\mathrm{" + body + "}")
    return "".join(out)


def unit_symbols(units) -> tuple[str, str, str]:
    """Mathtext symbols (without $) of the output units of time, momentum and length.

    Parameters
    ----------
    units : UnitSystem or None
        A scenario's output units; None: NATURAL_SYMBOLS.

    Returns
    -------
    (str, str, str)
        E.g. (r"\\mathrm{ns}", r"\\mathrm{eV}/c", r"\\mathrm{nm}").
    """
    if units is None:
        return NATURAL_SYMBOLS
    return tuple(unit_symbol(x) for x in (units.time_label, units.momentum_label,
                                          units.length_label))


def power_unit(symbols: tuple[str, str, str], powers: tuple[int, int, int]) -> str:
    """The unit prod_i symbol_i ** power_i as mathtext in $...$.

    A single factor a/b to the power -1 is written b/a; other powers as superscripts, a
    compound symbol in parentheses.

    Parameters
    ----------
    symbols : (str, str, str)
        Mathtext of the time, momentum and length units (`unit_symbols`).
    powers : (int, int, int)
        Powers of time, momentum and length.

    Returns
    -------
    str
        E.g. "$(\\mathrm{eV}/c)^{2}$", "$\\mathrm{ns}^{-1}$", "$c/\\mathrm{eV}$"; "" when
        dimensionless.
    """
    factors = [(s, n) for s, n in zip(symbols, powers) if n]
    if not factors:
        return ""
    if len(factors) == 1 and factors[0][1] == -1 and factors[0][0].count("/") == 1:
        top, bottom = factors[0][0].split("/")
        return f"${bottom}/{top}$" if top != "1" else f"${bottom}$"

    def factor(symbol: str, n: int) -> str:
        if n == 1:
            return symbol
        wrapped = f"({symbol})" if ("/" in symbol or "," in symbol or " " in symbol) else symbol
        return f"{wrapped}^{{{n}}}"

    return "$" + r"\,".join(factor(s, n) for s, n in factors) + "$"


def unit_of(scenario, column: str) -> str:
    """Mathtext unit of a quantity drawn for a scenario.

    Parameters
    ----------
    scenario : Scenario or None
    column : str
        A key of COLUMN_POWERS ("t", "p", "p_var", "x_var", "density", "rate", "length", ...).

    Returns
    -------
    str
        "$...$", in the scenario's output units (natural units without them).
    """
    return power_unit(unit_symbols(getattr(scenario, "units", None)), COLUMN_POWERS[column])


def labelled(name: str, scenario, column: str) -> str:
    """An axis label "name [unit]".

    Parameters
    ----------
    name : str
        What is drawn (mathtext allowed), e.g. r"momentum variance $\\mathrm{Var}\\,p$".
    scenario : Scenario or None
    column : str
        A key of COLUMN_POWERS.

    Returns
    -------
    str
    """
    return f"{name} [{unit_of(scenario, column)}]"


def output_scale(scenario, column: str) -> float:
    """Output units per natural unit of a quantity: prod_i factor_i ** power_i.

    Parameters
    ----------
    scenario : Scenario
    column : str
        A key of COLUMN_POWERS.

    Returns
    -------
    float
        1 for a scenario without units; else ``UnitSystem.to_output(column, 1)``, the product
        over (time, momentum, length) of its factors to the quantity's powers.
    """
    units = scenario.units
    if units is None:
        return 1.0
    return float(units.to_output(column, 1.0))


def in_output_units(scenario, column: str, values):
    """Natural-unit values of a quantity in the scenario's output units.

    Parameters
    ----------
    scenario : Scenario
    column : str
        A key of COLUMN_POWERS.
    values : float or ndarray
        In natural units.

    Returns
    -------
    ndarray
        values * `output_scale` (unchanged for a scenario without units).
    """
    return np.asarray(values, dtype=float) * output_scale(scenario, column)


def time_label(scenario) -> str:
    """Axis label of times, with their unit.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    str
        "time $t$ [unit]".
    """
    return labelled("time $t$", scenario, "t")


def output_times(result):
    """The run's sample times in output units.

    Parameters
    ----------
    result : Result

    Returns
    -------
    ndarray
    """
    return in_output_units(result.scenario, "t", result.times)


def quantity_text(value: float, scenario, column: str, digits: int = 3) -> str:
    """A value with its unit for a legend or note, e.g. "450 $\\hbar/E$" or "150 ns".

    Parameters
    ----------
    value : float
        In natural units.
    scenario : Scenario
    column : str
        A key of COLUMN_POWERS.
    digits : int
        Significant digits.

    Returns
    -------
    str
    """
    shown = float(in_output_units(scenario, column, value))
    return f"{shown:.{digits}g} {unit_of(scenario, column)}".strip()


# ---------------------------------------------------------------------------------------------
# curves: styles, truncated baths, coinciding lines
# ---------------------------------------------------------------------------------------------


def line_style(colour: str, dash, marker, index: int = 0, lw: float = 1.8) -> dict:
    """Keyword arguments of `Axes.plot` for one curve of a family.

    Markers are placed every MARK_SPACING of the axes diagonal, starting at index *
    MARK_SPACING / 4, so curves lying on top of each other show their markers side by side.

    Parameters
    ----------
    colour : str
    dash : str or tuple
        A matplotlib line style.
    marker : str or None
    index : int
        Position of the curve in its family (registry order).
    lw : float
        Line width (points).

    Returns
    -------
    dict
    """
    style = {"color": colour, "ls": dash, "lw": lw}
    if marker:
        style.update(marker=marker, ms=4.5, mfc="white", mew=1.2,
                     markevery=((index % 4) * MARK_SPACING / 4, MARK_SPACING))
    return style


def method_style(method: str, converged: bool = True) -> dict:
    """`line_style` of a method (colour and line from the registry order).

    Parameters
    ----------
    method : str
    converged : bool
        False: the NOT_CONVERGED dashes, whatever the method's own line.

    Returns
    -------
    dict
        Exact, the reference of comparisons, is drawn thicker and under the other methods.
    """
    dash, marker = METHOD_LINES.get(method, ("-", None))
    index = METHOD_NAMES.index(method) if method in METHOD_NAMES else 0
    thick = method == "exact"  # the reference: thick, and under the others
    return line_style(METHOD_COLOURS.get(method, "0.5"), dash if converged else NOT_CONVERGED,
                      marker, index, lw=2.6 if thick else 1.8) | {"zorder": 2 if thick else 3}


def model_style(model: str) -> dict:
    """`line_style` of a centre-of-mass model (colour and line from the registry order).

    Parameters
    ----------
    model : str

    Returns
    -------
    dict
    """
    dash, marker = MODEL_LINES.get(model, ("-", None))
    index = MODEL_NAMES.index(model) if model in MODEL_NAMES else 0
    return line_style(MODEL_COLOURS.get(model, "0.5"), dash, marker, index)


def bath_truncation(result) -> tuple[int, int, bool | None] | None:
    """(modes kept, modes available, converged) when a run's bath keeps fewer modes than it
    stands for.

    Read from the run's stats: the solver's truncation record ``truncation`` (kept, of, and
    converged: True, False, or None when not checked), else the fock method's ``fock_modes``
    and ``box_modes``.

    Parameters
    ----------
    result : Result

    Returns
    -------
    (int, int, bool or None) or None
        None when every available mode is kept, or the method reports no mode count.
    """
    stats = result.summary.get("stats", {})
    record = stats.get("truncation") or {}
    kept = record.get("kept", stats.get("fock_modes"))
    available = record.get("of", stats.get("box_modes"))
    if kept is None or available is None or kept >= available:
        return None
    return int(kept), int(available), record.get("converged")


def truncation_converged(result) -> bool:
    """Whether a run's curve may be drawn as converged: no truncation, or one judged converged.

    Parameters
    ----------
    result : Result

    Returns
    -------
    bool
    """
    cut = bath_truncation(result)
    return cut is None or cut[2] is True


def method_label(method: str, result=None) -> str:
    """Legend text of a method's curve: "method (simulated)", and its bath truncation.

    Parameters
    ----------
    method : str
    result : Result, optional
        Its run (for `bath_truncation`).

    Returns
    -------
    str
        E.g. "fock, truncated: 24 of 307 modes (not converged)", "(converged)" or
        "(convergence not checked)".
    """
    cut = bath_truncation(result) if result is not None else None
    if cut:
        return f"{method}, truncated: {cut[0]} of {cut[1]} modes ({truncation_verdict(cut[2])})"
    return f"{method} (simulated)"


def largest_gap(a, b, log: bool = False) -> float:
    """Largest distance between two curves on common samples (of log10 on a log axis).

    Parameters
    ----------
    a, b : ndarray
        The same length.
    log : bool
        Compare log10 of the values (samples where either is <= 0 ignored).

    Returns
    -------
    float
        nan when no sample can be compared.
    """
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    ok = np.isfinite(a) & np.isfinite(b) & ((a > 0) & (b > 0) if log else True)
    if not ok.any():
        return math.nan
    d = np.log10(a[ok]) - np.log10(b[ok]) if log else a[ok] - b[ok]
    return float(np.max(np.abs(d)))


def axis_span(ax) -> float:
    """The span of an axes' vertical axis as drawn (in decades on a log axis).

    Parameters
    ----------
    ax : matplotlib Axes

    Returns
    -------
    float
    """
    lo, hi = ax.get_ylim()
    if ax.get_yscale() == "log":
        return float(abs(np.log10(hi) - np.log10(max(lo, 1e-300))))
    return float(abs(hi - lo))


def coincident_pairs(curves: dict, ax) -> list[tuple[str, str, float]]:
    """Pairs of curves drawn on top of each other in `ax`.

    Two curves coincide when their largest distance (`largest_gap`, in decades on a log axis)
    is below RESOLUTION of the vertical axis span as drawn (`axis_span`).

    Parameters
    ----------
    curves : dict
        Name -> values on common samples.
    ax : matplotlib Axes
        The axes they are drawn in, its limits set.

    Returns
    -------
    list of (str, str, float)
        (name, name, largest absolute difference of the values) per coinciding pair.
    """
    log = ax.get_yscale() == "log"
    limit = RESOLUTION * axis_span(ax)
    names = list(curves)
    pairs = []
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            gap = largest_gap(curves[a], curves[b], log)
            if np.isfinite(gap) and gap <= limit:
                pairs.append((a, b, largest_gap(curves[a], curves[b])))
    return pairs


def coincidence_lines(curves: dict, ax) -> list[str]:
    """One note line per group of curves drawn on top of each other in `ax`.

    Groups are the connected sets of `coincident_pairs`.

    Parameters
    ----------
    curves : dict
        Name -> values on common samples.
    ax : matplotlib Axes
        The axes they are drawn in, its limits set.

    Returns
    -------
    list of str
        "a, b and c coincide (largest difference 1.2e-12)" lines, the difference being the
        largest between any two of the group.
    """
    groups: list[tuple[set, float]] = []
    for a, b, d in coincident_pairs(curves, ax):
        joined = [g for g in groups if a in g[0] or b in g[0]]
        names = set().union({a, b}, *(g[0] for g in joined))
        groups = [g for g in groups if g not in joined]
        groups.append((names, max([d, *(g[1] for g in joined)])))
    lines = []
    for names, d in groups:
        ordered = [n for n in curves if n in names]
        listed = ", ".join(ordered[:-1]) + " and " + ordered[-1]
        lines.append(f"{listed} coincide (largest difference {d:.2g})")
    return lines


def add_note(ax, lines: list[str], loc: str = "lower left") -> None:
    """A small boxed note inside the axes (nothing for no lines).

    Parameters
    ----------
    ax : matplotlib Axes
    lines : list of str
    loc : str
        A matplotlib legend location.
    """
    if not lines:
        return
    from matplotlib.offsetbox import AnchoredText

    box = AnchoredText("\n".join(lines), loc=loc, prop={"fontsize": LEGEND_SIZE - 0.5},
                       frameon=True)
    box.patch.set(edgecolor="0.7", facecolor="white", alpha=0.9)
    ax.add_artist(box)
