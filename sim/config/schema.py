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

from ..errors import ScenarioError
from .registry import METHOD_NAMES, MODEL_NAMES

# ---------------------------------------------------------------------------------------------
# The schema: one entry per key.  ``check`` returns None when the (already typed) value is
# allowed, otherwise the text "allowed: ...".
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Key:
    """One scenario key: its type, the allowed range, its default and its physical dimension.

    Parameters
    ----------
    kind : str
        "float", "int", "bool", "str" or "momentum" (a number, or [px, py, pz] in 3D).
    allowed : str
        Human-readable allowed range, used in error messages and the template.
    check : callable
        ``check(value) -> bool`` on the already typed value: True when it is allowed.
    default : object, optional
        Value used when the key is omitted; None: no default (optional keys chosen
        automatically, or required keys).
    required : bool
        Whether the key must be given.
    dimension : str, optional
        "energy", "length", "momentum" or "time" for a key that may be written as a unit
        string (read by :func:`sim.config.units.resolve_units`); None for a pure number.
    """

    kind: str  # "float", "int", "bool", "str", "momentum"
    allowed: str  # human-readable allowed range, used in error messages
    check: Callable[[Any], bool] = lambda v: True
    default: Any = None
    required: bool = False
    dimension: str | None = None  # energy, length, momentum or time: a unit string is allowed


def _positive(v):
    return v > 0


def _non_negative(v):
    return v >= 0


def _between(low, high):
    return lambda v: low <= v <= high


#: the gap is the natural energy unit of a lab-unit scenario; a bare-number gap must stay inside
#: this range so that every ratio the physics checks allow (sim.physics.checks.RATIO_RANGES) and
#: its squares and cubes stay finite and normal in double precision
GAP_RANGE = (1e-30, 1e30)
#: largest count of sample times, trajectories or bath / grid nodes: beyond these a run needs far
#: more memory or time than any machine has (the [bath] / [grid] estimate of `--dry-run` then
#: decides within them)
MAX_SAMPLES = 1_000_000
MAX_TRAJECTORIES = 1_000_000
MAX_MODES = 1_000_000
MAX_NODES = 100_000
MAX_FOCK = 1_000
#: largest seed: numpy's generators take any non-negative integer, TOML writes 64-bit ones
MAX_SEED = 2 ** 64 - 1


#: `packet.shape`: the momentum-space shapes of the centre-of-mass packet
PACKET_SHAPES = ("gaussian", "two-lobe", "file")


def _count(low, high):
    return Key("int", f"{low} .. {high}", _between(low, high))


def _choice(*options):
    return lambda v: v in options


def _choices_text(*options):
    return " | ".join(f'"{o}"' for o in options)


SCHEMA: dict[str, dict[str, Key]] = {
    "detector": {
        "model": Key("str", _choices_text(*MODEL_NAMES), _choice(*MODEL_NAMES), required=True),
        "ground_mass": Key("float", "> 0", _positive, required=True, dimension="energy"),
        "gap": Key("float", f"> 0, within {GAP_RANGE[0]:g} .. {GAP_RANGE[1]:g} in natural units",
                   _between(*GAP_RANGE), required=True, dimension="energy"),
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
        "shape": Key("str", _choices_text(*PACKET_SHAPES), _choice(*PACKET_SHAPES), "gaussian"),
        "separation": Key("float", '> 0 (packet.shape = "two-lobe" only)', _positive,
                          dimension="length"),
        "phase": Key("float", 'a number of radians (packet.shape = "two-lobe" only)', default=0.0),
        "amplitude_file": Key("str", 'a CSV file with columns p,re,im (packet.shape = "file" '
                              "only)", lambda v: bool(v.strip())),
    },
    "run": {
        "method": Key("str", _choices_text(*METHOD_NAMES), _choice(*METHOD_NAMES), "exact"),
        "t_max": Key("float", "> 0 (omit for five golden-rule lifetimes)", _positive,
                     dimension="time"),
        "samples": Key("int", f"2 .. {MAX_SAMPLES}", _between(2, MAX_SAMPLES), 201),
        "trajectories": Key("int", f"0 .. {MAX_TRAJECTORIES}", _between(0, MAX_TRAJECTORIES), 0),
        "seed": Key("int", f"0 .. {MAX_SEED}", _between(0, MAX_SEED)),
        "coherence_at": Key("float", "> 0 (omit for packet.separation of a two-lobe packet, "
                            "else no coherence)", _positive, dimension="length"),
    },
    "bath": {
        "box_length": Key("float", "> 0", _positive, dimension="length"),
        "modes": _count(2, MAX_MODES),
        "window": Key("float", "> 0", _positive, dimension="momentum"),
        "radial_nodes": _count(2, MAX_NODES),
        "angular_nodes": _count(2, MAX_NODES),
        "sectors": _count(1, MAX_NODES),
        "fock_modes": _count(1, MAX_FOCK),
        "directions": _count(2, MAX_NODES),
        "max_occupation": _count(1, MAX_FOCK),
        "max_quanta": _count(1, MAX_FOCK),
    },
    "grid": {
        "points": _count(3, MAX_MODES),
        "span": Key("float", "> 0 and <= 1000 (packet momentum widths each side)",
                    lambda v: 0 < v <= 1000),
        "directions": _count(2, MAX_NODES),
    },
}

REQUIRED_TABLES = ("detector", "field", "coupling", "packet")


# ---------------------------------------------------------------------------------------------
# The frozen configuration.
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Detector:
    """Two-level detector: COM model, ground rest mass M_g and rest-frame gap Omega (energy).

    Parameters
    ----------
    model : str
        Centre-of-mass model name (:data:`sim.config.registry.MODEL_NAMES`).
    ground_mass : float
        M_g, ground-state rest mass (energy units, M c^2 with c = 1).
    gap : float
        Omega = M_e - M_g, rest-frame level spacing (energy units).
    """

    model: str
    ground_mass: float
    gap: float

    @property
    def excited_mass(self) -> float:
        """Excited-state rest mass M_e = M_g + Omega.

        Returns
        -------
        float
            M_e (energy units).
        """
        return self.ground_mass + self.gap


@dataclass(frozen=True)
class FieldConfig:
    """Scalar field: spatial dimensions, field mass, smearing length, UV cutoff, temperature.

    Parameters
    ----------
    dimensions : int
        Spatial dimensions d, 1 or 3.
    mass : float
        Field mass m, w_k = sqrt(k^2 + m^2) (energy units).
    smearing : float
        Gaussian smearing length s, form factor F(k) = exp(-k^2 s^2 / 2) (inverse energy
        units, i.e. 1 / momentum units); 0: point-like.
    cutoff : float, optional
        Hard UV cutoff K on |k| (momentum units); None: chosen automatically.
    temperature : float
        k_B T of the field (energy units); 0: vacuum.
    """

    dimensions: int
    mass: float = 0.0
    smearing: float = 0.0
    cutoff: float | None = None  # None: none (golden rule), physics.field.default_cutoff (baths)
    temperature: float = 0.0


@dataclass(frozen=True)
class Coupling:
    """Monopole coupling lambda; `matching` fixes lambda_2 of the one-particle model.

    The golden-rule rate is Gamma = 2 pi Int d^dk |g(k)|^2 delta(...) with
    |g(k)|^2 = lambda^2 V^2 F(k)^2 / ((2 pi)^d 2 w_k), so lambda carries the energy dimension
    (3 - d) / 2: energy units in 1D, dimensionless in 3D.

    Parameters
    ----------
    strength : float
        lambda (energy^((3 - d)/2) in natural units).
    matching : str, optional
        One-particle model only: "nonrelativistic" (lambda_2^2 = 4 M_g M_e lambda^2) or
        "rest-frame" (lambda_2^2 = 4 M_e E_g* lambda^2, E_g* the ground energy after a decay
        at rest).
    rotating_wave : bool
        Keep only sigma+ a_k and sigma- a_k^dagger (rotating-wave approximation).
    lifetime : float, optional
        The rest-frame vacuum golden-rule lifetime 1/Gamma(0) as written in the scenario, when
        it set `strength` (inverse energy units, i.e. time units).
    """

    strength: float
    matching: str | None = None
    rotating_wave: bool = True
    lifetime: float | None = None  # as written in the scenario, when it set `strength`


@dataclass(frozen=True)
class PacketConfig:
    """COM packet: its shape, position std `width` (per axis), mean momentum vector, level.

    A "gaussian" packet is one Gaussian; a "two-lobe" packet two equal Gaussian lobes of
    `width`, centres `separation` apart along the packet axis, the second with the relative
    phase `phase`; a "file" packet has the axial momentum amplitude tabulated in
    `amplitude_file` (times a Gaussian transverse profile of `width` in 3D).  Valid by
    construction: shape keys given without their shape are refused (`shape_problems`).

    Parameters
    ----------
    width : float
        Standard deviation of the position density per axis of the Gaussian (of each lobe; the
        transverse profile of a "file" packet in 3D) (inverse energy units, i.e. length units);
        its momentum spread is sigma_p = 1 / (2 width) (momentum units).
    momentum : tuple of float
        Mean COM momentum p0 of the Gaussian envelope, one component in 1D, (px, py, pz) in 3D
        (momentum units); for a "file" packet only its direction in 3D (the packet axis).
    internal : str
        Initial internal level, "excited" (decay) or "ground" (thermal excitation).
    shape : str
        "gaussian", "two-lobe" or "file" (:data:`PACKET_SHAPES`).
    separation : float, optional
        "two-lobe": distance d between the lobe centres along the packet axis (length units).
    phase : float
        "two-lobe": relative phase phi of the second lobe (radians).
    amplitude_file : str, optional
        "file": the CSV file p,re,im of the axial amplitude, as written in the scenario (a
        relative path is read from the current folder).

    Raises
    ------
    ScenarioError
        Listing every problem of `shape_problems`.
    """

    width: float
    momentum: tuple[float, ...]
    internal: str = "excited"
    shape: str = "gaussian"
    separation: float | None = None
    phase: float = 0.0
    amplitude_file: str | None = None

    def __post_init__(self):
        problems = self.shape_problems()
        if problems:
            raise ScenarioError(problems)

    def shape_problems(self) -> list[str]:
        """Keys that are valid alone but do not fit `shape`, one line each (key, value, rule).

        separation is required by and allowed only with "two-lobe", a non-zero phase only with
        "two-lobe", amplitude_file is required by and allowed only with "file", and a 1D "file"
        packet takes its axial momenta from the file, so a non-zero momentum is refused.

        Returns
        -------
        list of str
            One problem line each; empty when the packet keys fit together.
        """
        shape, out = self.shape, []
        own = {"separation": "two-lobe", "phase": "two-lobe", "amplitude_file": "file"}
        for key, needs in own.items():
            value = getattr(self, key)
            if value and shape != needs:
                out.append(f"packet.{key} = {_quoted(value)}: applies only to packet.shape = "
                           f'"{needs}" (shape is "{shape}"); remove it')
        if shape == "two-lobe" and self.separation is None:
            out.append('packet.separation: missing; allowed: > 0, the distance between the lobe '
                       'centres (required by packet.shape = "two-lobe")')
        if shape == "file" and self.amplitude_file is None:
            out.append("packet.amplitude_file: missing; allowed: a CSV file with columns "
                       'p,re,im (required by packet.shape = "file")')
        if shape == "file" and len(self.momentum) == 1 and self.momentum[0] != 0:
            out.append(f"packet.momentum = {self.momentum[0]!r}: a 1D packet.shape = \"file\" "
                       "takes its momenta from packet.amplitude_file; remove it (in 3D it gives "
                       "the direction of the packet axis)")
        return out


def _quoted(value) -> str:
    """A value as written in TOML: strings in double quotes, numbers by repr."""
    return f'"{value}"' if isinstance(value, str) else repr(value)


@dataclass(frozen=True)
class RunConfig:
    """Which solver and which times: method, t_max (None: automatic), samples, trajectories.

    Parameters
    ----------
    method : str
        Solver name (:data:`sim.config.registry.METHOD_NAMES`).
    t_max : float, optional
        Last sample time (time units, i.e. inverse energy units); None: five golden-rule
        lifetimes.
    samples : int
        Number of sample times from 0 to t_max.
    trajectories : int
        Number of quantum trajectories (markov only); 0: the master equation itself.
    seed : int, optional
        Random seed of the quantum trajectories.
    coherence_at : float, optional
        Distance d along the packet axis at which the spatial coherence
        |Tr(rho_COM(t) exp(i P d))| / |Tr(rho_COM(0) exp(i P d))| is reported (length units);
        None: the separation of a two-lobe packet, else none
        (`sim.physics.coherence.coherence_distance`).
    """

    method: str = "exact"
    t_max: float | None = None
    samples: int = 201
    trajectories: int = 0
    seed: int | None = None
    coherence_at: float | None = None


@dataclass(frozen=True)
class BathConfig:
    """Overrides of the truncated bath (None: chosen from the scenario by the solver).

    Parameters
    ----------
    box_length : float, optional
        1D: length L_box of the periodic box (length units, i.e. 1 / momentum units).
    modes : int, optional
        Number of field modes of the 1D truncated bath.
    window : float, optional
        Half-width of the resonance window of bath modes kept, |eps - E_e| <= window (energy
        units; momentum units with c = 1).
    radial_nodes : int, optional
        3D: quadrature nodes in |k|.
    angular_nodes : int, optional
        3D: quadrature nodes in cos(theta) about the packet axis.
    sectors : int, optional
        Number of packet momentum sectors P solved.
    fock_modes : int, optional
        fock method: number of field modes in the Fock space.
    directions : int, optional
        fock method, 3D: order n of the emission-direction rule (n Gauss-Legendre nodes in
        cos(theta) times 2n azimuths); None: the six octahedral directions.
    max_occupation : int, optional
        fock method: largest occupation of one mode.
    max_quanta : int, optional
        fock method: largest total number of quanta.
    """

    box_length: float | None = None
    modes: int | None = None
    window: float | None = None
    radial_nodes: int | None = None
    angular_nodes: int | None = None
    sectors: int | None = None
    fock_modes: int | None = None
    directions: int | None = None
    max_occupation: int | None = None
    max_quanta: int | None = None


@dataclass(frozen=True)
class GridConfig:
    """Overrides of the master-equation momentum grid (None: automatic).

    Parameters
    ----------
    points : int, optional
        Points of the COM momentum lattice.
    span : float, optional
        Packet momentum widths sigma_p covered each side of the mean (dimensionless).
    directions : int, optional
        Emission-direction nodes in cos(theta) (3D; 2 in 1D).
    """

    points: int | None = None
    span: float | None = None
    directions: int | None = None


@dataclass(frozen=True)
class Scenario:
    """One validated scenario. `source` is the scenario as read (before unit conversion).

    All numbers are in natural units (hbar = c = 1): energies, masses and momenta in one
    energy unit, times and lengths in its inverse.

    Parameters
    ----------
    title : str
        The scenario's title.
    detector : Detector
    field : FieldConfig
    coupling : Coupling
    packet : PacketConfig
    run : RunConfig
    bath : BathConfig
    grid : GridConfig
    source : mapping
        The scenario as read, unit strings included (not compared or hashed).
    units : sim.config.units.UnitSystem or None
        Natural energy unit and output units when the scenario writes units; None otherwise
        (not compared or hashed).
    notes : tuple of str
        Warnings about the scenario as written that did not stop it loading, one line each
        (e.g. a bare number taken in natural units in a scenario that writes units); not
        compared or hashed.
    """

    title: str
    detector: Detector
    field: FieldConfig
    coupling: Coupling
    packet: PacketConfig
    run: RunConfig = RunConfig()
    bath: BathConfig = BathConfig()
    grid: GridConfig = GridConfig()
    source: Mapping[str, Any] = field(default_factory=dict, compare=False, hash=False)
    units: Any = field(default=None, compare=False, hash=False)  # config.units.UnitSystem | None
    notes: tuple[str, ...] = field(default=(), compare=False, hash=False)

    @property
    def dimensions(self) -> int:
        """Spatial dimensions d of the field (and of the COM motion).

        Returns
        -------
        int
            1 or 3.
        """
        return self.field.dimensions

    @property
    def packet_axis(self) -> tuple[float, ...]:
        """Unit vector of the packet axis: along the mean momentum, z (or +x in 1D) if it is 0.

        Returns
        -------
        tuple of float
            p0 / |p0| (dimensionless), (1.0,) in 1D or (0, 0, 1) in 3D when p0 = 0.
        """
        p = self.packet.momentum
        norm = math.sqrt(sum(c * c for c in p))
        if norm == 0:
            return (1.0,) if len(p) == 1 else (0.0, 0.0, 1.0)
        return tuple(c / norm for c in p)

    @property
    def mean_momentum(self) -> float:
        """Mean momentum along the packet axis (signed in 1D, |p0| in 3D).

        Returns
        -------
        float
            p0 in 1D, |p0| in 3D (momentum units).
        """
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

