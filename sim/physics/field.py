"""The scalar field: dispersion, smearing form factor, hard UV cutoff and thermal occupation.

phi(x) = Int d^dk [a_k e^{ik.x} + h.c.] F(k) / sqrt((2 pi)^d 2 w_k),  w_k = sqrt(k^2 + m^2),
with F the smearing form factor.  Momenta in energy units (hbar = c = 1).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .models import EXCITED
from .packet import Packet, packet_from_config

#: automatic UV cutoff: this many times the largest energy a quantum can carry,
#: K = CUTOFF_HEADROOM (E_e(p_fast) - M_g + THERMAL_REACH T)
CUTOFF_HEADROOM = 2.0
#: thermal absorption: quanta up to this many temperatures above the gap are kept by the cutoff
THERMAL_REACH = 30.0


@dataclass(frozen=True)
class Field:
    """A real scalar field in `dimensions` spatial dimensions with a hard cutoff |k| <= cutoff.

    `cutoff` may be infinite (no cutoff): the golden rule needs none; bath solvers choose a
    finite one with `default_cutoff` when the scenario gives none.

    phi(x) = Int d^dk [a_k e^{ik.x} + h.c.] F(k) / sqrt((2 pi)^d 2 w_k), w_k = sqrt(k^2 + m^2),
    [a_k, a_q^dagger] = delta^d(k - q).

    Parameters
    ----------
    dimensions : int
        Spatial dimensions d, 1 or 3.
    mass : float
        Field mass m (energy units).
    smearing : float
        Gaussian smearing length s of the detector (1 / momentum units); 0: point-like.
    cutoff : float
        Hard UV cutoff K on |k| (momentum units); may be inf.
    temperature : float
        k_B T of the field (energy units); 0: vacuum.

    References
    ----------
    Free scalar field mode expansion: M. E. Peskin and D. V. Schroeder, An Introduction to
    Quantum Field Theory (Addison-Wesley, 1995), ch. 2.
    """

    dimensions: int
    mass: float
    smearing: float
    cutoff: float
    temperature: float

    def frequency(self, k):
        """Mode frequency w_k = sqrt(k^2 + m^2) (energy units).

        Parameters
        ----------
        k : array_like
            Wavenumber magnitude |k| (momentum units).

        Returns
        -------
        numpy.ndarray
            w_k (energy units), the shape of `k`.
        """
        k = np.asarray(k, dtype=float)
        return np.sqrt(k * k + self.mass * self.mass)

    def form_factor(self, k):
        """Gaussian smearing F(k) = exp(-k^2 s^2 / 2); F = 1 for a point-like detector.

        F is the Fourier transform of a Gaussian detector profile of standard deviation s,
        normalised to F(0) = 1.

        Parameters
        ----------
        k : array_like
            Wavenumber magnitude |k| (momentum units).

        Returns
        -------
        numpy.ndarray
            F(k) (dimensionless), the shape of `k`.
        """
        k = np.asarray(k, dtype=float)
        return np.exp(-0.5 * (k * self.smearing) ** 2)

    def occupation(self, w):
        """Bose-Einstein n(w) = 1 / (exp(w/T) - 1); zero in the vacuum (T = 0).

        Parameters
        ----------
        w : array_like
            Mode frequency (energy units).

        Returns
        -------
        numpy.ndarray
            Mean occupation n(w) (dimensionless), the shape of `w`; 0 where exp(w/T)
            overflows and everywhere at T = 0.

        References
        ----------
        Bose-Einstein distribution: L. D. Landau and E. M. Lifshitz, Statistical Physics,
        Part 1, 3rd ed. (Pergamon, 1980).
        """
        w = np.asarray(w, dtype=float)
        if self.temperature == 0:
            return np.zeros_like(w)
        with np.errstate(over="ignore"):
            return 1.0 / np.expm1(w / self.temperature)

    def mode_weight(self, k):
        """F(k)^2 / ((2 pi)^d 2 w_k): |g_P(k)|^2 per d^dk divided by (coupling * V)^2.

        Parameters
        ----------
        k : array_like
            Wavenumber magnitude |k| (momentum units).

        Returns
        -------
        numpy.ndarray
            F(k)^2 / ((2 pi)^d 2 w_k) (1 / energy units), the shape of `k`.
        """
        k = np.asarray(k, dtype=float)
        return self.form_factor(k) ** 2 / ((2 * np.pi) ** self.dimensions * 2 * self.frequency(k))

    def inside(self, k):
        """True where |k| is kept by the hard cutoff, |k| <= K.

        Parameters
        ----------
        k : array_like
            Wavenumber magnitude |k| (momentum units).

        Returns
        -------
        numpy.ndarray of bool
            The shape of `k`.
        """
        return np.asarray(k) <= self.cutoff


def default_cutoff(scenario, model, packet: Packet) -> float:
    """Automatic UV cutoff of a truncated bath when `[field] cutoff` is not given.

    An emitted quantum carries at most the excited energy above M_g, w_k <= E_e(P) - M_g; the
    cutoff is CUTOFF_HEADROOM times that at the packet's fastest momentum, raised by
    THERMAL_REACH * T in a thermal field so that absorption is not cut off:

        K = CUTOFF_HEADROOM (E_e(p_fast) - M_g + THERMAL_REACH T),
        p_fast = |p0| + PACKET_REACH sigma_p.

    Parameters
    ----------
    scenario : Scenario
        Gives the field temperature T (energy units).
    model : COMModel
        Gives E_e(p) - M_g (energy units).
    packet : Packet
        Gives p_fast (momentum units).

    Returns
    -------
    float
        K (momentum units).
    """
    p_fast = packet.fastest_momentum()
    reach = float(model.energy(EXCITED, p_fast))
    return CUTOFF_HEADROOM * (reach + THERMAL_REACH * scenario.field.temperature)


def field_for(scenario, model=None) -> Field:
    """The scenario's field; with `model`, a bath field whose cutoff is always finite.

    Parameters
    ----------
    scenario : Scenario
    model : COMModel, optional
        Given by bath solvers: an omitted cutoff is then `default_cutoff`; without it an
        omitted cutoff is infinite (the golden rule needs none).

    Returns
    -------
    Field
        Mass, temperature (energy units), smearing (1 / momentum units) and cutoff (momentum
        units) of the scenario.
    """
    f = scenario.field
    cutoff = f.cutoff
    if cutoff is None:
        cutoff = np.inf if model is None else default_cutoff(scenario, model, packet_for(scenario))
    return Field(f.dimensions, f.mass, f.smearing, cutoff, f.temperature)


@lru_cache(maxsize=256)
def packet_for(scenario) -> Packet:
    """The scenario's packet, of any `packet.shape` (`packet_from_config`).

    Cached per scenario (frozen, compared by value): a "file" packet's table is read once.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    Packet
        Position width (1 / momentum units), mean momentum (momentum units) and shape of
        ``scenario.packet``.
    """
    return packet_from_config(scenario.packet)
