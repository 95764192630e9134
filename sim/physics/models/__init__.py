"""Detector centre-of-mass models behind one interface (`COMModel`).

`MODELS` maps each `detector.model` name of the registry (`sim.config.registry.MODEL_ENTRIES`)
to its class; a new model is one file here plus one line in the registry.
"""

from __future__ import annotations

from importlib import import_module

from ...config.registry import MODEL_ENTRIES
from .base import EXCITED, GROUND, COMModel, level_of


def _model_class(target: str) -> type[COMModel]:
    """The class at "module:Class"."""
    module, name = target.split(":")
    return getattr(import_module(module), name)


MODELS: dict[str, type[COMModel]] = {name: _model_class(entry.target)
                                     for name, entry in MODEL_ENTRIES.items()}


def model_for(scenario, name: str | None = None) -> COMModel:
    """The scenario's centre-of-mass model.

    Parameters
    ----------
    scenario : Scenario
    name : str, optional
        Another model's name, built with the scenario's masses, gap and coupling.

    Returns
    -------
    COMModel
        With M_g, Omega (energy units), lambda and, for `one-particle`, the matching rule
        ("nonrelativistic" unless the scenario says otherwise):
        lambda_2^2 = 4 M_g M_e lambda^2 ("nonrelativistic") or 4 M_e E_g* lambda^2
        ("rest-frame").
    """
    d, c = scenario.detector, scenario.coupling
    key = name or d.model
    matching = c.matching or ("nonrelativistic" if key == "one-particle" else None)
    return MODELS[key](d.ground_mass, d.gap, c.strength, matching)


__all__ = ["MODELS", "COMModel", "GROUND", "EXCITED", "level_of", "model_for"]
