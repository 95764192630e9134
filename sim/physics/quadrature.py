"""Fixed quadrature rules, computed once per node count and shared read-only."""

from __future__ import annotations

from functools import cache

import numpy as np


@cache
def gauss_legendre(nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes x_i and weights w_i on [-1, 1] (read-only arrays, cached).

    Parameters
    ----------
    nodes : int
        Number of nodes n; the rule integrates polynomials of degree 2n - 1 exactly.

    Returns
    -------
    (x, w) : tuple of ndarray
        Sum_i w_i f(x_i) ~ Int_{-1}^{1} f(x) dx, with x_i the roots of the Legendre
        polynomial P_n and w_i = 2 / ((1 - x_i^2) P_n'(x_i)^2) (both dimensionless).

    References
    ----------
    M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
    eq. 25.4.29 (Gauss-Legendre integration); NumPy documentation,
    ``numpy.polynomial.legendre.leggauss``.
    """
    x, w = np.polynomial.legendre.leggauss(nodes)
    x.flags.writeable = False
    w.flags.writeable = False
    return x, w


def gauss_legendre_on(nodes: int, lo, hi) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights mapped to [lo, hi] (lo, hi may be arrays: a rule each).

    points = (hi - lo)/2 x_i + (hi + lo)/2, weights = (hi - lo)/2 w_i, with (x_i, w_i) the
    rule on [-1, 1].

    Parameters
    ----------
    nodes : int
        Number of nodes n of each rule.
    lo, hi : float or ndarray
        Interval ends; with arrays of shape S the result has shape S + (nodes,).  Any unit.

    Returns
    -------
    (points, weights) : tuple of ndarray
        Sum weights f(points) ~ Int_lo^hi f(x) dx; both in the unit of `lo` and `hi`.

    References
    ----------
    M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
    eq. 25.4.30 (Gauss-Legendre integration over [a, b]).
    """
    x, w = gauss_legendre(nodes)
    lo, hi = np.asarray(lo, dtype=float)[..., None], np.asarray(hi, dtype=float)[..., None]
    half = 0.5 * (hi - lo)
    return half * x + 0.5 * (hi + lo), half * w


@cache
def gauss_hermite_normal(nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Hermite rule for the standard normal: Sum_i w_i f(x_i) ~ E[f(X)], X ~ N(0, 1).

    The probabilists' rule (weight exp(-x^2 / 2)) with its weights normalised to sum 1 (they
    sum to sqrt(2 pi)); exact for polynomials f of degree 2n - 1.  Read-only arrays, cached.

    Parameters
    ----------
    nodes : int
        Number of nodes n.

    Returns
    -------
    (x, w) : tuple of ndarray
        Nodes x_i (the roots of the Hermite polynomial He_n, in standard deviations) and
        weights w_i (dimensionless, summing to 1).

    References
    ----------
    M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
    eq. 25.4.46 (Gauss-Hermite integration, there with weight exp(-x^2)); NumPy
    documentation, ``numpy.polynomial.hermite_e.hermegauss``.
    """
    x, w = np.polynomial.hermite_e.hermegauss(nodes)
    w = w / w.sum()
    x.flags.writeable = False
    w.flags.writeable = False
    return x, w
