"""Gaussian centre-of-mass wave packets in momentum space.

`width` is the standard deviation of the position density (per axis in 3D), so the momentum
density |psi(p)|^2 is Gaussian with standard deviation sigma_p = 1 / (2 width) per axis
(hbar = 1), centred on the mean momentum p0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: packet momenta are taken this many standard deviations either side of the mean
PACKET_REACH = 8.0


@dataclass(frozen=True)
class Packet:
    """A Gaussian packet: position std `width` (length units), mean momentum vector `momentum`."""

    width: float
    momentum: tuple[float, ...]

    @property
    def dimensions(self) -> int:
        return len(self.momentum)

    @property
    def momentum_std(self) -> float:
        """sigma_p = 1 / (2 width) (momentum units, per axis)."""
        return 0.5 / self.width

    @property
    def mean_speed(self) -> float:
        """|p0| (momentum units)."""
        return float(np.linalg.norm(self.momentum))

    def fastest_momentum(self) -> float:
        """|p0| + PACKET_REACH sigma_p: the largest momentum magnitude the packet reaches."""
        return self.mean_speed + PACKET_REACH * self.momentum_std

    def density_1d(self, p):
        """|psi(p)|^2 = exp(-(p - p0)^2 / (2 sigma_p^2)) / sqrt(2 pi sigma_p^2) (1D)."""
        s = self.momentum_std
        p = np.asarray(p, dtype=float)
        return np.exp(-0.5 * ((p - self.momentum[0]) / s) ** 2) / (np.sqrt(2 * np.pi) * s)

    def magnitude_density(self, r):
        """Density of |p| for the 3D Gaussian (a noncentral chi distribution with 3 degrees):

        f(r) = r / (a sigma sqrt(2 pi)) [exp(-(r-a)^2/2 sigma^2) - exp(-(r+a)^2/2 sigma^2)],
        a = |p0|; at a = 0 the Maxwell density sqrt(2/pi) r^2 / sigma^3 exp(-r^2 / 2 sigma^2).
        """
        s, a = self.momentum_std, self.mean_speed
        r = np.asarray(r, dtype=float)
        if a < 1e-6 * s:
            return np.sqrt(2 / np.pi) * r * r / s ** 3 * np.exp(-0.5 * (r / s) ** 2)
        # difference of Gaussians written with -expm1 to stay accurate for small r a / s^2
        return (r / (a * s * np.sqrt(2 * np.pi)) * np.exp(-0.5 * ((r - a) / s) ** 2)
                * -np.expm1(-2 * r * a / s ** 2))

    def quadrature(self, nodes: int = 96) -> tuple[np.ndarray, np.ndarray]:
        """Nodes and weights with sum w f(p) = Int |psi(p)|^2 f(p) d^dp for f depending on p.

        1D: nodes are signed momenta; 3D: nodes are magnitudes |p| (f isotropic).
        Gauss-Legendre over PACKET_REACH standard deviations either side of the mean.
        """
        x, w = np.polynomial.legendre.leggauss(nodes)
        s = self.momentum_std
        if self.dimensions == 1:
            lo, hi = self.momentum[0] - PACKET_REACH * s, self.momentum[0] + PACKET_REACH * s
            density = self.density_1d
        else:
            lo, hi = max(0.0, self.mean_speed - PACKET_REACH * s), self.mean_speed + PACKET_REACH * s
            density = self.magnitude_density
        p = 0.5 * (hi - lo) * x + 0.5 * (hi + lo)
        weights = 0.5 * (hi - lo) * w * density(p)
        return p, weights / weights.sum()
