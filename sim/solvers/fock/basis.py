"""The fock solver's bath and truncated basis: modes, packet sectors, the reachable Fock states
and the sector Hamiltonian.

In the sector of total momentum P = p + sum_j n_j k_j the states are |level, n_1..n_M> with
n_j <= max_occupation and sum_j n_j <= max_quanta, and

    H = E_level(|P - sum_j n_j k_j|) + sum_j n_j w_j                              (diagonal),
    <other, n + 1_j| H |level, n> = c V(p_e, p_g) sqrt(mu_j) sqrt(n_j + 1)         (links),

with c = model.coupling_factor(), V the model's vertex and mu_j the mode measure
(`FockModes`); under the RWA only the links that conserve level + sum_j n_j are reachable.
The model is described in `sim.solvers.fock.solver`.

Units: hbar = c = 1; energies and momenta in the energy unit, lengths in its inverse.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from itertools import combinations_with_replacement

import numpy as np
import scipy.sparse as sp

from ...physics.field import packet_for
from ...physics.models import EXCITED, GROUND
from ...physics.quadrature import gauss_hermite_normal, gauss_legendre, gauss_legendre_on
from ..exact.baths import SECTOR_REACH, box_sector, sector_lattice

#: directions of the default 3D bath (the octahedron)
OCTAHEDRON = 6
#: transverse Gauss-Laguerre nodes of a 3D packet sector grid: exact for observables cubic in
#: |p_perp|^2 (one node, exact only for linear ones, left 23% of the error of dropping the spread
#: for sigma_p = 0.125 in a 60-mode RWA bath, two nodes 1%; measured), at twice the sectors
TRANSVERSE_SECTORS = 2
#: at most this many 1D packet sectors by default (each is one sesolve)
MAX_DEFAULT_SECTORS = 9
#: least axial nodes of a two-lobe or file packet by default: Gauss-Legendre over the packet
#: window integrates its density times exp(i p d) to 3e-9 with 24 base nodes (6.7e-3 with 9,
#: 2e-5 with 16; measured for sigma_p d = 1 and 4.25 against scipy quad)
SHAPED_AXIAL_NODES = 24
#: most sectors of a "file" packet: a finer table is resampled (`axial_rule`)
MAX_FILE_SECTORS = 96
#: lattice sectors resolve exp(i P d) with aliases below exp(-ALIAS_SIGMAS^2 / 2)
ALIAS_SIGMAS = 6.0
#: `hermite_nodes_for`: accuracy asked of the Gauss-Hermite sum of exp(i s x), and its node limit
HERMITE_ACCURACY = 1e-8
MAX_HERMITE_NODES = 64


# --------------------------------------------------------------------------------------------
# The bath: modes and packet sectors.
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FockModes:
    """M discrete field modes: momenta k_j, frequencies w_j and measures mu_j.

    mu_j = F(k_j)^2 / ((2 pi)^d 2 w_j) x (measure of mode j), so that sum_j mu_j f(k_j)
    approximates Int d^dk F^2 / ((2 pi)^d 2 w) f(k); the coupling of mode j is
    c V(p_e, p_g) sqrt(mu_j).

    Parameters
    ----------
    momenta : ndarray, shape (M, d)
        k_j (momentum units).
    frequencies : ndarray, shape (M,)
        w_j = sqrt(k_j^2 + m^2) (energy units).
    weights : ndarray, shape (M,)
        mu_j (energy^(d-1): dimensionless in 1D, energy^2 in 3D).
    box_length : float or None
        L of the 1D box (length units); None in 3D.
    available : int
        Modes the box holds within the cutoff before the `fock_modes` selection (3D: M).
    """

    momenta: np.ndarray
    frequencies: np.ndarray
    weights: np.ndarray
    box_length: float | None
    available: int

    @property
    def count(self) -> int:
        """Number of modes M.

        Returns
        -------
        int
        """
        return len(self.frequencies)


@dataclass(frozen=True)
class FockPlan:
    """Everything a run is built from: modes, sectors, cutoffs and the coupling rule.

    Parameters
    ----------
    modes : FockModes
    sector_momenta : ndarray, shape (S, d)
        Total momenta P of the packet sectors (momentum units).
    sector_weights : ndarray, shape (S,)
        Their probabilities, summing to 1 (dimensionless).
    axis : ndarray, shape (d,)
        The packet axis (unit vector in the solver's use).
    start_level : int
        Initial level (GROUND or EXCITED).
    rotating_wave : bool
        Keep only the rotating-wave terms.
    max_occupation : int
        Largest n_j.
    max_quanta : int
        Largest sum_j n_j.
    direction_order : int or None, optional
        3D: the order of the direction rule (`direction_rule`; None: the octahedron).
    separation : float or None, optional
        The coherence distance d (length units), None when no coherence is asked for.
    """

    modes: FockModes
    sector_momenta: np.ndarray
    sector_weights: np.ndarray
    axis: np.ndarray
    start_level: int
    rotating_wave: bool
    max_occupation: int
    max_quanta: int
    direction_order: int | None = None
    separation: float | None = None


def first_links(model, modes: FockModes, momentum, level: int):
    """The one-quantum states reached from |level, P; vac>: energies and couplings.

    Energies E_other(|P - k_j|) + w_j and couplings g_j = c V(p_e, p_g) sqrt(mu_j), V taken with
    the excited leg first.  These define the RWA star (level = EXCITED) and the second-order
    transition probability.

    Parameters
    ----------
    model : COMModel
    modes : FockModes
    momentum : array_like, shape (d,)
        P (momentum units).
    level : int
        The starting level; the linked states have the other one.

    Returns
    -------
    energies : ndarray, shape (M,)
        Measured from M_g (energy units).
    couplings : ndarray, shape (M,)
        g_j (energy units).
    """
    momentum = np.asarray(momentum, dtype=float)
    after = np.linalg.norm(momentum[None, :] - modes.momenta, axis=1)
    before = float(np.linalg.norm(momentum))
    energies = model.energy(1 - level, after) + modes.frequencies
    vertex = model.vertex(before, after) if level == EXCITED else model.vertex(after, before)
    return energies, model.coupling_factor() * vertex * np.sqrt(modes.weights)


def lattice_modes(field, model, box_length: float, count: int, momentum, level: int):
    """1D box modes, the `count` most strongly coupled to the first transition.

    All box modes k = 2 pi n / L with |k| <= cutoff (`box_sector`), mu = F^2 / (L 2 w); when
    there are more than `count`, those with the largest |g_j|^2 / (D_j^2 + (2 pi / L)^2) are
    kept, D_j the energy mismatch of the link out of |level, P; vac> (`first_links`): the weight
    of mode j in second-order perturbation theory, regularised by the mode spacing.

    Parameters
    ----------
    field : Field
    model : COMModel
    box_length : float
        L (length units).
    count : int
        Modes to keep.
    momentum : array_like, shape (1,)
        The sector momentum P the ranking uses (momentum units).
    level : int
        Initial level.

    Returns
    -------
    FockModes
        The kept modes in increasing order of k, with `available` the box's total.
    """
    spacing = 2 * np.pi / box_length
    k = box_sector(model, field, float(momentum[0]), spacing, 1.0, None).quanta
    every = FockModes(k[:, None], field.frequency(k), field.mode_weight(k) * spacing, box_length,
                      len(k))
    if count >= len(k):
        return every
    energies, couplings = first_links(model, every, momentum, level)
    mismatch = energies - model.energy(level, float(np.linalg.norm(momentum)))
    importance = np.abs(couplings) ** 2 / (mismatch ** 2 + spacing ** 2)
    chosen = np.sort(np.argsort(-importance, kind="stable")[:count])
    return FockModes(every.momenta[chosen], every.frequencies[chosen], every.weights[chosen],
                     box_length, len(k))


def axis_frame(axis: np.ndarray) -> np.ndarray:
    """An orthonormal frame (e1, e2, e3) with e3 along the packet axis.

    e1 = e3 x h / |e3 x h| with h the first Cartesian axis unless e3 lies near it (then the
    second), e2 = e3 x e1.

    Parameters
    ----------
    axis : ndarray, shape (3,)
        The packet axis (any length; normalised).

    Returns
    -------
    ndarray, shape (3, 3)
        Rows e1, e2, e3 (dimensionless).
    """
    e3 = axis / np.linalg.norm(axis)
    helper = np.array([1.0, 0, 0]) if abs(e3[0]) < 0.9 else np.array([0, 1.0, 0])
    e1 = np.cross(e3, helper)
    e1 /= np.linalg.norm(e1)
    return np.array([e1, np.cross(e3, e1), e3])


def direction_rule(order: int | None):
    """Directions n_i and solid angles W_i of the 3D bath, in the axis frame (third axis = axis).

    None: the octahedron +-e1, +-e2, +-e3, W = 4 pi / 6 each, a spherical 3-design (exact for
    polynomials in (x, y, z) of degree <= 3; common practice).  An order n: the product rule of
    n Gauss-Legendre nodes u_a (weights w_a) in u = cos(theta) and 2n equally spaced azimuths
    phi_b = pi b / n, W_ab = w_a pi / n, exact for every spherical harmonic of degree
    <= 2n - 1 (the azimuthal sum is exact for exp(i m phi), |m| < 2n, and Gauss-Legendre for
    the polynomials P_l(u), l <= 2n - 1, left when m = 0); 2 n^2 directions.

    Parameters
    ----------
    order : int or None
        n >= 1, or None for the octahedron.

    Returns
    -------
    directions : ndarray, shape (D, 3)
        Unit vectors (dimensionless), components along (e1, e2, e3).
    weights : ndarray, shape (D,)
        W_i (steradians), summing to 4 pi.

    References
    ----------
    A. H. Stroud, Approximate Calculation of Multiple Integrals (Prentice-Hall, 1971),
    sec. 2.6: product formulas for the surface of the sphere (from memory); Abramowitz &
    Stegun, Handbook of Mathematical Functions, eq. 25.4.29 (Gauss-Legendre quadrature).
    """
    if order is None:
        eye = np.eye(3)
        return np.vstack([eye[0], -eye[0], eye[1], -eye[1], eye[2], -eye[2]]), \
            np.full(OCTAHEDRON, 4 * np.pi / OCTAHEDRON)
    u, w = gauss_legendre(order)
    phi = np.pi * np.arange(2 * order) / order
    sine = np.sqrt(1 - u * u)
    directions = np.stack([np.outer(sine, np.cos(phi)), np.outer(sine, np.sin(phi)),
                           np.outer(u, np.ones_like(phi))], axis=-1).reshape(-1, 3)
    return directions, np.repeat(w * np.pi / order, 2 * order)


def direction_degree(order: int | None) -> int:
    """Highest degree of spherical harmonics `direction_rule(order)` integrates exactly.

    Parameters
    ----------
    order : int or None
        As in `direction_rule`.

    Returns
    -------
    int
        3 for the octahedron, 2 order - 1 for the product rule.
    """
    return 3 if order is None else 2 * order - 1


def sphere_modes(field, axis: np.ndarray, order: int | None, radial_nodes: int) -> FockModes:
    """3D bath: the directions of `direction_rule` x Gauss-Legendre |k| nodes on [0, cutoff].

    Mode (r, i) has k = k_r n_i (n_i turned into the packet's frame, `axis_frame`) and
    mu = W_r k_r^2 F^2 / ((2 pi)^3 2 w) x W_i, so that sum mu f(k) approximates
    Int d^3k F^2 / ((2 pi)^3 2 w) f(k).

    Parameters
    ----------
    field : Field
    axis : ndarray, shape (3,)
        The packet axis (any length; normalised).
    order : int or None
        Direction rule (`direction_rule`).
    radial_nodes : int
        Gauss-Legendre nodes R in |k|.

    Returns
    -------
    FockModes
        D R modes, radial node major (box_length None; `available` = D R).

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Legendre quadrature).
    """
    directions, solid = direction_rule(order)
    directions = directions @ axis_frame(axis)
    k, w = gauss_legendre_on(radial_nodes, 0.0, field.cutoff)
    radial = w * k ** 2 * field.mode_weight(k)
    momenta = (k[:, None, None] * directions[None, :, :]).reshape(-1, 3)
    count = len(solid)
    return FockModes(momenta, np.repeat(field.frequency(k), count), np.outer(radial, solid).ravel(),
                     None, len(momenta))


def coherent_lattice_step(packet, separation: float | None) -> float:
    """Largest lattice step of 1D Gaussian sectors that still resolves exp(i P d).

    By Poisson summation the lattice sum of N(p0, sigma_p^2)(P) exp(i P d) with step h errs by
    aliases of size exp(-sigma_p^2 (2 pi / h - d)^2 / 2); h = 2 pi / (d + ALIAS_SIGMAS /
    sigma_p) keeps them below exp(-ALIAS_SIGMAS^2 / 2) (common practice: the trapezoidal rule
    of a Gaussian).

    Parameters
    ----------
    packet : Packet
    separation : float or None
        d (length units); None or 0: the density alone (d = 0).

    Returns
    -------
    float
        h (momentum units).
    """
    return 2 * np.pi / ((separation or 0.0) + ALIAS_SIGMAS / packet.momentum_std)


def coherent_sector_count(packet, spacing: float, separation: float) -> int:
    """Fewest 1D lattice sectors of a Gaussian whose step resolves exp(i P d).

    The lattice over p0 +- SECTOR_REACH sigma_p thinned by the largest stride m with
    m dk <= `coherent_lattice_step` (at least 1).

    Parameters
    ----------
    packet : Packet
    spacing : float
        dk (momentum units).
    separation : float
        d (length units).

    Returns
    -------
    int
        A limit for `sector_lattice` (dimensionless count).
    """
    stride = max(1, math.floor(coherent_lattice_step(packet, separation) / spacing))
    return math.ceil((2 * SECTOR_REACH * packet.momentum_std / spacing + 1) / stride) + 1


def hermite_nodes_for(phase_reach: float) -> int:
    """Fewest Gauss-Hermite nodes (normal rule) that integrate exp(i s x) to HERMITE_ACCURACY.

    The exact value is exp(-s^2 / 2) (the normal characteristic function; common practice).

    Parameters
    ----------
    phase_reach : float
        s = sigma_p d (dimensionless).

    Returns
    -------
    int
        n <= MAX_HERMITE_NODES (that many when none is accurate enough).
    """
    for n in range(1, MAX_HERMITE_NODES):
        x, w = gauss_hermite_normal(n)
        if abs(w @ np.exp(1j * phase_reach * x) - np.exp(-0.5 * phase_reach ** 2)) \
                < HERMITE_ACCURACY:
            return n
    return MAX_HERMITE_NODES


def axial_rule(packet, nodes: int):
    """The packet's axial quadrature, a fine file table's resampled to MAX_FILE_SECTORS nodes.

    `Packet.axial_quadrature` (each node a sector, one ODE solve), except for a "file" packet
    whose composite rule (3 nodes per table interval at least) would exceed MAX_FILE_SECTORS:
    then MAX_FILE_SECTORS Gauss-Legendre nodes over the table's range, weights times its
    density (`Packet.axis_density`), normalised: the interpolated table is treated as a smooth
    density (its kinks at the rows are not resolved; tabulate a smooth amplitude).

    Parameters
    ----------
    packet : Packet
    nodes : int
        Least number of nodes.

    Returns
    -------
    (p_z, w) : tuple of ndarray
        Signed axial momenta (momentum units) and weights (dimensionless, summing to 1).

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, eq. 25.4.30 (Gauss-Legendre over
    [a, b]).
    """
    if packet.shape != "file" or packet.axial_nodes(nodes) <= MAX_FILE_SECTORS:
        return packet.axial_quadrature(nodes)
    p, w = gauss_legendre_on(max(nodes, MAX_FILE_SECTORS), *packet.axis_range())
    weights = w * packet.axis_density(p)
    return p, weights / weights.sum()


def sector_grid_1d(scenario, spacing: float, sectors: int | None, separation: float | None):
    """1D packet sectors: the exact solver's lattice for a Gaussian, else the axial rule.

    Gaussian: lattice momenta P = j dk over the packet (`sector_lattice`), thinned to at most
    `sectors`, by default MAX_DEFAULT_SECTORS or, when the coherence at d is asked for, as many
    as a step `coherent_lattice_step` needs; weights |psi(P)|^2 normalised to sum 1.  Other
    shapes: `Packet.axial_quadrature` with at least `sectors` (default SHAPED_AXIAL_NODES)
    nodes, which adds nodes for the fringes of a two-lobe density; these P lie off the box
    lattice (a sector's momenta P - sum n k stay P plus lattice kicks).

    Parameters
    ----------
    scenario : Scenario
    spacing : float
        dk = 2 pi / L (momentum units).
    sectors : int or None
        bath.sectors.
    separation : float or None
        The coherence distance d (length units), None when no coherence is asked for.

    Returns
    -------
    momenta : ndarray, shape (S, 1)
        P (momentum units).
    weights : ndarray, shape (S,)
        Dimensionless, summing to 1.
    """
    packet = packet_for(scenario)
    if packet.shape != "gaussian":
        momenta, weights = axial_rule(packet, sectors or SHAPED_AXIAL_NODES)
        return momenta[:, None], weights
    needed = coherent_sector_count(packet, spacing, separation) if separation else 0
    j, _ = sector_lattice(scenario, spacing, sectors or max(MAX_DEFAULT_SECTORS, needed))
    momenta = j * spacing
    weights = packet.axis_density(momenta)
    return momenta[:, None], weights / weights.sum()


def sector_grid_3d(packet, axis: np.ndarray, sectors: int):
    """3D packet sectors: the axial rule times TRANSVERSE_SECTORS transverse magnitudes.

    P = p_a e3 + rho_b e1 (`axis_frame`), with (p_a, w_a) `Packet.axial_quadrature`
    via `axial_rule` (Gauss-Hermite for a Gaussian, fringe-resolving Gauss-Legendre for two
    lobes, the table's composite rule for a file) and (rho_b, w_b) `Packet.transverse_quadrature`
    (Gauss-Laguerre in rho^2 / (2 sigma_p^2)), weight w_a w_b.  The transverse momentum is put
    along e1: the bath is isotropic up to its direction rule, so only |P| and P.axis matter.

    Parameters
    ----------
    packet : Packet
    axis : ndarray, shape (3,)
        Unit vector of the packet axis.
    sectors : int
        Least number of axial nodes.

    Returns
    -------
    momenta : ndarray, shape (S, 3)
        P (momentum units).
    weights : ndarray, shape (S,)
        Dimensionless, summing to 1.

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Hermite,
    Gauss-Legendre and Gauss-Laguerre quadratures).
    """
    along, axial = axial_rule(packet, sectors)
    rho, transverse = np.array(packet.transverse_quadrature(TRANSVERSE_SECTORS)).T
    e1, _, e3 = axis_frame(axis)
    momenta = along[:, None, None] * e3 + rho[None, :, None] * e1
    return momenta.reshape(-1, 3), np.outer(axial, transverse).ravel()


# --------------------------------------------------------------------------------------------
# The truncated Fock basis and the sector Hamiltonian.
# --------------------------------------------------------------------------------------------


def allowed_level(quanta: int, start_level: int, rotating_wave: bool) -> int | None:
    """The level a reachable state with `quanta` quanta has, or None if there is none.

    All terms: parity (level + quanta) mod 2 conserved.  RWA: level + quanta = start_level.

    Parameters
    ----------
    quanta : int
        sum_j n_j.
    start_level : int
        The initial level (with no quanta).
    rotating_wave : bool

    Returns
    -------
    int or None
        GROUND, EXCITED, or None (RWA: no level fits).
    """
    if rotating_wave:
        level = start_level - quanta
        return level if level in (GROUND, EXCITED) else None
    return (start_level + quanta) % 2


def occupation_counts(modes: int, max_occupation: int, max_quanta: int) -> np.ndarray:
    """Number of occupation vectors with N quanta, N = 0 .. max_quanta.

    The coefficients of (1 + x + ... + x^max_occupation)^modes truncated at degree max_quanta
    (exact integers).

    Parameters
    ----------
    modes : int
        M.
    max_occupation : int
        Largest n_j.
    max_quanta : int
        Largest N.

    Returns
    -------
    ndarray of object, shape (max_quanta + 1,)
        Python integers.
    """
    one_mode = [1] * (min(max_occupation, max_quanta) + 1)
    counts = [1]
    for _ in range(modes):
        counts = [sum(counts[n - j] for j in range(len(one_mode)) if 0 <= n - j < len(counts))
                  for n in range(min(len(counts) + len(one_mode) - 1, max_quanta + 1))]
    return np.array(counts + [0] * (max_quanta + 1 - len(counts)), dtype=object)


def state_count(plan: FockPlan) -> int:
    """States of one sector (all sectors have the same basis), without enumerating them.

    Parameters
    ----------
    plan : FockPlan

    Returns
    -------
    int
        Sum of `occupation_counts` over the quanta numbers with an allowed level.
    """
    counts = occupation_counts(plan.modes.count, plan.max_occupation, plan.max_quanta)
    return int(sum(c for n, c in enumerate(counts)
                   if allowed_level(n, plan.start_level, plan.rotating_wave) is not None))


def link_count(plan: FockPlan) -> int:
    """Creation links n -> n + 1_j inside one sector's basis, without enumerating it.

    A link starts at a state with N < max_quanta quanta and n_j < max_occupation and ends at
    one with N + 1 quanta, both levels allowed (`allowed_level`).  By the symmetry of the
    modes, links = M sum_a sum_N' c_(M-1)(N') over a = n_j < max_occupation and the other
    modes' quanta N' with N = a + N' < max_quanta, c_(M-1) the `occupation_counts` of M - 1
    modes.  The sector Hamiltonian (`sector_hamiltonian`) stores S + 2 links entries.

    Parameters
    ----------
    plan : FockPlan

    Returns
    -------
    int
        The number of links (exact).
    """
    modes, top = plan.modes.count, plan.max_quanta
    if modes == 0:
        return 0
    others = occupation_counts(modes - 1, plan.max_occupation, top)

    def allowed(n):
        return allowed_level(n, plan.start_level, plan.rotating_wave) is not None

    total = 0
    for a in range(min(plan.max_occupation, top)):
        for rest, count in enumerate(others):
            n = a + rest
            if n < top and allowed(n) and allowed(n + 1):
                total += int(count)
    return modes * total


@dataclass(frozen=True)
class FockBasis:
    """Reachable states, with sorted keys for exact lookup.

    Parameters
    ----------
    occupations : ndarray of unsigned int, shape (S, M)
        n_j of each state.
    levels : ndarray of int, shape (S,)
        Level of each state.
    quanta : ndarray of int, shape (S,)
        sum_j n_j of each state.
    keys : ndarray, shape (S,)
        The occupation rows as opaque bytes values, sorted.
    order : ndarray of int, shape (S,)
        Basis index of each sorted key.
    """

    occupations: np.ndarray
    levels: np.ndarray
    quanta: np.ndarray
    keys: np.ndarray
    order: np.ndarray

    def index_of(self, rows: np.ndarray) -> np.ndarray:
        """Index of each occupation row in the basis, -1 where it is not a basis state.

        Parameters
        ----------
        rows : ndarray of int, shape (R, M)
            Occupation vectors.

        Returns
        -------
        ndarray of int, shape (R,)
        """
        wanted = _row_keys(rows.astype(self.occupations.dtype))
        position = np.searchsorted(self.keys, wanted)
        inside = position < len(self.keys)
        found = np.zeros(len(wanted), dtype=bool)
        found[inside] = self.keys[position[inside]] == wanted[inside]
        return np.where(found, self.order[np.minimum(position, len(self.keys) - 1)], -1)


def _row_keys(rows: np.ndarray) -> np.ndarray:
    """Each occupation row as one opaque bytes value, for sorting and exact lookup."""
    rows = np.ascontiguousarray(rows)
    return rows.view(np.dtype((np.void, rows.shape[1] * rows.itemsize))).ravel()


def fock_basis(plan: FockPlan) -> FockBasis:
    """Enumerate the reachable states, vacuum first.

    For N = 0 .. max_quanta quanta with an allowed level (`allowed_level`: parity with all terms,
    level + N = start_level under the RWA), every occupation vector with sum_j n_j = N and all
    n_j <= max_occupation, in the order of `itertools.combinations_with_replacement`.

    Parameters
    ----------
    plan : FockPlan

    Returns
    -------
    FockBasis
    """
    m = plan.modes.count
    occupation_dtype = np.uint8 if min(plan.max_occupation, plan.max_quanta) < 255 else np.uint16
    blocks, levels, quanta = [], [], []
    for n in range(plan.max_quanta + 1):
        level = allowed_level(n, plan.start_level, plan.rotating_wave)
        if level is None:
            continue
        picks = np.array(list(combinations_with_replacement(range(m), n)), dtype=np.intp)
        rows = np.zeros((len(picks), m), dtype=occupation_dtype)
        if n:
            np.add.at(rows, (np.arange(len(picks))[:, None], picks), 1)
        rows = rows[rows.max(axis=1, initial=0) <= plan.max_occupation]
        blocks.append(rows)
        levels.append(np.full(len(rows), level))
        quanta.append(np.full(len(rows), n))
    occupations = np.concatenate(blocks)
    keys = _row_keys(occupations)
    order = np.argsort(keys, kind="stable")
    return FockBasis(occupations, np.concatenate(levels), np.concatenate(quanta), keys[order],
                     order)


def com_momenta(basis: FockBasis, modes: FockModes, total_momentum) -> np.ndarray:
    """p = P - sum_j n_j k_j of every basis state.

    Parameters
    ----------
    basis : FockBasis
    modes : FockModes
    total_momentum : array_like, shape (d,)
        P (momentum units).

    Returns
    -------
    ndarray, shape (S, d)
        COM momenta (momentum units).
    """
    return np.asarray(total_momentum, dtype=float)[None, :] - basis.occupations @ modes.momenta


def sector_hamiltonian(model, plan: FockPlan, basis: FockBasis, total_momentum) -> sp.csr_matrix:
    """H of one total-momentum sector in the basis, energies from M_g.

    Diagonal: E_level(|p|) + sum_j n_j w_j with p = P - sum_j n_j k_j.  Off-diagonal: every
    creation link n -> n + 1_j inside the basis, with matrix element
    <other, n + 1_j| H |level, n> = c V(p_e, p_g) sqrt(mu_j) sqrt(n_j + 1), and its Hermitian
    conjugate.

    Parameters
    ----------
    model : COMModel
    plan : FockPlan
    basis : FockBasis
    total_momentum : array_like, shape (d,)
        P (momentum units).

    Returns
    -------
    scipy.sparse.csr_matrix, shape (S, S)
        Complex Hermitian matrix (energy units).
    """
    modes = plan.modes
    p = np.linalg.norm(com_momenta(basis, modes, total_momentum), axis=1)
    excited = basis.levels == EXCITED
    diagonal = (np.where(excited, model.energy(EXCITED, p), model.energy(GROUND, p))
                + basis.occupations @ modes.frequencies)
    rows, cols, values = [np.arange(len(p))], [np.arange(len(p))], [diagonal]
    scale = model.coupling_factor() * np.sqrt(modes.weights)
    for j in range(modes.count):
        source = np.flatnonzero(basis.occupations[:, j] < plan.max_occupation)
        target_rows = basis.occupations[source].copy()
        target_rows[:, j] += 1
        target = basis.index_of(target_rows)
        source, target = source[target >= 0], target[target >= 0]
        src_excited = excited[source]
        p_e = np.where(src_excited, p[source], p[target])
        p_g = np.where(src_excited, p[target], p[source])
        element = (scale[j] * model.vertex(p_e, p_g)
                   * np.sqrt(basis.occupations[source, j] + 1.0))
        rows += [target, source]
        cols += [source, target]
        values += [element, element]
    return sp.csr_matrix((np.concatenate(values), (np.concatenate(rows), np.concatenate(cols))),
                         shape=(len(p), len(p)), dtype=complex)


def truncation_edge(plan: FockPlan, basis: FockBasis) -> np.ndarray:
    """States from which a term of the untruncated H would leave the basis.

    A state may create a quantum if it is excited or the counter-rotating terms are kept; the
    link is cut if the state already holds max_quanta quanta or a mode at max_occupation.

    Parameters
    ----------
    plan : FockPlan
    basis : FockBasis

    Returns
    -------
    ndarray of bool, shape (S,)
    """
    may_create = (basis.levels == EXCITED) | (not plan.rotating_wave)
    full = ((basis.quanta >= plan.max_quanta)
            | (basis.occupations.max(axis=1, initial=0) >= plan.max_occupation))
    return may_create & full
