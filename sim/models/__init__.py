"""Detector centre-of-mass models: name -> class.  A new model is one file plus one line here."""

from __future__ import annotations

from .base import EXCITED, GROUND, COMModel
from .galilean import Galilean
from .newton_wigner import NewtonWigner
from .one_particle import OneParticle

MODELS: dict[str, type[COMModel]] = {cls.name: cls for cls in (Galilean, NewtonWigner, OneParticle)}


def model_for(scenario, name: str | None = None) -> COMModel:
    """The scenario's model (or the model `name` with the scenario's parameters)."""
    d, c = scenario.detector, scenario.coupling
    key = name or d.model
    matching = c.matching or ("nonrelativistic" if key == "one-particle" else None)
    return MODELS[key](d.ground_mass, d.gap, c.strength, matching)


__all__ = ["MODELS", "COMModel", "GROUND", "EXCITED", "model_for"]
