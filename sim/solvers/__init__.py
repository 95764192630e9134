"""Solvers: a name -> class registry (`METHODS`), one package per method over `Solver`.

A solver turns a scenario into an `Evolution` (raw observables over the sample times); the
`Result` with its summary is assembled one layer up (`sim.result.run`, the front door).
"""

from __future__ import annotations

from importlib import import_module

from ..config.registry import METHODS
from ..physics.checks import load_scenario
from .base import Solver


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
        method "exact" with a thermal field).
    KeyError
        If `method` is not a key of `METHODS`.
    """
    s = load_scenario(scenario)
    return solver_class(method or s.run.method)(s, **options)


__all__ = ["METHODS", "Solver", "solver_class", "solver_for"]
