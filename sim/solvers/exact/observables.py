"""Recoil observables of the exact solver's sectors: momentum densities and the reduced COM state.

1D: the sectors and their modes sit on one momentum lattice p = j dk, so the ground-state
momentum density is a sum of lattice probabilities (`lattice_density`) and the reduced COM state
(field and level traced out) is held on the lattice (`ReducedState1D`):

    rho = |phi_e><phi_e| + sum_k |phi_k><phi_k|,   phi_e(P) = psi(P) c(P),
    phi_k(p) = psi(p + k) c_k(p + k)  on the lattice p = P - k,

whose position variance comes from the lattice Fourier transform (i d/dp on the periodic
lattice, exact for band-limited states) and whose purity is Tr rho^2 = sum_ab |<phi_a|phi_b>|^2
(the Gram matrix of the components).  3D: the density along the packet axis of the detector
momentum after emission, sampled over the directions (`axis_density`).

Units: hbar = c = 1; momenta in the energy unit, lengths in its inverse.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import sparse

from ...physics.field import packet_for
from ...physics.models import EXCITED
from ...physics.quadrature import gauss_legendre_on
from ..common import bin_index, cell_edges
from .baths import Bath

#: complex numbers allowed in the 1D reduced-state array (sectors x modes x state times)
STATE_ELEMENTS = 4e7
#: the reduced state (x variance, purity) is held at about this many evenly spread sample times
STATE_TIMES = 101
#: position grid: lattice Fourier transform padded to this many points per sector
POSITION_OVERSAMPLING = 8
#: largest momentum lattice for the final reduced state as a qutip.Qobj
FINAL_STATE_LIMIT = 4000
#: 3D axis density: quantile nodes in cos(angle of P to the axis), azimuth nodes
AXIS_NODES, AZIMUTH_NODES = 16, 12
#: 3D spatial coherence: Gauss-Legendre nodes in the quantile of cos(angle of P to the axis)
DIRECTION_NODES = 32
#: 3D purity: |k| bins per packet momentum width sigma_p (the overlap's scale in |k|; the
#: linear deposit makes the binning error O((bin / sigma_p)^2)), and at most this many bins
KICK_BINS_PER_SIGMA, KICK_BINS = 8, 2048
#: 3D purity: largest Legendre order of the kick directions' overlap expansion, and the bound
#: on an order's contribution below which it is left out
KICK_ORDERS, KICK_NEGLIGIBLE = 400, 1e-15
#: 3D purity: the Fourier integral of the kicked packets' overlap runs to this many / sigma_p
#: (its Gaussian weight exp(-sigma^2 y^2) is 6e-14 there)
KICK_REACH = 5.5
#: 3D purity: the kicked-packet mixture's error from the emitted line's Doppler spread across
#: the packet (`kicked_purity_error`; measured in 1D: 0.24 % at eta = 0.044 with Gamma / sigma_p
#: = 0.025, 2.4 % at eta = 0.05 with Gamma / sigma_p = 1.1), and the error above which it is
#: withheld
PURITY_ERROR_SQUARE, PURITY_ERROR_LINEAR, PURITY_TOLERANCE = 1.2, 0.5, 0.02
#: 1D density on the lattice up to this many points, else on the perturbative grid
LATTICE_DENSITY_LIMIT = 6001
#: warn when the 1D sectors are further apart in momentum than this fraction of the packet's
#: momentum width (the box spread of `lattice_density` then broadens the density visibly:
#: its variance grows by D^2 / 12, 2 % of sigma_p^2 at D = sigma_p / 2)
SECTOR_RESOLUTION = 0.5


def lattice_density(scenario, bath: Bath, index: np.ndarray, probability: np.ndarray):
    """Ground-state momentum density of the 1D sectors' modes, on a grid the sectors resolve.

    The sectors sample the packet every D = stride x dk in total momentum, so the density of
    the detector momentum p = j dk after emission is known on the scale D, not dk: it is
    deposited by linear weights (`cloud_density`) on a uniform grid of spacing h = max(D,
    span / LATTICE_DENSITY_LIMIT) aligned with the sectors, i.e. the sectors' samples are
    interpolated linearly instead of leaving the isolated zeros of a comb between them.  With
    every lattice point a sector (D = dk) and a short span this is the lattice probability / dk.
    Integrates to the ground-state population.

    Parameters
    ----------
    scenario : Scenario
    bath : Bath
        The 1D bath (supplies dk = bath.spacing and the stride).
    index : ndarray of int, shape (N,)
        Lattice index j of each detector momentum p = j dk.
    probability : ndarray, shape (N, S)
        Probability at each momentum and snapshot (dimensionless).

    Returns
    -------
    grid : ndarray, shape (G,)
        Momenta (momentum units).
    density : ndarray, shape (G, S)
        Density (1 / momentum units).
    notes : list of str
        A warning when the sector spacing D is too coarse for the packet (`SECTOR_RESOLUTION`).
    """
    packet = packet_for(scenario)
    cell = bath.stride * bath.spacing
    lo, hi = int(index.min()), int(index.max())
    step = max(cell, (hi - lo) * bath.spacing / (LATTICE_DENSITY_LIMIT - 1))
    anchor = bath.sectors[0].momentum
    first = math.floor((lo * bath.spacing - anchor) / step)
    last = math.ceil((hi * bath.spacing - anchor) / step)
    grid = anchor + step * np.arange(first, last + 1)
    density = cloud_density(grid, index * bath.spacing, probability)
    notes = []
    if cell > SECTOR_RESOLUTION * packet.momentum_std:
        notes.append(f"momentum density: the sectors sit {cell:.3g} apart in momentum, more than "
                     f"{SECTOR_RESOLUTION:g} of the packet's momentum width {packet.momentum_std:.3g}, "
                     "so the ground-state density is interpolated over that spacing; raise "
                     f"bath.sectors (now {len(bath.sectors)}) to resolve it")
    return grid, density, notes


def cloud_density(grid: np.ndarray, values, probability) -> np.ndarray:
    """Density on a uniform grid of masses shared linearly between their two nearest points.

    A mass w at v with grid[i] <= v < grid[i + 1] gives w (1 - f) to point i and w f to point
    i + 1, f = (v - grid[i]) / h (linear interpolation's dual; common practice in particle-mesh
    deposition), and the density is the deposit / h.  Mass is conserved for v inside the grid;
    mass outside it is dropped.

    Parameters
    ----------
    grid : ndarray, shape (G,)
        Uniform grid (momentum units), G >= 2.
    values : ndarray, shape (N,)
        Where each mass sits (momentum units).
    probability : ndarray, shape (N, S)
        Masses (dimensionless).

    Returns
    -------
    ndarray, shape (G, S)
        Density (1 / momentum units).
    """
    step = grid[1] - grid[0]
    position = (np.asarray(values, dtype=float) - grid[0]) / step
    cell = np.floor(position).astype(int)
    share = position - cell
    at_end = cell == grid.size - 1  # the last point itself
    cell, share = np.where(at_end, grid.size - 2, cell), np.where(at_end, 1.0, share)
    inside = (cell >= 0) & (cell <= grid.size - 2)
    mass = np.asarray(probability, dtype=float).reshape(position.size, -1)[inside]
    cell, share = cell[inside], share[inside]
    density = np.zeros((grid.size, mass.shape[1]))
    for column in range(mass.shape[1]):
        density[:, column] = (np.bincount(cell, mass[:, column] * (1 - share), minlength=grid.size)
                              + np.bincount(cell + 1, mass[:, column] * share, minlength=grid.size))
    return density / step


class ReducedState1D:
    """The reduced COM state of a 1D run on its momentum lattice, at a subset of times.

    rho = |phi_e><phi_e| + sum_k |phi_k><phi_k| with phi_e(P) = psi(P) c(P) and
    phi_k(P - k) = psi(P) c_k(P) on the lattice p = P - k.  The stored amplitudes are
    a[t, s, n] = sqrt(w_s) c_k(P_s, t) with k = n dk (n offset to the bath's lowest lattice mode)
    and e[t, s] = sqrt(w_s) c(P_s, t): component n sits at p = P_s - k_n.  The state times are
    the sample times thinned to about STATE_TIMES and at most STATE_ELEMENTS amplitudes, the last
    always kept (`state_rows`).

    Parameters
    ----------
    bath : Bath
        A 1D bath with sectors on every lattice point (`fits`).
    samples : int
        Number of sample times.

    Attributes
    ----------
    times : ndarray of int
        Sample indices of the state times.
    level : ndarray, shape (R, sectors)
        e[t, s] (complex, dimensionless).
    modes : ndarray, shape (R, sectors, width)
        a[t, s, n] (complex, dimensionless).
    """

    @staticmethod
    def lattice_range(bath: Bath) -> tuple[int, int]:
        """The lowest lattice mode index over all sectors and the number of lattice modes spanned.

        Parameters
        ----------
        bath : Bath

        Returns
        -------
        tuple of int
            (first, width); (0, 1) when no sector has modes.
        """
        lattice = np.concatenate([sec.lattice for sec in bath.sectors])
        if lattice.size == 0:
            return 0, 1
        return int(lattice.min()), int(lattice.max() - lattice.min()) + 1

    @classmethod
    def fits(cls, bath: Bath) -> bool:
        """Whether the reduced state can be held: sectors on every lattice point, and two times of
        amplitudes within STATE_ELEMENTS.

        Parameters
        ----------
        bath : Bath

        Returns
        -------
        bool
            bath.stride == 1 and 2 x sectors x width <= STATE_ELEMENTS.
        """
        return bath.stride == 1 and 2 * len(bath.sectors) * cls.lattice_range(bath)[1] <= STATE_ELEMENTS

    @staticmethod
    def state_rows(samples: int, sectors: int, width: int) -> np.ndarray:
        """The sample indices where the state is held: every m-th and the last.

        m = max(ceil(sectors x width x samples / STATE_ELEMENTS), ceil((samples - 1) /
        (STATE_TIMES - 1))): at most STATE_ELEMENTS amplitudes and about STATE_TIMES times.

        Parameters
        ----------
        samples : int
            Number of sample times.
        sectors, width : int
            The bath's sector count and lattice width (`lattice_range`).

        Returns
        -------
        ndarray of int
            Increasing sample indices, the last always included.
        """
        stride = max(1, math.ceil(sectors * width * samples / STATE_ELEMENTS),
                     math.ceil((samples - 1) / (STATE_TIMES - 1)))
        rows = np.arange(0, samples, stride)
        return rows if rows[-1] == samples - 1 else np.append(rows, samples - 1)

    def __init__(self, bath: Bath, samples: int):
        self.first, width = self.lattice_range(bath)
        sectors = len(bath.sectors)
        self.times = self.state_rows(samples, sectors, width)
        self.spacing = bath.spacing
        self.sector_index = np.array([round(sec.momentum / bath.spacing) for sec in bath.sectors])
        self.modes = np.zeros((self.times.size, sectors, width), dtype=complex)
        self.level = np.zeros((self.times.size, sectors), dtype=complex)

    def add(self, index: int, sector, level: np.ndarray, modes: np.ndarray) -> None:
        """Store sector `index`'s level and mode amplitudes at the state times.

        Parameters
        ----------
        index : int
            Position of the sector in `bath.sectors`.
        sector : Sector
            The sector (supplies its weight w_s and mode lattice indices).
        level : ndarray, shape (R,)
            c(P_s, t) at the state times (complex, dimensionless).
        modes : ndarray, shape (R, N)
            c_k(P_s, t) at the state times (complex, dimensionless).

        Returns
        -------
        None
        """
        root = math.sqrt(sector.weight)
        self.level[:, index] = root * level
        self.modes[:, index, sector.lattice - self.first] = root * modes

    def position_variance(self) -> np.ndarray:
        """Var x of the reduced state at each state time, from the lattice Fourier transform.

        phi(x) = sum_s a_s e^{i P_s x} (|phi(x)|^2 is the same for every mode's shift e^{-i k x}),
        zero-padded to POSITION_OVERSAMPLING points per sector, on the ring of length 2 pi / dk
        centred on the circular mean position; the density is the sum of |phi(x)|^2 over the level
        and mode components.

        Returns
        -------
        ndarray, shape (R,)
            Var x (length^2, i.e. 1 / momentum^2 units).
        """
        sectors = self.level.shape[1]
        points = POSITION_OVERSAMPLING * sectors
        density = np.abs(np.fft.ifft(self.level, n=points, axis=1)) ** 2
        for chunk in range(self.modes.shape[0]):
            density[chunk] += np.sum(np.abs(np.fft.ifft(self.modes[chunk], n=points, axis=0)) ** 2,
                                     axis=1)
        ring = 2 * np.pi / self.spacing
        x = np.arange(points) * ring / points
        phase = np.angle(density @ np.exp(2j * np.pi * np.arange(points) / points))
        centre = phase[:, None] / (2 * np.pi) * ring
        offset = (x[None, :] - centre + 0.5 * ring) % ring - 0.5 * ring
        total = density.sum(1)
        mean = (density * offset).sum(1) / total
        return (density * offset ** 2).sum(1) / total - mean ** 2

    def purity(self) -> np.ndarray:
        """Tr rho^2 = sum_ab |<phi_a|phi_b>|^2 over the level and mode components (Gram matrix).

        Components n and n + d overlap where P_s - k_n = P_s' - k_(n+d), i.e. s' = s + d; the level
        component overlaps mode n where P_s - k_n = P_s', i.e. s' = s - n.

        Returns
        -------
        ndarray, shape (R,)
            Tr rho^2 at each state time (dimensionless).
        """
        a, e = self.modes, self.level
        bra = a.conj()
        sectors, width = a.shape[1], a.shape[2]
        total = np.sum(np.abs(e) ** 2, axis=1) ** 2
        total += np.sum(np.abs(np.einsum("tsn,tsn->tn", bra, a)) ** 2, axis=1)
        for d in range(1, min(sectors, width)):
            overlap = np.einsum("tsn,tsn->tn", bra[:, :-d, :-d], a[:, d:, d:])
            total += 2 * np.sum(np.abs(overlap) ** 2, axis=1)
        for column in range(width):  # <phi_e|phi_n>: phi_n at P_s - k_n = P_s' for s' = s - n
            n = column + self.first
            if abs(n) >= sectors:
                continue
            lo, hi = max(0, n), min(sectors, sectors + n)
            overlap = np.sum(e[:, lo - n:hi - n].conj() * a[:, lo:hi, column], axis=1)
            total += 2 * np.abs(overlap) ** 2
        return total

    def final_qobj(self):
        """rho(p, p') at the last state time as a qutip.Qobj on the lattice p = j dk.

        rho = sum_a |phi_a><phi_a| over the components (`component_vectors`), lowest j first.

        Returns
        -------
        qutip.Qobj or None
            The Q x Q density matrix in the lattice basis (probabilities, dimensionless), or None
            when the lattice exceeds FINAL_STATE_LIMIT points.
        """
        import qutip

        vectors, momenta = self.component_vectors(-1)
        if momenta.size > FINAL_STATE_LIMIT:
            return None
        return qutip.Qobj(vectors @ vectors.conj().T)

    def component_vectors(self, row: int) -> tuple[np.ndarray, np.ndarray]:
        """The components phi_a on the momentum lattice at one state time.

        Column 0 is the level's component, column 1 + c the mode n = first + c.

        Parameters
        ----------
        row : int
            Index into the state times (-1 for the last).

        Returns
        -------
        vectors : ndarray, shape (Q, width + 1)
            phi_a(p) at the lattice points (complex, dimensionless amplitudes).
        momenta : ndarray, shape (Q,)
            The lattice momenta p = j dk, increasing (momentum units).
        """
        sectors, width = self.level.shape[1], self.modes.shape[2]
        lowest = int(self.sector_index[0]) - (self.first + width - 1)
        points = sectors + width - 1
        vectors = np.zeros((points, width + 1), dtype=complex)
        rows = self.sector_index - lowest
        vectors[rows, 0] = self.level[row]
        for column in range(width):
            vectors[rows - (self.first + column), column + 1] = self.modes[row, :, column]
        return vectors, (np.arange(points) + lowest) * self.spacing


def direction_quantiles(kappa: float, nodes: int = DIRECTION_NODES) -> tuple[np.ndarray, np.ndarray]:
    """Quadrature of the conditional law of x = cos(angle of P to the packet axis) (3D).

    The density ~ exp(kappa x) on [-1, 1] (von Mises-Fisher, kappa = |P| |p0| / sigma_p^2),
    integrated in its quantile q in (0, 1) by Gauss-Legendre: E[f(x)] = Int_0^1 f(x(q)) dq
    with the closed-form inverse x(q) = -1 + log(1 + q (exp(2 kappa) - 1)) / kappa (uniform for
    kappa -> 0).

    Parameters
    ----------
    kappa : float
        Concentration (dimensionless, >= 0).
    nodes : int, optional
        Gauss-Legendre nodes (default DIRECTION_NODES).

    Returns
    -------
    x : ndarray, shape (nodes,)
        cos(alpha) at the nodes (dimensionless).
    weights : ndarray, shape (nodes,)
        Their weights, summing to 1.
    """
    t, w = np.polynomial.legendre.leggauss(nodes)
    q, w = 0.5 * (t + 1), 0.5 * w
    if kappa < 1e-8:
        return 2 * q - 1, w
    x = -1 + np.logaddexp(0, np.log(q) + 2 * kappa + np.log(-np.expm1(-2 * kappa))) / kappa
    return np.clip(x, -1, 1), w


def direction_phases(packet, sector, d: float) -> tuple[complex, np.ndarray]:
    """<exp(i p_z d)> of the level and of each mode of a 3D sector, over the directions.

    The sector's direction P^ follows the packet's conditional law about the axis
    (`direction_quantiles`); a quantum at |k|, cos(angle to P) = u leaves p_z = |P| x - k (u x
    + sqrt(1 - u^2) sqrt(1 - x^2) cos phi), and its azimuth phi averages to a Bessel function:

        <exp(i p_z d)> = E_x[ exp(i (|P| - k u) x d) J0(k d sqrt(1 - u^2) sqrt(1 - x^2)) ],

    the level's E_x[exp(i |P| x d)].

    Parameters
    ----------
    packet : Packet
    sector : Sector
        A 3D sector (its nodes' mean |k| and u).
    d : float
        Distance along the packet axis (length units).

    Returns
    -------
    level : complex
        The level's phase average (dimensionless).
    modes : ndarray of complex, shape (N,)
        Each mode's (dimensionless).
    """
    from scipy.special import j0

    kappa = sector.momentum * packet.mean_speed / packet.momentum_std ** 2
    x, w = direction_quantiles(kappa)
    r, k, u = sector.momentum, sector.quanta[:, None], sector.cosines[:, None]
    level = complex(np.sum(w * np.exp(1j * r * x * d)))
    across = k * d * np.sqrt(np.clip(1 - u * u, 0, None)) * np.sqrt(np.clip(1 - x * x, 0, None))
    modes = (np.exp(1j * (r - k * u) * x * d) * j0(across)) @ w
    return level, modes


def position_moments(packet, momentum: float, level, level_slope, spread) -> np.ndarray:
    """<x_z^2>, <x_z> and <x_perp^2> of one 3D sector |P| = r, before its weight (z: the axis).

    A real Gaussian packet psi(P) (mean p0 along z, std sigma per axis) makes the COM
    component of a quantum k phi_k(p) = psi(p + k) c(|P|, |k|, u) with P = p + k, and
    X = i grad_p, so <x_z^2> = sum_k Int |d_Pz (psi c)|^2 d^3P with

        d_Pz (psi c) = psi [ a c + x B + sqrt(1 - u^2) sqrt(1 - x^2) cos(phi) C ],
        a = -(r x - p0) / (2 sigma^2),  x = cos(angle of P to z),

    B = dc/d|P|, C = (dc/du) / |P| at fixed k, phi the quantum's azimuth about P.  The azimuth
    average drops the cos(phi) cross terms and halves cos^2; the direction of P follows the
    conditional (von Mises-Fisher) law (`Packet.direction_moments`: E[x], E[x^2]).  So with the
    mode sums S (`StarSpectrum.mode_series`, `spreading`) plus the level's own (A = c,
    B = dc/d|P|, no C):

        <x_z^2>    = E[a^2] S_AA + 2 E[a x] S_ReAB + E[x^2] S_BB + (1 - E[x^2]) / 2 S_CC,
        <x_z>      = -E[x] S_ImAB,
        <x_perp^2> = E[a'^2] S_AA + 2 E[a' y] S_ReAB + E[y^2] S_BB + (1 - E[y^2]) / 2 S_CC,

    for one transverse axis y (a' = -r y / (2 sigma^2), E[y^2] = (1 - E[x^2]) / 2 by the
    symmetry about the axis, <x_perp> = 0).  At t = 0 (c = 1) both variances are
    1 / (4 sigma^2) = width^2.

    Parameters
    ----------
    packet : Packet
        A Gaussian 3D packet.
    momentum : float
        r = |P| of the sector (momentum units).
    level : ndarray, shape (T,)
        c(P, t) (complex, dimensionless).
    level_slope : ndarray, shape (T,)
        dc / d|P| (complex, 1 / momentum units).
    spread : ndarray, shape (T, 5)
        The modes' S_AA, S_ReAB, S_ImAB, S_BB, S_CC (dimensionless, 1 / momentum,
        1 / momentum, 1 / momentum^2, 1 / momentum^2).

    Returns
    -------
    ndarray, shape (T, 3)
        <x_z^2> (length^2), <x_z> (length), <x_perp^2> (length^2) of the sector.
    """
    sigma2, p0, r = packet.momentum_std ** 2, packet.mean_speed, momentum
    cos1, cos2 = (float(v) for v in packet.direction_moments(r))
    mixed = np.conj(level) * level_slope
    aa = np.abs(level) ** 2 + spread[:, 0]
    re, im = mixed.real + spread[:, 1], mixed.imag + spread[:, 2]
    bb, cc = np.abs(level_slope) ** 2 + spread[:, 3], spread[:, 4]
    across = 0.5 * (1 - cos2)
    axial = ((r * r * cos2 - 2 * r * p0 * cos1 + p0 * p0) / (4 * sigma2 ** 2) * aa
             - (r * cos2 - p0 * cos1) / sigma2 * re + cos2 * bb + 0.5 * (1 - cos2) * cc)
    transverse = (r * r * across / (4 * sigma2 ** 2) * aa - r * across / sigma2 * re
                  + across * bb + 0.5 * (1 - across) * cc)
    return np.stack([axial, -cos1 * im, transverse], axis=1)


class KickedPurity3D:
    """Tr rho_COM^2 of a 3D run as a mixture of momentum-kicked packets.

    Where the emitted quanta's amplitudes do not change across the packet's momentum spread
    (`kicked_purity_error` small), the COM state is the excited packet plus the packet displaced by
    each emitted quantum's momentum -k, weighted by its probability W(k):
    rho = P_e |psi><psi| + Int W(k) |psi_k><psi_k| d^3k, and with the Gaussian overlap
    |<psi_k|psi_k'>|^2 = exp(-|k - k'|^2 / (4 sigma^2)),

        Tr rho^2 = P_e^2 + 2 P_e Int W(k) exp(-k^2 / (4 sigma^2))
                   + Int Int W(k) W(k') exp(-|k - k'|^2 / (4 sigma^2)).

    The direction of k is that of a node (|k|, u) about P, P about the packet axis following
    its conditional (von Mises-Fisher) law, with the azimuth uniform; so the distribution of
    k's direction n is symmetric about the axis, its Legendre moments are
    E[P_l(n_z)] = P_l(u) E[P_l(cos angle of P)] (the addition theorem), and
    exp(k k' n.n' / (2 sigma^2)) = sum_l (2 l + 1) i_l(k k' / (2 sigma^2)) P_l(n.n')
    (i_l the modified spherical Bessel functions; Abramowitz & Stegun 10.2.36, from memory)
    turns the double integral into sum_l (2 l + 1) F_l^T K_l F_l over |k| bins, F_l the
    bins' Legendre moments.  After the decay of a static detector at rest it is
    (1 - exp(-2 a)) / (2 a), a = k*^2 / (2 sigma^2).

    Parameters
    ----------
    packet : Packet
        The Gaussian 3D packet.
    bath : Bath
        The 3D bath (its quanta fix the |k| bins: KICK_BINS_PER_SIGMA per sigma_p, at most
        KICK_BINS).
    rows : int
        Number of state times.
    """

    def __init__(self, packet, bath: Bath, rows: int):
        self.packet, self.sigma = packet, packet.momentum_std
        quanta = np.concatenate([sec.quanta for sec in bath.sectors] + [np.zeros(1)])
        self.low, high = float(quanta.min()), float(quanta.max())
        self.step = max(self.sigma / KICK_BINS_PER_SIGMA, (high - self.low) / (KICK_BINS - 1),
                        1e-300)
        self.centres = self.low + self.step * np.arange(int((high - self.low) / self.step) + 2)
        largest = high * high / (2 * self.sigma ** 2)
        self.orders = min(KICK_ORDERS, math.ceil(8.6 * math.sqrt(largest)) + 8)
        self.moments = np.zeros((rows, self.orders + 1, self.centres.size))
        self.excited = np.zeros(rows)

    def add(self, sector, level_probability, mode_probability) -> None:
        """Add one sector's excited probability and its quanta's probabilities.

        Each node's probability is shared linearly between the two |k| bin centres around its
        |k| (`cloud_density`'s deposit), so the kernels are interpolated to second order.

        Parameters
        ----------
        sector : Sector
            A 3D sector (its weight, the nodes' |k| and u).
        level_probability : ndarray, shape (R,)
            |c(P, t)|^2 at the state times (dimensionless).
        mode_probability : ndarray, shape (R, N)
            |c_k(P, t)|^2 of each node at the state times (dimensionless).

        Returns
        -------
        None
        """
        self.excited += sector.weight * level_probability
        if sector.quanta.size == 0:
            return
        position = (sector.quanta - self.low) / self.step
        cell = np.clip(np.floor(position).astype(int), 0, self.centres.size - 2)
        share = position - cell
        cosines, which = np.unique(sector.cosines, return_inverse=True)
        nodes = np.arange(cell.size)
        deposit = sparse.csr_matrix(
            (sector.weight * np.concatenate([1 - share, share]),
             (np.concatenate([nodes, nodes]),
              np.concatenate([cell, cell + 1]) * cosines.size + np.concatenate([which, which]))),
            shape=(cell.size, self.centres.size * cosines.size))
        lo, hi = int(cell.min()), int(cell.max()) + 2  # the bins this sector reaches
        weights = np.asarray((deposit.T @ mode_probability.T).T)
        weights = weights.reshape(-1, self.centres.size, cosines.size)[:, lo:hi]
        kappa = sector.momentum * self.packet.mean_speed / self.sigma ** 2
        x, w = direction_quantiles(kappa, max(DIRECTION_NODES, self.orders + 1))
        direction = legendre_table(x, self.orders) @ w  # E[P_l(cos angle of P)]
        table = legendre_table(cosines, self.orders) * direction[:, None]
        rows, bins = weights.shape[:2]
        product = weights.reshape(rows * bins, cosines.size) @ table.T  # (rows x bins, orders)
        self.moments[:, :, lo:hi] += product.reshape(rows, bins, -1).transpose(0, 2, 1)

    def purity(self) -> np.ndarray:
        """Tr rho^2 at each state time (the formula of the class).

        The ground-ground part by the Fourier transform of the Gaussian overlap,
        exp(-|k - k'|^2 / (4 sigma^2)) = (sigma^2 / pi)^(3/2) Int d^3y exp(-sigma^2 y^2)
        exp(i y.(k - k')), and the plane-wave expansion of the kicks' characteristic function:

            Int Int W W' exp(-|k - k'|^2 / (4 sigma^2))
                = 4 pi (sigma^2 / pi)^(3/2) sum_l (2 l + 1) Int_0^inf y^2 exp(-sigma^2 y^2) A_l(y)^2 dy,
            A_l(y) = sum_b F_l(b) j_l(k_b y)

        (j_l the spherical Bessel functions; Abramowitz & Stegun 10.1.47, from memory), the
        y integral by Gauss-Legendre on [0, KICK_REACH / sigma] with enough nodes for the
        oscillation of j_l(k_max y) (O(bins x nodes) per order, not O(bins^2)).

        Returns
        -------
        ndarray, shape (R,)
            (dimensionless).
        """
        active = np.any(self.moments[:, 0] != 0, axis=0)
        k, s2 = self.centres[active], self.sigma ** 2
        moments = self.moments[:, :, active]
        total = self.excited ** 2 + 2 * self.excited * (moments[:, 0] @ np.exp(-k * k / (4 * s2)))
        if k.size == 0:
            return total
        reach = KICK_REACH / self.sigma
        periods = float(k.max()) * reach / np.pi
        y, w = gauss_legendre_on(int(math.ceil(2 * periods)) + 32, 0.0, reach)
        w = w * y * y * np.exp(-s2 * y * y) * 4 * np.pi * (s2 / np.pi) ** 1.5
        for order in range(self.orders + 1):
            moment = moments[:, order]
            # |j_l| <= 1 and the y weights integrate to at most 1, so the order adds at most
            # (2 l + 1) (sum_b |F_l(b)|)^2: left out below KICK_NEGLIGIBLE (e.g. every l > 0 for
            # an isotropic packet, or every order before anything is emitted)
            if (2 * order + 1) * np.max(np.sum(np.abs(moment), axis=1)) ** 2 < KICK_NEGLIGIBLE:
                continue
            amplitude = moment @ spherical_bessel(order, np.outer(k, y))
            total += (2 * order + 1) * (amplitude * amplitude) @ w
        return total


def spherical_bessel(order: int, z) -> np.ndarray:
    """j_l(z), evaluated only where it is not negligible (zero elsewhere).

    Below z = l + 1/2 - 9 (l + 1/2)^(1/3) the function is below 1e-11 of its peak (it rises
    steeply up to its turning point near l + 1/2, over a transition region of width ~ l^(1/3):
    Abramowitz & Stegun 10.1.59, from memory; measured here for l <= 400), so only the points
    above are evaluated (`scipy.special.spherical_jn`).

    Parameters
    ----------
    order : int
        l (>= 0).
    z : ndarray
        Arguments (>= 0).

    Returns
    -------
    ndarray
        j_l(z), the shape of z.
    """
    from scipy.special import spherical_jn

    z = np.asarray(z, dtype=float)
    nu = order + 0.5
    start = nu - 9 * nu ** (1 / 3) if order > 8 else 0.0
    out = np.zeros_like(z)
    keep = z >= start
    out[keep] = spherical_jn(order, z[keep])
    return out


def legendre_table(x, order: int) -> np.ndarray:
    """P_l(x) for l = 0 .. order by Bonnet's recurrence (l + 1) P_(l+1) = (2 l + 1) x P_l - l P_(l-1).

    Parameters
    ----------
    x : array_like, shape (X,)
        Points in [-1, 1].
    order : int
        Largest l (>= 0).

    Returns
    -------
    ndarray, shape (order + 1, X)
    """
    x = np.asarray(x, dtype=float)
    table = np.empty((order + 1, x.size))
    table[0] = 1.0
    if order:
        table[1] = x
    for l in range(1, order):
        table[l + 1] = ((2 * l + 1) * x * table[l] - l * table[l - 1]) / (l + 1)
    return table


def kicked_purity_error(packet, model, bath: Bath) -> tuple[float, float]:
    """The Doppler ratio eta of the sectors' emitted line, and the error it brings to
    `KickedPurity3D`.

    The emitted line of a sector sits where eps_k(P) = E_e(P); across the packet's momentum
    spread sigma_p it moves by sigma_p |grad_P (eps - E_e)|, the COM velocity change of the
    emission: |grad|^2 = (v - v_e)^2 + (1 - u^2) v_u^2 with the mode slopes of
    `Sector.slopes` (v_e the excited level's group velocity), so

        eta = sigma_p rms|grad_P (eps - E_e)| / Gamma

    says whether the quantum's frequency tells the packet's momenta apart (eta ~ 1) or not
    (eta << 1).  The mixture misses that by about

        error = PURITY_ERROR_SQUARE eta^2 + PURITY_ERROR_LINEAR eta Gamma / sigma_p

    (relative; the coefficients measured in 1D against the exact lattice purity of
    `ReducedState1D`: second order where the line is narrow against the packet's momentum
    width, Gamma << sigma_p, first order where Gamma ~ sigma_p).  The on-shell quanta are the
    nodes of the two shells at the level (`line_width`), weighted by |g|^2 and the sectors'
    weights.

    Parameters
    ----------
    packet : Packet
    model : COMModel
    bath : Bath
        A 3D bath.

    Returns
    -------
    eta : float
        (dimensionless); 0 where no sector has on-shell quanta.
    error : float
        The estimated relative error of the mixture's purity after a complete decay
        (dimensionless; the caller scales it by the emitted fraction).
    """
    spread = width = total = 0.0
    for sector in bath.sectors:
        near = np.abs(sector.mode_energies - sector.level_energy) < bath.spacing
        strength = float(np.sum(np.abs(sector.couplings[near]) ** 2))
        if strength <= 0:
            continue
        speed = float(model.velocity(EXCITED, sector.momentum))
        v, vv, across = sector.slopes[near][:, [1, 3, 6]].sum(0)
        spread += sector.weight * (vv - 2 * speed * v + speed ** 2 * strength + across)
        width += sector.weight * line_width(sector, bath.spacing)
        total += sector.weight * strength
    if total <= 0:
        return 0.0, 0.0
    width /= sum(sec.weight for sec in bath.sectors)
    sigma = packet.momentum_std
    eta = sigma * math.sqrt(max(spread / total, 0.0)) / width if width > 0 else math.inf
    return eta, PURITY_ERROR_SQUARE * eta ** 2 + PURITY_ERROR_LINEAR * eta * width / sigma


def line_width(sector, width: float) -> float:
    """Golden-rule width Gamma = 2 pi J(E_e) of a 3D sector from its shells next to the level.

    The two shells nearest the level (centres E_e -/+ width / 2) carry Int J over 2 x width:
    J(E_e) = sum |g|^2 over |eps - E_e| < width, divided by 2 width.

    Parameters
    ----------
    sector : Sector
    width : float
        Shell width (energy units).

    Returns
    -------
    float
        Gamma (energy units).
    """
    near = np.abs(sector.mode_energies - sector.level_energy) < width
    return float(2 * np.pi * np.sum(np.abs(sector.couplings[near]) ** 2) / (2 * width))


def axis_density(grid, packet, sector, node_probability) -> np.ndarray:
    """Density along the packet axis of the detector momentum q = P - k after emission (3D).

    The sector's direction P^ follows the packet's conditional (von Mises-Fisher) law about the
    axis, kappa = |P| |p0| / sigma_p^2, sampled at AXIS_NODES stratified quantiles of
    cos(alpha) = x; the quantum's azimuth about P at AZIMUTH_NODES stratified angles phi:
    q_z = |P| x - k (u x + sqrt(1-u^2) sqrt(1-x^2) cos phi).  The strata are offset per node by
    low-discrepancy additive sequences (the fractional parts of n / golden ratio for x and of
    n / plastic number for phi), so that the discrete angles of different nodes do not pile up
    in the same cells.

    Parameters
    ----------
    grid : ndarray, shape (G,)
        Uniform axis-momentum grid (momentum units).
    packet : Packet
    sector : Sector
        A 3D sector (its nodes' mean |k| and u).
    node_probability : ndarray, shape (nodes, S)
        Probability of each node at each snapshot (dimensionless).

    Returns
    -------
    ndarray, shape (G, S)
        Density (1 / momentum units).
    """
    nodes = np.arange(sector.quanta.size)[:, None]
    quantile = (np.arange(AXIS_NODES)[None, :] + (nodes * 0.6180339887498949) % 1) / AXIS_NODES
    kappa = sector.momentum * packet.mean_speed / packet.momentum_std ** 2
    if kappa < 1e-8:
        x = 2 * quantile - 1
    else:  # inverse CDF of the density ~ exp(kappa x) on [-1, 1]
        x = -1 + np.logaddexp(0, np.log(np.maximum(quantile, 1e-300)) + 2 * kappa
                              + np.log(-np.expm1(-2 * kappa))) / kappa
    x = np.clip(x, -1, 1)[:, :, None]
    phi = (np.arange(AZIMUTH_NODES)[None, :] + (nodes * 0.7548776662466927) % 1) * np.pi / AZIMUTH_NODES
    k, u = sector.quanta[:, None, None], sector.cosines[:, None, None]
    qz = sector.momentum * x - k * (u * x + np.sqrt(1 - u * u) * np.sqrt(1 - x * x)
                                    * np.cos(phi)[:, None, :])
    cells = bin_index(grid, qz.reshape(qz.shape[0], -1))
    inside = cells >= 0
    owner = np.broadcast_to(nodes, cells.shape)
    share = sparse.coo_matrix((np.full(inside.sum(), 1.0 / cells.shape[1]),
                               (cells[inside], owner[inside])), shape=(grid.size, qz.shape[0]))
    return (share.tocsr() @ node_probability) / np.diff(cell_edges(grid))[:, None]
