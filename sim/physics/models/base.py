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
    """The internal level index (GROUND or EXCITED) of a `packet.internal` name.

    Parameters
    ----------
    internal : str
        "ground" or "excited".

    Returns
    -------
    int
        GROUND (0) or EXCITED (1).
    """
    return LEVELS[internal]


class COMModel(ABC):
    """A detector centre-of-mass model.

    Subclasses give the level energies E_g(p), E_e(p) above M_g, their inverses and slopes, and
    the vertex factor V(p_e, p_g); `coupling_factor` turns the scenario's lambda into the
    coupling that multiplies V (lambda itself, except where a model's coupling has another mass
    dimension).

    Parameters
    ----------
    ground_mass : float
        M_g, ground-state rest mass (energy units).
    gap : float
        Omega = M_e - M_g, rest-frame gap (energy units); M_e = M_g + Omega is kept as
        `excited_mass`.
    strength : float
        The scenario's monopole coupling lambda (energy^((3 - d)/2) in natural units).
    matching : str, optional
        One-particle model only: "nonrelativistic" or "rest-frame" (how lambda_2 is matched
        to lambda); ignored by the other models.
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
        """Level energy above the ground rest energy, E_level(|p|) - M_g.

        Parameters
        ----------
        level : int
            GROUND (0) or EXCITED (1).
        p : array_like
            COM momentum magnitude |p| (momentum units).

        Returns
        -------
        numpy.ndarray
            E_level(|p|) - M_g (energy units), the shape of `p`.
        """

    @abstractmethod
    def momentum(self, level: int, energy):
        """Inverse of `energy`: |p| >= 0 with E_level(|p|) - M_g = energy.

        Parameters
        ----------
        level : int
            GROUND (0) or EXCITED (1).
        energy : array_like
            Energy above M_g (energy units).

        Returns
        -------
        numpy.ndarray
            |p| (momentum units); nan where `energy` is below the level's minimum
            E_level(0) - M_g.
        """

    @abstractmethod
    def velocity(self, level: int, p):
        """Group velocity dE_level/d|p| of the COM.

        Parameters
        ----------
        level : int
            GROUND (0) or EXCITED (1).
        p : array_like
            COM momentum magnitude |p| (momentum units).

        Returns
        -------
        numpy.ndarray
            dE_level/d|p| (units of c: dimensionless).
        """

    @abstractmethod
    def inertia(self, level: int, p):
        """|p| / (dE_level/d|p|): M for a Galilean level, E_level(p) for a relativistic one.

        Parameters
        ----------
        level : int
            GROUND (0) or EXCITED (1).
        p : array_like
            COM momentum magnitude |p| (momentum units).

        Returns
        -------
        numpy.ndarray
            |p| / v_level(|p|) (energy units), finite at p = 0.
        """

    # --- coupling ---------------------------------------------------------------------------
    def vertex(self, p_excited, p_ground):
        """Vertex factor V(p_e, p_g) multiplying the coupling (dimensionless unless overridden).

        The default is V = 1.

        Parameters
        ----------
        p_excited : array_like
            COM momentum magnitude of the excited level (momentum units).
        p_ground : array_like
            COM momentum magnitude of the ground level (momentum units).

        Returns
        -------
        numpy.ndarray
            V, the broadcast shape of the two momenta (dimensionless here).
        """
        return np.ones(np.broadcast(np.asarray(p_excited), np.asarray(p_ground)).shape)

    def coupling_factor(self) -> float:
        """The coupling constant multiplying V in g_P(k) (lambda for most models).

        Returns
        -------
        float
            c, with |g(k)|^2 = c^2 V^2 F(k)^2 / ((2 pi)^d 2 w_k); here c = lambda
            (energy^((3 - d)/2) in natural units).
        """
        return self.strength

    # --- shared helpers ---------------------------------------------------------------------
    def rest_emission_momentum(self) -> float:
        """k* = (M_e^2 - M_g^2) / (2 M_e) for the relativistic models (overridden where not).

        The momentum of a massless quantum emitted by the detector at rest, from
        M_e = sqrt(k^2 + M_g^2) + k; computed as Omega (2 M_g + Omega) / (2 M_e).  It sets the
        momentum scale below which a 3D rate is taken at P = 0.

        Returns
        -------
        float
            k* (momentum units).

        References
        ----------
        Two-body decay kinematics: Particle Data Group, Review of Particle Physics,
        "Kinematics" review.
        """
        return self.gap * (2 * self.ground_mass + self.gap) / (2 * self.excited_mass)

    def __repr__(self) -> str:
        return (f"{type(self).__name__}(ground_mass={self.ground_mass!r}, gap={self.gap!r}, "
                f"strength={self.strength!r})")


def relativistic_kinetic(p, mass: float):
    """sqrt(p^2 + m^2) - m written as p^2 / (sqrt(p^2 + m^2) + m), free of cancellation.

    Parameters
    ----------
    p : array_like
        Momentum magnitude (momentum units).
    mass : float
        Rest mass m (energy units).

    Returns
    -------
    numpy.ndarray
        The relativistic kinetic energy (energy units), accurate also for p << m.
    """
    p = np.asarray(p, dtype=float)
    return p * p / (np.sqrt(p * p + mass * mass) + mass)
