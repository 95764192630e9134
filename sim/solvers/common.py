"""What several solvers share: sample times, snapshots, histograms, the box rule, warnings.

Units: hbar = c = 1; momenta in the energy unit, times and lengths in its inverse.
"""

from __future__ import annotations

import numpy as np

from ..config.schema import Scenario
from ..errors import ScenarioError
from ..physics.field import packet_for
from ..physics.golden_rule import packet_rate
from ..physics.models import EXCITED, GROUND, COMModel
from ..physics.packet import Packet

#: automatic t_max: this many golden-rule lifetimes
AUTO_LIFETIMES = 5.0
#: ground-state momentum snapshots written to momentum.csv
SNAPSHOTS = 5
#: points of the axis-momentum grid of the snapshot densities
AXIS_POINTS = 401
#: warn when the excited + ground population drifts from 1 by more than this
NORM_TOLERANCE = 1e-6
#: warn when the perturbation parameter Gamma / Omega exceeds this
WEAK_COUPLING_LIMIT = 0.05
#: a galilean packet "reaches" its mean speed plus this many momentum widths (RWA warning)
RWA_SPEED_REACH = 3.0
#: warn of a bath recurrence when t_max comes within this factor of the return time
RECURRENCE_SLACK = 1.05


# --- times ------------------------------------------------------------------------------------


def sample_times(scenario: Scenario) -> np.ndarray:
    """Sample times t_n = n t_max / (samples - 1), n = 0 .. samples - 1 (time units).

    t_max defaults to AUTO_LIFETIMES golden-rule lifetimes, AUTO_LIFETIMES / Gamma_packet.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    ndarray
        linspace(0, t_max, run.samples).
    """
    t_max = scenario.run.t_max
    if t_max is None:
        rate = packet_rate(scenario)
        if not rate > 0:
            raise ScenarioError("run.t_max: missing, and the golden-rule rate is zero so no "
                                "automatic choice exists; allowed: > 0")
        t_max = AUTO_LIFETIMES / rate
    return np.linspace(0.0, t_max, scenario.run.samples)


def snapshot_indices(samples: int, count: int = SNAPSHOTS) -> np.ndarray:
    """Indices of `count` evenly spread sample times, first and last included."""
    return np.unique(np.linspace(0, samples - 1, count).round().astype(int))


def masked(indices: np.ndarray, samples: int, values: np.ndarray) -> np.ndarray:
    """An array over all samples with `values` at `indices` and nan elsewhere."""
    out = np.full(samples, np.nan)
    out[indices] = values
    return out


# --- momentum grids and histograms ------------------------------------------------------------


def axis_grid(scenario: Scenario, packet: Packet, model: COMModel,
              points: int = AXIS_POINTS) -> np.ndarray:
    """Axis momenta covering the packet and one recoil kick either side (momentum units).

    Centre p0 along the axis, half-width 6 sigma_p + 1.5 (E_e(p_fast) - M_g): an emitted
    quantum carries at most the excited energy above M_g.
    """
    reach = float(model.energy(EXCITED, packet.fastest_momentum()))
    centre, width = scenario.mean_momentum, 6 * packet.momentum_std + 1.5 * reach
    return np.linspace(centre - width, centre + width, points)


def cell_edges(grid: np.ndarray) -> np.ndarray:
    """Edges of the cells around the points of a uniform grid (midpoints, ends extended)."""
    step = grid[1] - grid[0] if grid.size > 1 else 1.0
    return np.concatenate(([grid[0] - 0.5 * step], 0.5 * (grid[1:] + grid[:-1]),
                           [grid[-1] + 0.5 * step]))


def bin_index(grid: np.ndarray, values) -> np.ndarray:
    """Index of the grid cell (`cell_edges`) holding each value; -1 outside the grid."""
    values = np.asarray(values, dtype=float)
    edges = cell_edges(grid)
    cell = np.searchsorted(edges, values, side="right") - 1
    return np.where((values >= edges[0]) & (values < edges[-1]), cell, -1)


def histogram(grid: np.ndarray, values, probability) -> np.ndarray:
    """Density on `grid` of probability masses at `values`: mass per cell / cell width.

    Parameters
    ----------
    grid : ndarray
        Uniform grid of momenta (momentum units).
    values : ndarray
        Where each mass sits, shape (N,).
    probability : ndarray
        Masses, shape (N,) or (N, columns); masses outside the grid are dropped.

    Returns
    -------
    ndarray
        Shape (grid.size, columns) (1 / momentum units).
    """
    cell = bin_index(grid, values)
    inside = cell >= 0
    columns = np.asarray(probability, dtype=float).reshape(cell.size, -1)
    widths = np.diff(cell_edges(grid))
    return np.stack([np.bincount(cell[inside], weights=col[inside], minlength=grid.size)
                     for col in columns.T], axis=1) / widths[:, None]


# --- the truncated box --------------------------------------------------------------------------


def emitted_speed(model: COMModel, scenario: Scenario) -> float:
    """Fastest ground-detector speed after a resonant emission, v_g(|p_fast| + k*) (units of c)."""
    packet = packet_for(scenario)
    return float(abs(model.velocity(GROUND, packet.fastest_momentum()
                                    + model.rest_emission_momentum())))


def returning_box_length(t_max: float, speed: float, margin: float) -> float:
    """Box length L = margin (1 + v) t_max whose emitted wave returns after margin x t_max.

    The wave runs against the detector at relative speed 1 + v, so it comes back after
    `box_return_time(L, v)` = L / (1 + v) (length and time units, c = 1).
    """
    return margin * (1 + speed) * t_max


def box_return_time(length: float, speed: float) -> float:
    """L / (1 + v): when the emitted wave first returns to the detector in a periodic box."""
    return length / (1 + speed)


def recurrence_warning(t_max: float, recurrence: float, what: str, key: str) -> list[str]:
    """The bath-recurrence warning when t_max comes within RECURRENCE_SLACK of `recurrence`."""
    if t_max * RECURRENCE_SLACK <= recurrence:
        return []
    return [f"bath recurrence before t_max: {what} at t = {recurrence:.4g}, t_max = {t_max:.4g}; "
            f"raise {key}"]


# --- warnings every method shares ---------------------------------------------------------------


def norm_warning(norm: np.ndarray | None) -> list[str]:
    """A warning when the total probability departs from 1 by more than NORM_TOLERANCE."""
    if norm is None:
        return []
    drift = float(np.max(np.abs(np.asarray(norm) - 1.0)))
    if drift <= NORM_TOLERANCE:
        return []
    return [f"norm drift: total probability departs from 1 by {drift:.2e} "
            f"(tolerance {NORM_TOLERANCE:g}); refine the discretisation"]


def galilean_reach_speed(scenario: Scenario, packet: Packet) -> float:
    """(|p0| + RWA_SPEED_REACH sigma_p) / M_g: the speed a galilean packet reaches (units of c)."""
    return (packet.mean_speed + RWA_SPEED_REACH * packet.momentum_std) / scenario.detector.ground_mass


def physics_warnings(scenario: Scenario, rate: float) -> list[str]:
    """Warnings every method shares: a large perturbation parameter Gamma/Omega, and the
    rotating-wave approximation where counter-rotating terms are resonant (a galilean packet
    reaching |v| > 1, anomalous Doppler emission)."""
    out = []
    gap = scenario.detector.gap
    if rate / gap > WEAK_COUPLING_LIMIT:
        out.append(f"perturbation parameter Gamma/Omega = {rate / gap:.3g} is large (above "
                   f"{WEAK_COUPLING_LIMIT:g}): golden-rule and Markov predictions are unreliable here")
    fastest = galilean_reach_speed(scenario, packet_for(scenario))
    if scenario.detector.model == "galilean" and scenario.coupling.rotating_wave and fastest > 1:
        out.append(f"rotating-wave approximation with a galilean detector reaching |v| = "
                   f"{fastest:.3g} > 1: counter-rotating terms are resonant there (anomalous Doppler "
                   "emission) and are dropped; use method = \"fock\" with rotating_wave = false")
    return out
