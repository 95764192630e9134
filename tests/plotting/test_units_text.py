"""Units as mathtext: powers as superscripts, compound units in parentheses, inverses as
fractions, and every unit a string matplotlib's mathtext parser accepts."""

from __future__ import annotations

import pytest
from matplotlib.mathtext import MathTextParser

from sim.plotting.style import NATURAL_SYMBOLS, power_unit, unit_symbol, unit_symbols

LAB = (r"\mathrm{ns}", r"\mathrm{eV}/c", r"\mathrm{nm}")


@pytest.mark.parametrize("powers, expected", [
    ((0, 2, 0), r"$(\mathrm{eV}/c)^{2}$"),
    ((-1, 0, 0), r"$\mathrm{ns}^{-1}$"),
    ((0, -1, 0), r"$c/\mathrm{eV}$"),
    ((0, 0, 2), r"$\mathrm{nm}^{2}$"),
    ((1, 0, 0), r"$\mathrm{ns}$"),
    ((0, 0, 0), ""),
])
def test_lab_units(powers, expected):
    assert power_unit(LAB, powers) == expected


def test_natural_units_invert_to_fractions():
    assert power_unit(NATURAL_SYMBOLS, (-1, 0, 0)) == r"$E/\hbar$"
    assert power_unit(NATURAL_SYMBOLS, (0, 0, 2)) == r"$(\hbar c/E)^{2}$"


def test_unit_labels_as_pint_writes_them():
    assert unit_symbol("eV/c") == r"\mathrm{eV}/c"
    assert unit_symbol("µm") == r"\mu\mathrm{m}"
    assert unit_symbol("kg*m/s") == r"\mathrm{kg}\,\mathrm{m}/\mathrm{s}"
    assert unit_symbols(None) == NATURAL_SYMBOLS


@pytest.mark.parametrize("symbols", [LAB, NATURAL_SYMBOLS, tuple(
    unit_symbol(x) for x in ("µs", "meV/c", "µm"))])
def test_every_unit_parses_as_mathtext(symbols):
    parser = MathTextParser("agg")
    for powers in [(1, 0, 0), (-1, 0, 0), (0, 1, 0), (0, 2, 0), (0, -1, 0), (0, 0, 1),
                   (0, 0, 2)]:
        parser.parse(power_unit(symbols, powers), dpi=72)
