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
            problems.append(f"run.samples = {s.run.samples}: t_max spans {lifetimes:.3g} golden-rule "
                            f"lifetimes, fewer than one sample each leaves the decay unresolved; "
                            f"allowed: >= {need} (or a shorter run.t_max)")
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
