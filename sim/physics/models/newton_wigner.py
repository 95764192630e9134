"""`newton-wigner`: E = sqrt(p^2 + M^2), M = M_g or M_e, V = 1."""

from __future__ import annotations

import numpy as np

from .base import EXCITED, COMModel, relativistic_kinetic


class RelativisticEnergies(COMModel):
    """Relativistic dispersion with a level-dependent rest mass (shared by two models).

    E_level(p) = sqrt(p^2 + M^2) with M = M_g (ground) or M_e = M_g + Omega (excited).

    Parameters
    ----------
    ground_mass, gap, strength, matching
        As for :class:`COMModel` (masses and gap in energy units).
    """

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
        """Velocity dE/dp = p / sqrt(p^2 + M^2)."""
        p = np.asarray(p, dtype=float)
        m = self._mass(level)
        return p / np.sqrt(p * p + m * m)

    def inertia(self, level, p):
        """p / (dE/dp) = E_level(p) = sqrt(p^2 + M^2)."""
        return self.total_energy(level, p)

    def total_energy(self, level, p):
        """Total energy sqrt(p^2 + M^2) of a level, rest energy included.

        Parameters
        ----------
        level : int
            GROUND (0) or EXCITED (1).
        p : array_like
            COM momentum magnitude (momentum units).

        Returns
        -------
        numpy.ndarray
            sqrt(p^2 + M^2) (energy units).
        """
        p = np.asarray(p, dtype=float)
        m = self._mass(level)
        return np.sqrt(p * p + m * m)


class NewtonWigner(RelativisticEnergies):
    """Relativistic COM, Newton-Wigner localised: exp(ik.X)|p> = |p + k>, V = 1.

    E_g(p) = sqrt(p^2 + M_g^2), E_e(p) = sqrt(p^2 + M_e^2); X is the Newton-Wigner position
    operator, so the field couples with a momentum-independent vertex.

    Parameters
    ----------
    ground_mass, gap, strength, matching
        As for :class:`COMModel` (masses and gap in energy units; `matching` unused).

    References
    ----------
    T. D. Newton and E. P. Wigner, "Localized States for Elementary Systems", Rev. Mod. Phys.
    21, 400 (1949).
    """

    name = "newton-wigner"
