"""Reading and validating scenario files (configuration only: no physics is computed here).

:func:`parse_scenario` turns a TOML path or a dict into a :class:`~sim.config.schema.Scenario`
whose every key is typed and range-checked; validation collects every problem in the file and
raises one :class:`~sim.errors.ScenarioError` naming each key, its value and what is allowed.
The physics checks and `coupling.lifetime` -> strength come on top of it in
:func:`sim.physics.checks.load_scenario`, the loader users call.
"""

from __future__ import annotations

import math
import stat
import sys
import tomllib
from dataclasses import fields
from pathlib import Path
from typing import Any, Mapping

from ..errors import ScenarioError
from . import units as units_module
from .schema import REQUIRED_TABLES, SCHEMA, TABLE_CLASSES, Scenario

MAX_SCENARIO_BYTES = 1_000_000
#: the path that means "read the scenario from standard input"
STDIN_NAME = "-"

# ---------------------------------------------------------------------------------------------
# Reading.
# ---------------------------------------------------------------------------------------------


def read_scenario_file(path: str | Path) -> dict:
    """Parse a TOML scenario file into a dict, with ScenarioError for anything unreadable.

    Parameters
    ----------
    path : str or Path
        The scenario file: UTF-8 TOML text of at most MAX_SCENARIO_BYTES bytes; "-"
        (STDIN_NAME) reads standard input, and a pipe or FIFO is read up to that size.

    Returns
    -------
    dict
        The file as TOML parses it (tables as dicts); no key is checked yet.

    Raises
    ------
    ScenarioError
        When the file cannot be read, is a folder, is empty, is larger than
        MAX_SCENARIO_BYTES, is not UTF-8 text or is not valid TOML.

    References
    ----------
    TOML v1.0.0 specification; Python documentation, ``tomllib``.
    """
    if str(path) == STDIN_NAME:
        data = _read_limited(sys.stdin.buffer, "standard input")
        label = "standard input"
        if not data:
            raise ScenarioError(f"scenario from {label}: nothing was read; expected TOML with "
                                "[detector], [field], [coupling] and [packet] tables")
        return _decode(data, f"scenario from {label}")
    path = Path(path)
    try:
        info = path.stat()
    except OSError as exc:
        raise ScenarioError(f"scenario file {str(path)!r}: cannot be read ({exc.strerror})") from None
    if path.is_dir():
        raise ScenarioError(f"scenario file {str(path)!r}: is a folder, expected a TOML file")
    if not stat.S_ISREG(info.st_mode):  # a pipe, FIFO or terminal: its size is known by reading
        try:
            with open(path, "rb") as stream:
                data = _read_limited(stream, f"scenario file {str(path)!r}")
        except OSError as exc:
            raise ScenarioError(f"scenario file {str(path)!r}: cannot be read "
                                f"({exc.strerror})") from None
        if not data:
            raise ScenarioError(f"scenario file {str(path)!r}: nothing was read from it; "
                                "expected TOML with [detector], [field], [coupling] and [packet] "
                                "tables")
        return _decode(data, f"scenario file {str(path)!r}")
    size = info.st_size
    if size == 0:
        raise ScenarioError(f"scenario file {str(path)!r}: is empty; expected TOML with "
                            "[detector], [field], [coupling] and [packet] tables")
    if size > MAX_SCENARIO_BYTES:
        raise ScenarioError(f"scenario file {str(path)!r}: is {size} bytes; scenario files are "
                            f"at most {MAX_SCENARIO_BYTES} bytes")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ScenarioError(f"scenario file {str(path)!r}: cannot be read ({exc.strerror})") from None
    return _decode(data, f"scenario file {str(path)!r}")


def _read_limited(stream, label: str) -> bytes:
    """Up to MAX_SCENARIO_BYTES bytes of a stream, ScenarioError when it holds more."""
    data = stream.read(MAX_SCENARIO_BYTES + 1)
    if len(data) > MAX_SCENARIO_BYTES:
        raise ScenarioError(f"{label}: holds more than {MAX_SCENARIO_BYTES} bytes; scenarios are "
                            f"at most {MAX_SCENARIO_BYTES} bytes")
    return data


def _decode(data: bytes, label: str) -> dict:
    """UTF-8 TOML bytes as a dict, ScenarioError naming `label` otherwise."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise ScenarioError(f"{label}: is not UTF-8 text (binary file?)") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{label}: is not valid TOML ({exc})") from None


def _typed(kind: str, value: Any, dims: int) -> tuple[Any, str | None]:
    """Coerce `value` to `kind`; return (value, None) or (None, reason)."""
    if kind == "bool":
        return (value, None) if isinstance(value, bool) else (None, "expected true or false")
    if kind == "str":
        return (value, None) if isinstance(value, str) else (None, "expected a string")
    if isinstance(value, bool):
        return None, "expected a number, got a boolean"
    if kind == "int":
        if isinstance(value, int):
            return value, None
        if isinstance(value, float) and value.is_integer():
            return int(value), None
        return None, "expected a whole number"
    if isinstance(value, int) and not -1e308 < value < 1e308:  # float(value) would overflow
        return None, "expected a finite number of at most 1e308 in size"
    if kind == "float":
        if isinstance(value, (int, float)) and math.isfinite(value):
            return float(value), None
        return None, "expected a finite number"
    if kind == "momentum":
        if isinstance(value, (int, float)) and math.isfinite(value):
            return ((float(value),) if dims == 1 else (0.0, 0.0, float(value))), None
        if isinstance(value, list):
            if dims != 3:
                return None, "a momentum vector [px, py, pz] needs field.dimensions = 3; use a number"
            ok = len(value) == 3 and all(isinstance(c, (int, float)) and not isinstance(c, bool)
                                         and -1e308 < c < 1e308 for c in value)
            return (tuple(float(c) for c in value), None) if ok else (
                None, "expected three finite numbers [px, py, pz]")
        return None, "expected a finite number"
    raise AssertionError(kind)


def _name(key: str) -> str:
    """A key as it appears in messages: bare if it is a plain TOML key, quoted otherwise."""
    plain = bool(key) and all(c.isalnum() or c in "_-" for c in key)
    return key if plain else _describe(key)


def _describe(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _validate_tables(raw: Mapping[str, Any]) -> tuple[dict[str, dict[str, Any]], list[str]]:
    """Type- and range-check every key; return the typed tables and the list of problems."""
    problems: list[str] = []
    tables: dict[str, dict[str, Any]] = {}
    dims = raw.get("field", {}).get("dimensions") if isinstance(raw.get("field"), dict) else None
    dims = dims if dims in (1, 3) else 1
    for name, value in raw.items():
        if name == "title":
            if not isinstance(value, str):
                problems.append(f"title = {_describe(value)}: expected a string")
        elif name not in SCHEMA:
            problems.append(f"[{_name(name)}]: unknown table; allowed: title, "
                            + ", ".join(f"[{t}]" for t in SCHEMA))
        elif not isinstance(value, dict):
            problems.append(f"{name} = {_describe(value)}: expected a table [{name}]")
    for table in REQUIRED_TABLES:
        if table not in raw:
            problems.append(f"[{table}]: missing table")
    for table, keys in SCHEMA.items():
        given = raw.get(table, {})
        if not isinstance(given, dict):
            continue
        typed: dict[str, Any] = {}
        for key, value in given.items():
            if key not in keys:
                problems.append(f"{table}.{_name(key)}: unknown key; allowed: " + ", ".join(keys))
                continue
            spec = keys[key]
            converted, reason = _typed(spec.kind, value, dims)
            if reason is None and not spec.check(converted):
                reason = f"allowed: {spec.allowed}"
            if reason is not None:
                problems.append(f"{table}.{key} = {_describe(value)}: {reason}"
                                + ("" if reason.startswith("allowed") else f" ({spec.allowed})"))
                continue
            typed[key] = converted
        if table in raw or table in REQUIRED_TABLES:
            for key, spec in keys.items():
                if spec.required and key not in given:
                    problems.append(f"{table}.{key}: missing; allowed: {spec.allowed}")
        tables[table] = typed
    return tables, problems


def inapplicable_keys(tables: Mapping[str, Mapping[str, Any]]) -> dict[str, str]:
    """Keys that are valid alone but do not apply given the others, each with why.

    Parameters
    ----------
    tables : mapping
        Table name -> key -> value (a scenario as written, or its typed tables).

    Returns
    -------
    dict
        Dotted key -> one problem line naming the key, its value and what it needs:
        coupling.matching without detector.model = "one-particle", run.trajectories > 0
        without run.method = "markov", run.seed without trajectories.
    """
    detector, coupling, run = (tables.get(t, {}) for t in ("detector", "coupling", "run"))
    model, trajectories = detector.get("model"), run.get("trajectories", 0)
    out = {}
    if "matching" in coupling and model != "one-particle":
        out["coupling.matching"] = (f'coupling.matching = "{coupling["matching"]}": applies only '
                                    f'to detector.model = "one-particle" (model is "{model}"); '
                                    "remove it")
    if isinstance(trajectories, int) and trajectories > 0 and run.get("method", "exact") != "markov":
        out["run.trajectories"] = (f"run.trajectories = {trajectories}: quantum trajectories "
                                   "unravel the master equation; allowed only with run.method = "
                                   '"markov"')
    if "seed" in run and trajectories == 0:
        out["run.seed"] = (f"run.seed = {run['seed']}: seeds the quantum trajectories; set "
                           "run.trajectories > 0 or remove it")
    return out


def _combination_problems(t: dict[str, dict[str, Any]]) -> list[str]:
    """Keys that are valid alone but make no sense together."""
    problems = list(inapplicable_keys(t).values())
    coupling = t["coupling"]
    if "strength" in coupling and "lifetime" in coupling:
        problems.append("coupling.lifetime: give either coupling.strength or coupling.lifetime, "
                        "not both")
    if "strength" not in coupling and "lifetime" not in coupling:
        problems.append("coupling.strength: missing; allowed: >= 0 (or give coupling.lifetime)")
    return problems


def _build(t: dict[str, dict[str, Any]], title: str, source: Mapping[str, Any], units) -> Scenario:
    def make(table: str):
        cls = TABLE_CLASSES[table]
        values = {k: v for k, v in t.get(table, {}).items()}
        for key, spec in SCHEMA[table].items():
            if key not in values and spec.default is not None:
                values[key] = spec.default
        if table == "packet" and isinstance(values.get("momentum"), float):
            p = values["momentum"]
            values["momentum"] = (p,) if t["field"]["dimensions"] == 1 else (0.0, 0.0, p)
        if table == "coupling":
            values.setdefault("strength", 0.0)
            if t["detector"]["model"] == "one-particle":
                values.setdefault("matching", "nonrelativistic")
        names = {f.name for f in fields(cls)}
        return cls(**{k: v for k, v in values.items() if k in names})

    notes = tuple(units_module.bare_number_notes(source, SCHEMA, units))
    return Scenario(title=title, source=source, units=units, notes=notes,
                    **{name: make(name) for name in TABLE_CLASSES})


def parse_scenario(scenario: str | Path | Mapping[str, Any]) -> Scenario:
    """Read and validate a scenario from a TOML path or a dict (as TOML would parse it).

    Unit strings are converted with E0 = detector.gap: E / E0, p c / E0, L E0 / (hbar c) and
    t E0 / hbar (:func:`sim.config.units.resolve_units`).

    Parameters
    ----------
    scenario : str, Path or mapping
        A TOML file, or a dict shaped as TOML would parse it (unit strings allowed).

    Returns
    -------
    Scenario
        Every key typed, range-checked and converted to natural units; a `coupling.lifetime`
        is kept as written (the strength is set from it by `sim.physics.checks.load_scenario`).

    Raises
    ------
    ScenarioError
        Listing every problem (key, value, what is allowed); also when `scenario` is neither a
        path nor a mapping, or the file cannot be read as TOML.
    """
    if isinstance(scenario, (str, Path)):
        raw = beside_the_file(read_scenario_file(scenario), Path(scenario))
    elif isinstance(scenario, Mapping):
        raw = _plain(scenario)
    else:
        raise ScenarioError(f"scenario: expected a file path or a dict, got {type(scenario).__name__}")
    numeric, units, unit_problems = units_module.resolve_units(raw, SCHEMA)
    tables, problems = _validate_tables(numeric)
    problems = unit_problems + problems
    if not problems:
        problems += _combination_problems(tables)
    if problems:
        raise ScenarioError(problems)
    return _build(tables, numeric.get("title", "untitled scenario"), raw, units)


def beside_the_file(raw: dict, path: Path) -> dict:
    """The raw scenario with a relative packet.amplitude_file read from the scenario's folder.

    Parameters
    ----------
    raw : dict
        The scenario as read from `path` (changed in place and returned).
    path : Path
        The scenario file.

    Returns
    -------
    dict
        `raw`, its packet.amplitude_file (when a relative path string) joined to path's folder.
    """
    packet = raw.get("packet")
    name = packet.get("amplitude_file") if isinstance(packet, dict) else None
    if isinstance(name, str) and name and not Path(name).is_absolute():
        packet["amplitude_file"] = str(path.resolve().parent / name)
    return raw


def _plain(mapping: Mapping[str, Any]) -> dict:
    """A deep copy of nested mappings as plain dicts (lists copied too)."""
    def copy(v):
        if isinstance(v, Mapping):
            return {str(k): copy(x) for k, x in v.items()}
        if isinstance(v, (list, tuple)):
            return [copy(x) for x in v]
        return v
    return copy(mapping)


def set_keys(raw: Mapping[str, Any], values: Mapping[str, Any]) -> dict:
    """A copy of the raw scenario dict with dotted keys (``"packet.width"``) set to new values.

    Parameters
    ----------
    raw : mapping
        The scenario as written (as TOML parses it); it is not changed.
    values : mapping
        Dotted key "table.key" -> new value, as it would be written in the file (a number in
        natural units or a unit string).

    Returns
    -------
    dict
        A deep copy of `raw` with the keys set (a missing table is added); not validated.

    Raises
    ------
    ScenarioError
        When a dotted key is not "table.key" with a table and key of the schema.
    """
    out = _plain(raw)
    for dotted, value in values.items():
        parts = dotted.split(".")
        if len(parts) != 2 or parts[0] not in SCHEMA or parts[1] not in SCHEMA[parts[0]]:
            raise ScenarioError(f"{dotted}: not a scenario key; use table.key, e.g. packet.width")
        out.setdefault(parts[0], {})[parts[1]] = value
    return out
