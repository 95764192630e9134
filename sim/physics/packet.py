"""Gaussian centre-of-mass wave packets in momentum space.

`width` is the standard deviation of the position density (per axis in 3D), so the momentum
density |psi(p)|^2 is Gaussian with standard deviation sigma_p = 1 / (2 width) per axis
(hbar = 1), centred on the mean momentum p0.  Every solver takes its packet densities and
quadratures from here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .quadrature import gauss_legendre_on

#: packet momenta are taken this many standard deviations either side of the mean
PACKET_REACH = 8.0


def gaussian_density(p, mean: float, std: float):
    """N(mean, std^2) density exp(-(p - mean)^2 / (2 std^2)) / sqrt(2 pi std^2) (1 / momentum).

    Parameters
    ----------
    p : array_like
        Momentum (momentum units).
    mean : float
        Mean (momentum units).
    std : float
        Standard deviation, > 0 (momentum units).

    Returns
    -------
    numpy.ndarray
        The density at `p` (1 / momentum units), the shape of `p`.
    """
    p = np.asarray(p, dtype=float)
    return np.exp(-0.5 * ((p - mean) / std) ** 2) / (np.sqrt(2 * np.pi) * std)


@dataclass(frozen=True)
class Packet:
    """A Gaussian packet: position std `width` (length units), mean momentum vector `momentum`.

    |psi(p)|^2 = prod over the d axes of N(p0_i, sigma_p^2), sigma_p = 1 / (2 width).

    Parameters
    ----------
    width : float
        Standard deviation of the position density per axis (length units, i.e. 1 / momentum
        units).
    momentum : tuple of float
        Mean momentum p0: one component in 1D, three in 3D (momentum units).
    """

    width: float
    momentum: tuple[float, ...]

    @property
    def dimensions(self) -> int:
        """Spatial dimensions d of the packet (the number of momentum components).

        Returns
        -------
        int
            1 or 3.
        """
        return len(self.momentum)

    @property
    def momentum_std(self) -> float:
        """Momentum standard deviation per axis, sigma_p = 1 / (2 width) (hbar = 1).

        Returns
        -------
        float
            sigma_p (momentum units).
        """
        return 0.5 / self.width

    @property
    def mean_speed(self) -> float:
        """Magnitude |p0| of the mean momentum (despite the name, a momentum, not a speed).

        Returns
        -------
        float
            |p0| (momentum units).
        """
        return float(np.linalg.norm(self.momentum))

    @property
    def axis_mean(self) -> float:
        """Mean momentum along the packet axis: p0 (signed) in 1D, |p0| in 3D.

        Returns
        -------
        float
            Momentum units.
        """
        return self.momentum[0] if self.dimensions == 1 else self.mean_speed

    def fastest_momentum(self) -> float:
        """|p0| + PACKET_REACH sigma_p: the largest momentum magnitude the packet reaches.

        Returns
        -------
        float
            Momentum units.
        """
        return self.mean_speed + PACKET_REACH * self.momentum_std

    def axis_density(self, p):
        """Density of the momentum component along the packet axis (1 / momentum units).

        N(p0_axis, sigma_p^2): in 1D the packet's whole momentum density |psi(p)|^2, in 3D the
        marginal of the axial component.

        Parameters
        ----------
        p : array_like
            Axial momentum component (momentum units; signed).

        Returns
        -------
        numpy.ndarray
            exp(-(p - p0_axis)^2 / (2 sigma_p^2)) / sqrt(2 pi sigma_p^2) (1 / momentum units).
        """
        return gaussian_density(p, self.axis_mean, self.momentum_std)

    def magnitude_density(self, r):
        """Density of |p| for the 3D Gaussian (a noncentral chi distribution, 3 degrees).

        f(r) = r / (a sigma sqrt(2 pi)) [exp(-(r-a)^2/2 sigma^2) - exp(-(r+a)^2/2 sigma^2)],
        a = |p0|; at a = 0 the Maxwell density sqrt(2/pi) r^2 / sigma^3 exp(-r^2 / 2 sigma^2).
        Here sigma = sigma_p; the Maxwell form is used when a < 1e-6 sigma.

        Parameters
        ----------
        r : array_like
            Momentum magnitude |p| >= 0 (momentum units).

        Returns
        -------
        numpy.ndarray
            f(r) (1 / momentum units), normalised over r >= 0.

        References
        ----------
        N. L. Johnson, S. Kotz and N. Balakrishnan, Continuous Univariate Distributions,
        2nd ed., Vol. 1 (Wiley, 1994; chi and Maxwell distributions) and Vol. 2 (Wiley, 1995;
        noncentral chi-square distributions).
        """
        s, a = self.momentum_std, self.mean_speed
        r = np.asarray(r, dtype=float)
        if a < 1e-6 * s:
            return np.sqrt(2 / np.pi) * r * r / s ** 3 * np.exp(-0.5 * (r / s) ** 2)
        # difference of Gaussians written with -expm1 to stay accurate for small r a / s^2
        return (r / (a * s * np.sqrt(2 * np.pi)) * np.exp(-0.5 * ((r - a) / s) ** 2)
                * -np.expm1(-2 * r * a / s ** 2))

    def quadrature(self, nodes: int = 96, *, along_axis: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """Nodes and weights with sum w f(p) = Int |psi(p)|^2 f(p) d^dp.

        Parameters
        ----------
        nodes : int
            Number of nodes.
        along_axis : bool
            3D only: nodes of the axial component (for f depending on it alone) instead of |p|.

        Returns
        -------
        (p, w) : tuple of ndarray
            1D: signed momenta; 3D: magnitudes |p| (f isotropic), or axial components with
            `along_axis`.  Weights sum to 1.  Gauss-Legendre over PACKET_REACH standard
            deviations either side of the mean; the axial rule is Gauss-Hermite (exact for
            polynomials of degree 2 nodes - 1 under the Gaussian, so a few nodes suffice).
            Momenta in momentum units, weights dimensionless.

        References
        ----------
        M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
        eqs. 25.4.29-25.4.30 (Gauss-Legendre) and 25.4.46 (Gauss-Hermite, weight exp(-x^2);
        used here in the form with weight exp(-x^2 / 2), NumPy's
        ``numpy.polynomial.hermite_e.hermegauss``).
        """
        s = self.momentum_std
        if self.dimensions == 3 and along_axis:
            x, w = np.polynomial.hermite_e.hermegauss(nodes)
            return self.mean_speed + s * x, w / w.sum()
        if self.dimensions == 1:
            lo, hi = self.momentum[0] - PACKET_REACH * s, self.momentum[0] + PACKET_REACH * s
            density = self.axis_density
        else:
            lo, hi = max(0.0, self.mean_speed - PACKET_REACH * s), self.mean_speed + PACKET_REACH * s
            density = self.magnitude_density
        p, w = gauss_legendre_on(nodes, lo, hi)
        weights = w * density(p)
        return p, weights / weights.sum()

    def transverse_quadrature(self, nodes: int) -> tuple[tuple[float, float], ...]:
        """Magnitudes rho_b and weights of the 2D Gaussian transverse momentum (3D packets).

        rho^2 / (2 sigma_p^2) is exponentially distributed: Gauss-Laguerre nodes x_b give
        rho_b = sigma_p sqrt(2 x_b) with the Gauss-Laguerre weights (normalised to 1).

        Parameters
        ----------
        nodes : int
            Number of Gauss-Laguerre nodes.

        Returns
        -------
        tuple of (float, float)
            (rho_b, weight_b) pairs: rho_b in momentum units, weights dimensionless, summing
            to 1; Sum_b weight_b f(rho_b) ~ E[f(|p_perp|)].

        References
        ----------
        M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
        eq. 25.4.45 (Gauss-Laguerre integration); NumPy documentation,
        ``numpy.polynomial.laguerre.laggauss``.
        """
        x, w = np.polynomial.laguerre.laggauss(nodes)
        return tuple((float(self.momentum_std * np.sqrt(2 * a)), float(b))
                     for a, b in zip(x, w / w.sum()))

    def direction_moments(self, r):
        """E[cos a] and E[cos^2 a] of the angle a between a momentum of magnitude r and p0.

        Given |p| = r, the direction of a 3D Gaussian momentum follows a von Mises-Fisher law
        with kappa = r |p0| / sigma_p^2 about p0: E[cos] = L(kappa) = coth kappa - 1/kappa
        (the Langevin function), E[cos^2] = 1 - 2 L / kappa (dimensionless).
        Below kappa = 1e-4 the series L = kappa / 3, E[cos^2] = 1/3 + 2 kappa^2 / 45 is used.

        Parameters
        ----------
        r : array_like
            Momentum magnitude |p| (momentum units).

        Returns
        -------
        (mean_cos, mean_cos2) : tuple of numpy.ndarray
            E[cos a] and E[cos^2 a] (dimensionless), the shape of `r`.

        References
        ----------
        K. V. Mardia and P. E. Jupp, Directional Statistics (Wiley, 2000): the von
        Mises-Fisher distribution, its mean resultant length coth kappa - 1/kappa on the
        sphere, and its arising from an isotropic normal conditioned on its length.
        """
        kappa = np.asarray(r, dtype=float) * self.mean_speed / self.momentum_std ** 2
        small = kappa < 1e-4
        k = np.where(small, 1.0, kappa)
        lang = np.where(small, kappa / 3, 1 / np.tanh(k) - 1 / k)
        cos2 = np.where(small, 1 / 3 + 2 * kappa ** 2 / 45, 1 - 2 * lang / k)
        return lang, cos2
