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
        Sum_i w_i f(x_i) ~ Int_{-1}^{1} f(x) dx.

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, 25.4.29 (common practice).
    """
    x, w = np.polynomial.legendre.leggauss(nodes)
    x.flags.writeable = False
    w.flags.writeable = False
    return x, w


def gauss_legendre_on(nodes: int, lo, hi) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights mapped to [lo, hi] (lo, hi may be arrays: a rule each).

    Parameters
    ----------
    nodes : int
    lo, hi : float or ndarray
        Interval ends; with arrays of shape S the result has shape S + (nodes,).

    Returns
    -------
    (points, weights) : tuple of ndarray
        Sum weights f(points) ~ Int_lo^hi f(x) dx.
    """
    x, w = gauss_legendre(nodes)
    lo, hi = np.asarray(lo, dtype=float)[..., None], np.asarray(hi, dtype=float)[..., None]
    half = 0.5 * (hi - lo)
    return half * x + 0.5 * (hi + lo), half * w
