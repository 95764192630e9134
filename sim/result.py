"""The one result type every solver returns, and the analysis shared by all of them."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

#: the exponential part of a decay curve: samples with the excited population in this range
FIT_WINDOW = (0.02, 0.9)


@dataclass
class Result:
    """Simulated time evolution of one scenario by one method.

    Arrays over `times` (time units): `excited` (excited-state population), `p_mean`, `p_var`
    (COM momentum mean and variance along the packet axis), `x_var` (position variance along the
    axis), `purity` (Tr rho^2 of the reduced COM state); `nan` where a method does not compute a
    quantity.  `momentum_density[:, j]` is the ground-state COM momentum density on
    `momentum_grid` (along the packet axis) at `snapshot_times[j]`; `initial_density` is the
    packet's density there at t = 0.  `tables` holds method-specific extra tables (name ->
    column -> array), written as DIR/<name>.csv.  `final_state` is the final reduced COM state
    as a `qutip.Qobj` where the solver has it.
    """

    method: str
    scenario: Any
    times: np.ndarray
    excited: np.ndarray
    p_mean: np.ndarray
    p_var: np.ndarray
    x_var: np.ndarray
    purity: np.ndarray
    momentum_grid: np.ndarray
    snapshot_times: np.ndarray
    momentum_density: np.ndarray
    initial_density: np.ndarray
    summary: dict = field(default_factory=dict)
    tables: dict = field(default_factory=dict)
    final_state: Any = None

    @property
    def warnings(self) -> list[str]:
        return self.summary.get("warnings", [])

    def to_dataframe(self):
        """Time series as a pandas DataFrame (columns t, excited, p_mean, p_var, x_var, purity)."""
        try:
            import pandas as pd
        except ImportError as exc:  # pandas is optional
            raise ImportError("Result.to_dataframe needs pandas: pip install pandas") from exc
        return pd.DataFrame({"t": self.times, "excited": self.excited, "p_mean": self.p_mean,
                             "p_var": self.p_var, "x_var": self.x_var, "purity": self.purity})

    def plot(self, ax=None):
        """Decay curve with its golden-rule exponential on a log axis; returns the axes."""
        from .figures import draw_decay

        return draw_decay(self, ax)


def fitted_rate(times: np.ndarray, excited: np.ndarray, window=FIT_WINDOW) -> float:
    """Decay rate of the exponential part of a decay curve (inverse time units).

    Least-squares slope of -ln P_e(t) over the samples with window[0] <= P_e <= window[1]
    (excluding the quadratic short-time region and the long-time tail); nan with fewer than
    three such samples.
    """
    times, excited = np.asarray(times), np.asarray(excited)
    keep = (excited >= window[0]) & (excited <= window[1])
    if keep.sum() < 3:
        return float("nan")
    slope = np.polyfit(times[keep], np.log(excited[keep]), 1)[0]
    return float(-slope)


def fitted_excitation_rate(times: np.ndarray, excited: np.ndarray) -> float:
    """Initial excitation rate of a ground-state packet: slope of P_e(t) while P_e < 0.1 P_e(end)."""
    times, excited = np.asarray(times), np.asarray(excited)
    keep = excited <= 0.1 * excited[-1]
    if keep.sum() < 3 or excited[-1] <= 0:
        return float("nan")
    return float(np.polyfit(times[keep], excited[keep], 1)[0])
