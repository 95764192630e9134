"""The markov solver's momentum lattice, its on-shell jump channels and its sectors.

A channel takes |A, p> to |B, p + kick(p)>, kick = q - p = -s k n fixed by energy conservation
E_A(p) = E_B(|p - s k n|) + s w_k, at the golden-rule rate (density)
Gamma_c(p) = 2 pi |g|^2 N(w_k) / |d mismatch / dk|.  Kicks are split onto the two neighbouring
lattice shifts with hat weights (`lattice_shares`); the states are the breadth-first closure of
the packet window under the jumps (`build_sector`).  3D: emission directions by a product
quadrature (`direction_quadrature`), the transverse momentum by Gauss-Laguerre nodes of the
packet (`Packet.transverse_quadrature`).

Units: hbar = c = 1; momenta in the energy unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import qutip
import scipy.sparse as sparse

from ...errors import ScenarioError
from ...physics.field import field_for, packet_for
from ...physics.golden_rule import (
    ABSORPTION,
    EMISSION,
    PROCESS_FROM,
    Channel,
    bracketed_roots,
    channels_1d,
    coupling_density,
    kick_moments,
    reach,
)
from ...physics.models import EXCITED, GROUND, model_for
from ...physics.quadrature import gauss_legendre

#: default lattice step: this many steps per packet momentum width sigma_p
STEPS_PER_WIDTH = 3
#: default packet window: this many sigma_p either side of the mean (density e^-18 at the edge)
WINDOW_WIDTHS = 6.0
#: 3D: Gauss-Laguerre nodes of the transverse momentum magnitude
TRANSVERSE_NODES = 4
#: 3D: default Gauss-Legendre nodes in cos(theta) about the packet axis
POLAR_DIRECTIONS = 8
#: 3D: midpoint nodes in phi over [0, pi] (each stands for the mirror pair +-phi)
AZIMUTHAL_DIRECTIONS = 4
#: a kick within this fraction of a lattice step from a lattice shift is taken on it
SNAP = 1e-9
#: largest number of states of one sector before the closure is cut
MAX_STATES = 3000
#: thermal closure: generations = EXPECTED_JUMPS_FACTOR * (expected jumps) + 4 sqrt(.) + 3
EXPECTED_JUMPS_FACTOR = 1.0
#: population in the cut states above which the run warns
EDGE_TOLERANCE = 1e-6
#: ODE options of mesolve / mcsolve (QuTiP 5)
SOLVER_OPTIONS = {"method": "adams", "atol": 1e-12, "rtol": 1e-10, "nsteps": 1_000_000,
                  "progress_bar": False}


# ---------------------------------------------------------------------------------------------
# On-shell channels
# ---------------------------------------------------------------------------------------------


def direction_channels(model, field, process, P: float, cos_alpha: float) -> list[Channel]:
    """On-shell quanta of a 3D detector at momentum |P| along a direction n at angle alpha to P.

    Roots k > 0 of E_A(|P|) - E_B(q) - s w_k with q = |P - s k n| = sqrt(P^2 + k^2 - 2 s P k cos a)
    (s = +1 emission, -1 absorption); `rate` is the golden-rule rate per solid angle of n,

        dGamma/dOmega = 2 pi k^2 |g(k)|^2 N(w_k) / |d mismatch/dk|,
        d mismatch/dk = -v_B(q) (k - s P cos a) / q - s k / w_k,

    and `kick` = -s k is the recoil along n (q_vec - P = -s k n).  Integrated over all directions
    it is `sim.physics.golden_rule.kick_moments(...).rate` (tested).

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
        EMISSION or ABSORPTION (initial level A, final level B, sign s).
    P : float
        |P| (momentum units).
    cos_alpha : float
        cos of the angle between n and P (dimensionless).

    Returns
    -------
    list of Channel
        kick (momentum units, along n), rate (1 / time units per steradian), quantum k
        (momentum units).

    References
    ----------
    J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (the golden-rule transition rate).
    """
    s = process.sign
    e_initial = float(model.energy(process.initial, P))

    def final_momentum(k):
        return np.sqrt(np.maximum(P * P + k * k - 2 * s * P * k * cos_alpha, 0.0))

    def mismatch(k):
        return e_initial - model.energy(process.final, final_momentum(k)) - s * field.frequency(k)

    out = []
    for k in bracketed_roots(mismatch, reach(model, field, process, P)):
        q = float(final_momentum(k))
        slope = (-model.velocity(process.final, q) * (k - s * P * cos_alpha) / max(q, 1e-300)
                 - s * k / field.frequency(k))
        density = 2 * np.pi * k * k * coupling_density(model, field, process, k, P, q) / abs(slope)
        out.append(Channel(float(-s * k), float(density), float(k)))
    return out


@dataclass(frozen=True)
class Direction:
    """One emission direction of the 3D quadrature: n = (sin t cos phi, sin t sin phi, cos t).

    Parameters
    ----------
    polar : float
        cos(theta) about the packet axis (dimensionless).
    azimuth : float
        phi, with the detector's transverse momentum along phi = 0 (radians).
    weight : float
        Solid angle it stands for, mirror pair included (steradians).
    """

    polar: float  # cos(theta) about the packet axis
    azimuth: float  # phi, with the detector's transverse momentum along phi = 0
    weight: float  # solid angle it stands for (steradian; mirror pair included)


def direction_quadrature(polar_nodes: int, azimuth_nodes: int = AZIMUTHAL_DIRECTIONS):
    """Emission directions: Gauss-Legendre in cos(theta) x midpoint rule in phi on [0, pi].

    Each phi node phi_j = (j + 1/2) pi / azimuth_nodes stands for the mirror pair +-phi, so its
    weight is w_i 2 pi / azimuth_nodes; the weights sum to 4 pi.

    Parameters
    ----------
    polar_nodes : int
        Gauss-Legendre nodes in cos(theta).
    azimuth_nodes : int, optional
        Midpoint nodes in phi (default AZIMUTHAL_DIRECTIONS).

    Returns
    -------
    tuple of Direction
        polar_nodes x azimuth_nodes directions (weights in steradians).

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Legendre quadrature).
    """
    u, w = gauss_legendre(polar_nodes)
    phis = (np.arange(azimuth_nodes) + 0.5) * np.pi / azimuth_nodes
    return tuple(Direction(float(a), float(phi), float(b * 2 * np.pi / azimuth_nodes))
                 for a, b in zip(u, w) for phi in phis)


def lattice_shares(kick: float, step: float) -> list[tuple[int, float]]:
    """Hat-function split of a kick onto lattice shifts: [(m, 1 - f), (m + 1, f)], kick/dp = m + f.

    Conserves probability and mean kick, and adds the variance f (1 - f) dp^2 <= dp^2 / 4; a
    kick within SNAP of a lattice shift stays whole.

    Parameters
    ----------
    kick : float
        The axial recoil kick (momentum units).
    step : float
        Lattice step dp (momentum units).

    Returns
    -------
    list of tuple
        (shift m in lattice steps (int), share (dimensionless)); one or two entries, shares
        summing to 1.
    """
    x = kick / step
    m = math.floor(x)
    f = x - m
    if f < SNAP:
        return [(m, 1.0)]
    if f > 1 - SNAP:
        return [(m + 1, 1.0)]
    return [(m, 1.0 - f), (m + 1, f)]


# ---------------------------------------------------------------------------------------------
# The lattice and its sectors
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MarkovGrid:
    """Momentum lattice p_n = origin + n step (axial), packet window n = 0 .. points - 1.

    Parameters
    ----------
    origin : float
        p_0, the lattice momentum of index 0 (momentum units).
    step : float
        Lattice step dp (momentum units).
    points : int
        Lattice points of the packet window.
    span : float
        Packet widths sigma_p each side covered by the window (dimensionless).
    transverse : tuple
        ((rho_b, weight), ...): transverse momentum magnitudes (momentum units) and weights
        (dimensionless); ((0, 1),) in 1D.
    directions : tuple of Direction
        The 3D emission-direction quadrature; () in 1D.
    generations : int
        Largest number of jumps the closure follows.
    """

    origin: float
    step: float
    points: int
    span: float  # packet widths each side covered by the window
    transverse: tuple  # ((rho_b, weight), ...); ((0, 1),) in 1D
    directions: tuple  # Direction quadrature (3D) or () in 1D
    generations: int  # largest number of jumps the closure follows

    def momentum(self, n):
        """Axial momentum of lattice index n.

        Parameters
        ----------
        n : int or array_like of int
            Lattice indices.

        Returns
        -------
        ndarray or float
            origin + n step (momentum units).
        """
        return self.origin + np.asarray(n) * self.step


def window_size(g) -> tuple[float, int]:
    """(span in sigma_p each side, points) of the packet window: [grid] keys or the defaults.

    Parameters
    ----------
    g : GridConfig
        The scenario's [grid] table (`scenario.grid`: span, points).

    Returns
    -------
    span : float
        grid.span, default WINDOW_WIDTHS (dimensionless, in sigma_p).
    points : int
        grid.points, default 2 ceil(span STEPS_PER_WIDTH) + 1.
    """
    span = g.span if g.span is not None else WINDOW_WIDTHS
    points = g.points if g.points is not None else 2 * math.ceil(span * STEPS_PER_WIDTH) + 1
    return span, points


def grid_for(scenario, times) -> MarkovGrid:
    """The lattice from the [grid] keys or the automatic defaults.

    step = 2 span sigma_p / (points - 1), origin = p0 - span sigma_p (`window_size`).  1D: no
    transverse nodes, two emission directions; 3D: TRANSVERSE_NODES Gauss-Laguerre nodes of the
    transverse momentum (`Packet.transverse_quadrature`) and `direction_quadrature` with
    grid.directions (default POLAR_DIRECTIONS) polar nodes.  Closure depth: 2 generations in the
    vacuum (emission, then nothing); in a thermal field ceil(J + 4 sqrt(J) + 3) with
    J = EXPECTED_JUMPS_FACTOR (Gamma_down + Gamma_up)(p0) t_max the expected number of jumps.

    Parameters
    ----------
    scenario : Scenario
    times : ndarray
        Sample times (time units); t_max = times[-1].

    Returns
    -------
    MarkovGrid

    Raises
    ------
    ScenarioError
        If grid.directions is given and is not 2 for a 1D field.

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Laguerre and
    Gauss-Legendre quadratures).
    """
    g = scenario.grid
    packet = packet_for(scenario)
    sigma = packet.momentum_std
    span, points = window_size(g)
    step = 2 * span * sigma / (points - 1)
    if scenario.dimensions == 1:
        if g.directions is not None and g.directions != 2:
            raise ScenarioError(f"grid.directions = {g.directions}: a 1D field has two emission "
                                "directions; allowed: 2 (or omit the key)")
        transverse, directions = ((0.0, 1.0),), ()
    else:
        transverse = packet.transverse_quadrature(TRANSVERSE_NODES)
        directions = direction_quadrature(g.directions or POLAR_DIRECTIONS)
    model, field = model_for(scenario), field_for(scenario)
    p0 = scenario.mean_momentum
    if scenario.field.temperature > 0:
        total = (kick_moments(model, field, EMISSION, p0).rate
                 + kick_moments(model, field, ABSORPTION, p0).rate)
        jumps = EXPECTED_JUMPS_FACTOR * total * float(times[-1])
        generations = int(math.ceil(jumps + 4 * math.sqrt(jumps) + 3))
    else:
        generations = 2  # emission, then nothing: absorption needs quanta
    return MarkovGrid(p0 - span * sigma, step, points, span, transverse, directions, generations)


@dataclass
class Sector:
    """States |level, n> of one transverse node and their generator pieces.

    Parameters
    ----------
    rho : float
        Transverse momentum magnitude rho_b of the node (momentum units).
    weight : float
        Its quadrature weight (dimensionless).
    levels : ndarray of int
        Level of each state (GROUND or EXCITED).
    index : ndarray of int
        Lattice index n of each state.
    energies : ndarray
        E_level(sqrt(p_n^2 + rho^2)) - M_g of each state (energy units).
    families : dict
        (process sign, channel label, shift) -> (targets, sources, amplitudes sqrt(rate)), the
        entries of one jump operator (amplitudes in sqrt(1 / time units)).
    edge : ndarray of bool
        States whose jumps were cut.
    quadrature_error : float, optional
        3D: largest relative error of the direction quadrature's rate (dimensionless).
    """

    rho: float
    weight: float
    levels: np.ndarray
    index: np.ndarray  # lattice index n of each state
    energies: np.ndarray
    families: dict  # (process sign, channel label, shift) -> (targets, sources, amplitudes)
    edge: np.ndarray  # states whose jumps were cut (boolean)
    quadrature_error: float = 0.0  # 3D: largest relative error of the direction quadrature's rate

    @property
    def size(self) -> int:
        """Number of states of the sector.

        Returns
        -------
        int
        """
        return len(self.levels)

    def hamiltonian(self) -> qutip.Qobj:
        """H = sum_s E_s |s><s|, diagonal in the lattice states (no Lamb shift).

        Returns
        -------
        qutip.Qobj
            Sparse (CSR) operator (energy units).
        """
        return qutip.Qobj(sparse.diags(self.energies, format="csr"))

    def jump_operators(self) -> tuple[list[qutip.Qobj], list[tuple]]:
        """The Lindblad operators L_{c,m} (CSR) and their family labels.

        L_{c,m} = sum_p sqrt(gamma_{c,m}(p)) |B, p + m dp><A, p|, one per family.

        Returns
        -------
        ops : list of qutip.Qobj
            The jump operators (sqrt(1 / time units)).
        labels : list of tuple
            (process sign, channel label, shift m) of each operator.
        """
        ops, labels = [], []
        n = self.size
        for label, (targets, sources, amps) in self.families.items():
            ops.append(qutip.Qobj(sparse.csr_matrix((amps, (targets, sources)), shape=(n, n))))
            labels.append(label)
        return ops, labels

    def liouvillian(self) -> qutip.Qobj:
        """The Lindblad generator as one sparse superoperator (one product per ODE step).

        L rho = -i [H, rho] + sum_J (L_J rho L_J^dag - {L_J^dag L_J, rho} / 2), built by
        `qutip.liouvillian`.

        Returns
        -------
        qutip.Qobj
            Superoperator (1 / time units).

        References
        ----------
        H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3.
        The QuTiP 5 documentation: liouvillian, mesolve.
        """
        ops, _ = self.jump_operators()
        return qutip.liouvillian(self.hamiltonian(), ops)

    def diagonal(self, values) -> qutip.Qobj:
        """A diagonal operator with `values` on the sector's states (an observable).

        Parameters
        ----------
        values : array_like, shape (size,)
            Diagonal entries (any units; kept).

        Returns
        -------
        qutip.Qobj
            Sparse (CSR) diagonal operator.
        """
        return qutip.Qobj(sparse.diags(np.asarray(values, dtype=float), format="csr"))

    def initial_ket(self, amplitudes: dict) -> qutip.Qobj:
        """The sector's ket with the given amplitudes on its states.

        Parameters
        ----------
        amplitudes : dict
            (level, lattice index n) -> amplitude (dimensionless), e.g. `packet_amplitudes`; every
            key must be a state of the sector.

        Returns
        -------
        qutip.Qobj
            Ket of shape (size, 1).
        """
        psi = np.zeros(self.size, dtype=complex)
        lookup = {(int(l), int(n)): i for i, (l, n) in enumerate(zip(self.levels, self.index))}
        for key, value in amplitudes.items():
            psi[lookup[key]] = value
        return qutip.Qobj(psi.reshape(-1, 1))


def _channels(model, field, process, grid: MarkovGrid, rho: float, n: int):
    """[(label, axial kick, rate)] of `process` from lattice state n at transverse momentum rho."""
    pz = float(grid.momentum(n))
    if not grid.directions:
        out, count = [], {}
        for c in channels_1d(model, field, process, pz):
            direction = -process.sign * int(np.sign(c.kick))
            count[direction] = count.get(direction, -1) + 1
            out.append(((direction, count[direction]), c.kick, c.rate))
        return out
    P = math.hypot(pz, rho)
    out = []
    for j, d in enumerate(grid.directions):
        sin_t = math.sqrt(max(0.0, 1 - d.polar ** 2))
        cos_alpha = (rho * sin_t * math.cos(d.azimuth) + pz * d.polar) / P if P > 0 else 1.0
        for r, c in enumerate(direction_channels(model, field, process, P, cos_alpha)):
            out.append(((j, r), c.kick * d.polar, c.rate * d.weight))
    return out


def build_sector(model, field, grid: MarkovGrid, rho: float, weight: float,
                 start_level: int) -> Sector:
    """Breadth-first closure of the packet window under the jumps, up to grid.generations.

    Starts from |start_level, n>, n = 0 .. points - 1; each generation adds the targets of the
    frontier's jumps (at most MAX_STATES states).  Each channel's kick is split onto lattice
    shifts by `lattice_shares`; in 3D the direction quadrature's rates are rescaled so that their
    sum is the exact golden-rule rate (`kick_moments`).  Ground states have no jumps in the
    vacuum.

    Parameters
    ----------
    model : COMModel
    field : Field
    grid : MarkovGrid
    rho : float
        Transverse momentum magnitude of the node (momentum units; 0 in 1D).
    weight : float
        Its quadrature weight (dimensionless).
    start_level : int
        Level of the packet window (GROUND or EXCITED).

    Returns
    -------
    Sector
        States ordered by lattice index, then level.
    """
    thermal = field.temperature > 0

    quadrature_error = [0.0]

    def jumps(level, n):
        if level == GROUND and not thermal:
            return []
        process = PROCESS_FROM[level]
        channels = _channels(model, field, process, grid, rho, n)
        if grid.directions and channels:
            # the direction quadrature carries the angular law; its sum is set to the exact rate
            exact = kick_moments(model, field, process, math.hypot(grid.momentum(n), rho)).rate
            total = sum(c[2] for c in channels)
            quadrature_error[0] = max(quadrature_error[0], abs(total / exact - 1))
            channels = [(label, kick, rate * exact / total) for label, kick, rate in channels]
        out = []
        for label, kick, rate in channels:
            for shift, share in lattice_shares(kick, grid.step):
                out.append(((process.sign, label, shift), shift, rate * share))
        return out

    states = {(start_level, n): None for n in range(grid.points)}
    outgoing = {}
    frontier = list(states)
    for _ in range(grid.generations):
        new = []
        for level, n in frontier:
            outgoing[(level, n)] = jumps(level, n)
            for _, shift, _ in outgoing[(level, n)]:
                target = (1 - level, n + shift)
                if target not in states:
                    states[target] = None
                    new.append(target)
        frontier = new
        if not frontier or len(states) > MAX_STATES:
            break
    edge_states = {s for s in frontier if jumps(*s)}
    order = sorted(states, key=lambda s: (s[1], s[0]))
    position = {s: i for i, s in enumerate(order)}
    levels = np.array([s[0] for s in order])
    index = np.array([s[1] for s in order])
    pz = grid.momentum(index)
    p = np.hypot(pz, rho)
    energies = np.where(levels == EXCITED, model.energy(EXCITED, p), model.energy(GROUND, p))
    families: dict = {}
    for (level, n), out in outgoing.items():
        for label, shift, rate in out:
            if rate <= 0:
                continue
            targets, sources, amps = families.setdefault(label, ([], [], []))
            targets.append(position[(1 - level, n + shift)])
            sources.append(position[(level, n)])
            amps.append(math.sqrt(rate))
    edge = np.array([s in edge_states for s in order])
    return Sector(rho, weight, levels, index, energies, families, edge, quadrature_error[0])


def packet_amplitudes(scenario, grid: MarkovGrid, level: int) -> dict:
    """sqrt(|psi(p_n)|^2 dp) of the axial packet on the window, normalised on the lattice.

    Parameters
    ----------
    scenario : Scenario
    grid : MarkovGrid
    level : int
        Internal level of the packet.

    Returns
    -------
    dict
        (level, n) -> real amplitude (dimensionless), with sum of squares 1.
    """
    n = np.arange(grid.points)
    density = packet_for(scenario).axis_density(grid.momentum(n))
    amps = np.sqrt(density / density.sum())
    return {(level, int(i)): float(a) for i, a in zip(n, amps)}
