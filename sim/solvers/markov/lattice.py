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
from scipy.optimize.elementwise import find_root

from ...errors import ScenarioError
from ...physics.field import field_for, packet_for
from ...physics.golden_rule import (
    ABSORPTION,
    EMISSION,
    PROCESS_FROM,
    Channel,
    bracketed_roots,
    channel_table,
    coupling_density,
    kick_moments,
    reach,
)
from ...physics.coherence import coherence_distance
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
#: a kick within this fraction of a lattice step from a lattice shift is taken on it (a
#: rounding-level tolerance: the mean kick then errs by at most SNAP dp)
SNAP = 1e-12
#: 3D on-shell roots are sought on [ROOT_FLOOR reach, reach] (the golden-rule scan's low end)
ROOT_FLOOR = 1e-12
#: largest number of states of one sector before the closure is cut
MAX_STATES = 3000
#: thermal closure: generations = EXPECTED_JUMPS_FACTOR * (expected jumps) + 4 sqrt(.) + 3
EXPECTED_JUMPS_FACTOR = 1.0
#: a jump that moves less probability than this over the whole run, rate x t_max, is dropped
#: (e.g. the absorption of a quantum many temperatures above the gap): below the ODE's atol
NEGLIGIBLE_TRANSFER = 1e-14
#: population in the cut states above which the run warns
EDGE_TOLERANCE = 1e-6
#: a coherence run's default lattice: at most this phase p d (radians) per lattice step at the
#: coherence distance d, i.e. about 22 steps per fringe period 2 pi / d; the lattice split of a
#: kick then lowers |Tr(rho exp(i P d))| by at most 1 - cos(0.14) = 1e-2 per jump
COHERENCE_PHASE_STEP = 0.28
#: fewer lattice steps than this per fringe period 2 pi / d do not resolve the fringes
MIN_FRINGE_STEPS = 4
#: a lattice split that lowers |Tr(rho exp(i P d))| by more than this per jump is warned about
SPLIT_COHERENCE_TOLERANCE = 1e-2
#: ODE options of mesolve / mcsolve (QuTiP 5)
SOLVER_OPTIONS = {"method": "adams", "atol": 1e-12, "rtol": 1e-10, "nsteps": 1_000_000,
                  "progress_bar": False}


# ---------------------------------------------------------------------------------------------
# On-shell channels
# ---------------------------------------------------------------------------------------------


def concave_roots(func, slope, upper, args=()):
    """Roots of a concave function on (0, upper], at most two per row, found by bracketing.

    With f = func(k, *args) concave in k on [a, U] (a = ROOT_FLOOR U), its maximum k_top is a
    when f'(a) <= 0, U when f'(U) >= 0, else the root of the decreasing f'; a root of f lies in
    [a, k_top] when f(a) < 0 < f(k_top) and in [k_top, U] when f(U) < 0 < f(k_top).  The brackets
    are closed by `scipy.optimize.elementwise.find_root` (Chandrupatla's method, to about four
    machine epsilons relative).

    Parameters
    ----------
    func, slope : callable
        ``func(k, *args)`` and its derivative in k, elementwise over rows (any units).
    upper : ndarray, shape (n,)
        U of each row (the unit of k); rows with U <= 0 have no roots.
    args : tuple of ndarray, optional
        Per-row arguments, shape (n,).

    Returns
    -------
    rows : ndarray of int
        The row of each root, increasing; a row's roots in increasing k.
    roots : ndarray
        The roots (the unit of k).

    References
    ----------
    T. R. Chandrupatla, "A new hybrid quadratic/bisection algorithm for finding the zero of a
    nonlinear function without using derivatives", Adv. Eng. Software 28, 145 (1997)
    (scipy.optimize.elementwise.find_root).
    """
    upper = np.asarray(upper, dtype=float)
    live = np.nonzero(upper > 0)[0]
    args = tuple(np.asarray(a, dtype=float)[live] for a in args)
    high = upper[live]
    low = ROOT_FLOOR * high

    def bracketed(f, a, b, mask):
        if not mask.any():
            return np.empty(0)
        return find_root(f, (a[mask], b[mask]), args=tuple(x[mask] for x in args)).x

    g_low, g_high = slope(low, *args), slope(high, *args)
    top = np.where(g_low <= 0, low, high)
    inner = (g_low > 0) & (g_high < 0)
    top[inner] = bracketed(slope, low, high, inner)
    peak = func(top, *args)
    left = (peak > 0) & (func(low, *args) < 0) & (top > low)
    right = (peak > 0) & (func(high, *args) < 0) & (top < high)
    rows = np.concatenate([live[left], live[right]])
    roots = np.concatenate([bracketed(func, low, top, left), bracketed(func, top, high, right)])
    order = np.lexsort((roots, rows))
    return rows[order], roots[order]


@dataclass(frozen=True)
class DirectionTable:
    """On-shell quanta along fixed directions, for many rows (|P|, cos alpha) at once.

    Parameters
    ----------
    row : ndarray of int
        The row of each quantum, increasing (a row's quanta in increasing k).
    kick : ndarray
        Recoil along n, -s k (momentum units).
    rate : ndarray
        Golden-rule rate per solid angle of n (1 / time units per steradian).
    quantum : ndarray
        k (momentum units).
    """

    row: np.ndarray
    kick: np.ndarray
    rate: np.ndarray
    quantum: np.ndarray


def direction_table(model, field, process, P, cos_alpha) -> DirectionTable:
    """On-shell quanta of 3D detectors at momenta |P_i| along directions at angles alpha_i to P_i.

    Roots k > 0 of f(k) = E_A(|P|) - E_B(q) - s w_k with q = |P - s k n| =
    sqrt(P^2 + k^2 - 2 s P k cos a) (s = +1 emission, -1 absorption), up to the process's reach;
    the rate per solid angle of n is

        dGamma/dOmega = 2 pi k^2 |g(k)|^2 N(w_k) / |f'(k)|,
        f'(k) = -v_B(q) (k - s P cos a) / q - s k / w_k,

    and the recoil along n is -s k (q_vec - P = -s k n).  E_B(|x|) is convex in the vector x
    for every model (p^2/2M, sqrt(p^2 + M^2)) and q is a norm of an affine function of k, so f
    is concave for emission and for absorption of a massless quantum (`concave_roots`, all rows
    at once); absorption of a massive quantum is scanned row by row (`bracketed_roots`).
    Integrated over all directions the rate is `sim.physics.golden_rule.kick_moments(...).rate`
    (tested).

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
        EMISSION or ABSORPTION (initial level A, final level B, sign s).
    P : array_like, shape (n,)
        |P| of each row (momentum units).
    cos_alpha : array_like, shape (n,)
        cos of the angle between n and P of each row (dimensionless).

    Returns
    -------
    DirectionTable

    References
    ----------
    J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (the golden-rule transition rate).
    """
    s = process.sign
    P = np.atleast_1d(np.asarray(P, dtype=float))
    cos_alpha = np.atleast_1d(np.asarray(cos_alpha, dtype=float))

    def final_momentum(k, p, u):
        return np.sqrt(np.maximum(p * p + k * k - 2 * s * p * k * u, 0.0))

    def mismatch(k, p, u):
        return (model.energy(process.initial, p) - model.energy(process.final,
                                                                final_momentum(k, p, u))
                - s * field.frequency(k))

    def slope(k, p, u):
        q = final_momentum(k, p, u)
        return (-model.velocity(process.final, q) * (k - s * p * u) / np.maximum(q, 1e-300)
                - s * k / field.frequency(k))

    upper = reach(model, field, process, P)
    if s > 0 or field.mass == 0:
        rows, k = concave_roots(mismatch, slope, upper, (P, cos_alpha))
    else:
        found = [(i, r) for i in range(P.size)
                 for r in bracketed_roots(lambda x, i=i: mismatch(x, P[i], cos_alpha[i]),
                                          float(upper[i]))]
        rows = np.array([i for i, _ in found], dtype=int)
        k = np.array([r for _, r in found], dtype=float)
    p, u = P[rows], cos_alpha[rows]
    q = final_momentum(k, p, u)
    density = (2 * np.pi * k * k * coupling_density(model, field, process, k, p, q)
               / np.abs(slope(k, p, u)))
    return DirectionTable(rows, -s * k, density, k)


def direction_channels(model, field, process, P: float, cos_alpha: float) -> list[Channel]:
    """On-shell quanta of a 3D detector at momentum |P| along a direction at angle alpha to P.

    One row of `direction_table`: the roots k > 0 of E_A(|P|) - E_B(q) - s w_k,
    q = sqrt(P^2 + k^2 - 2 s P k cos a), with dGamma/dOmega = 2 pi k^2 |g(k)|^2 N(w_k) /
    |d mismatch/dk| and the recoil -s k along n.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
        EMISSION or ABSORPTION.
    P : float
        |P| (momentum units).
    cos_alpha : float
        cos of the angle between n and P (dimensionless).

    Returns
    -------
    list of Channel
        kick (momentum units, along n), rate (1 / time units per steradian), quantum k
        (momentum units), in increasing k.

    References
    ----------
    J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (the golden-rule transition rate).
    """
    table = direction_table(model, field, process, [P], [cos_alpha])
    return [Channel(float(a), float(b), float(c))
            for a, b, c in zip(table.kick, table.rate, table.quantum)]


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


def split_kicks(kicks, step: float):
    """Hat-function split of kicks onto lattice shifts: m gets 1 - f, m + 1 gets f, kick/dp = m + f.

    Conserves probability and mean kick, and adds the variance f (1 - f) dp^2 <= dp^2 / 4; a
    kick within SNAP of a lattice shift stays whole.

    Parameters
    ----------
    kicks : array_like, shape (n,)
        Axial recoil kicks (momentum units).
    step : float
        Lattice step dp (momentum units).

    Returns
    -------
    origin : ndarray of int
        The kick each share belongs to (index into `kicks`), increasing.
    shift : ndarray of int
        The lattice shift m of each share (lattice steps).
    share : ndarray
        Its weight (dimensionless); the shares of one kick sum to 1.
    """
    x = np.asarray(kicks, dtype=float) / step
    m = np.floor(x)
    f = x - m
    whole = (f < SNAP) | (f > 1 - SNAP)
    base = np.where(f > 1 - SNAP, m + 1, m)
    first = np.where(whole, 1.0, 1.0 - f)
    split = np.nonzero(~whole)[0]
    origin = np.concatenate([np.arange(x.size), split])
    shift = np.concatenate([base, m[split] + 1]).astype(int)
    share = np.concatenate([first, f[split]])
    order = np.argsort(origin, kind="stable")
    return origin[order], shift[order], share[order]


def lattice_shares(kick: float, step: float) -> list[tuple[int, float]]:
    """Hat-function split of one kick onto shifts: [(m, 1 - f), (m + 1, f)], kick/dp = m + f.

    One entry of `split_kicks` (probability and mean kick conserved, extra variance
    f (1 - f) dp^2 <= dp^2 / 4, a kick within SNAP of a shift kept whole).

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
    _, shift, share = split_kicks([kick], step)
    return [(int(m), float(w)) for m, w in zip(shift, share)]


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
    smallest_rate : float, optional
        Jumps slower than this are dropped (1 / time units): NEGLIGIBLE_TRANSFER / t_max.
    """

    origin: float
    step: float
    points: int
    span: float  # packet widths each side covered by the window
    transverse: tuple  # ((rho_b, weight), ...); ((0, 1),) in 1D
    directions: tuple  # Direction quadrature (3D) or () in 1D
    generations: int  # largest number of jumps the closure follows
    smallest_rate: float = 0.0  # jumps slower than this are dropped

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


def packet_scale(packet) -> tuple[float, float]:
    """(centre, width) of the axial momentum window: the packet's mean and momentum spread.

    "gaussian" and "two-lobe": the envelope's axial mean and sigma_p = 1 / (2 width).  "file":
    the middle of the table's range and the table's own standard deviation
    sqrt(<p_z^2> - <p_z>^2) (its composite quadrature, exact for the interpolated density).

    Parameters
    ----------
    packet : Packet

    Returns
    -------
    centre : float
        Momentum units.
    width : float
        Momentum units, > 0.
    """
    if packet.shape != "file":
        return packet.axis_mean, packet.momentum_std
    p, w = packet.axial_quadrature(0)
    mean = float(w @ p)
    low, high = packet.axis_range()
    return 0.5 * (low + high), float(np.sqrt(w @ (p - mean) ** 2))


def window_size(scenario) -> tuple[float, int]:
    """(span in packet widths each side, points) of the packet window: [grid] keys or defaults.

    With w the window's width unit (`packet_scale`: sigma_p, or a "file" table's spread):
    span = grid.span, default WINDOW_WIDTHS; a "file" packet's window is its table's range,
    span = (p_last - p_first) / (2 w), and grid.span is refused.  points = grid.points, default
    2 ceil(span STEPS_PER_WIDTH) + 1.  When the run reports a coherence at a distance d
    (`sim.physics.coherence.coherence_distance`) and grid.points is not given, the default step
    is also at most COHERENCE_PHASE_STEP / d (the fringes of period 2 pi / d resolved, the kick
    split's loss of coherence below 1e-2 per jump), rounded down to k* / integer with k* the
    rest-frame emitted momentum (so that a static detector's kicks land on the lattice):
    points = 2 ceil(span w / step) + 1 and span widened to (points - 1) step / (2 w).

    Parameters
    ----------
    scenario : Scenario
        Its [grid] table (span, points), packet and, for a coherence run, detector.

    Returns
    -------
    span : float
        Dimensionless, in window widths w.
    points : int
        Lattice points of the packet window.

    Raises
    ------
    ScenarioError
        If grid.span is given with packet.shape = "file".
    """
    g, packet = scenario.grid, packet_for(scenario)
    _, width = packet_scale(packet)
    if packet.shape == "file":
        if g.span is not None:
            raise ScenarioError(f"grid.span = {g.span!r}: a \"file\" packet's lattice window is its "
                                "table's momentum range; remove grid.span (grid.points sets the "
                                "lattice step)")
        low, high = packet.axis_range()
        span = 0.5 * (high - low) / width
    else:
        span = g.span if g.span is not None else WINDOW_WIDTHS
    if g.points is not None:
        return span, g.points
    distance = coherence_distance(scenario)
    if distance is None:
        return span, 2 * math.ceil(span * STEPS_PER_WIDTH) + 1
    kick = float(model_for(scenario).rest_emission_momentum())
    step = min(width / STEPS_PER_WIDTH, COHERENCE_PHASE_STEP / distance[0])
    step = kick / math.ceil(kick / step)
    half = math.ceil(span * width / step * (1 - 1e-12))
    return half * step / width, 2 * half + 1


def grid_for(scenario, times) -> MarkovGrid:
    """The lattice from the [grid] keys or the automatic defaults.

    step = 2 span w / (points - 1), origin = c - span w, with (c, w) the packet's window centre
    and width (`packet_scale`) and (span, points) from `window_size`.  1D: no
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
        If grid.directions is given and is not 2 for a 1D field, or grid.span is given for a
        "file" packet (`window_size`).

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Laguerre and
    Gauss-Legendre quadratures).
    """
    g = scenario.grid
    packet = packet_for(scenario)
    centre, width = packet_scale(packet)
    span, points = window_size(scenario)
    step = 2 * span * width / (points - 1)
    if scenario.dimensions == 1:
        if g.directions is not None and g.directions != 2:
            raise ScenarioError(f"grid.directions = {g.directions}: a 1D field has two emission "
                                "directions; allowed: 2 (or omit the key)")
        transverse, directions = ((0.0, 1.0),), ()
    else:
        transverse = packet.transverse_quadrature(TRANSVERSE_NODES)
        directions = direction_quadrature(g.directions or POLAR_DIRECTIONS)
    model, field = model_for(scenario), field_for(scenario)
    p0 = packet.axis_mean
    if scenario.field.temperature > 0:
        total = (kick_moments(model, field, EMISSION, p0).rate
                 + kick_moments(model, field, ABSORPTION, p0).rate)
        jumps = EXPECTED_JUMPS_FACTOR * total * float(times[-1])
        generations = int(math.ceil(jumps + 4 * math.sqrt(jumps) + 3))
    else:
        generations = 2  # emission, then nothing: absorption needs quanta
    t_max = float(times[-1])
    smallest = NEGLIGIBLE_TRANSFER / t_max if t_max > 0 else 0.0
    return MarkovGrid(centre - span * width, step, points, span, transverse, directions,
                      generations, smallest)


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
        (process sign, channel label, shift) -> (targets, sources, amplitudes sqrt(rate)), arrays
        of the entries of one jump operator (amplitudes in sqrt(1 / time units)).
    edge : ndarray of bool
        States whose jumps were cut.
    quadrature_error : float, optional
        3D: largest relative error of the direction quadrature's rate (dimensionless).
    generations : int, optional
        Generations of jumps the closure followed.
    split_spread : float, optional
        Largest f (1 - f) of the lattice split of a kept jump (`split_kicks`; dimensionless, in
        [0, 1/4]): 0 when every kick lands on the lattice.
    """

    rho: float
    weight: float
    levels: np.ndarray
    index: np.ndarray  # lattice index n of each state
    energies: np.ndarray
    families: dict  # (process sign, channel label, shift) -> (targets, sources, amplitudes)
    edge: np.ndarray  # states whose jumps were cut (boolean)
    quadrature_error: float = 0.0  # 3D: largest relative error of the direction quadrature's rate
    generations: int = 0  # generations of jumps the closure followed
    split_spread: float = 0.0  # largest f (1 - f) of a kept jump's lattice split

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

    def rate_matrix(self) -> sparse.csr_matrix:
        """The generator W of the populations, dP/dt = W P (the Pauli rate equation).

        The Lindblad generator maps diagonal density matrices to diagonal ones (H is diagonal,
        every L_{c,m} moves one state to one state and L^dag L is diagonal) and its diagonal
        part depends on the populations alone:
        dP_s/dt = sum_J gamma_J(s') P_s' [s = s' + jump J] - Gamma(s) P_s, so
        W = sum_J gamma_J |target><source| - diag(sum_J gamma_J(s)).

        Returns
        -------
        scipy.sparse.csr_matrix, shape (size, size)
            W (1 / time units); its columns sum to zero.

        References
        ----------
        H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3
        (the Pauli master equation).
        """
        n = self.size
        if not self.families:
            return sparse.csr_matrix((n, n))
        targets, sources, amps = (np.concatenate(x) for x in zip(*self.families.values()))
        rates = amps * amps
        gain = sparse.csr_matrix((rates, (targets, sources)), shape=(n, n))
        return (gain - sparse.diags(np.bincount(sources, rates, minlength=n))).tocsr()

    def liouvillian(self) -> qutip.Qobj:
        """The Lindblad generator as one sparse superoperator (one product per ODE step).

        L rho = -i [H, rho] + sum_J (L_J rho L_J^dag - {L_J^dag L_J, rho} / 2) on vec(rho)
        stacked by columns, rho(i, j) -> i + n j (QuTiP's convention).  H and every L_J^dag L_J
        are diagonal, so the commutator and anticommutator give one diagonal,
        -i (E_i - E_j) - (Gamma_i + Gamma_j) / 2 with Gamma the total jump rate out of a state,
        and each family L = sum_a amp_a |t_a><s_a| adds amp_a amp_b at row t_a + n t_b and
        column s_a + n s_b (families with equal shifts add up).  Assembled in one sparse build
        (`qutip.liouvillian` gives the same operator, summing one Kronecker product per
        operator, which is slow for many operators: tested against it).

        Returns
        -------
        qutip.Qobj
            Superoperator (1 / time units).

        References
        ----------
        H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3.
        The QuTiP 5 documentation: liouvillian, mesolve (column-stacking convention).
        """
        n = self.size
        rates = np.zeros(n)
        rows, cols, values = [], [], []
        for targets, sources, amps in self.families.values():
            rows.append((targets[:, None] + n * targets[None, :]).ravel())
            cols.append((sources[:, None] + n * sources[None, :]).ravel())
            values.append(np.outer(amps, amps).ravel().astype(complex))
            np.add.at(rates, sources, amps * amps)
        k = np.arange(n * n)
        i, j = k % n, k // n
        rows.append(k)
        cols.append(k)
        values.append(-1j * (self.energies[i] - self.energies[j]) - 0.5 * (rates[i] + rates[j]))
        matrix = sparse.csr_matrix((np.concatenate(values),
                                    (np.concatenate(rows), np.concatenate(cols))),
                                   shape=(n * n, n * n))
        return qutip.Qobj(matrix, dims=[[[n], [n]], [[n], [n]]])

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


@dataclass(frozen=True)
class Jumps:
    """The jumps out of a batch of lattice states of one level, after the lattice split.

    Parameters
    ----------
    source : ndarray of int
        The state each jump leaves (index into the batch).
    label : ndarray of int, shape (J, 2)
        The channel: (direction d, root) in 1D, (direction node, root) in 3D.
    shift : ndarray of int
        Lattice shift m of the jump (lattice steps).
    rate : ndarray
        gamma_{c,m}(p) (1 / time units).
    quadrature_error : float
        3D: largest relative error of the direction quadrature's rate over the batch
        (dimensionless; 0 in 1D).
    split_spread : float
        Largest f (1 - f) of the lattice split of a kept jump (dimensionless, in [0, 1/4]).
    """

    source: np.ndarray
    label: np.ndarray
    shift: np.ndarray
    rate: np.ndarray
    quadrature_error: float = 0.0
    split_spread: float = 0.0


def _on_shell(model, field, process, grid: MarkovGrid, rho: float, n: np.ndarray):
    """(source, label (J, 2), axial kick, rate, quadrature error) of the channels of states n."""
    pz = grid.momentum(n)
    if not grid.directions:
        table = channel_table(model, field, process, pz)
        source, column = np.nonzero(~np.isnan(table.quantum))
        direction = (-process.sign * np.sign(table.kick[source, column])).astype(int)
        forward = np.sum(-process.sign * np.sign(np.nan_to_num(table.kick)) > 0, axis=1)
        root = column - np.where(direction < 0, forward[source], 0)
        return (source, np.stack([direction, root], axis=1), table.kick[source, column],
                table.rate[source, column], 0.0)
    polar = np.array([d.polar for d in grid.directions])
    azimuth = np.array([d.azimuth for d in grid.directions])
    weight = np.array([d.weight for d in grid.directions])
    P = np.hypot(pz, rho)
    sin_t = np.sqrt(np.maximum(0.0, 1 - polar ** 2))
    along = rho * sin_t * np.cos(azimuth) + pz[:, None] * polar
    cos_alpha = np.divide(along, P[:, None], out=np.ones_like(along), where=P[:, None] > 0)
    table = direction_table(model, field, process, np.repeat(P, len(polar)), cos_alpha.ravel())
    source, node = np.divmod(table.row, len(polar))
    first = np.r_[True, table.row[1:] != table.row[:-1]]
    root = np.arange(table.row.size) - np.maximum.accumulate(np.where(first,
                                                                      np.arange(first.size), 0))
    rate = table.rate * weight[node]
    # the direction quadrature carries the angular law; its sum is set to the exact rate
    total = np.bincount(source, rate, minlength=n.size)
    has = total > 0
    exact = np.zeros(n.size)
    if has.any():
        exact[has] = kick_moments(model, field, process, P[has]).rate
    error = float(np.max(np.abs(total[has] / exact[has] - 1), initial=0.0))
    return (source, np.stack([node, root], axis=1), table.kick * polar[node],
            rate * exact[source] / total[source], error)


def state_jumps(model, field, grid: MarkovGrid, rho: float, level: int, n) -> Jumps:
    """The jumps out of the lattice states |level, n>, every on-shell channel split on the lattice.

    Each channel c of `level`'s process at p = (p_n, rho) (1D: `channel_table`; 3D: the
    direction quadrature of `direction_table`, its rates rescaled so that their sum is the
    exact golden-rule rate `kick_moments`) is split onto lattice shifts m by `split_kicks`:
    gamma_{c,m}(p) = Gamma_c(p) max(0, 1 - |kick_c(p) / dp - m|).  Jumps with gamma below
    grid.smallest_rate are dropped (they move less than NEGLIGIBLE_TRANSFER of probability over
    the run).  Ground states have no jumps in the vacuum.

    Parameters
    ----------
    model : COMModel
    field : Field
    grid : MarkovGrid
    rho : float
        Transverse momentum magnitude of the sector (momentum units; 0 in 1D).
    level : int
        GROUND or EXCITED.
    n : array_like of int
        Lattice indices of the states.

    Returns
    -------
    Jumps
        With the largest f (1 - f) of the kept jumps' splits (`split_kicks`).
    """
    n = np.asarray(n, dtype=int)
    if n.size == 0 or (level == GROUND and field.temperature <= 0):
        return Jumps(np.zeros(0, int), np.zeros((0, 2), int), np.zeros(0, int), np.zeros(0))
    source, label, kick, rate, error = _on_shell(model, field, PROCESS_FROM[level], grid, rho, n)
    origin, shift, share = split_kicks(kick, grid.step)
    rate = rate[origin] * share
    keep = rate >= grid.smallest_rate
    spread = float(np.max(share[keep] * (1 - share[keep]), initial=0.0))
    return Jumps(source[origin][keep], label[origin][keep], shift[keep], rate[keep], error,
                 spread)


def _state_keys(level, n):
    """One integer per state |level, n>: 2 n + level (its order is by n, then level)."""
    return 2 * np.asarray(n, dtype=np.int64) + level


def build_sector(model, field, grid: MarkovGrid, rho: float, weight: float,
                 start_level: int, tick=None) -> Sector:
    """Breadth-first closure of the packet window under the jumps, up to grid.generations.

    Starts from |start_level, n>, n = 0 .. points - 1; each generation adds the targets of the
    frontier's jumps (`state_jumps`, one vectorised batch per level) until the frontier is empty,
    grid.generations are done or the closure holds more than MAX_STATES states.  The last
    frontier's jumps are not followed: those of its states that have jumps are the edge.

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
    tick : callable, optional
        Called once per generation (a progress bar's update).

    Returns
    -------
    Sector
        States ordered by lattice index, then level; split_spread the largest f (1 - f) of the
        followed jumps.
    """
    def batch(keys):
        levels = keys % 2
        out = []
        for level in (GROUND, EXCITED):
            mine = keys[levels == level]
            jumps = state_jumps(model, field, grid, rho, level, (mine - level) // 2)
            out.append((mine, jumps))
        return out

    known = _state_keys(start_level, np.arange(grid.points))
    frontier, found, error, spread = known, [], 0.0, 0.0
    for generation in range(1, grid.generations + 1):
        targets = []
        for keys, jumps in batch(frontier):
            if jumps.rate.size:
                sources = keys[jumps.source]
                level = sources % 2
                ends = _state_keys(1 - level, (sources - level) // 2 + jumps.shift)
                found.append((sources, ends, jumps))
                targets.append(ends)
                error = max(error, jumps.quadrature_error)
                spread = max(spread, jumps.split_spread)
        frontier = np.setdiff1d(np.concatenate(targets), known) if targets else known[:0]
        known = np.union1d(known, frontier)
        if tick is not None:
            tick()
        if not frontier.size or known.size > MAX_STATES:
            break
    edges = batch(frontier)
    edge_keys = np.concatenate([keys[np.unique(jumps.source)] for keys, jumps in edges])
    error = max([error] + [jumps.quadrature_error for _, jumps in edges])
    levels = known % 2
    index = (known - levels) // 2
    p = np.hypot(grid.momentum(index), rho)
    energies = np.where(levels == EXCITED, model.energy(EXCITED, p), model.energy(GROUND, p))
    families = _families(known, found)
    return Sector(rho, weight, levels, index, energies, families, np.isin(known, edge_keys),
                  error, generation if grid.generations else 0, spread)


def _families(known: np.ndarray, found: list) -> dict:
    """(sign, label, shift) -> (targets, sources, amplitudes) of the positive-rate jumps."""
    if not found:
        return {}
    rates = np.concatenate([f[2].rate for f in found])
    keep = rates > 0
    sources = np.searchsorted(known, np.concatenate([f[0] for f in found])[keep])
    targets = np.searchsorted(known, np.concatenate([f[1] for f in found])[keep])
    columns = [np.concatenate([np.where(f[0] % 2 == EXCITED, 1, -1) for f in found]),
               *np.concatenate([f[2].label for f in found]).T,
               np.concatenate([f[2].shift for f in found])]
    columns = np.stack([c[keep] for c in columns])
    order = np.lexsort(columns[::-1])
    columns, sources, targets = columns[:, order], sources[order], targets[order]
    amplitudes = np.sqrt(rates[keep][order])
    starts = np.r_[0, 1 + np.nonzero(np.any(columns[:, 1:] != columns[:, :-1], axis=0))[0]]
    ends = np.r_[starts[1:], order.size]
    return {(int(columns[0, a]), (int(columns[1, a]), int(columns[2, a])), int(columns[3, a])):
            (targets[a:b], sources[a:b], amplitudes[a:b]) for a, b in zip(starts, ends)}


def packet_amplitudes(scenario, grid: MarkovGrid, level: int) -> dict:
    """a(p_n) sqrt(dp) of the axial packet amplitude on the window, normalised on the lattice.

    a = `Packet.axis_amplitude`: real for a Gaussian, complex for the two lobes (their
    relative phases e^{-+i p d / 2} carry the fringes) and a "file" table, so the initial
    state is the pure |psi><psi| with its coherences.

    Parameters
    ----------
    scenario : Scenario
    grid : MarkovGrid
    level : int
        Internal level of the packet.

    Returns
    -------
    dict
        (level, n) -> complex amplitude (dimensionless), with sum of |.|^2 equal to 1.

    Raises
    ------
    ScenarioError
        If the amplitude vanishes on every lattice point (a "file" table between the points),
        naming grid.points.
    """
    n = np.arange(grid.points)
    amplitude = packet_for(scenario).axis_amplitude(grid.momentum(n))
    norm = float(np.sum(np.abs(amplitude) ** 2))
    if not norm > 0:
        raise ScenarioError(f"grid.points = {grid.points}: the packet's amplitude is zero on every "
                            "lattice point; allowed: more points (a finer lattice step)")
    amps = amplitude / math.sqrt(norm)
    return {(level, int(i)): complex(a) for i, a in zip(n, amps)}
