"""Solvers: one front door (`run`), a name -> class map (`METHODS`), one file per method."""

from __future__ import annotations

from importlib import import_module

from ..result import Result
from ..scenario import Scenario, load_scenario
from .base import Solver

#: method key -> "module:class"; classes are imported when first used
METHODS: dict[str, str] = {
    "perturbative": "sim.solvers.perturbative:PerturbativeSolver",
    "exact": "sim.solvers.exact:ExactSolver",
    "markov": "sim.solvers.markov:MarkovSolver",
    "fock": "sim.solvers.fock:FockSolver",
}


def solver_class(method: str) -> type[Solver]:
    """The solver class registered for `method`."""
    module, name = METHODS[method].split(":")
    return getattr(import_module(module), name)


def solver_for(scenario, method: str | None = None, **options) -> Solver:
    """A solver for the scenario (its own `run.method` unless `method` is given)."""
    s = load_scenario(scenario)
    return solver_class(method or s.run.method)(s, **options)


def run(scenario: Scenario | str | dict, method: str | None = None, **options) -> Result:
    """Evolve a scenario with its `run.method` (or `method`) and return the Result."""
    return solver_for(scenario, method, **options).run()


__all__ = ["METHODS", "Solver", "run", "solver_class", "solver_for"]
