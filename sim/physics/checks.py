"""The scenario loader users call: configuration checks, then the physics a scenario needs.

:func:`load_scenario` reads and validates the file (`sim.config.scenario.parse_scenario`), turns
`coupling.lifetime` into the coupling strength through the golden rule, and refuses values that
are each allowed but make the physics meaningless together (a cutoff below the emitted momentum,
samples too coarse for the decay).
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from typing import Any, Mapping

from ..config.scenario import parse_scenario, set_keys
from ..config.schema import Scenario
from ..errors import ScenarioError
from .golden_rule import packet_rate, rest_emitted_momentum, template_rate


def load_scenario(scenario: str | Path | Mapping[str, Any] | Scenario) -> Scenario:
    """Read, validate and complete a scenario.

    Parameters
    ----------
    scenario : str, Path, mapping or Scenario
        A TOML file, a dict shaped as TOML would parse it, or an already loaded Scenario
        (returned as it is).

    Returns
    -------
    Scenario
        Validated, in natural units (hbar = c = 1), with `coupling.strength` set from
        `coupling.lifetime` where the scenario gives a lifetime.

    Raises
    ------
    ScenarioError
        Listing every problem (key, value, what is allowed): configuration problems, then the
        physics problems of :func:`physics_problems`, or a lifetime given for a detector that
        cannot emit.
    """
    if isinstance(scenario, Scenario):
        return scenario
    parsed = parse_scenario(scenario)
    problems = range_problems(parsed)
    if problems:
        raise ScenarioError(problems)
    if parsed.coupling.lifetime is not None:
        parsed = strength_from_lifetime(parsed)
    problems = physics_problems(parsed)
    if problems:
        raise ScenarioError(problems)
    return parsed


def with_keys(scenario: Scenario, values: Mapping[str, Any]) -> Scenario:
    """The scenario re-read with dotted keys (``"packet.width"``) changed, validation included.

    Parameters
    ----------
    scenario : Scenario
        A loaded scenario; its `source` (the scenario as written) is changed and re-read.
    values : mapping
        Dotted key -> new value, as it would be written in the scenario file.

    Returns
    -------
    Scenario
        The changed scenario, validated and completed as by :func:`load_scenario`.

    Raises
    ------
    ScenarioError
        When a dotted key is not a scenario key, or the changed scenario is not valid.
    """
    return load_scenario(set_keys(scenario.source, values))


#: the usable range of each dimensional value as a ratio to its natural scale, (low, high), and
#: the scale: "gap" (Omega), "1/gap" (1 / Omega), "mass" (M_g) or "coupling" (Omega^((3-d)/2)).
#: Each range keeps the double-precision arithmetic of the solvers meaningful: M_e = M_g + Omega
#: stays distinct from M_g (M_g / Omega <= 1e15, ulp(1e15) = 0.125); phases Omega t and
#: momentum ratios up to 1e12 keep about four significant digits; squares and cubes of every
#: allowed value stay finite within sim.config.schema.GAP_RANGE.  A value 0 where the schema
#: allows it (a massless field, a point-like detector, a vacuum, a packet at rest) is always
#: usable.
RATIO_RANGES = {
    ("detector", "ground_mass"): ("gap", 1e-3, 1e15),
    ("field", "mass"): ("gap", 0.0, 1e12),
    ("field", "smearing"): ("1/gap", 0.0, 1e6),
    ("field", "cutoff"): ("gap", 1e-12, 1e12),
    ("field", "temperature"): ("gap", 0.0, 1e6),
    ("coupling", "strength"): ("coupling", 0.0, 1e6),
    ("coupling", "lifetime"): ("1/gap", 1e-6, 1e30),
    ("packet", "width"): ("1/gap", 1e-12, 1e12),
    ("packet", "momentum"): ("gap", 0.0, 1e12),
    ("run", "t_max"): ("1/gap", 1e-12, 1e12),
    ("bath", "box_length"): ("1/gap", 1e-12, 1e12),
    ("bath", "window"): ("gap", 1e-12, 1e12),
}
#: the packet momentum spread 1 / (2 width) and the mean momentum |p0| may be at most this many
#: ground masses: beyond it a Galilean detector moves faster than 100 c and the momentum grids
#: of the solvers no longer resolve the emitted momentum (about Omega) against the packet
MAX_MOMENTUM_PER_MASS = 100.0


def _log10(x: float) -> float:
    return math.log10(abs(x)) if x != 0 else -math.inf


def _written(s: Scenario, table: str, key: str, value) -> str:
    """The value as the scenario wrote it (unit string or number), with its natural value."""
    raw = s.source.get(table, {}) if isinstance(s.source.get(table), Mapping) else {}
    given = raw.get(key, value)
    shown = repr(given) if isinstance(given, str) else f"{given!r}"
    if isinstance(given, str) or isinstance(given, list) and any(isinstance(c, str) for c in given):
        shown += f" (= {_fmt(value)} natural units)"
    return shown


def _fmt(x) -> str:
    if isinstance(x, tuple):
        return "[" + ", ".join(f"{c:.4g}" for c in x) + "]"
    return f"{x:.4g}"


def range_problems(s: Scenario) -> list[str]:
    """Values each allowed by the schema but outside what double-precision numerics can honour.

    Every dimensional value is compared with its natural scale (the gap Omega, 1 / Omega, the
    ground mass, or Omega^((3-d)/2) for the coupling) by the ratios of :data:`RATIO_RANGES`;
    the packet momentum spread 1 / (2 width) and |p0| with the ground mass by
    MAX_MOMENTUM_PER_MASS.  Nothing is computed but these ratios (in logarithms, so that no
    ratio overflows), so the check is instant and comes before any heavy computation.

    Parameters
    ----------
    s : Scenario
        A scenario that passed the configuration checks (natural units).

    Returns
    -------
    list of str
        One line per problem: the key, its value as written (and in natural units) and the
        usable range in natural units.
    """
    gap = s.detector.gap
    coupling_scale = gap ** ((3 - s.dimensions) / 2)
    scales = {"gap": (gap, "detector.gap"), "1/gap": (1 / gap, "1 / detector.gap"),
              "coupling": (coupling_scale, "detector.gap" if s.dimensions == 1 else "1")}
    tables = {"detector": s.detector, "field": s.field, "coupling": s.coupling,
              "packet": s.packet, "run": s.run, "bath": s.bath}
    problems = []
    for (table, key), (scale_name, low, high) in RATIO_RANGES.items():
        value = getattr(tables[table], key)
        if value is None:
            continue
        size = math.sqrt(sum(c * c for c in value)) if isinstance(value, tuple) else value
        if isinstance(value, tuple) and not math.isfinite(size):  # components near 1e308
            size = max(abs(c) for c in value) * math.sqrt(len(value))
        if size == 0 and low == 0:
            continue
        scale, scale_text = scales[scale_name]
        ratio_log = _log10(size) - math.log10(scale)
        if math.log10(low) - 1e-9 <= ratio_log <= math.log10(high) + 1e-9 if low > 0 else \
                ratio_log <= math.log10(high) + 1e-9:
            continue
        if low > 0:
            usable = f"{low * scale:.3g} .. {high * scale:.3g}"
        else:
            usable = f"0 .. {high * scale:.3g}" if scale_name != "coupling" else f"0 .. {high * scale:.3g}"
        what = "|p0|" if key == "momentum" else "the value"
        problems.append(f"{table}.{key} = {_written(s, table, key, value)}: {what} is "
                        f"10^{ratio_log:.3g} times {scale_text}, beyond what double precision "
                        f"can honour; allowed (natural units): {usable}")
    odd_gap = not 1e-3 <= gap <= 1e3  # natural units chosen far from the gap
    if len(problems) >= 2 or problems and odd_gap:  # the gap may well be the odd one out
        names = ", ".join(p.split(" = ")[0] for p in problems)
        low, high = RATIO_RANGES[("detector", "ground_mass")][1:]
        mass = s.detector.ground_mass
        problems.insert(0, f"detector.gap = {_written(s, 'detector', 'gap', gap)}: the natural "
                        f"unit of {names}, which are all out of range against it; allowed "
                        f"(natural units) with detector.ground_mass = {mass:.4g}: "
                        f"{mass / high:.3g} .. {mass / low:.3g}")
    if any(p.startswith(("detector.ground_mass", "detector.gap")) for p in problems):
        return problems  # the comparisons with the mass below would repeat that problem
    mass = s.detector.ground_mass
    spread = 0.5 / s.packet.width
    limit = MAX_MOMENTUM_PER_MASS * mass
    if _log10(spread) > math.log10(limit):
        problems.append(f"packet.width = {_written(s, 'packet', 'width', s.packet.width)}: the "
                        f"packet momentum spread 1 / (2 width) = {spread:.3g} is more than "
                        f"{MAX_MOMENTUM_PER_MASS:g} ground masses (detector.ground_mass = "
                        f"{mass:.4g}); allowed (natural units): >= {0.5 / limit:.3g}")
    p0 = max((abs(c) for c in s.packet.momentum), default=0.0)
    if _log10(p0) > math.log10(limit):
        problems.append(f"packet.momentum = "
                        f"{_written(s, 'packet', 'momentum', s.packet.momentum)}: a mean momentum "
                        f"of more than {MAX_MOMENTUM_PER_MASS:g} ground masses "
                        f"(detector.ground_mass = {mass:.4g}); allowed (natural units): each "
                        f"component within +-{limit:.3g}")
    return problems


def physics_problems(s: Scenario) -> list[str]:
    """Values that are each allowed but make the physics meaningless together.

    A UV cutoff K at or below the rest-frame emitted momentum k0 (root of
    E_e(0) - E_g(k) - w_k = 0) leaves no resonant mode; a sample spacing longer than a
    golden-rule lifetime, t_max Gamma > samples - 1, leaves the decay unresolved.

    Parameters
    ----------
    s : Scenario
        A scenario that passed the configuration checks, with its coupling strength set.

    Returns
    -------
    list of str
        One line per problem, naming the key, its value and the allowed range; k0 and K in
        momentum units, t_max Gamma dimensionless (Gamma the packet-averaged golden-rule rate).
    """
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
            coupling = (f"coupling.lifetime = {s.coupling.lifetime:.4g} longer"
                        if s.coupling.lifetime is not None
                        else f"coupling.strength = {s.coupling.strength:.4g} smaller")
            problems.append(f"run.samples = {s.run.samples}: t_max spans {lifetimes:.3g} golden-rule "
                            f"lifetimes, fewer than one sample each leaves the decay unresolved; "
                            f"allowed: >= {need} (or a shorter run.t_max = {s.run.t_max:.4g}, or "
                            f"a weaker coupling: {coupling})")
    return problems


def strength_from_lifetime(s: Scenario) -> Scenario:
    """Set lambda so that the rest-frame vacuum golden-rule lifetime 1/Gamma(0) = tau.

    tau is `coupling.lifetime`.

    Gamma is proportional to lambda^2 for every model (one-particle through its matching), so
    lambda = sqrt(1 / (tau Gamma_1(0))) with Gamma_1 the rate at lambda = 1.  It is the vacuum
    emission lifetime of the detector at rest, whatever the packet's level or the field's
    temperature (the lifetime a lab quotes).

    Parameters
    ----------
    s : Scenario
        With `coupling.lifetime` tau set (time units).

    Returns
    -------
    Scenario
        The same scenario with `coupling.strength` = lambda (natural units,
        energy^((3 - d)/2): energy units in 1D, dimensionless in 3D).

    Raises
    ------
    ScenarioError
        When the detector at rest cannot emit in the scenario's field (Gamma_1(0) = 0, e.g. a
        field mass above what the gap can supply), so no strength gives the lifetime.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
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
