"""What several solvers share: sample times, snapshots, histograms, the box rule, warnings.

Units: hbar = c = 1; momenta in the energy unit, times and lengths in its inverse.
"""

from __future__ import annotations

import numpy as np

from ..config.schema import Scenario
from ..errors import ScenarioError
from ..physics.field import field_for, packet_for
from ..physics.golden_rule import anomalous_doppler_speed, packet_rate
from ..physics.models import EXCITED, GROUND, COMModel, model_for
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


def last_sample_time(scenario: Scenario) -> float:
    """t_max, the last sample time, without building the sample times (time units).

    `run.t_max`, or by default AUTO_LIFETIMES golden-rule lifetimes,
    t_max = AUTO_LIFETIMES / Gamma_packet, with Gamma_packet the golden-rule rate averaged over
    the packet (`sim.physics.golden_rule.packet_rate`, 1 / time units).  Costs nothing in
    proportion to run.samples, so estimates can call it for any sample count.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    float
        t_max (time units).

    Raises
    ------
    ScenarioError
        If run.t_max is missing and the golden-rule rate is zero (no automatic choice).
    """
    t_max = scenario.run.t_max
    if t_max is None:
        rate = packet_rate(scenario)
        if not rate > 0:
            hint = (" (coupling.strength = 0: nothing decays)"
                    if scenario.coupling.strength == 0 else "")
            raise ScenarioError("run.t_max: missing, and the golden-rule rate is zero so no "
                                f"automatic choice exists{hint}; allowed: > 0")
        t_max = AUTO_LIFETIMES / rate
    return float(t_max)


def sample_times(scenario: Scenario) -> np.ndarray:
    """Sample times t_n = n t_max / (samples - 1), n = 0 .. samples - 1 (time units).

    t_max is `last_sample_time`: `run.t_max`, or by default AUTO_LIFETIMES golden-rule
    lifetimes.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    ndarray
        linspace(0, t_max, run.samples) (time units).

    Raises
    ------
    ScenarioError
        If run.t_max is missing and the golden-rule rate is zero (no automatic choice).
    """
    return np.linspace(0.0, last_sample_time(scenario), scenario.run.samples)


def snapshot_indices(samples: int, count: int = SNAPSHOTS) -> np.ndarray:
    """Indices of `count` evenly spread sample times, first and last included.

    Parameters
    ----------
    samples : int
        Number of sample times.
    count : int, optional
        Number of snapshots wanted (default SNAPSHOTS).

    Returns
    -------
    ndarray of int
        The distinct values of round(linspace(0, samples - 1, count)), increasing (fewer than
        `count` when samples < count).
    """
    return np.unique(np.linspace(0, samples - 1, count).round().astype(int))


def masked(indices: np.ndarray, samples: int, values: np.ndarray) -> np.ndarray:
    """An array over all samples with `values` at `indices` and nan elsewhere.

    Parameters
    ----------
    indices : ndarray of int
        Sample indices where values are known.
    samples : int
        Length of the result.
    values : ndarray
        Values at `indices` (any units; kept).

    Returns
    -------
    ndarray, shape (samples,)
        Float array, nan off `indices`.
    """
    out = np.full(samples, np.nan)
    out[indices] = values
    return out


# --- momentum grids and histograms ------------------------------------------------------------


def axis_grid(scenario: Scenario, packet: Packet, model: COMModel,
              points: int = AXIS_POINTS) -> np.ndarray:
    """Axis momenta covering the packet and one recoil kick either side (momentum units).

    Centre p0 along the axis (`scenario.mean_momentum`), half-width
    6 sigma_p + 1.5 (E_e(p_fast) - M_g) with p_fast = |p0| + PACKET_REACH sigma_p
    (`Packet.fastest_momentum`): an emitted quantum carries at most the excited energy above
    M_g, and |k| <= w_k.

    Parameters
    ----------
    scenario : Scenario
    packet : Packet
        The scenario's packet (`sim.physics.field.packet_for`).
    model : COMModel
        The scenario's centre-of-mass model (`sim.physics.models.model_for`).
    points : int, optional
        Number of grid points (default AXIS_POINTS).

    Returns
    -------
    ndarray, shape (points,)
        Uniform grid of axis momenta (momentum units).
    """
    reach = float(model.energy(EXCITED, packet.fastest_momentum()))
    centre, width = scenario.mean_momentum, 6 * packet.momentum_std + 1.5 * reach
    return np.linspace(centre - width, centre + width, points)


def cell_edges(grid: np.ndarray) -> np.ndarray:
    """Edges of the cells around the points of a uniform grid (midpoints, ends extended).

    Parameters
    ----------
    grid : ndarray, shape (N,)
        Uniform grid (any units; momentum units here).

    Returns
    -------
    ndarray, shape (N + 1,)
        Midpoints between neighbours, plus grid[0] - step / 2 and grid[-1] + step / 2 (step 1
        for a one-point grid), in the units of `grid`.
    """
    step = grid[1] - grid[0] if grid.size > 1 else 1.0
    return np.concatenate(([grid[0] - 0.5 * step], 0.5 * (grid[1:] + grid[:-1]),
                           [grid[-1] + 0.5 * step]))


def bin_index(grid: np.ndarray, values) -> np.ndarray:
    """Index of the grid cell (`cell_edges`) holding each value; -1 outside the grid.

    Parameters
    ----------
    grid : ndarray
        Uniform grid (momentum units).
    values : array_like
        Values to place (same units as `grid`).

    Returns
    -------
    ndarray of int
        Same shape as `values`: the cell i with edges[i] <= value < edges[i + 1], or -1.
    """
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
        Where each mass sits, shape (N,) (momentum units).
    probability : ndarray
        Masses (dimensionless), shape (N,) or (N, columns); masses outside the grid are dropped.

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
    """Fastest ground-detector speed after a resonant emission (units of c, dimensionless).

    v_g(|p_fast| + k*), with p_fast = |p0| + PACKET_REACH sigma_p the largest momentum the
    packet reaches and k* the resonant emission momentum at rest
    (`COMModel.rest_emission_momentum`).

    Parameters
    ----------
    model : COMModel
    scenario : Scenario

    Returns
    -------
    float
        |dE_g/dp| at |p_fast| + k* (units of c).
    """
    packet = packet_for(scenario)
    return float(abs(model.velocity(GROUND, packet.fastest_momentum()
                                    + model.rest_emission_momentum())))


def returning_box_length(t_max: float, speed: float, margin: float) -> float:
    """Box length L = margin (1 + v) t_max whose emitted wave returns after margin x t_max.

    The wave runs against the detector at relative speed 1 + v, so in a periodic box of
    length L it comes back after `box_return_time(L, v)` = L / (1 + v) (c = 1).

    Parameters
    ----------
    t_max : float
        Last sample time (time units).
    speed : float
        Detector speed v (units of c, `emitted_speed`).
    margin : float
        Return time in units of t_max (dimensionless).

    Returns
    -------
    float
        L (length units, 1 / momentum units).
    """
    return margin * (1 + speed) * t_max


def box_return_time(length: float, speed: float) -> float:
    """When the emitted wave first returns to the detector in a periodic box: L / (1 + v).

    Parameters
    ----------
    length : float
        Box length L (length units).
    speed : float
        Detector speed v (units of c).

    Returns
    -------
    float
        L / (1 + v) (time units, c = 1).
    """
    return length / (1 + speed)


def recurrence_warning(t_max: float, recurrence: float, what: str, key: str) -> list[str]:
    """The bath-recurrence warning when t_max comes within RECURRENCE_SLACK of `recurrence`.

    Parameters
    ----------
    t_max : float
        Last sample time (time units).
    recurrence : float
        When the discrete bath stops acting as a continuum (time units).
    what : str
        What recurs, for the message.
    key : str
        The scenario key to raise, for the message.

    Returns
    -------
    list of str
        Empty when t_max RECURRENCE_SLACK <= recurrence, else one warning.
    """
    if t_max * RECURRENCE_SLACK <= recurrence:
        return []
    return [f"bath recurrence before t_max: {what} at t = {recurrence:.4g}, t_max = {t_max:.4g}; "
            f"raise {key}"]


# --- warnings every method shares ---------------------------------------------------------------


def norm_warning(norm: np.ndarray | None, advice: str = "") -> list[str]:
    """A warning when the total probability departs from 1 by more than NORM_TOLERANCE.

    Every method's evolution conserves probability (a truncated Hamiltonian, a Lindblad
    generator, an exact spectrum), so a drift is numerical error, not a discretisation that a
    larger bath or grid would cure; `advice` says what does reduce it for the method.

    Parameters
    ----------
    norm : ndarray or None
        Total probability over time (dimensionless), or None when not checked.
    advice : str, optional
        Where the error comes from and the key that reduces it, for the message; a generic
        sentence naming no key when empty.

    Returns
    -------
    list of str
        Empty when norm is None or max |norm - 1| <= NORM_TOLERANCE, else one warning.
    """
    if norm is None:
        return []
    drift = float(np.max(np.abs(np.asarray(norm) - 1.0)))
    if drift <= NORM_TOLERANCE:
        return []
    return [f"norm drift: total probability departs from 1 by {drift:.2e} "
            f"(tolerance {NORM_TOLERANCE:g}); "
            + (advice or "the evolution conserves probability, so this is numerical error")]


def galilean_reach_speed(scenario: Scenario, packet: Packet) -> float:
    """(|p0| + RWA_SPEED_REACH sigma_p) / M_g: the speed a galilean packet reaches (units of c).

    Parameters
    ----------
    scenario : Scenario
        Supplies the ground rest mass M_g (energy units).
    packet : Packet
        Supplies |p0| and sigma_p (momentum units).

    Returns
    -------
    float
        The speed (units of c, dimensionless); it may exceed 1 for a galilean model.
    """
    return (packet.mean_speed + RWA_SPEED_REACH * packet.momentum_std) / scenario.detector.ground_mass


def physics_warnings(scenario: Scenario, rate: float) -> list[str]:
    """Warnings every method shares.

    A large perturbation parameter Gamma / Omega (above WEAK_COUPLING_LIMIT, Omega the
    detector gap), and the rotating-wave approximation where counter-rotating terms are
    resonant: a packet reaching |v| = `galilean_reach_speed` above the recoil-corrected
    anomalous-Doppler threshold v_t (`sim.physics.golden_rule.anomalous_doppler_speed`;
    v_t = 1 + sqrt(2 Omega / M_g) for a massless field, inf for the relativistic models), where
    g -> e + quantum conserves energy.

    Parameters
    ----------
    scenario : Scenario
    rate : float
        The golden-rule rate Gamma (1 / time units).

    Returns
    -------
    list of str
        Zero, one or two warnings.
    """
    out = []
    gap = scenario.detector.gap
    if rate / gap > WEAK_COUPLING_LIMIT:
        out.append(f"perturbation parameter Gamma/Omega = {rate / gap:.3g} is large (above "
                   f"{WEAK_COUPLING_LIMIT:g}): golden-rule and Markov predictions are unreliable here; lower "
                   "coupling.strength (or raise coupling.lifetime), or use run.method = \"exact\" "
                   "or \"fock\"")
    if not scenario.coupling.rotating_wave:
        return out
    threshold = anomalous_doppler_speed(model_for(scenario), field_for(scenario))
    fastest = galilean_reach_speed(scenario, packet_for(scenario))
    if fastest > threshold:
        out.append(f"rotating-wave approximation with a {scenario.detector.model} detector "
                   f"reaching |v| = {fastest:.3g}, above the anomalous-Doppler threshold "
                   f"{threshold:.4g}: counter-rotating terms are resonant there (excitation with "
                   "emission, g -> e + quantum) and are dropped; set coupling.rotating_wave = "
                   "false (methods \"perturbative\" and \"fock\" keep them)")
    return out
