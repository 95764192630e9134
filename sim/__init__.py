"""recoilsim: simulated emission of a two-level detector with a quantum centre of mass.

Python entry points:
    load_scenario(path_or_dict) -> Scenario
    template_rate(scenario, p), packet_rate(scenario), rest_rate(scenario)   golden-rule rates
    run(scenario) -> Result                            time evolution with scenario.run.method
    METHODS                                            method name -> "module:Class"

The names are loaded on first use, so that `import sim` stays quick; importing `sim` never
loads qutip, dask or matplotlib.pyplot, and never switches matplotlib's backend.
"""

from __future__ import annotations

from importlib import import_module

#: public name -> module that defines it
_EXPORTS = {
    "METHODS": "sim.config.registry",
    "Result": "sim.result",
    "Scenario": "sim.config.schema",
    "ScenarioError": "sim.errors",
    "load_scenario": "sim.physics.checks",
    "packet_rate": "sim.physics.golden_rule",
    "rest_rate": "sim.physics.golden_rule",
    "template_rate": "sim.physics.golden_rule",
    "run": "sim.result",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name not in _EXPORTS:
        raise AttributeError(f"module 'sim' has no attribute {name!r}")
    value = getattr(import_module(_EXPORTS[name]), name)
    if name == "run":  # a Result drawn from a notebook: register the figures with it
        import_module("sim.plotting")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))
