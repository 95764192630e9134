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
    """Relativistically normalised one-particle states of a two-field detector."""

    name = "one-particle"

    def vertex(self, p_excited, p_ground):
        """V = 1 / sqrt(2 E_e(p_e) * 2 E_g(p_g)) (inverse energy units)."""
        return 1.0 / np.sqrt(4 * self.total_energy(EXCITED, p_excited)
                             * self.total_energy(GROUND, p_ground))

    def coupling_factor(self):
        """lambda_2 from the scenario's lambda and the matching rule."""
        if self.matching == "rest-frame":
            k_star = self.rest_emission_momentum()
            ground_energy = np.sqrt(k_star * k_star + self.ground_mass ** 2)
            return self.strength * np.sqrt(4 * self.excited_mass * ground_energy)
        return self.strength * np.sqrt(4 * self.ground_mass * self.excited_mass)
