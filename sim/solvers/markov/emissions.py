"""The emissions of quantum trajectories and their statistics (numpy only, no QuTiP).

An emission table has one row per emitted quantum: columns trajectory (index), t (time units)
and kick (the recoil along the packet axis, momentum units).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class TrajectoryRecord:
    """Emissions of `count` trajectories and the seed used.

    Parameters
    ----------
    table : dict
        Columns "trajectory" (int index), "t" (time units) and "kick" (recoil along the packet
        axis, momentum units), one row per emission.
    count : int
        Number of trajectories run.
    seed : int or None
        The seed of the run.
    """

    table: dict
    count: int
    seed: int | None

    def summary(self, times, excited) -> dict:
        """Statistics of the trajectories against the master equation.

        The largest deviation of the surviving fraction (`surviving_fraction`) from the
        master-equation excited population, in units of its binomial standard error
        (`binomial_error`).

        Parameters
        ----------
        times : ndarray, shape (T,)
            Sample times (time units).
        excited : ndarray, shape (T,)
            Master-equation excited population (dimensionless).

        Returns
        -------
        dict
            count, seed, emissions (number of rows) and max_deviation_in_std_errors
            (dimensionless).
        """
        surviving = surviving_fraction(self.table, times, self.count)
        error = binomial_error(excited, self.count)
        return {"count": self.count, "seed": self.seed, "emissions": int(len(self.table["t"])),
                "max_deviation_in_std_errors": float(np.max(np.abs(surviving - excited) / error))}


def binomial_error(fraction, count: int):
    """Standard error sqrt(P (1 - P) / N) of a fraction of N trials.

    Floored at P (1 - P) = 1/N so that it stays finite where P is 0 or 1 (common practice).

    Parameters
    ----------
    fraction : array_like
        P (dimensionless).
    count : int
        N.

    Returns
    -------
    ndarray
        sqrt(max(P (1 - P), 1/N) / N) (dimensionless).
    """
    fraction = np.asarray(fraction, dtype=float)
    return np.sqrt(np.maximum(fraction * (1 - fraction), 1.0 / count) / count)


def first_emissions(table) -> np.ndarray:
    """Time of each trajectory's first emission (trajectories that emitted).

    Parameters
    ----------
    table : dict
        An emissions table (columns trajectory, t).

    Returns
    -------
    ndarray
        One time per emitting trajectory, ordered by trajectory index (time units); empty when
        there are no emissions.
    """
    traj, t = np.asarray(table["trajectory"]), np.asarray(table["t"])
    if len(t) == 0:
        return np.array([])
    order = np.lexsort((t, traj))
    traj, t = traj[order], t[order]
    return t[np.r_[True, traj[1:] != traj[:-1]]]


def surviving_fraction(table, times, count: int) -> np.ndarray:
    """Fraction of the `count` trajectories that have not emitted by each time.

    Parameters
    ----------
    table : dict
        An emissions table.
    times : array_like, shape (T,)
        Times (time units).
    count : int
        Number of trajectories.

    Returns
    -------
    ndarray, shape (T,)
        1 - (trajectories with a first emission at or before t) / count (dimensionless).
    """
    firsts = np.sort(first_emissions(table))
    return 1.0 - np.searchsorted(firsts, times, side="right") / count
