"""`one-particle`: two scalar fields restricted to one particle, V = 1/sqrt(2E_in 2E_out).

Its cubic coupling lambda_2 has another mass dimension; it is matched to the scenario's lambda:
lambda_2^2 = 4 M_g M_e lambda^2 ("nonrelativistic") or
lambda_2^2 = 4 M_e E_g* lambda^2 ("rest-frame", equal rest-frame rates with newton-wigner).
"""

from __future__ import annotations

import numpy as np

from .base import EXCITED, GROUND
from .newton_wigner import RelativisticEnergies


class OneParticle(RelativisticEnergies):
    """Relativistically normalised one-particle states of a two-field detector.

    E_g(p) = sqrt(p^2 + M_g^2), E_e(p) = sqrt(p^2 + M_e^2), V = 1 / sqrt(2 E_e 2 E_g), and a
    cubic coupling lambda_2 matched to lambda: lambda_2^2 = 4 M_g M_e lambda^2
    ("nonrelativistic") or 4 M_e E_g* lambda^2 ("rest-frame"), E_g* = sqrt(k*^2 + M_g^2).

    Parameters
    ----------
    ground_mass, gap, strength : float
        As for :class:`COMModel` (masses and gap in energy units).
    matching : str
        "nonrelativistic" or "rest-frame".

    References
    ----------
    Relativistic normalisation <p|q> = 2 E_p (2 pi)^3 delta^3(p - q): M. E. Peskin and
    D. V. Schroeder, An Introduction to Quantum Field Theory (Addison-Wesley, 1995), ch. 2.
    """

    name = "one-particle"

    def vertex(self, p_excited, p_ground):
        """V = 1 / sqrt(2 E_e(p_e) * 2 E_g(p_g)) (inverse energy units)."""
        return 1.0 / np.sqrt(4 * self.total_energy(EXCITED, p_excited)
                             * self.total_energy(GROUND, p_ground))

    def coupling_factor(self):
        """lambda_2 from the scenario's lambda and the matching rule.

        "rest-frame": lambda_2 = lambda sqrt(4 M_e E_g*), E_g* = sqrt(k*^2 + M_g^2), so that
        the rest-frame rate equals the newton-wigner one (k* being the momentum a massless
        quantum carries away); otherwise ("nonrelativistic") lambda_2 = lambda sqrt(4 M_g M_e).
        """
        if self.matching == "rest-frame":
            k_star = self.rest_emission_momentum()
            ground_energy = np.sqrt(k_star * k_star + self.ground_mass ** 2)
            return self.strength * np.sqrt(4 * self.excited_mass * ground_energy)
        return self.strength * np.sqrt(4 * self.ground_mass * self.excited_mass)
