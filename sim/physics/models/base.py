"""The centre-of-mass model interface shared by every detector model.

Energies are measured from the ground-state rest energy M_g, so that differences between
heavy-detector energies stay accurate to machine precision (no cancellation of M_g ~ 1e10 against
Omega ~ 1 in lab units).  Momenta are magnitudes |p| >= 0: every model here is isotropic.
"""

from __future__ import annotations

from abc import ABC, abstractmethod

import numpy as np

GROUND, EXCITED = 0, 1
#: `packet.internal` -> internal level index
LEVELS = {"ground": GROUND, "excited": EXCITED}


def level_of(internal: str) -> int:
    """The internal level index (GROUND or EXCITED) of a `packet.internal` name."""
    return LEVELS[internal]


class COMModel(ABC):
    """A detector centre-of-mass model .

    Subclasses give the level energies E_g(p), E_e(p) above M_g, their inverses and slopes, and the
    vertex factor V(p_e, p_g); `coupling_factor` turns the scenario's lambda into the coupling that
    multiplies V (lambda itself, except where a model's coupling has another mass dimension).
    """

    name: str = ""

    def __init__(self, ground_mass: float, gap: float, strength: float, matching: str | None = None):
        self.ground_mass = float(ground_mass)
        self.gap = float(gap)
        self.excited_mass = self.ground_mass + self.gap
        self.strength = float(strength)
        self.matching = matching

    # --- kinematics -------------------------------------------------------------------------
    @abstractmethod
    def energy(self, level: int, p):
        """E_level(|p|) - M_g (energy units)."""

    @abstractmethod
    def momentum(self, level: int, energy):
        """Inverse of `energy`: |p| >= 0 with E_level(|p|) - M_g = energy (nan below the minimum)."""

    @abstractmethod
    def velocity(self, level: int, p):
        """dE_level/d|p| (units of c)."""

    @abstractmethod
    def inertia(self, level: int, p):
        """|p| / (dE_level/d|p|): M for a Galilean level, E_level(p) for a relativistic one."""

    # --- coupling ---------------------------------------------------------------------------
    def vertex(self, p_excited, p_ground):
        """Vertex factor V(p_e, p_g) multiplying the coupling (dimensionless unless overridden)."""
        return np.ones(np.broadcast(np.asarray(p_excited), np.asarray(p_ground)).shape)

    def coupling_factor(self) -> float:
        """The coupling constant multiplying V in g_P(k) (lambda for most models)."""
        return self.strength

    # --- shared helpers ---------------------------------------------------------------------
    def rest_emission_momentum(self) -> float:
        """k* = (M_e^2 - M_g^2) / (2 M_e) for the relativistic models (overridden where not)."""
        return self.gap * (2 * self.ground_mass + self.gap) / (2 * self.excited_mass)

    def __repr__(self) -> str:
        return (f"{type(self).__name__}(ground_mass={self.ground_mass!r}, gap={self.gap!r}, "
                f"strength={self.strength!r})")


def relativistic_kinetic(p, mass: float):
    """sqrt(p^2 + m^2) - m written as p^2 / (sqrt(p^2 + m^2) + m), free of cancellation."""
    p = np.asarray(p, dtype=float)
    return p * p / (np.sqrt(p * p + mass * mass) + mass)
