"""`newton-wigner`: E = sqrt(p^2 + M^2), M = M_g or M_e, V = 1."""

from __future__ import annotations

import numpy as np

from .base import EXCITED, COMModel, relativistic_kinetic


class RelativisticEnergies(COMModel):
    """Relativistic dispersion with a level-dependent rest mass (shared by two models)."""

    def _mass(self, level):
        return self.excited_mass if level == EXCITED else self.ground_mass

    def _offset(self, level):
        return self.gap if level == EXCITED else 0.0

    def energy(self, level, p):
        """sqrt(p^2 + M^2) - M_g = (sqrt(p^2 + M^2) - M) + (M - M_g)."""
        return relativistic_kinetic(p, self._mass(level)) + self._offset(level)

    def momentum(self, level, energy):
        """|p| = sqrt(x (x + 2M)) with x = E - M the kinetic energy."""
        x = np.asarray(energy, dtype=float) - self._offset(level)
        with np.errstate(invalid="ignore"):
            return np.where(x >= 0, np.sqrt(np.maximum(x, 0) * (np.maximum(x, 0) + 2 * self._mass(level))),
                            np.nan)

    def velocity(self, level, p):
        p = np.asarray(p, dtype=float)
        m = self._mass(level)
        return p / np.sqrt(p * p + m * m)

    def inertia(self, level, p):
        return self.total_energy(level, p)

    def total_energy(self, level, p):
        """sqrt(p^2 + M^2) (energy units)."""
        p = np.asarray(p, dtype=float)
        m = self._mass(level)
        return np.sqrt(p * p + m * m)


class NewtonWigner(RelativisticEnergies):
    """Relativistic COM, Newton-Wigner localised: exp(ik.X)|p> = |p + k>, V = 1."""

    name = "newton-wigner"
