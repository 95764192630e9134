"""`galilean`: non-relativistic COM, E_g = p^2/2M, E_e = p^2/2M + Omega, V = 1."""

from __future__ import annotations

import numpy as np

from .base import EXCITED, COMModel


class Galilean(COMModel):
    """Galilean COM with one mass M = M_g for both levels.

    E_g(p) - M_g = p^2 / 2M, E_e(p) - M_g = p^2 / 2M + Omega, V = 1.

    Parameters
    ----------
    ground_mass, gap, strength, matching
        As for :class:`COMModel` (masses and gap in energy units; `matching` unused).
    """

    name = "galilean"

    def energy(self, level, p):
        """Level energy above M_g: p^2 / 2M, plus Omega for the excited level."""
        p = np.asarray(p, dtype=float)
        return p * p / (2 * self.ground_mass) + (self.gap if level == EXCITED else 0.0)

    def momentum(self, level, energy):
        """Inverse of `energy`: |p| = sqrt(2 M (E - offset)), offset Omega (excited) or 0."""
        kinetic = np.asarray(energy, dtype=float) - (self.gap if level == EXCITED else 0.0)
        with np.errstate(invalid="ignore"):
            return np.where(kinetic >= 0, np.sqrt(2 * self.ground_mass * np.maximum(kinetic, 0)), np.nan)

    def velocity(self, level, p):
        """Velocity dE/dp = p / M, the same for both levels."""
        return np.asarray(p, dtype=float) / self.ground_mass

    def inertia(self, level, p):
        """p / (dE/dp) = M for both levels."""
        return np.full(np.shape(p), self.ground_mass)

    def rest_emission_momentum(self):
        """k* of a Galilean detector at rest: k + k^2/2M = Omega (massless quantum).

        k* = 2 Omega / (1 + sqrt(1 + 2 Omega/M)), the positive root written free of
        cancellation.
        """
        return 2 * self.gap / (1 + np.sqrt(1 + 2 * self.gap / self.ground_mass))
