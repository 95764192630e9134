"""Scenario files: reading, validating and holding one simulation set-up.

A scenario is a TOML file (or an equivalent dict) with the tables ``[detector]``, ``[field]``,
``[coupling]``, ``[packet]``, ``[run]`` and the optional solver tables ``[bath]`` and ``[grid]``.
All quantities are in natural units (hbar = c = 1, one energy unit for energies, masses and
momenta; times and lengths in its inverse) unless the scenario writes them as strings with a
unit, which :mod:`sim.units` converts.

Every key is described once in :data:`SCHEMA`; validation collects every problem in the file
and raises one :class:`ScenarioError` naming each key, its value and what is allowed.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any, Callable, Mapping

MAX_SCENARIO_BYTES = 1_000_000


class ScenarioError(ValueError):
    """A scenario that cannot be run; ``problems`` holds one line per problem."""

    def __init__(self, problems: list[str] | str):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        super().__init__("\n".join(self.problems))


# ---------------------------------------------------------------------------------------------
# The schema: one entry per key.  ``check`` returns None when the (already typed) value is
# allowed, otherwise the text "allowed: ...".
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Key:
    """One scenario key: its type, the allowed range, its default and its physical dimension."""

    kind: str  # "float", "int", "bool", "str", "momentum"
    allowed: str  # human-readable allowed range, used in error messages
    check: Callable[[Any], bool] = lambda v: True
    default: Any = None
    required: bool = False
    dimension: str | None = None  # physical dimension for unit strings (see sim.units)


def _positive(v):
    return v > 0


def _non_negative(v):
    return v >= 0


def _choice(*options):
    return lambda v: v in options


def _choices_text(*options):
    return " | ".join(f'"{o}"' for o in options)


MODEL_NAMES = ("galilean", "newton-wigner", "one-particle")
METHOD_NAMES = ("perturbative", "markov", "exact", "fock")

SCHEMA: dict[str, dict[str, Key]] = {
    "detector": {
        "model": Key("str", _choices_text(*MODEL_NAMES), _choice(*MODEL_NAMES), required=True),
        "ground_mass": Key("float", "> 0", _positive, required=True, dimension="energy"),
        "gap": Key("float", "> 0", _positive, required=True, dimension="energy"),
    },
    "field": {
        "dimensions": Key("int", "1 | 3", _choice(1, 3), required=True),
        "mass": Key("float", ">= 0", _non_negative, 0.0, dimension="energy"),
        "smearing": Key("float", ">= 0", _non_negative, 0.0, dimension="length"),
        "cutoff": Key("float", "> 0 (omit for an automatic choice)", _positive, dimension="momentum"),
        "temperature": Key("float", ">= 0", _non_negative, 0.0, dimension="energy"),
    },
    "coupling": {
        "strength": Key("float", ">= 0", _non_negative),
        "lifetime": Key("float", "> 0 (replaces strength)", _positive, dimension="time"),
        "matching": Key("str", _choices_text("nonrelativistic", "rest-frame"),
                        _choice("nonrelativistic", "rest-frame")),
        "rotating_wave": Key("bool", "true | false", default=True),
    },
    "packet": {
        "width": Key("float", "> 0", _positive, required=True, dimension="length"),
        "momentum": Key("momentum", "a number, or [px, py, pz] in 3D", default=0.0,
                        dimension="momentum"),
        "internal": Key("str", _choices_text("excited", "ground"), _choice("excited", "ground"),
                        "excited"),
    },
    "run": {
        "method": Key("str", _choices_text(*METHOD_NAMES), _choice(*METHOD_NAMES), "exact"),
        "t_max": Key("float", "> 0 (omit for five golden-rule lifetimes)", _positive,
                     dimension="time"),
        "samples": Key("int", ">= 2", lambda v: v >= 2, 201),
        "trajectories": Key("int", ">= 0", _non_negative, 0),
        "seed": Key("int", ">= 0", _non_negative),
    },
    "bath": {
        "box_length": Key("float", "> 0", _positive, dimension="length"),
        "modes": Key("int", ">= 2", lambda v: v >= 2),
        "window": Key("float", "> 0", _positive, dimension="momentum"),
        "radial_nodes": Key("int", ">= 2", lambda v: v >= 2),
        "angular_nodes": Key("int", ">= 2", lambda v: v >= 2),
        "sectors": Key("int", ">= 1", lambda v: v >= 1),
        "fock_modes": Key("int", ">= 1", lambda v: v >= 1),
        "max_occupation": Key("int", ">= 1", lambda v: v >= 1),
        "max_quanta": Key("int", ">= 1", lambda v: v >= 1),
    },
    "grid": {
        "points": Key("int", ">= 3", lambda v: v >= 3),
        "span": Key("float", "> 0 (packet momentum widths each side)", _positive),
        "directions": Key("int", ">= 2", lambda v: v >= 2),
    },
}

REQUIRED_TABLES = ("detector", "field", "coupling", "packet")


# ---------------------------------------------------------------------------------------------
# The frozen configuration.
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Detector:
    """Two-level detector: COM model, ground rest mass M_g and rest-frame gap Omega (energy)."""

    model: str
    ground_mass: float
    gap: float

    @property
    def excited_mass(self) -> float:
        """M_e = M_g + Omega."""
        return self.ground_mass + self.gap


@dataclass(frozen=True)
class FieldConfig:
    """Scalar field: spatial dimensions, field mass, smearing length, UV cutoff, temperature."""

    dimensions: int
    mass: float = 0.0
    smearing: float = 0.0
    cutoff: float | None = None  # None: chosen automatically (sim.field.default_cutoff)
    temperature: float = 0.0


@dataclass(frozen=True)
class Coupling:
    """Monopole coupling lambda; `matching` fixes lambda_2 of the one-particle model."""

    strength: float
    matching: str | None = None
    rotating_wave: bool = True
    lifetime: float | None = None  # as written in the scenario, when it set `strength`


@dataclass(frozen=True)
class PacketConfig:
    """Gaussian COM packet: position std `width` (per axis), mean momentum vector, level."""

    width: float
    momentum: tuple[float, ...]
    internal: str = "excited"


@dataclass(frozen=True)
class RunConfig:
    """Which solver and which times: method, t_max (None: automatic), samples, trajectories."""

    method: str = "exact"
    t_max: float | None = None
    samples: int = 201
    trajectories: int = 0
    seed: int | None = None


@dataclass(frozen=True)
class BathConfig:
    """Overrides of the truncated bath (None: chosen from the scenario by the solver)."""

    box_length: float | None = None
    modes: int | None = None
    window: float | None = None
    radial_nodes: int | None = None
    angular_nodes: int | None = None
    sectors: int | None = None
    fock_modes: int | None = None
    max_occupation: int | None = None
    max_quanta: int | None = None


@dataclass(frozen=True)
class GridConfig:
    """Overrides of the master-equation momentum grid (None: automatic)."""

    points: int | None = None
    span: float | None = None
    directions: int | None = None


@dataclass(frozen=True)
class Scenario:
    """One validated scenario. `source` is the scenario as read (before unit conversion)."""

    title: str
    detector: Detector
    field: FieldConfig
    coupling: Coupling
    packet: PacketConfig
    run: RunConfig = RunConfig()
    bath: BathConfig = BathConfig()
    grid: GridConfig = GridConfig()
    source: Mapping[str, Any] = field(default_factory=dict, compare=False, hash=False)
    units: Any = field(default=None, compare=False, hash=False)  # sim.units.UnitSystem or None

    @property
    def dimensions(self) -> int:
        return self.field.dimensions

    @property
    def packet_axis(self) -> tuple[float, ...]:
        """Unit vector of the packet axis: along the mean momentum, z (or +x in 1D) if it is 0."""
        p = self.packet.momentum
        norm = math.sqrt(sum(c * c for c in p))
        if norm == 0:
            return (1.0,) if len(p) == 1 else (0.0, 0.0, 1.0)
        return tuple(c / norm for c in p)

    @property
    def mean_momentum(self) -> float:
        """Mean momentum along the packet axis (signed in 1D, |p0| in 3D)."""
        p = self.packet.momentum
        return p[0] if len(p) == 1 else math.sqrt(sum(c * c for c in p))


TABLE_CLASSES = {
    "detector": Detector,
    "field": FieldConfig,
    "coupling": Coupling,
    "packet": PacketConfig,
    "run": RunConfig,
    "bath": BathConfig,
    "grid": GridConfig,
}


# ---------------------------------------------------------------------------------------------
# Reading.
# ---------------------------------------------------------------------------------------------


def read_scenario_file(path: str | Path) -> dict:
    """Parse a TOML scenario file into a dict, with ScenarioError for anything unreadable."""
    path = Path(path)
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise ScenarioError(f"scenario file {str(path)!r}: cannot be read ({exc.strerror})") from None
    if path.is_dir():
        raise ScenarioError(f"scenario file {str(path)!r}: is a folder, expected a TOML file")
    if size == 0:
        raise ScenarioError(f"scenario file {str(path)!r}: is empty; expected TOML with "
                            "[detector], [field], [coupling] and [packet] tables")
    if size > MAX_SCENARIO_BYTES:
        raise ScenarioError(f"scenario file {str(path)!r}: is {size} bytes; scenario files are "
                            f"at most {MAX_SCENARIO_BYTES} bytes")
    data = path.read_bytes()
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise ScenarioError(f"scenario file {str(path)!r}: is not UTF-8 text (binary file?)") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"scenario file {str(path)!r}: is not valid TOML ({exc})") from None


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
                                         and math.isfinite(c) for c in value)
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


def _combination_problems(t: dict[str, dict[str, Any]]) -> list[str]:
    """Keys that are valid alone but make no sense together."""
    problems = []
    model = t["detector"].get("model")
    coupling = t["coupling"]
    if "matching" in coupling and model != "one-particle":
        problems.append(f'coupling.matching = "{coupling["matching"]}": applies only to '
                        f'detector.model = "one-particle" (model is "{model}"); remove it')
    if "strength" in coupling and "lifetime" in coupling:
        problems.append("coupling.lifetime: give either coupling.strength or coupling.lifetime, "
                        "not both")
    if "strength" not in coupling and "lifetime" not in coupling:
        problems.append("coupling.strength: missing; allowed: >= 0 (or give coupling.lifetime)")
    run = t["run"]
    if run.get("trajectories", 0) > 0 and run.get("method", "exact") != "markov":
        problems.append(f"run.trajectories = {run['trajectories']}: quantum trajectories unravel "
                        f'the master equation; allowed only with run.method = "markov"')
    if "seed" in run and run.get("trajectories", 0) == 0:
        problems.append(f"run.seed = {run['seed']}: seeds the quantum trajectories; set "
                        "run.trajectories > 0 or remove it")
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

    return Scenario(title=title, source=source, units=units,
                    **{name: make(name) for name in TABLE_CLASSES})


def load_scenario(scenario: str | Path | Mapping[str, Any] | Scenario) -> Scenario:
    """Read and validate a scenario from a TOML path or a dict (as TOML would parse it).

    Raises ScenarioError listing every problem (key, value, what is allowed).
    """
    if isinstance(scenario, Scenario):
        return scenario
    if isinstance(scenario, (str, Path)):
        raw = read_scenario_file(scenario)
    elif isinstance(scenario, Mapping):
        raw = _plain(scenario)
    else:
        raise ScenarioError(f"scenario: expected a file path or a dict, got {type(scenario).__name__}")
    from . import units as units_module

    numeric, units, unit_problems = units_module.resolve_units(raw, SCHEMA)
    tables, problems = _validate_tables(numeric)
    problems = unit_problems + problems
    if not problems:
        problems += _combination_problems(tables)
    if problems:
        raise ScenarioError(problems)
    scenario_obj = _build(tables, numeric.get("title", "untitled scenario"), raw, units)
    if scenario_obj.coupling.lifetime is not None:
        scenario_obj = _strength_from_lifetime(scenario_obj)
    problems = _physics_problems(scenario_obj)
    if problems:
        raise ScenarioError(problems)
    return scenario_obj


def _physics_problems(s: Scenario) -> list[str]:
    """Values that are each allowed but make the physics meaningless together.

    A UV cutoff at or below the rest-frame emitted momentum k0 leaves no resonant mode; a sample
    spacing longer than a golden-rule lifetime leaves the decay unresolved.
    """
    from .rates import packet_rate, rest_emitted_momentum

    problems = []
    k0 = rest_emitted_momentum(s)
    if s.field.cutoff is not None and k0 is not None and s.field.cutoff <= k0:
        problems.append(f"field.cutoff = {s.field.cutoff!r}: at or below the momentum k0 = {k0:.6g} "
                        f"a detector at rest emits, so the bath has no resonant mode; "
                        f"allowed: > {k0:.6g}")
    if s.run.t_max is not None:
        lifetimes = packet_rate(s) * s.run.t_max
        if lifetimes > s.run.samples - 1:
            need = math.ceil(lifetimes) + 1
            problems.append(f"run.samples = {s.run.samples}: t_max spans {lifetimes:.3g} golden-rule "
                            f"lifetimes, fewer than one sample each leaves the decay unresolved; "
                            f"allowed: >= {need} (or a shorter run.t_max)")
    return problems


def _plain(mapping: Mapping[str, Any]) -> dict:
    """A deep copy of nested mappings as plain dicts (lists copied too)."""
    def copy(v):
        if isinstance(v, Mapping):
            return {str(k): copy(x) for k, x in v.items()}
        if isinstance(v, (list, tuple)):
            return [copy(x) for x in v]
        return v
    return copy(mapping)


def _strength_from_lifetime(s: Scenario) -> Scenario:
    """Set lambda so that the rest-frame vacuum golden-rule lifetime 1/Gamma(0) is coupling.lifetime.

    Gamma is proportional to lambda^2 for every model (one-particle through its matching), so
    lambda = sqrt(1 / (tau * Gamma_1(0))) with Gamma_1 the rate at lambda = 1.
    """
    from .rates import template_rate

    # the vacuum emission lifetime of the detector at rest, whatever the packet's level or the
    # field's temperature (the lifetime a lab quotes)
    unit = replace(s, coupling=replace(s.coupling, strength=1.0),
                   packet=replace(s.packet, internal="excited"),
                   field=replace(s.field, temperature=0.0))
    gamma_1 = float(template_rate(unit, 0.0))
    if not gamma_1 > 0:
        raise ScenarioError(f"coupling.lifetime = {s.coupling.lifetime!r}: the detector at rest "
                            "cannot emit in this field (zero golden-rule rate); give "
                            "coupling.strength instead")
    strength = math.sqrt(1.0 / (s.coupling.lifetime * gamma_1))
    return replace(s, coupling=replace(s.coupling, strength=strength))


def set_keys(raw: Mapping[str, Any], values: Mapping[str, Any]) -> dict:
    """A copy of the raw scenario dict with dotted keys (``"packet.width"``) set to new values."""
    out = _plain(raw)
    for dotted, value in values.items():
        parts = dotted.split(".")
        if len(parts) != 2 or parts[0] not in SCHEMA or parts[1] not in SCHEMA[parts[0]]:
            raise ScenarioError(f"{dotted}: not a scenario key; use table.key, e.g. packet.width")
        out.setdefault(parts[0], {})[parts[1]] = value
    return out


def with_keys(s: Scenario, values: Mapping[str, Any]) -> Scenario:
    """The scenario re-read with dotted keys changed (validation included)."""
    return load_scenario(set_keys(s.source, values))
