"""Truncated baths of field modes for the exact single-excitation solver.

Under the rotating-wave approximation |e> (x) psi (x) vac splits into total-momentum sectors P:
a level E_e(P) coupled to modes eps = E_g(|P - k|) + w_k with

    g_P(k) = c V(|P|, |P - k|) F(k) / sqrt((2 pi)^d 2 w_k)   per sqrt(d^dk),

so a discrete mode of phase-space volume dV carries g = sqrt(|g_P(k)|^2 dV) (energy units).
Energies are measured from M_g and come from the model (`sim.physics.models`), couplings from
`sim.physics.golden_rule.coupling_density`; nothing is re-derived here.

1D: a periodic box of length L.  Field modes on the lattice k = 2 pi n / L, 0 < |k| <= K
(k = 0 is dropped for a massless field, where w_0 = 0 and the mode weight diverges; it is kept
for a massive one), Int dk / 2 pi -> (1/L) sum_n.  The sectors P sit on the same lattice, so
that the detector momentum P - k after an emission stays on it.

3D: in each sector |P| the modes are labelled by (|k|, u = cos theta) relative to P.  The
azimuth is combined exactly (one collective mode per node, weight 2 pi).  u takes
Gauss-Legendre nodes; |k| is cut into equal-width *energy shells*: every node of a shell gets
the shell's centre energy, so that all nodes of one shell are degenerate and merge into one
bright mode (`star.bright_modes`), and the bath's energy spacing is uniform (recurrence
2 pi / shell width).  The shell edges are placed at E_e(P) + n x width, which puts the level
midway between two shell energies (the discrete principal-value sum of the Lamb shift is then
second-order accurate).  Each (shell, u) node carries the integral of |g|^2 2 pi k^2 dk over
the |k| interval whose energies fall in the shell, by a SHELL_POINTS-point Gauss-Legendre rule
(the energy is convex in |k| at fixed u, so that interval is found by bisection on at most two
monotone pieces).

Automatic truncation: a band too large for the mode budget is cut to a resonance window around
the on-shell emission only where that leaves the physics alone (`window_hazards`); a strongly
coupled level, a level near a band edge (bound state, threshold) or a broad packet keeps the
whole band up to the cutoff, within memory (`full_band_guard`, then the run's estimate).

Units: hbar = c = 1; momenta, energies in the energy unit, lengths and times in its inverse.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field as dataclass_field, replace

import numpy as np

from ...errors import ResourceError
from ...physics.field import Field, field_for, packet_for
from ...physics.golden_rule import EMISSION, channels_1d, coupling_density, packet_rate
from ...physics.models import EXCITED, GROUND, COMModel, model_for
from ...physics.quadrature import gauss_legendre, gauss_legendre_on
from ..base import MEMORY_SHARE, available_memory
from ..common import (
    WEAK_COUPLING_LIMIT,
    box_return_time,
    emitted_speed,
    recurrence_warning,
    returning_box_length,
)
from .star import sector_lamb_shift

#: the bath must outlast t_max by this factor (box return time, 3D shell recurrence)
RECURRENCE_MARGIN = 1.25
#: the 1D box also holds this many packet widths beyond the return distance
BOX_WIDTHS = 8.0
#: lattice points per packet momentum standard deviation (1D box length from the packet)
POINTS_PER_SIGMA = 4.0
#: 1D sectors cover the packet this many standard deviations either side of the mean
SECTOR_REACH = 6.0
#: 1D: most sectors before they are thinned to every m-th lattice point
MAX_SECTORS_1D = 161
#: 3D: default packet |P| quadrature nodes and Gauss-Legendre nodes in cos theta
SECTORS_3D = 24
ANGULAR_NODES = 16
#: modes (1D) / energy shells (3D) per sector before a resonance window is chosen automatically
MODE_BUDGET = 6000
#: warn when the resonance window is narrower than this many golden-rule rates
WINDOW_LINEWIDTHS = 50.0
#: a recoil kick or momentum spread needs at least this many lattice spacings
RESOLUTION_POINTS = 4.0
#: Gauss-Legendre points per (shell, u) node for the |k| integrals; bisection steps
SHELL_POINTS = 4
BISECTION_STEPS = 60
#: a window distorts the physics when the level lies within this many max(Gamma, |Lamb shift|)
#: of a band edge (a bound state or threshold nearby)
EDGE_REACH = 5.0
#: a window distorts the reduced COM state when the off-window Lamb shift varies across the
#: packet (p0 to p0 + 2 sigma_p) by more than this phase over t_max (radians)
PHASE_TOLERANCE = 0.1
#: modes (1D) / energy shells (3D) of the coarse full-band sector that screens a window
SCREEN_MODES = 2000
#: bytes per bath mode of a sector's arrays (six float64 arrays), for the guard of a full band
SECTOR_MODE_BYTES = 48.0
#: columns of `Sector.slopes`
SLOPES = 8
#: 3D sector slopes: central-difference step in |P|, relative to |P| + sigma_p
SECTOR_STEP = 1e-4
#: relative step of the central differences of the vertex factor (`vertex_log_slopes`)
VERTEX_STEP = 1e-6


@dataclass(frozen=True)
class Sector:
    """One total-momentum sector: a level coupled to discrete modes.

    Parameters
    ----------
    momentum : float
        P: signed in 1D, |P| in 3D (momentum units).
    weight : float
        The packet's probability of the sector; the weights of a bath sum to 1 (dimensionless).
    level_energy : float
        E_e(P) - M_g (energy units).
    mode_energies : ndarray, shape (N,)
        eps = E_g(|P - k|) + w_k of each mode (energy units).
    couplings : ndarray, shape (N,)
        g = sqrt(|g_P(k)|^2 dV) of each mode (energy units).
    quanta : ndarray, shape (N,)
        1D: the signed lattice momentum k; 3D: the |g|^2-weighted mean |k| of the node
        (momentum units).
    lattice : ndarray of int
        1D: n with k = n dk, shape (N,); empty in 3D.
    cosines : ndarray, shape (N,)
        3D: u = cos theta of the node relative to P; 1D: the sign of k (dimensionless).
    quanta_square : ndarray, shape (N,)
        3D: the |g|^2-weighted mean k^2 of the node; 1D: k^2 (momentum^2).
    slopes : ndarray, shape (N, 8)
        3D: the node's integrals Int |g|^2 s dV of the slopes s = gamma, v, gamma^2, v^2,
        gamma v, (1 - u^2) gamma_u^2, (1 - u^2) v_u^2, (1 - u^2) gamma_u v_u of the mode at fixed
        k (`mode_slopes`: gamma = d ln g / d|P|, v = d eps / d|P|, gamma_u and v_u the same in u
        divided by |P|), which the position moments need (`observables.spreading_moments`);
        shape (0, 8) in 1D (units: energy^2 times the slope's).
    """

    momentum: float
    weight: float
    level_energy: float
    mode_energies: np.ndarray
    couplings: np.ndarray
    quanta: np.ndarray
    lattice: np.ndarray
    cosines: np.ndarray
    quanta_square: np.ndarray
    slopes: np.ndarray = dataclass_field(default_factory=lambda: np.zeros((0, SLOPES)))

    @property
    def coupling_sum(self) -> float:
        """sum_k |g_k|^2 = Int J_P(w) dw of the truncated bath: the t^2 coefficient of 1 - P_e.

        Returns
        -------
        float
            sum_k |g_k|^2 (energy^2).
        """
        return float(np.sum(np.abs(self.couplings) ** 2))


@dataclass(frozen=True)
class Bath:
    """A truncated bath: its sectors and the discretisation that made them.

    Parameters
    ----------
    dimensions : int
        1 or 3.
    sectors : tuple of Sector
        The total-momentum sectors; their weights sum to 1.
    cutoff : float
        The field's momentum cutoff K (momentum units).
    spacing : float
        1D: lattice spacing dk = 2 pi / L (momentum units); 3D: energy-shell width (energy
        units).
    recurrence_time : float
        When the discrete bath stops faking a continuum (time units): 1D the emitted wave's
        return L / (1 + v); 3D 2 pi / shell width.
    window : float or None
        The resonance window |eps - E_e| <= window (energy units), or None for the full band
        0 < |k| <= cutoff.
    box_length : float or None, optional
        1D box length L (length units); None in 3D.
    stride : int, optional
        1D sectors sit on every stride-th lattice point (default 1).
    angular_nodes : int, optional
        3D Gauss-Legendre nodes in u = cos theta (0 in 1D).
    notes : tuple of str, optional
        Warnings about the discretisation, for the run's summary.
    cutoff_is_model : bool, optional
        True when the scenario fixes field.cutoff for a point-like detector (F = 1): the cutoff
        then defines the coupling, it is not a truncation to refine (default False).
    """

    dimensions: int
    sectors: tuple[Sector, ...]
    cutoff: float
    spacing: float
    recurrence_time: float
    window: float | None
    box_length: float | None = None
    stride: int = 1
    angular_nodes: int = 0
    notes: tuple[str, ...] = ()
    cutoff_is_model: bool = False

    @property
    def mode_count(self) -> int:
        """Largest number of modes in one sector.

        Returns
        -------
        int
            max over sectors of the mode count (0 without sectors).
        """
        return max((s.mode_energies.size for s in self.sectors), default=0)


# --- shared -----------------------------------------------------------------------------------


def _mode_couplings(model: COMModel, field: Field, P, k, volume):
    """g = sqrt(|g_P(k)|^2 volume) for a 1D emission at signed P into the signed quantum k."""
    k = np.asarray(k, dtype=float)
    return np.sqrt(coupling_density(model, field, EMISSION, np.abs(k), abs(P), np.abs(P - k))
                   * volume)


def bath_model(scenario) -> tuple[COMModel, Field]:
    """The scenario's model and its bath field (a finite cutoff, `sim.physics.field.field_for`).

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    (COMModel, Field)
    """
    model = model_for(scenario)
    return model, field_for(scenario, model)


def bath_for(scenario, t_max: float) -> Bath:
    """The scenario's truncated bath for a run to t_max (defaults overridable in [bath]).

    Parameters
    ----------
    scenario : Scenario
    t_max : float
        Last sample time (time units); the bath must outlast it.

    Returns
    -------
    Bath
        `box_bath` in 1D, `shell_bath` in 3D.
    """
    if scenario.dimensions == 1:
        return box_bath(scenario, t_max)
    return shell_bath(scenario, t_max)


def refined_keys(bath: Bath, factor: float = 1.5) -> dict:
    """Dotted scenario keys that refine every truncation of `bath` by `factor` (`run --check`).

    - bath.window x factor when the bath has a window (set or automatic);
    - bath.modes = ceil(factor^2 x the largest sector's mode count): at least the refined full
      band (box and cutoff both x factor), so that a full-band bath stays full-band;
    - field.cutoff x factor unless the cutoff is part of the model (`Bath.cutoff_is_model`);
    - 1D: bath.box_length x factor and bath.sectors = ceil(factor x sector count);
    - 3D: bath.radial_nodes = ceil(factor x band / shell width) with band the widest sector's
      mode-energy range, bath.angular_nodes and bath.sectors x factor (rounded up).

    Parameters
    ----------
    bath : Bath
    factor : float, optional
        Refinement factor (dimensionless, default 1.5).

    Returns
    -------
    dict
        Dotted key -> new value (natural units).
    """
    keys = {"bath.modes": math.ceil(factor * factor * max(bath.mode_count, 1)),
            "bath.sectors": math.ceil(factor * len(bath.sectors))}
    if not bath.cutoff_is_model:
        keys["field.cutoff"] = bath.cutoff * factor
    if bath.window is not None:
        keys["bath.window"] = bath.window * factor
    if bath.dimensions == 1:
        keys["bath.box_length"] = bath.box_length * factor
    else:
        band = max(s.mode_energies.max() - s.mode_energies.min() for s in bath.sectors
                   if s.mode_energies.size)
        keys["bath.radial_nodes"] = math.ceil(factor * band / bath.spacing)
        keys["bath.angular_nodes"] = math.ceil(factor * bath.angular_nodes)
    return keys


def cutoff_is_model(scenario) -> bool:
    """True when field.cutoff is given for a point-like detector (field.smearing = 0).

    Then F(k) = 1 up to K: the cutoff defines the coupling (the Lamb shift and a bound state
    depend on it), so it is a model parameter, not a truncation to refine.

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    bool
    """
    return scenario.field.cutoff is not None and scenario.field.smearing == 0


# --- when a resonance window would distort the physics ------------------------------------------


def screening_sector(model: COMModel, field: Field, P: float, dimensions: int,
                     angular_nodes: int = ANGULAR_NODES) -> tuple[Sector, float]:
    """A coarse full-band sector at P, to screen a resonance window cheaply.

    1D: `box_sector` at spacing 2 K / SCREEN_MODES; 3D: `shell_sector` with shells of width
    band / SCREEN_MODES (`_band`).  Its off-resonant sums (Lamb shift, band edges) are accurate
    to the coarse spacing; it is never evolved.

    Parameters
    ----------
    model : COMModel
    field : Field
    P : float
        Sector momentum (momentum units; |P| in 3D).
    dimensions : int
        1 or 3.
    angular_nodes : int, optional
        3D Gauss-Legendre nodes in cos theta (default ANGULAR_NODES).

    Returns
    -------
    sector : Sector
    shift : float
        Its Lamb shift, the discrete principal-value sum less the ladder offset
        (`ladder_correction`; energy units).
    """
    if dimensions == 1:
        spacing = 2 * field.cutoff / SCREEN_MODES
        sector = box_sector(model, field, P, spacing, 1.0, None)
        correction = ladder_correction(model, field, sector, spacing)
    else:
        width = _band(model, field, abs(P)) / SCREEN_MODES
        sector = shell_sector(model, field, abs(P), 1.0, width, angular_nodes, None)
        correction = 0.0
    shift = sector_lamb_shift(sector.level_energy, sector.mode_energies, sector.couplings)
    return sector, shift - correction


def _outside_shift(sector: Sector, window: float) -> float:
    """The part of the discrete Lamb shift from the modes outside |eps - E_e| <= window."""
    detuning = sector.level_energy - sector.mode_energies
    outside = np.abs(detuning) > window
    return float(np.sum(np.abs(sector.couplings[outside]) ** 2 / detuning[outside]))


def window_hazards(scenario, model: COMModel, field: Field, window: float, t_max: float,
                   angular_nodes: int = ANGULAR_NODES) -> list[str]:
    """Why a resonance window |eps - E_e| <= window would distort the run (empty: it would not).

    - strong coupling: Gamma / Omega > WEAK_COUPLING_LIMIT (Gamma the packet's golden-rule rate,
      Omega the gap): the dressed level, the non-exponential decay and any bound state are set
      by the whole band, not by the line;
    - a band edge near the level: the distance from E_e(p0) to the bottom or top of the band is
      below EDGE_REACH max(Gamma, |Delta|), Delta the full-band Lamb shift (a bound state or a
      threshold tail, whose weight depends on all modes);
    - a broad packet: the Lamb shift of the dropped modes, Delta_out(P), varies across the packet
      so that |Delta_out(p0 + 2 sigma_p) - Delta_out(p0)| t_max > PHASE_TOLERANCE: the sectors'
      relative phases, hence the reduced COM state, would be wrong.

    Each is judged on a coarse full-band sector (`screening_sector`).

    Parameters
    ----------
    scenario : Scenario
    model : COMModel
    field : Field
    window : float
        The window that would be used (energy units).
    t_max : float
        Last sample time (time units).
    angular_nodes : int, optional
        3D nodes in cos theta of the screening sector.

    Returns
    -------
    list of str
        One phrase per hazard.
    """
    out = []
    rate, gap = packet_rate(scenario), scenario.detector.gap
    if rate / gap > WEAK_COUPLING_LIMIT:
        out.append(f"strong coupling (Gamma/Omega = {rate / gap:.3g} > {WEAK_COUPLING_LIMIT:g})")
    p0, sigma = scenario.mean_momentum, packet_for(scenario).momentum_std
    dims = scenario.dimensions
    sector, shift = screening_sector(model, field, p0, dims, angular_nodes)
    if sector.mode_energies.size:
        edge = min(abs(sector.level_energy - sector.mode_energies.min()),
                   abs(sector.mode_energies.max() - sector.level_energy))
        reach = EDGE_REACH * max(rate, abs(shift))
        if edge < reach:
            out.append(f"the level lies {edge:.3g} from a band edge, within {EDGE_REACH:g} "
                       f"max(Gamma, |Lamb shift|) = {reach:.3g} (a bound state or threshold)")
    wide, _ = screening_sector(model, field, p0 + 2 * sigma, dims, angular_nodes)
    phase = abs(_outside_shift(wide, window) - _outside_shift(sector, window)) * t_max
    if phase > PHASE_TOLERANCE:
        out.append(f"a broad packet (the dropped modes' Lamb shift varies by {phase:.3g} rad over "
                   f"t_max across 2 sigma_p, above {PHASE_TOLERANCE:g})")
    return out


def full_band_guard(modes: int, sectors: int, hazards: list[str], keys: str) -> None:
    """Refuse a full band the physics needs (`window_hazards`) whose bath alone cannot fit.

    The bath's arrays take SECTOR_MODE_BYTES per mode and sector; the run needs more
    (`ExactSolver.estimate`, checked before evolving), so this only stops the build itself.

    Parameters
    ----------
    modes : int
        Modes (1D) or nodes (3D) per sector of the full band (dimensionless count).
    sectors : int
        Sectors (dimensionless count).
    hazards : list of str
        Why a window would distort the run.
    keys : str
        The size keys to name, e.g. "bath.box_length".

    Raises
    ------
    ResourceError
        If modes x sectors x SECTOR_MODE_BYTES > MEMORY_SHARE x available memory.
    """
    need, limit = SECTOR_MODE_BYTES * modes * sectors, MEMORY_SHARE * available_memory()
    if need > limit:
        raise ResourceError(
            f"bath.modes: the whole band needs {modes:,} modes per sector x {sectors} sectors "
            f"({need / 2**30:.3g} GiB for the bath alone, more than the {limit / 2**30:.3g} GiB "
            f"it may use), and a resonance window would distort this run ({'; '.join(hazards)}); "
            f"lower {keys}, or set bath.window (or bath.modes) to accept a window knowingly")


def _hazard_note(hazards: list[str], what: str, key: str) -> str:
    """The note of a bath that keeps (or, by the user's choice, drops) the whole band."""
    return f"bath: {what} because of {'; '.join(hazards)}; {key}"


# --- 1D: periodic box -------------------------------------------------------------------------


def default_box_length(scenario, model: COMModel, t_max: float) -> float:
    """Default 1D box length L (length units).

    L = max(RECURRENCE_MARGIN (1 + v) t_max + BOX_WIDTHS Delta_x, 2 pi POINTS_PER_SIGMA / sigma_p)
    with v = `emitted_speed` and Delta_x the packet's position width: the emitted wave, running
    against the detector at relative speed 1 + v, returns after L / (1 + v); the lattice spacing
    2 pi / L must resolve the packet's momentum spread sigma_p with POINTS_PER_SIGMA points.

    Parameters
    ----------
    scenario : Scenario
    model : COMModel
    t_max : float
        Last sample time (time units).

    Returns
    -------
    float
        L (length units).
    """
    packet = packet_for(scenario)
    speed = emitted_speed(model, scenario)
    returning = returning_box_length(t_max, speed, RECURRENCE_MARGIN) + BOX_WIDTHS * packet.width
    resolving = 2 * np.pi * POINTS_PER_SIGMA / packet.momentum_std
    return float(max(returning, resolving))


def sector_lattice(scenario, spacing: float, limit: int | None) -> tuple[np.ndarray, int]:
    """Lattice indices j of the 1D sectors P = j dk covering the packet.

    The sectors cover p0 +- SECTOR_REACH sigma_p; when there are more than `limit` lattice points
    they are thinned to every stride-th point, stride = ceil(count / limit), aligned so that the
    point nearest p0 is kept.

    Parameters
    ----------
    scenario : Scenario
    spacing : float
        Lattice spacing dk (momentum units).
    limit : int or None
        Largest number of sectors; None or 0 for no thinning.

    Returns
    -------
    j : ndarray of int
        Lattice indices of the sectors, increasing.
    stride : int
        The thinning stride (1 when not thinned).
    """
    packet = packet_for(scenario)
    lo = math.ceil((packet.momentum[0] - SECTOR_REACH * packet.momentum_std) / spacing)
    hi = math.floor((packet.momentum[0] + SECTOR_REACH * packet.momentum_std) / spacing)
    count = hi - lo + 1
    stride = max(1, math.ceil(count / limit)) if limit else 1
    centre = round(packet.momentum[0] / spacing)
    j = np.arange(centre - ((centre - lo) // stride) * stride, hi + 1, stride)
    return j, stride


def box_sector(model: COMModel, field: Field, P: float, spacing: float, weight: float,
               window: float | None) -> Sector:
    """The 1D sector at lattice momentum P.

    Modes k = n dk with 0 < |k| <= cutoff (k = 0 kept for a massive field), restricted to
    |eps - E_e(P)| <= window when a window is given (`_window_lattice` lists the candidates);
    eps = E_g(|P - k|) + w_k and g = sqrt(|g_P(k)|^2 dk).

    Parameters
    ----------
    model : COMModel
    field : Field
    P : float
        Signed sector momentum (momentum units).
    spacing : float
        Lattice spacing dk = 2 pi / L (momentum units).
    weight : float
        The packet's probability of the sector (dimensionless).
    window : float or None
        Resonance window (energy units), or None for the full band.

    Returns
    -------
    Sector
    """
    level = float(model.energy(EXCITED, abs(P)))
    if window is None:
        top = math.floor(field.cutoff / spacing * (1 + 1e-12))
        n = np.arange(-top, top + 1)
    else:
        n = _window_lattice(model, field, P, spacing, window)
    if field.mass == 0:
        n = n[n != 0]
    k = n * spacing
    energies = model.energy(GROUND, np.abs(P - k)) + field.frequency(k)
    keep = np.abs(k) <= field.cutoff
    if window is not None:
        keep &= np.abs(energies - level) <= window
    n, k, energies = n[keep], k[keep], energies[keep]
    couplings = _mode_couplings(model, field, P, k, spacing)
    return Sector(float(P), float(weight), level, energies, couplings, k, n, np.sign(k), k * k)


def _window_lattice(model: COMModel, field: Field, P: float, spacing: float, window: float):
    """Lattice indices around each on-shell emission of the sector (candidates for the window)."""
    pieces = []
    for channel, slope in _on_shell(model, field, P):
        k = -channel.kick  # the emitted quantum's signed momentum: P - k = P + kick
        half = 2 * window / slope + 2 * spacing
        pieces.append(np.arange(math.floor((k - half) / spacing), math.ceil((k + half) / spacing) + 1))
    return np.unique(np.concatenate(pieces)) if pieces else np.zeros(0, dtype=int)


def _on_shell(model: COMModel, field: Field, P: float):
    """(channel, |d eps / dk|) of each on-shell emission of a 1D detector at P (golden rule)."""
    out = []
    for channel in channels_1d(model, field, EMISSION, P):
        k = -channel.kick
        q = P - k
        slope = abs(k / float(field.frequency(k)) - float(model.velocity(GROUND, abs(q))) * np.sign(q))
        out.append((channel, slope))
    return out


def automatic_window(model: COMModel, field: Field, P: float, spacing: float, budget: int) -> float:
    """Resonance window holding about `budget` lattice modes around the on-shell emissions at P.

    The mode count of a window is sum over channels of 2 window / (slope dk), slope = |d eps/dk|
    at the channel's on-shell quantum, so window = budget / sum_c 2 / (slope_c dk).

    Parameters
    ----------
    model : COMModel
    field : Field
    P : float
        Signed sector momentum (momentum units).
    spacing : float
        Lattice spacing dk (momentum units).
    budget : int
        Modes wanted.

    Returns
    -------
    float
        The window (energy units); inf when there is no on-shell channel.
    """
    density = sum(2.0 / (slope * spacing) for _, slope in _on_shell(model, field, P))
    return budget / density if density > 0 else np.inf


def box_bath(scenario, t_max: float) -> Bath:
    """1D periodic-box bath with sectors on the mode lattice.

    Box length L = bath.box_length or `default_box_length`; lattice spacing dk = 2 pi / L; sectors
    P = j dk from `sector_lattice` (at most bath.sectors, default MAX_SECTORS_1D) with weights
    |psi(P)|^2 normalised to sum 1; modes k = n dk, 0 < |k| <= cutoff (`box_sector`).  When the
    full band, 2 floor(K / dk) modes, exceeds the budget (bath.modes, default MODE_BUDGET) and no
    bath.window is given, the modes are restricted to `automatic_window` at the packet's mean
    momentum, unless that window would distort the run (`window_hazards`: strong coupling, a
    band edge near the level, a broad packet) and bath.modes is not given: then the whole band
    is kept, and refused (`full_band_guard`) if the bath alone cannot fit in memory.  The
    recurrence time is L / (1 + v), v = `emitted_speed`.

    Parameters
    ----------
    scenario : Scenario
    t_max : float
        Last sample time (time units).

    Returns
    -------
    Bath
        With the discretisation warnings (`resolution_notes`) in `notes`.

    Raises
    ------
    ResourceError
        If the whole band is needed and its bath alone cannot fit (`full_band_guard`).
    """
    model, field = bath_model(scenario)
    packet, cfg = packet_for(scenario), scenario.bath
    length = cfg.box_length or default_box_length(scenario, model, t_max)
    spacing = 2 * np.pi / length
    budget = cfg.modes or MODE_BUDGET
    j, stride = sector_lattice(scenario, spacing, cfg.sectors or MAX_SECTORS_1D)
    P = j * spacing
    weights = packet.axis_density(P)
    weights /= weights.sum()
    window = cfg.window
    notes = []
    full_band = 2 * math.floor(field.cutoff / spacing)
    if window is None and full_band > budget:
        window = automatic_window(model, field, scenario.mean_momentum, spacing, budget)
        hazards = window_hazards(scenario, model, field, window, t_max)
        if hazards and cfg.modes is None:
            full_band_guard(full_band + 1, len(P), hazards, "bath.box_length (or bath.sectors)")
            notes.append(_hazard_note(hazards, f"the whole band 0 < |k| <= {field.cutoff:.4g} kept "
                                      f"({full_band:,} modes per sector, above the {budget:,} at "
                                      "which a resonance window is chosen)",
                                      "set bath.window or bath.modes to use a window instead"))
            window = None
        elif hazards:
            notes.append(_hazard_note(hazards, f"bath.modes = {budget:,} restricts the modes to the "
                                      f"window |eps - E_e| <= {window:.4g}, which distorts the run",
                                      f"raise bath.modes to {full_band + 1:,} for the whole band"))
        else:
            notes.append(f"bath: the full band 0 < |k| <= {field.cutoff:.4g} would need "
                         f"{full_band:,} modes per sector; modes restricted to the resonance "
                         f"window |eps - E_e| <= {window:.4g} (bath.window); the Lamb shift then "
                         "depends on the window")
    sectors = tuple(box_sector(model, field, p, spacing, w, window) for p, w in zip(P, weights))
    speed = emitted_speed(model, scenario)
    bath = Bath(1, sectors, field.cutoff, spacing, box_return_time(length, speed), window, length, stride,
                notes=tuple(notes), cutoff_is_model=cutoff_is_model(scenario))
    return replace(bath, notes=bath.notes + tuple(resolution_notes(scenario, model, bath, t_max)))


# --- 3D: energy shells x Gauss-Legendre angles ------------------------------------------------


def shell_energy(model: COMModel, field: Field, P, k, u):
    """Mode energy eps = E_g(|P - k|) + w_k with |P - k| = sqrt(P^2 + k^2 - 2 P k u).

    Parameters
    ----------
    model : COMModel
    field : Field
    P : float
        |P| of the sector (momentum units).
    k : array_like
        |k| of the quantum (momentum units).
    u : array_like
        cos theta between k and P (dimensionless), broadcast against k.

    Returns
    -------
    ndarray
        eps (energy units, measured from M_g).
    """
    q = np.sqrt(np.maximum(P * P + k * k - 2 * P * k * u, 0.0))
    return model.energy(GROUND, q) + field.frequency(k)


def _energy_slope(model: COMModel, field: Field, P, k, u):
    """d eps / dk at fixed u: k / w_k + v_g(q) (k - P u) / q (the sign is what matters)."""
    q = np.sqrt(np.maximum(P * P + k * k - 2 * P * k * u, 0.0))
    tiny = 1e-300
    w = field.frequency(k)
    field_part = np.where(w > 0, k / np.where(w > 0, w, 1.0), 1.0)
    safe_q = np.maximum(q, tiny)
    return field_part + model.velocity(GROUND, safe_q) / safe_q * (k - P * u)


def _bisect(func, lo, hi, rising):
    """Vectorised bisection: x in [lo, hi] with func(x) = 0, func rising (or falling) there."""
    lo, hi = np.array(lo, dtype=float), np.array(hi, dtype=float)
    for _ in range(BISECTION_STEPS):
        mid = 0.5 * (lo + hi)
        up = (func(mid) > 0) == rising
        hi = np.where(up, mid, hi)
        lo = np.where(up, lo, mid)
    return 0.5 * (lo + hi)


def shell_sector(model: COMModel, field: Field, P: float, weight: float, width: float,
                 angular_nodes: int, window: float | None) -> Sector:
    """The 3D sector |P| discretised in energy shells and Gauss-Legendre nodes in u = cos theta.

    Shell edges at E_e(P) + n width, each shell's nodes at its centre energy
    E_e(P) + (n + 1/2) width; at each angular node u the energy is monotone on at most two pieces
    in |k| (split at the bisected turning point of d eps/dk), and each (shell, u) node carries
    Int |g_P(k)|^2 2 pi k^2 dk over the |k| interval whose energies fall in the shell, times the
    u quadrature weight (`_piece_nodes`).  Nodes with zero weight are dropped; g = sqrt(weight).

    Parameters
    ----------
    model : COMModel
    field : Field
    P : float
        |P| of the sector (momentum units).
    weight : float
        The packet's probability of the sector (dimensionless).
    width : float
        Shell width (energy units).
    angular_nodes : int
        Gauss-Legendre nodes in u.
    window : float or None
        Resonance window (energy units), or None for the full band up to the cutoff.

    Returns
    -------
    Sector

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Legendre quadrature).
    """
    level = float(model.energy(EXCITED, P))
    u, u_weights = gauss_legendre(angular_nodes)
    K = field.cutoff
    turn = _bisect(lambda k: _energy_slope(model, field, P, k, u), np.zeros_like(u),
                   np.full_like(u, K), rising=True)
    turn = np.where(_energy_slope(model, field, P, np.zeros_like(u), u) >= 0, 0.0, turn)
    turn = np.where(_energy_slope(model, field, P, np.full_like(u, K), u) <= 0, K, turn)
    pieces = [(np.zeros_like(u), turn, False), (turn, np.full_like(u, K), True)]
    nodes = [_piece_nodes(model, field, P, level, u, u_weights, width, window, *piece)
             for piece in pieces]
    energies, W0, W1, W2, cos, slopes = (np.concatenate(parts) for parts in zip(*nodes))
    keep = W0 > 0
    mean_k = W1[keep] / W0[keep]
    return Sector(float(P), float(weight), level, energies[keep], np.sqrt(W0[keep]), mean_k,
                  np.zeros(0, dtype=int), cos[keep], W2[keep] / W0[keep], slopes[keep])


def _piece_nodes(model, field, P, level, u, u_weights, width, window, start, stop, rising):
    """The (shell, u) nodes of one monotone piece of the energy at the angular nodes u.

    (energy, Int |g|^2 dV, Int |g|^2 k dV, Int |g|^2 k^2 dV, u, Int |g|^2 slopes dV) of every
    (shell, u) node on the monotone pieces k in [start(u), stop(u)], dV = 2 pi k^2 dk x
    (u weight), the slopes those of `mode_slopes`.
    """
    e_start = shell_energy(model, field, P, start, u)
    e_stop = shell_energy(model, field, P, stop, u)
    e_lo, e_hi = np.minimum(e_start, e_stop), np.maximum(e_start, e_stop)
    if window is not None:
        e_lo, e_hi = np.maximum(e_lo, level - window), np.minimum(e_hi, level + window)
    first = np.floor((e_lo - level) / width)
    count = np.where(e_hi > e_lo, np.ceil((e_hi - level) / width) - first, 0).astype(int)
    node = np.repeat(np.arange(u.size), count)
    if node.size == 0:
        return (np.zeros(0),) * 5 + (np.zeros((0, SLOPES)),)
    shell = first[node] + (np.arange(node.size) - np.repeat(np.cumsum(count) - count, count))
    lower = np.maximum(level + shell * width, e_lo[node])
    upper = np.minimum(level + (shell + 1) * width, e_hi[node])
    uu = u[node]

    def invert(target):
        return _bisect(lambda k: shell_energy(model, field, P, k, uu) - target, start[node],
                       stop[node], rising)

    k_a, k_b = invert(lower), invert(upper)
    k, w = gauss_legendre_on(SHELL_POINTS, k_a, k_b)
    q = np.sqrt(np.maximum(P * P + k * k - 2 * P * k * uu[:, None], 0.0))
    density = (coupling_density(model, field, EMISSION, k, P, q) * 2 * np.pi * k * k
               * np.abs(w) * u_weights[node][:, None])
    energies = level + (shell + 0.5) * width
    slopes = np.einsum("np,nps->ns", density, mode_slopes(model, P, k, uu[:, None]))
    return (energies, density.sum(1), (density * k).sum(1), (density * k * k).sum(1), uu, slopes)


def mode_slopes(model: COMModel, P: float, k, u) -> np.ndarray:
    """Slopes of a 3D mode's coupling and energy with the sector momentum, at fixed vector k.

    With q = |P - k| = sqrt(P^2 + k^2 - 2 P k u) and eps = E_g(q) + w_k, g ~ V(P, q):

        v       = d eps / d|P|       = v_g(q) (P - k u) / q,
        v_u     = (d eps / d u) / P  = -v_g(q) k / q,
        gamma   = d ln g / d|P|      = d_P ln V + d_q ln V (P - k u) / q,
        gamma_u = (d ln g / d u) / P = -d_q ln V k / q

    (the u-slopes divided by |P| stay finite as |P| -> 0; d ln V from `vertex_log_slopes`).

    Parameters
    ----------
    model : COMModel
    P : float
        |P| of the sector (momentum units).
    k : ndarray
        |k| of the quantum (momentum units).
    u : ndarray
        cos theta between k and P, broadcast against k (dimensionless).

    Returns
    -------
    ndarray, shape k.shape + (SLOPES,)
        gamma, v, gamma^2, v^2, gamma v, (1 - u^2) gamma_u^2, (1 - u^2) v_u^2,
        (1 - u^2) gamma_u v_u (gamma in 1 / momentum, v dimensionless, the u-slopes per |P|).
    """
    k, u = np.broadcast_arrays(np.asarray(k, dtype=float), np.asarray(u, dtype=float))
    q = np.maximum(np.sqrt(np.maximum(P * P + k * k - 2 * P * k * u, 0.0)), 1e-300)
    along, across = (P - k * u) / q, -k / q
    d_p, d_q = vertex_log_slopes(model, P, q)
    speed = model.velocity(GROUND, q)
    v, v_u = speed * along, speed * across
    gamma, gamma_u = d_p + d_q * along, d_q * across
    side = 1 - u * u
    return np.stack([gamma, v, gamma * gamma, v * v, gamma * v, side * gamma_u ** 2,
                     side * v_u ** 2, side * gamma_u * v_u], axis=-1)


def vertex_log_slopes(model: COMModel, P: float, q) -> tuple[np.ndarray, np.ndarray]:
    """d ln V / d p_e and d ln V / d p_g of the emission vertex V(p_e, p_g) at (P, q).

    Central differences with relative step VERTEX_STEP (V is smooth and positive); zero for
    the models whose vertex is 1.

    Parameters
    ----------
    model : COMModel
    P : float
        Excited-level momentum |P| (momentum units).
    q : ndarray
        Ground-level momentum |P - k| (momentum units).

    Returns
    -------
    (ndarray, ndarray)
        The two slopes, shaped like q (1 / momentum units).
    """
    q = np.asarray(q, dtype=float)
    scale = VERTEX_STEP * (P + q + model.ground_mass)

    def log_vertex(p_e, p_g):
        return np.log(np.abs(EMISSION.vertex(model, p_e, p_g)))

    p_lo, q_lo = np.maximum(P - scale, 0.0), np.maximum(q - scale, 0.0)
    d_p = (log_vertex(P + scale, q) - log_vertex(p_lo, q)) / (P + scale - p_lo)
    d_q = (log_vertex(P, q + scale) - log_vertex(P, q_lo)) / (q + scale - q_lo)
    return d_p, d_q


def neighbour_sectors(scenario, bath: Bath, sector: Sector) -> tuple[Sector, Sector, float]:
    """The 3D sector at |P| -/+ delta with the bath's shells, for slopes in |P| at fixed k.

    delta = SECTOR_STEP (|P| + sigma_p), at most |P| / 2; the shells keep their width, angular
    nodes and window relative to the level, so the phase-free level amplitude is smooth in |P|
    (`star.StarSpectrum.level_slope`).

    Parameters
    ----------
    scenario : Scenario
    bath : Bath
        A 3D bath (`shell_bath`).
    sector : Sector
        One of its sectors.

    Returns
    -------
    below, above : Sector
    delta : float
        The step (momentum units).
    """
    model, field = bath_model(scenario)
    P = sector.momentum
    delta = min(SECTOR_STEP * (P + packet_for(scenario).momentum_std), 0.5 * P)
    below, above = (shell_sector(model, field, P + sign * delta, sector.weight, bath.spacing,
                                 bath.angular_nodes, bath.window) for sign in (-1, 1))
    return below, above, delta


def default_shell_width(t_max: float) -> float:
    """Energy-shell width whose recurrence 2 pi / width is RECURRENCE_MARGIN x t_max.

    Parameters
    ----------
    t_max : float
        Last sample time (time units).

    Returns
    -------
    float
        2 pi / (RECURRENCE_MARGIN t_max) (energy units).
    """
    return 2 * np.pi / (RECURRENCE_MARGIN * t_max)


def shell_bath(scenario, t_max: float) -> Bath:
    """3D bath: sectors at the packet's |P| quadrature nodes, energy shells x angular nodes.

    Sectors at the Gauss-Legendre nodes of the packet's |P| density (bath.sectors, default
    SECTORS_3D; `Packet.quadrature`), each discretised by `shell_sector` with
    bath.angular_nodes (default ANGULAR_NODES) nodes in u.  The shell width is band / radial_nodes
    when bath.radial_nodes is given (band: the mode-energy range of the fastest sector, `_band`),
    else `default_shell_width(t_max)`.  When band / width exceeds the budget (bath.modes, default
    MODE_BUDGET) and no bath.window is given, the shells are restricted to the window
    0.5 budget width, unless that window would distort the run (`window_hazards`) and
    bath.modes is not given: then the whole band is kept, and refused (`full_band_guard`) if the
    bath alone cannot fit in memory.  The recurrence time is 2 pi / width.

    Parameters
    ----------
    scenario : Scenario
    t_max : float
        Last sample time (time units).

    Returns
    -------
    Bath
        With the discretisation warnings (`resolution_notes`) in `notes`.

    Raises
    ------
    ResourceError
        If the whole band is needed and its bath alone cannot fit (`full_band_guard`).

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Legendre quadrature).
    """
    model, field = bath_model(scenario)
    packet, cfg = packet_for(scenario), scenario.bath
    P, weights = packet.quadrature(cfg.sectors or SECTORS_3D)
    angular = cfg.angular_nodes or ANGULAR_NODES
    band = _band(model, field, float(P.max()))
    width = band / cfg.radial_nodes if cfg.radial_nodes else default_shell_width(t_max)
    budget = cfg.modes or MODE_BUDGET
    window = cfg.window
    notes = []
    shells = band / width
    if window is None and shells > budget:
        window = 0.5 * budget * width
        hazards = window_hazards(scenario, model, field, window, t_max, angular)
        if hazards and cfg.modes is None:
            full_band_guard(math.ceil(shells) * angular, len(P), hazards,
                            "bath.radial_nodes (or bath.angular_nodes, bath.sectors)")
            notes.append(_hazard_note(hazards, f"the whole band ({band:.4g} wide, {shells:,.0f} "
                                      f"energy shells per sector, above the {budget:,} at which a "
                                      "resonance window is chosen) kept",
                                      "set bath.window or bath.modes to use a window instead"))
            window = None
        elif hazards:
            notes.append(_hazard_note(hazards, f"bath.modes = {budget:,} restricts the shells to "
                                      f"the window |eps - E_e| <= {window:.4g}, which distorts the "
                                      f"run", f"raise bath.modes to {math.ceil(shells):,} for the "
                                      "whole band"))
        else:
            notes.append(f"bath: the full band ({band:.4g} wide) would need {shells:,.0f} energy "
                         f"shells per sector; shells restricted to the resonance window "
                         f"|eps - E_e| <= {window:.4g} (bath.window); the Lamb shift then depends "
                         "on the window")
    sectors = tuple(shell_sector(model, field, float(p), float(w), width, angular, window)
                    for p, w in zip(P, weights))
    bath = Bath(3, sectors, field.cutoff, width, 2 * np.pi / width, window,
                angular_nodes=angular, notes=tuple(notes), cutoff_is_model=cutoff_is_model(scenario))
    return replace(bath, notes=bath.notes + tuple(resolution_notes(scenario, model, bath, t_max)))


def _band(model: COMModel, field: Field, P: float) -> float:
    """Energy range of the 3D sector |P|: its lowest mode to the backward mode at the cutoff."""
    u = np.linspace(-1, 1, 65)
    k = np.linspace(0, field.cutoff, 513)[:, None]
    e = shell_energy(model, field, P, k, u[None, :])
    return float(e.max() - e.min())


# --- checks -----------------------------------------------------------------------------------


def resolution_notes(scenario, model: COMModel, bath: Bath, t_max: float) -> list[str]:
    """Warnings about the discretisation of a bath.

    A recurrence before t_max (`recurrence_warning`); an unresolved recoil (k* spanning fewer than
    RESOLUTION_POINTS lattice spacings or energy shells); in 1D an unresolved packet (sigma_p
    spanning fewer than RESOLUTION_POINTS sector spacings); a resonance window narrower than
    WINDOW_LINEWIDTHS golden-rule rates.

    Parameters
    ----------
    scenario : Scenario
    model : COMModel
    bath : Bath
    t_max : float
        Last sample time (time units).

    Returns
    -------
    list of str
        The warnings (possibly none).
    """
    what = ("the emitted wave returns to the detector (box length L / (1 + v))"
            if bath.dimensions == 1 else "the energy-shell bath rephases (2 pi / shell width)")
    key = "bath.box_length" if bath.dimensions == 1 else "bath.radial_nodes"
    notes = recurrence_warning(t_max, bath.recurrence_time, what, key)
    k_star = model.rest_emission_momentum()
    sigma = packet_for(scenario).momentum_std
    if bath.dimensions == 1:
        lattice = bath.spacing * bath.stride
        if k_star < RESOLUTION_POINTS * bath.spacing:
            notes.append(f"unresolved recoil: the emitted momentum k* = {k_star:.3g} spans fewer "
                         f"than {RESOLUTION_POINTS:g} lattice spacings ({bath.spacing:.3g}); raise "
                         "bath.box_length")
        if sigma < RESOLUTION_POINTS * lattice:
            notes.append(f"unresolved packet: sigma_p = {sigma:.3g} spans fewer than "
                         f"{RESOLUTION_POINTS:g} sector spacings ({lattice:.3g}); raise "
                         "bath.box_length or bath.sectors")
    elif k_star < RESOLUTION_POINTS * bath.spacing:
        notes.append(f"unresolved recoil: the emitted momentum k* = {k_star:.3g} spans fewer than "
                     f"{RESOLUTION_POINTS:g} energy shells ({bath.spacing:.3g}); raise "
                     "bath.radial_nodes")
    if bath.window is not None:
        rate = packet_rate(scenario)
        if bath.window < WINDOW_LINEWIDTHS * rate:
            notes.append(f"narrow resonance window: bath.window = {bath.window:.3g} is less than "
                         f"{WINDOW_LINEWIDTHS:g} golden-rule rates ({rate:.3g}); the line is "
                         "truncated and the decay distorted; raise bath.window or bath.modes")
    return notes


def lamb_sector(scenario, bath: Bath) -> Sector:
    """The sector at the packet's mean momentum, built like the bath's own sectors.

    1D: at the lattice point nearest p0 (`box_sector`); 3D: at |P| = p0 (`shell_sector`); weight 1.

    Parameters
    ----------
    scenario : Scenario
    bath : Bath

    Returns
    -------
    Sector
    """
    model, field = bath_model(scenario)
    if bath.dimensions == 1:
        P = round(scenario.mean_momentum / bath.spacing) * bath.spacing
        return box_sector(model, field, P, bath.spacing, 1.0, bath.window)
    return shell_sector(model, field, scenario.mean_momentum, 1.0, bath.spacing,
                        bath.angular_nodes, bath.window)


def discreteness_correction(scenario, bath: Bath, sector: Sector) -> float:
    """Part of the discrete principal-value sum due to the level's offset from the energy lattice.

    The discrete sum is sum_k |g_k|^2 / (E_e - eps_k).  Near an on-shell emission the modes form
    a locally uniform ladder eps_c + m D; its sum sum_m 1/(delta - m D) = (pi / D) cot(pi delta / D)
    (delta = E_e - eps_c), which vanishes only when the level sits midway between two modes.  The
    continuum principal value of a smooth density has no such term, so it is
    pi J cot(pi delta / D) with J = |g_c|^2 / D, summed over the 1D emission channels.  The 3D
    shells are built with the level midway: zero there.

    Parameters
    ----------
    scenario : Scenario
    bath : Bath
    sector : Sector
        A sector of the bath (`lamb_sector`).

    Returns
    -------
    float
        The correction (energy units); 0 in 3D.
    """
    if bath.dimensions == 3:
        return 0.0
    model, field = bath_model(scenario)
    return ladder_correction(model, field, sector, bath.spacing)


def ladder_correction(model: COMModel, field: Field, sector: Sector, spacing: float) -> float:
    """The 1D ladder term sum_c pi J_c cot(pi delta_c / D_c) of a box sector (energy units).

    See `discreteness_correction`: J_c = |g_c|^2 / D_c at the mode nearest each on-shell
    emission c, D_c the local ladder spacing, delta_c = E_e - eps_c.

    Parameters
    ----------
    model : COMModel
    field : Field
    sector : Sector
        A 1D box sector (`box_sector`).
    spacing : float
        Its lattice spacing dk (momentum units).

    Returns
    -------
    float
        The correction (energy units); 0 where a channel's neighbours are not in the sector.
    """
    index = {int(n): i for i, n in enumerate(sector.lattice)}
    total = 0.0
    for channel, _ in _on_shell(model, field, sector.momentum):
        root = round(-channel.kick / spacing)
        near = [n for n in (root - 1, root, root + 1) if n in index]
        if not near:
            continue
        centre = min(near, key=lambda n: abs(sector.mode_energies[index[n]] - sector.level_energy))
        if centre - 1 not in index or centre + 1 not in index:
            continue
        ladder = 0.5 * (sector.mode_energies[index[centre + 1]] - sector.mode_energies[index[centre - 1]])
        delta = sector.level_energy - sector.mode_energies[index[centre]]
        if delta != 0 and ladder != 0:
            weight = abs(sector.couplings[index[centre]]) ** 2
            total += np.pi * weight / ladder / np.tan(np.pi * delta / ladder)
    return float(total)
