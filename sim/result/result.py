"""The one result type of a run: every method's observables over time, with its summary.

Figures of a Result are drawn by `sim.plotting`, which registers its drawing functions in
`DRAWERS` when it is imported (`import sim` does); `Result.plot` draws through it, so the result
layer never imports the plotting layer.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

#: figure name -> function(result, ax) -> ax, filled in by sim.plotting on import
DRAWERS: dict[str, Callable] = {}


def truncation_verdict(converged: bool | None) -> str:
    """The words for a truncated bath's convergence verdict, in figures and on the terminal.

    Parameters
    ----------
    converged : bool or None
        The solver's truncation record "converged" (None: not checked).

    Returns
    -------
    str
        "converged", "not converged" or "convergence not checked".
    """
    return {True: "converged", False: "not converged"}.get(converged, "convergence not checked")


@dataclass
class Result:
    """Simulated time evolution of one scenario by one method.

    Arrays over `times` (time units): `excited` (excited-state population), `p_mean`, `p_var`
    (COM momentum mean and variance along the packet axis), `x_var` (position variance along the
    axis), `x_var_transverse` (3D: along one axis transverse to it; None in 1D or where the
    method gives none), `purity` (Tr rho^2 of the reduced COM state); `nan` where a method does not compute a
    quantity.  `momentum_density[:, j]` is the ground-state COM momentum density on
    `momentum_grid` (along the packet axis) at `snapshot_times[j]`; `initial_density` is the
    packet's density there at t = 0.  `tables` holds method-specific extra tables (name ->
    column -> array), written as DIR/<name>.csv.  `final_state` is the final reduced COM state
    as a `qutip.Qobj` where the solver has it.  `summary["rate_fitted"]` is None when the
    curve has no rate; `summary["fit"]` says why (`sim.result.fits.RateFit.summary`).
    `coherence` is the spatial coherence |Tr(rho_COM(t) exp(i P d))| / |Tr(rho_COM(0) exp(i P d))|
    at the distance `summary["coherence_at"]` along the packet axis (dimensionless; None when
    the run reports none, nan where not computed).
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
    coherence: np.ndarray | None = None
    x_var_transverse: np.ndarray | None = None

    @property
    def warnings(self) -> list[str]:
        """The run's warnings (plain-language lines, each naming the key to change)."""
        return self.summary.get("warnings", [])

    def to_dataframe(self):
        """Time series as a pandas DataFrame.

        Returns
        -------
        pandas.DataFrame
            Columns t (time units), excited, p_mean (momentum), p_var (momentum^2), x_var (length^2),
            x_var_transverse (length^2, where the run has it) and purity, in natural units.

        Raises
        ------
        ImportError
            When pandas is not installed.
        """
        try:
            import pandas as pd
        except ImportError as exc:  # pandas is optional
            raise ImportError("Result.to_dataframe needs pandas: pip install pandas") from exc
        return pd.DataFrame(self.recoil_columns(excited=True))

    def recoil_columns(self, *, excited: bool = False) -> dict:
        """The time series by column name, in natural units: t, [excited,] p_mean, p_var,
        x_var, x_var_transverse (only where the run has it) and purity.

        Parameters
        ----------
        excited : bool, optional
            Include the excited-state population after t (default False).

        Returns
        -------
        dict
            Column name -> ndarray over `times`.
        """
        columns = {"t": self.times, **({"excited": self.excited} if excited else {}),
                   "p_mean": self.p_mean, "p_var": self.p_var, "x_var": self.x_var}
        if self.x_var_transverse is not None:
            columns["x_var_transverse"] = self.x_var_transverse
        columns["purity"] = self.purity
        return columns

    def plot(self, ax=None, figure: str = "decay"):
        """Draw one of the run's figures into `ax` (a new stamped figure if None).

        Parameters
        ----------
        ax : matplotlib Axes, optional
        figure : str
            "decay" (P_e(t) on a log axis with its golden-rule exponential), "momentum" (recoil
            broadening) or "variance" (packet spreading).

        Returns
        -------
        matplotlib Axes
            The axes drawn into.

        Raises
        ------
        LookupError
            For an unknown figure name.
        """
        if figure not in DRAWERS:
            raise LookupError(f"figure {figure!r}: no such figure; allowed: "
                              + (", ".join(DRAWERS) or "none (import sim.plotting first)"))
        return DRAWERS[figure](self, ax)
