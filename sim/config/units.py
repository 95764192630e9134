"""Physical units in scenario files, and the output units of a run that used them.

Any dimensional scenario key (``Key.dimension`` in :data:`sim.config.schema.SCHEMA`) may be written
as a string ``"<number> <unit>"``; :func:`resolve_units` replaces it by a float in natural units
(hbar = c = 1).  Unit parsing is done by pint, the physical constants are scipy.constants
(CODATA); no conversion factor is written by hand.

Natural energy unit.  A scenario that writes units measures every energy in units of its own
rest-frame gap, E0 = detector.gap (which must then carry a unit), so that the numbers the
solvers see stay O(1) where possible: Omega = 1, a mass M -> M c^2 / E0, a time
t -> t E0 / hbar, a length L -> L E0 / (hbar c), a momentum p -> p c / E0.  A bare number in such
a scenario is read in these natural units (``field.mass = 0.02`` is 0.02 gaps).

What a string may say, by dimension:

* energy (ground_mass, gap, field.mass, temperature): an energy ("1.9 eV"), a mass
  ("40 u" -> m c^2), a vacuum wavelength ("650 nm" -> h c / lambda), a frequency
  ("461 THz" -> h f; "rad/s" -> hbar omega) or a temperature ("300 K" -> k_B T);
* length (width, smearing, box_length): a length ("50 nm");
* momentum (packet.momentum, cutoff, bath.window): a momentum ("1.5 eV/c", "kg*m/s"), an energy
  read as p c ("1.5 eV"), or a wavenumber ("12 1/um" -> p = hbar k);
* time (t_max, coupling.lifetime): a time ("30 ns").

Output units (:class:`UnitSystem`): times in the unit written for run.t_max (else that of
coupling.lifetime, else ns), rates and the Lamb shift (as an angular frequency Delta / hbar) in
its inverse, momenta in "<E>/c" with <E> the energy unit written for detector.gap (eV when the
gap is a wavelength, frequency, mass or temperature), lengths in the unit written for
packet.width (else nm).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import cache
from typing import TYPE_CHECKING, Any, Mapping

import numpy as np
from scipy import constants as const

if TYPE_CHECKING:  # pint is imported when a scenario first writes a unit (it is slow to load)
    import pint

#: what each dimension accepts, for error messages
ALLOWED_UNITS = {
    "energy": 'an energy ("1.9 eV"), a mass ("40 u", "0.511 MeV/c^2"), a vacuum wavelength '
              '("650 nm"), a frequency ("461 THz") or a temperature ("300 K")',
    "length": 'a length ("50 nm", "2 um")',
    "momentum": 'a momentum ("1.5 eV/c", "1e-27 kg*m/s"), an energy read as p c ("1.5 eV") or '
                'a wavenumber ("12 1/um", p = hbar k)',
    "time": 'a time ("30 ns", "2 us")',
}

#: a quantity string: a decimal number, then the unit expression
QUANTITY_TEXT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")
#: unit expressions pint could take ages to evaluate: chained powers, long integers
COSTLY_UNIT_TEXT = re.compile(r"(\^|\*\*)[^A-Za-zµμΩ°]*(\^|\*\*)|\d{4,}")
MAX_UNIT_TEXT = 40

#: output columns (natural -> output units): powers of (time, momentum, length)
COLUMN_POWERS = {
    "t": (1, 0, 0), "t_max": (1, 0, 0),
    "p": (0, 1, 0), "p_mean": (0, 1, 0), "kick": (0, 1, 0),
    "p_var": (0, 2, 0), "x_var": (0, 0, 2), "x_var_transverse": (0, 0, 2),
    "density": (0, -1, 0),
    "rate_golden_rule": (-1, 0, 0), "rate_fitted": (-1, 0, 0), "lamb_shift": (-1, 0, 0),
    "t_start": (1, 0, 0), "t_end": (1, 0, 0), "line_rate": (-1, 0, 0),
    "rate": (-1, 0, 0), "length": (0, 0, 1),  # any rate or length (figures' axes)
    "coherence_at": (0, 0, 1),
}
#: momentum.csv snapshot columns are named "t=<time>" and hold momentum densities
SNAPSHOT_PREFIX = "t="
#: summary.json numbers given in output units by `UnitSystem.summary_entries`
SUMMARY_KEYS = ("rate_golden_rule", "rate_fitted", "lamb_shift", "t_max", "coherence_at")
#: entries of summary["fit"] (`sim.result.fits.RateFit.summary`) with a unit: the window's
#: first and last time and the line's rate; the others are dimensionless
SUMMARY_FIT_KEYS = ("t_start", "t_end", "line_rate")


class UnitProblem(ValueError):
    """A quantity string that cannot be read (the message says why, in a few words).

    Raised by :func:`parse_quantity` and the readers in :data:`SI_READERS`;
    :func:`resolve_units` catches it and turns it into one problem line of the scenario.

    Parameters
    ----------
    message : str
        The reason, a few words long (e.g. "unknown unit 'parsec/fortnight'").
    """


@cache
def registry() -> pint.UnitRegistry:
    """The one pint unit registry of the process (built on first use: it takes a moment).

    Returns
    -------
    pint.UnitRegistry
        pint's default registry, cached: every quantity of a run shares it, so that quantities
        parsed by different calls can be compared and converted.  pint keeps its parsed
        definitions in the user's cache folder (``cache_folder=":auto:"``: about 0.25 s less
        per process after the first, measured); where that folder cannot be used the registry
        is built without it.

    References
    ----------
    pint documentation, "Tutorial", "Defining units" and "Speeding up pint" (cache_folder).
    """
    import pint

    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except OSError:  # a read-only or missing cache folder: build it from the definitions
        return pint.UnitRegistry()


def parse_quantity(text: str) -> pint.Quantity:
    """Read a quantity string '<number> <unit>' as a pint Quantity.

    The number is a decimal literal (sign, decimal point and exponent allowed); the unit is any
    expression pint parses, at most MAX_UNIT_TEXT characters and without chained powers or long
    integers (which pint could take very long to evaluate).

    Parameters
    ----------
    text : str
        The string as written in the scenario, e.g. "650 nm" or "1.5 eV/c".

    Returns
    -------
    pint.Quantity
        The number in the unit as written (no conversion yet; any dimension).

    Raises
    ------
    UnitProblem
        When `text` is not '<number> <unit>', has no unit, has a unit expression that is too
        long or too costly, or names a unit pint does not know.

    References
    ----------
    pint documentation, "String parsing" (``UnitRegistry.parse_units``).
    """
    match = QUANTITY_TEXT.match(text)
    if not match:
        raise UnitProblem("expected '<number> <unit>'")
    number, unit_text = match.groups()
    if not unit_text:
        raise UnitProblem("a string needs a unit; write a bare number for natural units")
    if len(unit_text) > MAX_UNIT_TEXT or COSTLY_UNIT_TEXT.search(unit_text):
        raise UnitProblem("unit expression too complicated")
    try:
        unit = registry().parse_units(unit_text)
    except Exception:  # pint raises several error types for text it cannot read
        raise UnitProblem(f"unknown unit {unit_text!r}") from None
    return registry().Quantity(float(number), unit)


def _magnitude(q: pint.Quantity, unit: str) -> float:
    return float(q.to(unit).magnitude)


def energy_joule(q: pint.Quantity) -> float:
    """Read an energy-like quantity as an energy in J.

    The readings, by the dimension of `q`:

    * an energy E: E;
    * a mass m: E = m c^2;
    * a length, read as a vacuum wavelength lambda > 0: E = h c / lambda;
    * a frequency f (a unit of 1/time without "radian"): E = h f; an angular frequency omega
      (a unit containing "radian", e.g. "rad/s"): E = hbar omega;
    * a temperature T: E = k_B T.

    Parameters
    ----------
    q : pint.Quantity
        An energy, mass, vacuum wavelength, frequency or temperature.

    Returns
    -------
    float
        The energy in J (SI).

    Raises
    ------
    UnitProblem
        When `q` has none of these dimensions, or is a wavelength <= 0.

    References
    ----------
    SciPy documentation, ``scipy.constants`` (CODATA recommended values of c, h, hbar, k_B).
    """
    if q.check("[energy]"):
        return _magnitude(q, "J")
    if q.check("[mass]"):
        return _magnitude(q, "kg") * const.c ** 2
    if q.check("[length]"):
        wavelength = _magnitude(q, "m")
        if not wavelength > 0:
            raise UnitProblem("a vacuum wavelength must be > 0")
        return const.h * const.c / wavelength
    if q.check("1/[time]"):
        angular = "radian" in str(q.units)
        return _magnitude(q, "rad/s" if angular else "Hz") * (const.hbar if angular else const.h)
    if q.check("[temperature]"):
        return _magnitude(q, "K") * const.k
    raise UnitProblem(f"{q.units:~} is not an energy, mass, wavelength, frequency or temperature")


def momentum_si(q: pint.Quantity) -> float:
    """Read a momentum-like quantity as a momentum in kg m/s.

    A momentum p is taken as it is, an energy E as p = E / c, a wavenumber k (1/length, not
    divided by 2 pi) as p = hbar k.

    Parameters
    ----------
    q : pint.Quantity
        A momentum, an energy or a wavenumber.

    Returns
    -------
    float
        The momentum in kg m/s (SI).

    Raises
    ------
    UnitProblem
        When `q` is none of these.

    References
    ----------
    SciPy documentation, ``scipy.constants`` (CODATA recommended values of c and hbar).
    """
    if q.check("[mass] * [length] / [time]"):
        return _magnitude(q, "kg*m/s")
    if q.check("[energy]"):
        return _magnitude(q, "J") / const.c
    if q.check("1/[length]"):
        return _magnitude(q, "1/m") * const.hbar
    raise UnitProblem(f"{q.units:~} is not a momentum, an energy or a wavenumber")


def plain_reader(dimension: str, unit: str, name: str):
    """Make a reader of quantities of one pint dimension into their SI unit.

    Parameters
    ----------
    dimension : str
        pint dimensionality the quantity must have, e.g. "[length]" or "[time]".
    unit : str
        SI unit the value is returned in, e.g. "m" or "s".
    name : str
        What the quantity is, for the error message, e.g. "a length".

    Returns
    -------
    callable
        ``read(q) -> float``: the magnitude of `q` in `unit`; it raises :class:`UnitProblem`
        when `q` does not have `dimension`.
    """
    def read(q: pint.Quantity) -> float:
        if q.check(dimension):
            return _magnitude(q, unit)
        raise UnitProblem(f"{q.units:~} is not {name}")
    return read


#: dimension -> reader of a quantity into SI (J, kg m/s, m, s)
SI_READERS = {"energy": energy_joule, "momentum": momentum_si,
              "length": plain_reader("[length]", "m", "a length"),
              "time": plain_reader("[time]", "s", "a time")}


def natural_value(si: float, dimension: str, energy_unit: float) -> float:
    """Convert an SI value (J, kg m/s, m, s) to natural units with energy unit E0.

    E -> E / E0;  p -> p c / E0;  L -> L E0 / (hbar c);  t -> t E0 / hbar.

    Parameters
    ----------
    si : float
        The value in SI: J for an energy, kg m/s for a momentum, m for a length, s for a time.
    dimension : str
        "energy", "momentum", "length" or "time".
    energy_unit : float
        E0, the natural energy unit, in J.

    Returns
    -------
    float
        The value in natural units (hbar = c = 1): energy units (multiples of E0) for an
        energy or a momentum, inverse energy units (multiples of hbar / E0 and hbar c / E0)
        for a time or a length.

    References
    ----------
    SciPy documentation, ``scipy.constants`` (CODATA recommended values of c and hbar).
    """
    if dimension == "energy":
        return si / energy_unit
    if dimension == "momentum":
        return si * const.c / energy_unit
    if dimension == "length":
        return si * energy_unit / (const.hbar * const.c)
    if dimension == "time":
        return si * energy_unit / const.hbar
    raise AssertionError(dimension)


@dataclass(frozen=True)
class UnitSystem:
    """Natural energy unit of a scenario and the output units of its run.

    energy_joule: E0, the natural energy unit (the scenario's gap) in J.  Output units: times in
    `time_label` (= `time_seconds` s), momenta in `momentum_label` (an energy of
    `momentum_energy_joule` J over c), lengths in `length_label` (= `length_metres` m).

    Parameters
    ----------
    energy_joule : float
        E0, the natural energy unit, in J.
    time_label : str
        Name of the output time unit (default "ns").
    time_seconds : float
        The output time unit in s (default 1e-9).
    momentum_label : str
        Name of the output momentum unit (default "eV/c").
    momentum_energy_joule : float
        The energy E_out whose E_out / c is the output momentum unit, in J (default 1 eV).
    length_label : str
        Name of the output length unit (default "nm").
    length_metres : float
        The output length unit in m (default 1e-9).
    """

    energy_joule: float
    time_label: str = "ns"
    time_seconds: float = 1e-9
    momentum_label: str = "eV/c"
    momentum_energy_joule: float = const.e
    length_label: str = "nm"
    length_metres: float = 1e-9

    def factors(self) -> tuple[float, float, float]:
        """Factors that turn a natural-unit time, momentum and length into output units.

        time: hbar / (E0 t_out);  momentum: E0 / E_out (momenta in E_out / c);
        length: hbar c / (E0 L_out), with E0 = `energy_joule` and t_out, E_out, L_out the
        output units in SI.

        Returns
        -------
        (time, momentum, length) : tuple of float
            Output units per natural unit (dimensionless numbers): a natural-unit value times
            its factor is the value in the output unit.

        References
        ----------
        SciPy documentation, ``scipy.constants`` (CODATA recommended values of c and hbar).
        """
        time = const.hbar / self.energy_joule / self.time_seconds
        momentum = self.energy_joule / self.momentum_energy_joule
        length = const.hbar * const.c / self.energy_joule / self.length_metres
        return time, momentum, length

    @staticmethod
    def powers(column: str) -> tuple[int, int, int]:
        """Powers of (time, momentum, length) in the dimension of an output column.

        Parameters
        ----------
        column : str
            Output column name, e.g. "t", "p_var" or a momentum snapshot "t=<time>" (a density
            in momentum, power (0, -1, 0)).

        Returns
        -------
        tuple of int
            (time, momentum, length) powers, from :data:`COLUMN_POWERS`; (0, 0, 0) for a
            dimensionless or unknown column.
        """
        if column.startswith(SNAPSHOT_PREFIX):
            return COLUMN_POWERS["density"]
        return COLUMN_POWERS.get(column, (0, 0, 0))

    def to_output(self, column: str, values) -> np.ndarray:
        """Convert natural-unit values of one output column to output units.

        Each value is multiplied by prod_i factor_i ** power_i over (time, momentum, length),
        with the factors of :meth:`factors` and the powers of :meth:`powers`.

        Parameters
        ----------
        column : str
            Output column name (unknown columns are dimensionless and left unchanged).
        values : array_like
            The values in natural units (hbar = c = 1).

        Returns
        -------
        numpy.ndarray
            The values in output units (:meth:`column_unit`), as floats.
        """
        scale = math.prod(f ** n for f, n in zip(self.factors(), self.powers(column)))
        return np.asarray(values, dtype=float) * scale

    def column_unit(self, column: str) -> str:
        """Unit string of an output column, e.g. "ns", "1/ns", "eV/c", "(eV/c)^2", "1/(eV/c)".

        Parameters
        ----------
        column : str
            Output column name.

        Returns
        -------
        str
            The output unit, built from the labels and :meth:`powers`; "1" for a dimensionless
            column.
        """
        labels = (self.time_label, self.momentum_label, self.length_label)
        powers = self.powers(column)
        up = [(lab, n) for lab, n in zip(labels, powers) if n > 0]
        down = [(lab, -n) for lab, n in zip(labels, powers) if n < 0]
        if len(up) == 1 and up[0][1] == 1 and not down:
            return up[0][0]

        def factor(label: str, n: int) -> str:
            wrapped = f"({label})" if "/" in label else label
            return wrapped if n == 1 else f"{wrapped}^{n}"

        numerator = "*".join(factor(*f) for f in up) or "1"
        return f"{numerator}/{'*'.join(factor(*f) for f in down)}" if down else numerator


def _unit_label(q: pint.Quantity) -> str:
    return f"{q.units:~}".replace(" ", "")


def _dimensional_strings(raw: Mapping[str, Any], schema) -> list[tuple[str, str, int | None, str]]:
    """(table, key, list index or None, text) of every string at a dimensional key."""
    found = []
    for table, keys in schema.items():
        given = raw.get(table)
        if not isinstance(given, dict):
            continue
        for key, value in given.items():
            dimension = getattr(keys.get(key), "dimension", None)
            if dimension is None:
                continue
            if isinstance(value, str):
                found.append((table, key, None, value))
            elif isinstance(value, list):
                found += [(table, key, i, v) for i, v in enumerate(value) if isinstance(v, str)]
    return found


def _output_units(parsed: dict[tuple[str, str], pint.Quantity], energy_unit: float) -> UnitSystem:
    """Output units from the units the scenario wrote.

    Times in the unit written for run.t_max, else coupling.lifetime, else ns; momenta in
    "<E>/c" with <E> the unit of detector.gap when it is an energy (else eV/c); lengths in the
    unit of packet.width (else nm).
    """
    options = {}
    for key in (("run", "t_max"), ("coupling", "lifetime")):
        if key in parsed:
            q = parsed[key]
            options.update(time_label=_unit_label(q), time_seconds=_magnitude(1.0 * q.units, "s"))
            break
    gap = parsed[("detector", "gap")]
    if gap.check("[energy]"):
        options.update(momentum_label=f"{_unit_label(gap)}/c",
                       momentum_energy_joule=_magnitude(1.0 * gap.units, "J"))
    if ("packet", "width") in parsed:
        q = parsed[("packet", "width")]
        options.update(length_label=_unit_label(q), length_metres=_magnitude(1.0 * q.units, "m"))
    return UnitSystem(energy_joule=energy_unit, **options)


#: a stand-in for a string that could not be read, inside every dimensional key's range, so
#: that validation does not report the same key a second time (the load fails anyway)
UNREADABLE_PLACEHOLDER = 1.0


def resolve_units(raw: Mapping[str, Any], schema) -> tuple[Mapping[str, Any], UnitSystem | None,
                                                            list[str]]:
    """Replace every quantity string by its value in natural units (E0 = detector.gap).

    Returns (numeric raw dict, UnitSystem or None when the scenario writes no units, problems):
    one problem line per unreadable string, naming the key, the value and the allowed units.
    Never raises for user input.

    Each string is read into SI (:data:`SI_READERS`), then into natural units with
    E0 = detector.gap: E / E0, p c / E0, L E0 / (hbar c), t E0 / hbar (:func:`natural_value`).
    A scenario that writes any unit must write the gap with a unit too.

    Parameters
    ----------
    raw : mapping
        The scenario as TOML parses it (tables of keys); other values are passed through.
    schema : mapping
        Table -> key -> :class:`sim.config.schema.Key`; a key with a ``dimension`` may be a
        quantity string (or a list of them).

    Returns
    -------
    numeric : mapping
        `raw` itself when it writes no unit string, else a copy with every quantity string
        replaced by a float in natural units (UNREADABLE_PLACEHOLDER where it could not be
        read).
    units : UnitSystem or None
        The natural energy unit and the output units; None when the scenario writes no unit
        or has a problem.
    problems : list of str
        One line per unreadable string or missing gap unit (empty when all is well).
    """
    if not isinstance(raw, Mapping):
        return raw, None, []
    found = _dimensional_strings(raw, schema)
    if not found:
        return raw, None, []
    from pint import PintError

    problems: list[str] = []
    si: dict[tuple[str, str, int | None], float] = {}
    parsed: dict[tuple[str, str], pint.Quantity] = {}
    for table, key, index, text in found:
        dimension = schema[table][key].dimension
        name = f"{table}.{key}" + ("" if index is None else f"[{index}]")
        try:
            q = parse_quantity(text)
            si[table, key, index] = SI_READERS[dimension](q)
            parsed[table, key] = q
        except (UnitProblem, PintError, ArithmeticError) as exc:
            reason = (str(exc).splitlines() or ["unreadable"])[0]
            problems.append(f"{name} = {text[:60]!r}: {reason}; allowed: "
                            f"{ALLOWED_UNITS[dimension]}, or a number in natural units")
    gap_si = si.get(("detector", "gap", None))
    gap_written = raw.get("detector", {}).get("gap") if isinstance(raw.get("detector"), dict) else None
    if si and gap_si is None and gap_written is not None and not isinstance(gap_written, str):
        problems.append(f"detector.gap = {gap_written!r}: a scenario that writes units must give "
                        "the gap with a unit too (bare numbers are then in units of the gap); "
                        'allowed: ' + ALLOWED_UNITS["energy"])
    elif gap_si is not None and not (math.isfinite(gap_si) and gap_si > 0):
        problems.append(f"detector.gap = {raw['detector']['gap']!r}: allowed: > 0")
        gap_si = None
    numeric = _copy_tables(raw)
    for (table, key, index, _text) in found:
        value = (natural_value(si[table, key, index], schema[table][key].dimension, gap_si)
                 if gap_si is not None and (table, key, index) in si else UNREADABLE_PLACEHOLDER)
        if index is None:
            numeric[table][key] = value
        else:
            numeric[table][key][index] = value
    units = None if problems else _output_units(parsed, gap_si)
    return numeric, units, problems


#: how a bare number at a dimensional key is read in a scenario that writes units (E0 = gap)
_NATURAL_READING = {"energy": "{v} gap", "momentum": "{v} gap/c", "length": "{v} hbar c / gap",
                    "time": "{v} hbar / gap"}


def bare_number_notes(raw: Mapping[str, Any], schema, units: UnitSystem | None) -> list[str]:
    """One note per bare number at a dimensional key of a scenario that writes units.

    Such a number is read in natural units, E0 = detector.gap (``run.t_max = 130`` is
    130 hbar / E0), which is rarely what a scenario written in lab units means.  Zero, the same
    in every unit, gets no note.

    Parameters
    ----------
    raw : mapping
        The scenario as written (as TOML parses it).
    schema : mapping
        Table -> key -> :class:`sim.config.schema.Key`.
    units : UnitSystem or None
        The scenario's units (:func:`resolve_units`); None: no unit written, no note.

    Returns
    -------
    list of str
        E.g. "run.t_max = 130 taken as 130 hbar / gap = 5.4e-05 ns; write '130 ns'?"; the
        value in the output unit of its dimension (:meth:`UnitSystem.factors`).
    """
    if units is None or not isinstance(raw, Mapping):
        return []
    time, momentum, length = units.factors()
    energy_label = units.momentum_label.removesuffix("/c")
    out_units = {"energy": (momentum, energy_label), "momentum": (momentum, units.momentum_label),
                 "length": (length, units.length_label), "time": (time, units.time_label)}
    notes = []
    for table, keys in schema.items():
        given = raw.get(table)
        if not isinstance(given, Mapping):
            continue
        for key, value in given.items():
            dimension = getattr(keys.get(key), "dimension", None)
            if dimension is None:
                continue
            numbers = value if isinstance(value, list) else [value]
            if not numbers or not all(isinstance(v, (int, float)) and not isinstance(v, bool)
                                      and math.isfinite(v) for v in numbers):
                continue
            if all(v == 0 for v in numbers):
                continue
            factor, label = out_units[dimension]
            shown = [f"{v:.6g}" for v in numbers]
            converted = [f"{float(v) * factor:.3g}" for v in numbers]
            if isinstance(value, list):
                written = "[" + ", ".join(shown) + "]"
                reading = _NATURAL_READING[dimension].format(v=written)
                suggestion = "[" + ", ".join(f"'{c} {label}'" for c in shown) + "]"
                result = "[" + ", ".join(converted) + f"] {label}"
            else:
                written = shown[0]
                reading = _NATURAL_READING[dimension].format(v=written)
                suggestion = f"'{written} {label}'"
                result = f"{converted[0]} {label}"
            notes.append(f"{table}.{key} = {written} taken as {reading} = {result}; "
                         f"write {suggestion}?")
    return notes


def _copy_tables(raw: Mapping[str, Any]) -> dict:
    """A copy of the raw scenario whose tables (and lists in them) may be changed."""
    return {name: ({k: (list(v) if isinstance(v, list) else v) for k, v in value.items()}
                   if isinstance(value, dict) else value) for name, value in raw.items()}
