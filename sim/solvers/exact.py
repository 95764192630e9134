"""`method = "exact"`: exact single-excitation dynamics in a truncated bath (physics.md section 2).

Under the rotating-wave approximation the state |e> (x) psi (x) vac stays in the one-excitation
space and splits into total-momentum sectors P (`sim.bath`).  Each sector is solved exactly by
the secular equation of its star Hamiltonian (`sim.exact.star_spectrum`): no time step.  With
w_P the packet's probability of sector P, c(P, t) the level amplitude and c_k(P, t) the mode
amplitudes,

    P_e(t) = sum_P w_P |c(P, t)|^2,
    <p^n>  = sum_P w_P [ |c|^2 P^n + sum_k |c_k|^2 (P - k)^n ]           (1D, detector momentum),

and in 3D the same along the packet axis, with the emission direction's moments relative to P
projected by the conditional direction moments of the Gaussian packet (`langevin_moments`).
In 1D the reduced COM state (field and level traced out) is

    rho = |phi_e><phi_e| + sum_k |phi_k><phi_k|,   phi_e(P) = psi(P) c(P),
    phi_k(p) = psi(p + k) c_k(p + k)  on the lattice p = P - k,

whose position variance comes from the lattice Fourier transform (i d/dp on the periodic
lattice, exact for band-limited states) and whose purity is Tr rho^2 = sum_ab |<phi_a|phi_b>|^2
(the Gram matrix of the components).  Recoil observables cost O(modes^2) per sector and time;
beyond a work budget they are computed on every m-th sample time only (nan in between).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import sparse
from scipy.ndimage import gaussian_filter1d

from ..bath import Bath, bath_for, discreteness_correction, lamb_sector, refined_keys
from ..exact import sector_lamb_shift, star_spectrum
from ..field import packet_for
from ..models import model_for
from ..scenario import ScenarioError, with_keys
from .base import Estimate, Evolution, Solver, sample_times, snapshot_indices
from .perturbative import langevin_moments, momentum_grid

#: sum over sectors of (bright modes)^2 x (recoil times) allowed before the recoil times thin out
RECOIL_WORK = 4e10
#: complex numbers allowed in the 1D reduced-state array (sectors x modes x state times)
STATE_ELEMENTS = 4e7
#: position grid: lattice Fourier transform padded to this many points per sector
POSITION_OVERSAMPLING = 8
#: largest momentum lattice for the final reduced state as a qutip.Qobj
FINAL_STATE_LIMIT = 4000
#: 3D axis density: quantile nodes in cos(angle of P to the axis), azimuth nodes
AXIS_NODES, AZIMUTH_NODES = 16, 12
#: 3D axis density: Gaussian smoothing of the sampled histogram, in grid cells
DENSITY_SMOOTHING = 1.5
#: 1D density on the lattice up to this many points, else on the perturbative grid
LATTICE_DENSITY_LIMIT = 6001


def unsupported(scenario) -> list[str]:
    """Scenario keys the single-excitation RWA solver cannot honour (ScenarioError lines)."""
    problems = []
    if scenario.field.temperature > 0:
        problems.append(f"field.temperature = {scenario.field.temperature!r}: method \"exact\" "
                        "evolves the field vacuum (one excitation); allowed: 0 (use method "
                        "\"markov\" for a thermal field)")
    if scenario.packet.internal != "excited":
        problems.append(f"packet.internal = \"{scenario.packet.internal}\": in the vacuum under the "
                        "rotating-wave approximation a ground-state detector never changes; "
                        "allowed: \"excited\"")
    if not scenario.coupling.rotating_wave:
        problems.append("coupling.rotating_wave = false: method \"exact\" solves the "
                        "rotating-wave single-excitation sectors; allowed: true (use method "
                        "\"fock\" for the counter-rotating terms)")
    return problems


class ExactSolver(Solver):
    """Exact sector-by-sector dynamics in the scenario's truncated bath (module docstring)."""

    name = "exact"

    def __init__(self, scenario, *, progress: bool = False):
        super().__init__(scenario, progress=progress)
        problems = unsupported(scenario)
        if problems:
            raise ScenarioError(problems)
        self._bath: Bath | None = None

    def bath(self) -> Bath:
        """The truncated bath for this run (built once)."""
        if self._bath is None:
            self._bath = bath_for(self.scenario, float(sample_times(self.scenario)[-1]))
        return self._bath

    def estimate(self) -> Estimate:
        bath = self.bath()
        samples = self.scenario.run.samples
        modes = bath.mode_count
        state = len(bath.sectors) * (modes + 1) * samples if bath.dimensions == 1 else 0
        memory = 16.0 * (min(state, STATE_ELEMENTS) + 4 * modes * samples) + 8.0 * 2**18 * 4
        work = sum(s.mode_energies.size ** 2 for s in bath.sectors) * samples * 4.0
        keys = ("bath.modes", "bath.window", "bath.box_length" if bath.dimensions == 1
                else "bath.radial_nodes", "bath.sectors")
        return Estimate(states=modes + 1, memory_bytes=memory, work=work, keys=keys)

    def refined(self) -> "ExactSolver":
        """The same solver with the bath refined x1.5 (box, cutoff, nodes, sectors, window)."""
        return ExactSolver(with_keys(self.scenario, refined_keys(self.bath())),
                           progress=self.progress)

    def evolve(self, times):
        s = self.scenario
        bath = self.bath()
        snaps = snapshot_indices(len(times))
        recoil = recoil_indices(len(times), snaps,
                                [np.unique(sec.mode_energies).size for sec in bath.sectors])
        residues = []
        spectra = (_spectrum(sec, residues) for sec in _progress(bath.sectors, self.progress))
        evolve_sectors = _evolve_1d if bath.dimensions == 1 else _evolve_3d
        evo = evolve_sectors(s, bath, spectra, times, recoil, snaps)
        lamb, lowest = lamb_shift(s, bath)
        evo.lamb_shift = lamb
        evo.warnings = list(bath.notes) + evo.warnings + self._warnings(bath, lowest)
        evo.details.update(sectors=len(bath.sectors), modes_per_sector=bath.mode_count,
                           cutoff=bath.cutoff, spacing=bath.spacing,
                           recurrence_time=bath.recurrence_time, window=bath.window,
                           box_length=bath.box_length, sector_stride=bath.stride,
                           recoil_samples=int(recoil.size), lamb_shift_lowest_modes=lowest,
                           residue_sum_error=max(residues))
        return evo

    def _warnings(self, bath: Bath, lowest: float) -> list[str]:
        """Warnings of the physics the exact bath shows and the golden rule does not."""
        s = self.scenario
        out = []
        if s.dimensions == 1 and s.field.mass == 0:
            out.append("massless 1D field: the monopole coupling is infrared-sensitive; the soft "
                       "end of the bath keeps dressing the detector, so the decay departs from the "
                       "golden rule by a few percent even at weak coupling (physics, not a "
                       "discretisation error); give field.mass > 0 to compare with the golden rule")
        what = "cutoff and smearing" + (", and for a massless 1D field on the lowest mode"
                                        if s.dimensions == 1 and s.field.mass == 0 else "")
        out.append(f"lamb_shift: discrete principal-value sum of the truncated bath; it depends on "
                   f"the {what} (the modes |k| = {bath.spacing:.3g} nearest k = 0 contribute "
                   f"{lowest:.3g})" if s.dimensions == 1 else
                   f"lamb_shift: discrete principal-value sum of the truncated bath; it depends on "
                   f"the {what} (cutoff {bath.cutoff:.4g})")
        return out


def _progress(sectors, enabled: bool):
    """The sectors, under a tqdm progress bar when enabled."""
    if not enabled:
        return sectors
    from tqdm import tqdm

    return tqdm(sectors, desc="exact", unit="sector", leave=False)


def _spectrum(sector, residues: list):
    """The sector's star spectrum; its norm check |sum_j w_j - 1| is appended to `residues`."""
    spectrum = star_spectrum(sector.level_energy, sector.mode_energies, sector.couplings)
    residues.append(abs(spectrum.residue_sum - 1))
    return spectrum


def recoil_indices(samples: int, snaps: np.ndarray, bright_counts) -> np.ndarray:
    """Sample indices where recoil observables are computed: all of them within RECOIL_WORK,
    else every m-th (first, last and the snapshots always included)."""
    work = sum(n * n for n in bright_counts) * samples
    stride = max(1, math.ceil(work / RECOIL_WORK))
    return np.union1d(np.union1d(np.arange(0, samples, stride), snaps), [samples - 1])


def lamb_shift(scenario, bath: Bath) -> tuple[float, float]:
    """(Lamb shift of the sector at the packet's mean momentum, contribution of the modes
    nearest k = 0) (energy units): the discrete principal-value sum sum |g|^2 / (E_e - eps),
    less the level's offset from the mode ladder (`sim.bath.discreteness_correction`)."""
    sector = lamb_sector(scenario, bath)
    shift = sector_lamb_shift(sector.level_energy, sector.mode_energies, sector.couplings)
    shift -= discreteness_correction(scenario, bath, sector)
    if sector.quanta.size == 0:
        return float(shift), 0.0
    soft = np.abs(sector.quanta) <= np.abs(sector.quanta).min() * (1 + 1e-9)
    lowest = sector_lamb_shift(sector.level_energy, sector.mode_energies[soft], sector.couplings[soft])
    return float(shift), float(lowest)


def _masked(recoil: np.ndarray, samples: int, values: np.ndarray) -> np.ndarray:
    """An array over all samples with `values` at the recoil indices and nan elsewhere."""
    out = np.full(samples, np.nan)
    out[recoil] = values
    return out


# --- 1D -----------------------------------------------------------------------------------------


def _evolve_1d(scenario, bath: Bath, spectra, times, recoil, snaps) -> Evolution:
    """1D sectors: population, momentum moments, density, and the reduced COM state."""
    packet = packet_for(scenario)
    excited = np.zeros(times.size)
    moments = np.zeros((3, recoil.size))  # norm, <p>, <p^2>
    snap_rows = np.searchsorted(recoil, snaps)
    lattice_p, probability = [], []
    state = ReducedState1D(bath, recoil) if ReducedState1D.fits(bath) else None
    for index, (sector, spectrum) in enumerate(zip(bath.sectors, spectra)):
        level = spectrum.level_amplitude(times)
        excited += sector.weight * np.abs(level) ** 2
        modes = spectrum.mode_amplitudes(times[recoil])
        level_p, modes_p = np.abs(level[recoil]) ** 2, np.abs(modes) ** 2
        p_after = sector.momentum - sector.quanta
        moments += sector.weight * np.array([level_p + modes_p.sum(1),
                                             level_p * sector.momentum + modes_p @ p_after,
                                             level_p * sector.momentum ** 2 + modes_p @ p_after ** 2])
        lattice_p.append(round(sector.momentum / bath.spacing) - sector.lattice)
        probability.append(sector.weight * modes_p[snap_rows].T)
        if state is not None:
            state.add(index, sector, level[state.times], modes[state.rows])
    mean = moments[1] / moments[0]
    variance = moments[2] / moments[0] - mean ** 2
    grid, density = _lattice_density(scenario, bath, np.concatenate(lattice_p),
                                     np.concatenate(probability))
    warnings, x_var, purity, final, details = [], None, None, None, {}
    if state is None:
        warnings.append("x_var, purity: not computed (the reduced state needs the sectors on "
                        f"every lattice point (stride here {bath.stride}) and at most "
                        f"{STATE_ELEMENTS:.0e} amplitudes per time); lower bath.box_length or "
                        "bath.window, or raise bath.sectors")
    else:
        x_var, purity = state.position_variance(), state.purity()
        x_var, purity = (_masked(state.times, times.size, v) for v in (x_var, purity))
        final = state.final_qobj()
        details["final_state_lattice"] = [float(state.component_vectors(-1)[1][0]), bath.spacing]
    return Evolution(excited=excited, p_mean=_masked(recoil, times.size, mean),
                     p_var=_masked(recoil, times.size, variance), momentum_grid=grid,
                     snapshot_times=times[snaps], momentum_density=density,
                     initial_density=packet.density_1d(grid), x_var=x_var, purity=purity,
                     norm=moments[0], final_state=final, warnings=warnings, details=details)


def _lattice_density(scenario, bath: Bath, index: np.ndarray, probability: np.ndarray):
    """Ground-state momentum density (probability / dk per lattice point) on the lattice, or
    histogrammed onto the perturbative grid when the occupied lattice is too long."""
    lo, hi = int(index.min()), int(index.max())
    if hi - lo + 1 <= LATTICE_DENSITY_LIMIT:
        grid = np.arange(lo, hi + 1) * bath.spacing
        density = np.stack([np.bincount(index - lo, weights=col, minlength=hi - lo + 1)
                            for col in probability.T], axis=1) / bath.spacing
        return grid, density
    grid = momentum_grid(scenario, packet_for(scenario), model_for(scenario))
    return grid, _histogram(grid, index * bath.spacing, probability)


def _histogram(grid: np.ndarray, values: np.ndarray, probability: np.ndarray) -> np.ndarray:
    """Density on `grid` (cells between midpoints) of probability masses at `values`."""
    edges = _cell_edges(grid)
    cell = np.clip(np.searchsorted(edges, values) - 1, 0, grid.size - 1)
    inside = (values >= edges[0]) & (values < edges[-1])
    columns = probability.reshape(values.size, -1)
    return np.stack([np.bincount(cell[inside], weights=col[inside], minlength=grid.size)
                     for col in columns.T], axis=1) / np.diff(edges)[:, None]


class ReducedState1D:
    """The reduced COM state of a 1D run on its momentum lattice, at a subset of times.

    Amplitudes a[t, s, n] = sqrt(w_s) c_k(P_s, t) with k = n dk (n offset to the bath's lowest
    lattice mode) and e[t, s] = sqrt(w_s) c(P_s, t): component n sits at p = P_s - k_n.
    """

    @staticmethod
    def lattice_range(bath: Bath) -> tuple[int, int]:
        """(lowest lattice mode index, number of lattice modes spanned) over all sectors."""
        lattice = np.concatenate([sec.lattice for sec in bath.sectors])
        if lattice.size == 0:
            return 0, 1
        return int(lattice.min()), int(lattice.max() - lattice.min()) + 1

    @classmethod
    def fits(cls, bath: Bath) -> bool:
        """Sectors on every lattice point, and two times of amplitudes within STATE_ELEMENTS."""
        return bath.stride == 1 and 2 * len(bath.sectors) * cls.lattice_range(bath)[1] <= STATE_ELEMENTS

    def __init__(self, bath: Bath, recoil: np.ndarray):
        self.first, width = self.lattice_range(bath)
        sectors = len(bath.sectors)
        stride = max(1, math.ceil(sectors * width * recoil.size / STATE_ELEMENTS))
        self.rows = np.arange(0, recoil.size, stride)
        if self.rows[-1] != recoil.size - 1:
            self.rows = np.append(self.rows, recoil.size - 1)
        self.times = recoil[self.rows]
        self.spacing = bath.spacing
        self.sector_index = np.array([round(sec.momentum / bath.spacing) for sec in bath.sectors])
        self.modes = np.zeros((self.rows.size, sectors, width), dtype=complex)
        self.level = np.zeros((self.rows.size, sectors), dtype=complex)

    def add(self, index: int, sector, level: np.ndarray, modes: np.ndarray) -> None:
        """Store sector `index`'s level and mode amplitudes at the state times."""
        root = math.sqrt(sector.weight)
        self.level[:, index] = root * level
        self.modes[:, index, sector.lattice - self.first] = root * modes

    def position_variance(self) -> np.ndarray:
        """Var x of the reduced state (length^2) from the zero-padded lattice Fourier transform
        phi(x) = sum_s a_s e^{i P_s x} (|phi(x)|^2 is the same for every mode's shift e^{-i k x}),
        on the ring of length 2 pi / dk centred on the circular mean position."""
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

        Components n and n + d overlap where P_s - k_n = P_s' - k_(n+d), i.e. s' = s + d.
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
        """rho(p, p') at the last state time as a qutip.Qobj on the lattice p = j dk (lowest j
        first, see `lattice_momenta`), or None when the lattice exceeds FINAL_STATE_LIMIT."""
        import qutip

        vectors, momenta = self.component_vectors(-1)
        if momenta.size > FINAL_STATE_LIMIT:
            return None
        return qutip.Qobj(vectors @ vectors.conj().T)

    def component_vectors(self, row: int) -> tuple[np.ndarray, np.ndarray]:
        """(phi matrix: lattice points x components, the lattice momenta) at state time `row`;
        column 0 is the level's component, column 1 + c the mode n = first + c."""
        sectors, width = self.level.shape[1], self.modes.shape[2]
        lowest = int(self.sector_index[0]) - (self.first + width - 1)
        points = sectors + width - 1
        vectors = np.zeros((points, width + 1), dtype=complex)
        rows = self.sector_index - lowest
        vectors[rows, 0] = self.level[row]
        for column in range(width):
            vectors[rows - (self.first + column), column + 1] = self.modes[row, :, column]
        return vectors, (np.arange(points) + lowest) * self.spacing


# --- 3D -----------------------------------------------------------------------------------------


def _evolve_3d(scenario, bath: Bath, spectra, times, recoil, snaps) -> Evolution:
    """3D sectors: population, momentum moments along the packet axis and the axis density."""
    packet = packet_for(scenario)
    grid = momentum_grid(scenario, packet, model_for(scenario))
    excited = np.zeros(times.size)
    moments = np.zeros((3, recoil.size))
    density = np.zeros((grid.size, snaps.size))
    snap_rows = np.searchsorted(recoil, snaps)
    for sector, spectrum in zip(bath.sectors, spectra):
        level = spectrum.level_amplitude(times)
        excited += sector.weight * np.abs(level) ** 2
        bright = np.abs(spectrum.bright_mode_amplitudes(times[recoil])) ** 2
        member = spectrum.modes.member_of
        strength = np.abs(sector.couplings) ** 2
        r, u = sector.momentum, sector.cosines

        def per_bright(values):
            return np.bincount(member, weights=strength * values, minlength=bright.shape[1])

        along = per_bright(sector.quanta * u)  # sum |g|^2 k u
        along2 = per_bright(sector.quanta_square * u * u)
        across2 = per_bright(0.5 * sector.quanta_square * (1 - u * u))
        cos1, cos2 = langevin_moments(r, packet.mean_speed, packet.momentum_std)
        level_p = np.abs(level[recoil]) ** 2
        ground = bright @ spectrum.modes.weights
        moments += sector.weight * np.array([
            level_p + ground,
            cos1 * (level_p * r + r * ground - bright @ along),
            cos2 * (level_p * r * r + r * r * ground - 2 * r * (bright @ along) + bright @ along2)
            + (1 - cos2) * (bright @ across2)])
        node_probability = strength[:, None] * bright[snap_rows][:, member].T
        density += sector.weight * axis_density(grid, packet, sector, node_probability)
    mean = moments[1] / moments[0]
    variance = moments[2] / moments[0] - mean ** 2
    sigma = packet.momentum_std
    initial = np.exp(-0.5 * ((grid - packet.mean_speed) / sigma) ** 2) / (np.sqrt(2 * np.pi) * sigma)
    # the sampled angles leave a histogram: smooth it over DENSITY_SMOOTHING grid cells
    density = gaussian_filter1d(density, DENSITY_SMOOTHING, axis=0, mode="constant")
    return Evolution(excited=excited, p_mean=_masked(recoil, times.size, mean),
                     p_var=_masked(recoil, times.size, variance), momentum_grid=grid,
                     snapshot_times=times[snaps], momentum_density=density,
                     initial_density=initial, norm=moments[0])


def axis_density(grid, packet, sector, node_probability) -> np.ndarray:
    """Density along the packet axis of the detector momentum q = P - k after emission.

    The sector's direction P^ follows the packet's conditional (von Mises-Fisher) law about the
    axis, kappa = |P| |p0| / sigma_p^2, sampled at AXIS_NODES stratified quantiles of
    cos(alpha) = x; the quantum's azimuth about P at AZIMUTH_NODES stratified angles phi:
    q_z = |P| x - k (u x + sqrt(1-u^2) sqrt(1-x^2) cos phi).  The strata are offset per node by
    a low-discrepancy (golden-ratio) sequence, so that the discrete angles of different nodes do
    not pile up in the same cells.  node_probability: (nodes, snapshots) probabilities.
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
    edges = _cell_edges(grid)
    cells = np.searchsorted(edges, qz.reshape(qz.shape[0], -1)) - 1
    inside = (cells >= 0) & (cells < grid.size)
    owner = np.broadcast_to(nodes, cells.shape)
    share = sparse.coo_matrix((np.full(inside.sum(), 1.0 / cells.shape[1]),
                               (cells[inside], owner[inside])), shape=(grid.size, qz.shape[0]))
    return (share.tocsr() @ node_probability) / np.diff(edges)[:, None]


def _cell_edges(grid: np.ndarray) -> np.ndarray:
    """Edges of the cells around the points of a uniform grid (midpoints, ends extended)."""
    step = grid[1] - grid[0]
    return np.concatenate(([grid[0] - 0.5 * step], 0.5 * (grid[1:] + grid[:-1]),
                           [grid[-1] + 0.5 * step]))
