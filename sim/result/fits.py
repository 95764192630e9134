"""Rates fitted to simulated population curves."""

from __future__ import annotations

import numpy as np

#: the exponential part of a decay curve: samples with the excited population in this range
FIT_WINDOW = (0.02, 0.9)


def fitted_rate(times: np.ndarray, excited: np.ndarray, window=FIT_WINDOW) -> float:
    """Decay rate of the exponential part of a decay curve.

    Least-squares slope of -ln P_e(t) over the samples with window[0] <= P_e <= window[1]
    (excluding the quadratic short-time region and the long-time tail).

    Parameters
    ----------
    times : ndarray
        Sample times (time units).
    excited : ndarray
        Excited population at those times (dimensionless).
    window : (float, float)
        The populations bounding the exponential part.

    Returns
    -------
    float
        Gamma_fit (inverse time units); nan with fewer than three samples in the window.
    """
    times, excited = np.asarray(times), np.asarray(excited)
    keep = (excited >= window[0]) & (excited <= window[1])
    if keep.sum() < 3:
        return float("nan")
    slope = np.polyfit(times[keep], np.log(excited[keep]), 1)[0]
    return float(-slope)


def fitted_excitation_rate(times: np.ndarray, excited: np.ndarray) -> float:
    """Initial excitation rate of a ground-state packet.

    Least-squares slope of P_e(t) over the samples with P_e <= 0.1 P_e(t_max).

    Parameters
    ----------
    times : ndarray
        Sample times (time units).
    excited : ndarray
        Excited population at those times (dimensionless).

    Returns
    -------
    float
        dP_e/dt (inverse time units); nan with fewer than three such samples or P_e(t_max) = 0.
    """
    times, excited = np.asarray(times), np.asarray(excited)
    keep = excited <= 0.1 * excited[-1]
    if keep.sum() < 3 or excited[-1] <= 0:
        return float("nan")
    return float(np.polyfit(times[keep], excited[keep], 1)[0])
