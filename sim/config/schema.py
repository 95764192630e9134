"""The scenario schema: every key once, with its type, allowed range, default and dimension,
and the frozen dataclasses a validated scenario is made of.

A scenario has the tables ``[detector]``, ``[field]``, ``[coupling]``, ``[packet]``, ``[run]``
and the optional solver tables ``[bath]`` and ``[grid]``.  All quantities are in natural units
(hbar = c = 1, one energy unit for energies, masses and momenta; times and lengths in its inverse)
unless written as strings with a unit (:mod:`sim.config.units`).  Adding a key is one entry in
:data:`SCHEMA` plus one field of its table's dataclass (and its meaning in
:mod:`sim.config.template`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

from .registry import METHOD_NAMES, MODEL_NAMES

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
    dimension: str | None = None  # physical dimension for unit strings (see sim.config.units)


def _positive(v):
    return v > 0


def _non_negative(v):
    return v >= 0


def _choice(*options):
    return lambda v: v in options


def _choices_text(*options):
    return " | ".join(f'"{o}"' for o in options)


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

