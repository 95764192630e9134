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

from dataclasses import dataclass
from itertools import combinations_with_replacement

import numpy as np
import scipy.sparse as sp

from ...physics.field import packet_for
from ...physics.models import EXCITED, GROUND
from ...physics.quadrature import gauss_legendre_on
from ..exact.baths import box_sector, sector_lattice

#: directions of the 3D bath (octahedron)
DIRECTIONS_3D = 6
#: at most this many 1D packet sectors by default (each is one sesolve)
MAX_DEFAULT_SECTORS = 9


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
    """

    modes: FockModes
    sector_momenta: np.ndarray
    sector_weights: np.ndarray
    axis: np.ndarray
    start_level: int
    rotating_wave: bool
    max_occupation: int
    max_quanta: int


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


def octahedral_modes(field, axis: np.ndarray, radial_nodes: int) -> FockModes:
    """3D bath: 6 octahedron directions (e3 = axis) x Gauss-Legendre |k| nodes on [0, cutoff].

    The directions +-e1, +-e2, +-e3 (a spherical 3-design, weight 4 pi / 6 each; common
    practice) times the radial nodes k_r with weights W_r: mu = W_r k_r^2 F^2 / ((2 pi)^3 2 w)
    x 4 pi / 6.

    Parameters
    ----------
    field : Field
    axis : ndarray, shape (3,)
        The packet axis (any length; normalised).
    radial_nodes : int
        Gauss-Legendre nodes R in |k|.

    Returns
    -------
    FockModes
        6 R modes (box_length None).

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Legendre quadrature).
    """
    e3 = axis / np.linalg.norm(axis)
    helper = np.array([1.0, 0, 0]) if abs(e3[0]) < 0.9 else np.array([0, 1.0, 0])
    e1 = np.cross(e3, helper)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(e3, e1)
    directions = np.array([e1, -e1, e2, -e2, e3, -e3])
    k, w = gauss_legendre_on(radial_nodes, 0.0, field.cutoff)
    radial = w * k ** 2 * field.mode_weight(k) * (4 * np.pi / DIRECTIONS_3D)
    momenta = (k[:, None, None] * directions[None, :, :]).reshape(-1, 3)
    return FockModes(momenta, np.repeat(field.frequency(k), DIRECTIONS_3D),
                     np.repeat(radial, DIRECTIONS_3D), None, len(momenta))


def sector_grid_1d(scenario, spacing: float, sectors: int | None):
    """The exact solver's 1D sectors (`sector_lattice`), weighted by the packet.

    Lattice momenta P = j dk over the packet, thinned to at most `sectors` (default
    MAX_DEFAULT_SECTORS), with weights |psi(P)|^2 normalised to sum 1.

    Parameters
    ----------
    scenario : Scenario
    spacing : float
        dk = 2 pi / L (momentum units).
    sectors : int or None
        Largest number of sectors.

    Returns
    -------
    momenta : ndarray, shape (S, 1)
        P (momentum units).
    weights : ndarray, shape (S,)
        Dimensionless, summing to 1.
    """
    j, _ = sector_lattice(scenario, spacing, sectors or MAX_DEFAULT_SECTORS)
    momenta = j * spacing
    weights = packet_for(scenario).axis_density(momenta)
    return momenta[:, None], weights / weights.sum()


def sector_grid_3d(packet, axis: np.ndarray, sectors: int):
    """Gauss-Hermite nodes of the axial marginal N(|p0|, sigma_p^2), placed on the packet axis.

    Parameters
    ----------
    packet : Packet
    axis : ndarray, shape (3,)
        Unit vector of the packet axis.
    sectors : int
        Number of nodes.

    Returns
    -------
    momenta : ndarray, shape (S, 3)
        P = p_node axis (momentum units).
    weights : ndarray, shape (S,)
        Dimensionless, summing to 1.

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (Gauss-Hermite quadrature).
    """
    along, weights = packet.quadrature(sectors, along_axis=True)
    return along[:, None] * axis[None, :], weights


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
