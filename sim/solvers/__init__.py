"""Solvers: a name -> class registry (`METHODS`), one package per method over `Solver`.

A solver turns a scenario into an `Evolution` (raw observables over the sample times); the
`Result` with its summary is assembled one layer up (`sim.result.run`, the front door).
"""

from __future__ import annotations

from importlib import import_module

from ..config.registry import METHOD_NAMES, METHODS
from ..errors import ScenarioError
from ..physics.checks import load_scenario
from .base import Solver

#: the packet shapes a solver class evolves unless it declares its own ``packet_shapes``
DEFAULT_PACKET_SHAPES = ("gaussian",)


def solver_class(method: str) -> type[Solver]:
    """The solver class registered for `method` (imported when first asked for).

    Parameters
    ----------
    method : str
        A key of `METHODS` ("perturbative", "markov", "exact", "fock").

    Returns
    -------
    type
        The `Solver` subclass named by ``METHODS[method]`` ("module:Class").

    Raises
    ------
    KeyError
        If `method` is not a key of `METHODS`.
    """
    module, name = METHODS[method].split(":")
    return getattr(import_module(module), name)


def solver_for(scenario, method: str | None = None, **options) -> Solver:
    """A solver for the scenario: its own `run.method` unless `method` is given.

    Parameters
    ----------
    scenario : Scenario, str, Path or dict
        Loaded with `sim.physics.checks.load_scenario` when it is not a Scenario yet.
    method : str, optional
        A key of `METHODS`.
    **options
        Passed to the solver (e.g. ``progress=True``).

    Returns
    -------
    Solver
        An instance of the registered class, not yet run (`Solver.run` evolves it).

    Raises
    ------
    ScenarioError
        If the scenario does not load or validate, or the chosen method cannot honour it (e.g.
        method "exact" with a thermal field, or a packet.shape outside the class's
        ``packet_shapes``: `shape_refusal`).
    KeyError
        If `method` is not a key of `METHODS`.
    """
    s = load_scenario(scenario)
    name = method or s.run.method
    cls = solver_class(name)
    if s.packet.shape not in packet_shapes(cls):
        raise ScenarioError(shape_refusal(s.packet.shape, name))
    return cls(s, **options)


def packet_shapes(cls: type[Solver]) -> tuple[str, ...]:
    """The packet shapes a solver class evolves: its ``packet_shapes``, else gaussian only.

    Parameters
    ----------
    cls : type
        A `Solver` subclass.

    Returns
    -------
    tuple of str
        Values of packet.shape (`sim.config.schema.PACKET_SHAPES`) the class evolves.
    """
    return tuple(getattr(cls, "packet_shapes", DEFAULT_PACKET_SHAPES))


def shape_refusal(shape: str, method: str) -> str:
    """The one-line refusal of a packet.shape that `method` does not evolve, naming the others.

    Parameters
    ----------
    shape : str
        The scenario's packet.shape.
    method : str
        The method that cannot evolve it (a key of `METHODS`).

    Returns
    -------
    str
        'packet.shape = "...": method "..." evolves only ... packets so far; use run.method =
        ...' with the methods (in `METHOD_NAMES` order) whose class lists `shape`, or the advice
        to use a gaussian packet when none does.
    """
    own = " and ".join(packet_shapes(solver_class(method)))
    able = [name for name in METHOD_NAMES if shape in packet_shapes(solver_class(name))]
    advice = (("use run.method = " + " or ".join(f'"{name}"' for name in able)) if able
              else 'no method evolves it yet; use packet.shape = "gaussian"')
    return (f'packet.shape = "{shape}": method "{method}" evolves only {own} packets so far; '
            f"{advice}")


__all__ = ["METHODS", "Solver", "packet_shapes", "solver_class", "solver_for"]
