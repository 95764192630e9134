"""`method = "exact"`: exact single-excitation dynamics in a truncated bath.

Under the rotating-wave approximation the state |e> (x) psi (x) vac stays in the one-excitation
space and splits into total-momentum sectors P (`baths`): in each a level E_e(P) coupled to
modes eps_k = E_g(P - k) + w_k with couplings g_P(k) = lambda F(k) V(P, P - k) /
sqrt((2 pi)^d 2 w_k) per sqrt(d^dk).  Each sector is solved exactly by the secular equation of
its star Hamiltonian (`star.star_spectrum`): no time step.  With w_P the packet's probability
of sector P, c(P, t) the level amplitude and c_k(P, t) the mode amplitudes,

    P_e(t) = sum_P w_P |c(P, t)|^2,
    <p^n>  = sum_P w_P [ |c|^2 P^n + sum_k |c_k|^2 (P - k)^n ]           (1D, detector momentum),

and in 3D the same along the packet axis, with the emission direction's moments relative to P
projected by the conditional direction moments of the Gaussian packet
(`Packet.direction_moments`).  In 1D the reduced COM state follows on the momentum lattice
(`observables.ReducedState1D`).  In 3D the position variances along the axis and across it
come from the amplitudes' slopes in |P| at fixed k (`observables.position_moments`), the
purity from the mixture of kicked packets (`observables.KickedPurity3D`).  The mode
amplitudes follow from the level amplitude by the exact Duhamel recurrence on the sample grid
(`star.StarSpectrum.mode_series`), so the recoil observables at every sample time cost O(modes)
per sector and time, as the decay itself does.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.ndimage import gaussian_filter1d

from ...errors import ScenarioError
from ...physics.checks import with_keys
from ...physics.coherence import coherence_distance
from ...physics.field import packet_for
from ...physics.models import model_for
from ..base import SAMPLE_BYTES, Estimate, Evolution, Solver, credit
from ..common import SNAPSHOTS, axis_grid, last_sample_time, masked, snapshot_indices
from .baths import (Bath, bath_for, discreteness_correction, lamb_sector, neighbour_sectors,
                    refined_keys)
from .bound import bound_states, packet_bound_states
from .observables import (PURITY_TOLERANCE, STATE_ELEMENTS, KickedPurity3D, ReducedState1D,
                          axis_density, direction_phases, kicked_purity_error, lattice_density,
                          position_moments)
from .star import (chunk_rows, duhamel_rule, grid_from_zero,
                   sector_lamb_shift, star_spectrum)

#: 3D axis density: Gaussian smoothing of the sampled histogram, in grid cells
DENSITY_SMOOTHING = 1.5

# Memory of a run (`ExactSolver.estimate`), measured as the peak resident memory of the bundled
# scenarios (default.toml, recoil_3d.toml) at several sample counts:
#: bytes per (kept sample time x mode): the bright and mode amplitudes and their squares
MODE_BYTES = 48.0
#: bytes per (sample time x Duhamel node): the level amplitude at the nodes and its blocks
NODE_BYTES = 32.0
#: bytes per amplitude of the 1D reduced state (the array, and the conjugate copy of `purity`)
STATE_BYTES = 32.0
#: bytes per bath mode (the sector's arrays and its star spectrum)
BATH_BYTES = 128.0
#: bytes per amplitude of the Duhamel recurrence's block (amplitudes, squares, kernel product)
CHUNK_BYTES = 3 * 16.0
#: temporaries of any run (level-amplitude blocks, snapshot densities)
FIXED_BYTES = 8.0 * 2 ** 20
# Wall time (`ExactSolver.estimate`), measured on this project's 2-core reference machine:
#: floating-point operations per second of the blocked products and the recurrence
FLOP_RATE = 2e9
#: passes over the reduced state besides the purity's sector offsets (storing, conjugating,
#: the padded Fourier transform of `ReducedState1D.position_variance`)
STATE_PASSES = 20
#: root finding of a sector: ROOT_SECONDS x (bright modes)^ROOT_POWER
ROOT_SECONDS, ROOT_POWER = 2e-7, 1.5
#: 3D: operations per bright mode and sample time of the position sums (the eight amplitude
#: products and their contraction, `star._spreading_coefficients`)
SPREAD_WORK = 60.0


def unsupported(scenario) -> list[str]:
    """Scenario keys the single-excitation RWA solver cannot honour (ScenarioError lines).

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    list of str
        One line per problem: field.temperature > 0, packet.internal other than "excited",
        coupling.rotating_wave = false; empty when the scenario is supported.
    """
    problems = []
    if scenario.field.temperature > 0:
        problems.append(f"field.temperature = {scenario.field.temperature!r}: method \"exact\" "
                        "evolves the field vacuum (one excitation); allowed: 0 (use method "
                        "\"markov\" for a thermal field)")
    if scenario.packet.internal != "excited":
        problems.append(f"packet.internal = \"{scenario.packet.internal}\": in the vacuum under the "
                        "rotating-wave approximation a ground-state detector never changes; "
                        "allowed: \"excited\"")
    if scenario.dimensions == 3 and scenario.packet.shape != "gaussian":
        problems.append(f"packet.shape = \"{scenario.packet.shape}\" in 3D: method \"exact\" "
                        "splits a 3D packet into sectors of |P| with the directions of a Gaussian; "
                        "allowed: \"gaussian\" (use method \"perturbative\" or \"fock\" for "
                        "this shape)")
    if not scenario.coupling.rotating_wave:
        problems.append("coupling.rotating_wave = false: method \"exact\" solves the "
                        "rotating-wave single-excitation sectors; allowed: true (use method "
                        "\"fock\" for the counter-rotating terms)")
    return problems


class ExactSolver(Solver):
    """Exact sector-by-sector dynamics in the scenario's truncated bath.

    In each total-momentum sector P the level E_e(P) couples to the bath modes
    eps_k = E_g(P - k) + w_k; the secular equation of the star Hamiltonian,
    f(z) = z - E_e(P) - sum_i b_i / (z - e_i) = 0, gives the amplitudes
    c(P, t) = sum_j w_j exp(-i z_j t) and c_k(P, t) = conj(g_k) sum_j w_j exp(-i z_j t) /
    (z_j - e_{i(k)}) with w_j = 1 / f'(z_j), and with w_P the packet's probability of sector P

        P_e(t) = sum_P w_P |c(P, t)|^2,
        <p^n>  = sum_P w_P [ |c|^2 P^n + sum_k |c_k|^2 (P - k)^n ]       (1D, detector momentum),

    in 3D the same along the packet axis with the packet's conditional direction moments.

    Parameters
    ----------
    scenario : Scenario
    progress : bool, optional
        Show a progress bar over the sectors (default False).

    Raises
    ------
    ScenarioError
        If the scenario has a thermal field, a ground-state packet or rotating_wave = false
        (`unsupported`).

    References
    ----------
    G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318.
    """

    name = "exact"
    packet_shapes = ("gaussian", "two-lobe", "file")

    def __init__(self, scenario, *, progress: bool = False):
        super().__init__(scenario, progress=progress)
        problems = unsupported(scenario)
        if problems:
            raise ScenarioError(problems)
        self._bath: Bath | None = None

    def bath(self) -> Bath:
        """The truncated bath for this run (built once, for t_max = the last sample time).

        Returns
        -------
        Bath
            `bath_for(scenario, t_max)`.
        """
        if self._bath is None:
            self._bath = bath_for(self.scenario, last_sample_time(self.scenario))
        return self._bath

    def estimate(self) -> Estimate:
        """Size of the run from its bath, without building anything in proportion to run.samples.

        With T = run.samples, N_s the modes, B_s the bright modes and Q_s the Duhamel quadrature
        nodes per step of sector s (`duhamel_nodes`; the largest: N, B), R the sample times whose
        amplitudes are kept (snapshots and, in 1D, the reduced state's times) and E the reduced
        state's amplitudes (`reduced_state_elements`):

            memory = MODE_BYTES R (N in 1D, B in 3D) + NODE_BYTES T Q (x3 in 3D) + STATE_BYTES E
                     + BATH_BYTES sum_s N_s + SAMPLE_BYTES T + CHUNK_BYTES + FIXED_BYTES,
            work   = sum_s [8 (N_s + 1) T (1 + Q_s) + 8 T Q_s B_s + 24 T B_s]
                     + 8 E (sectors + STATE_PASSES)
                     (in 3D the first term x3 for the neighbouring spectra, the next two x3 for
                     the slope series, plus 8 SPREAD_WORK T B_s for the position sums)
                     (level amplitudes, at the quadrature nodes, the Duhamel kernel, the
                     recurrence and the mode sums; the reduced state's purity, a sum over
                     sector offsets, and its position variance and storage),
            seconds = work / FLOP_RATE + ROOT_SECONDS sum_s B_s^ROOT_POWER (x3 in 3D).

        The constants are measured (peak resident memory and wall time of runs of the bundled
        scenarios on the machine the module names).  The bath is built for t_max alone
        (`last_sample_time`).

        Returns
        -------
        Estimate
            states = modes + 1 of the largest sector, memory (bytes), work (floating-point
            operations), seconds, keyed by bath.modes, bath.window, bath.box_length (1D) or
            bath.radial_nodes (3D), bath.sectors and run.samples; each memory term is credited
            to its larger count.
        """
        bath = self.bath()
        samples = self.scenario.run.samples
        modes = bath.mode_count
        sectors = len(bath.sectors)
        bright = [np.unique(sec.mode_energies).size for sec in bath.sectors]
        across = modes if bath.dimensions == 1 else max(bright, default=0)
        bath_bytes = BATH_BYTES * sum(sec.mode_energies.size for sec in bath.sectors)
        width = ReducedState1D.lattice_range(bath)[1] if bath.dimensions == 1 else 0
        t_max = last_sample_time(self.scenario)

        def nodes(count: int) -> list[int]:
            step = t_max / max(count - 1, 1)
            return [duhamel_nodes(sec, step) for sec in bath.sectors]

        def memory(count: int) -> tuple[dict, float]:
            elements, state_rows = reduced_state_elements(bath, count, width)
            kept = min(count, SNAPSHOTS + state_rows)
            breakdown: dict = {}
            credit(breakdown, MODE_BYTES * kept * across, {"bath.modes": across, "run.samples": kept})
            credit(breakdown, NODE_BYTES * count * max(nodes(count), default=0)
                   * (1 if bath.dimensions == 1 else 3), {"run.samples": count})
            # rows x sectors x width, capped at STATE_ELEMENTS: the larger factor drives it
            credit(breakdown, STATE_BYTES * elements,
                   {"bath.modes": width, "run.samples": elements // max(sectors * width, 1)})
            credit(breakdown, bath_bytes, {"bath.modes": modes})
            credit(breakdown, SAMPLE_BYTES * count, {"run.samples": count})
            series, widest = (1 if bath.dimensions == 1 else 3), max(bright, default=0)
            chunk = CHUNK_BYTES * min(count, chunk_rows(widest, series)) * widest * series
            return breakdown, sum(breakdown.values()) + chunk + FIXED_BYTES

        breakdown, total = memory(samples)
        # 3D: two neighbouring spectra per sector and two more series (`_evolve_3d`)
        spectra, series = (1, 1) if bath.dimensions == 1 else (3, 3)
        work = sum(8.0 * samples * ((sec.mode_energies.size + 1) * (1 + q) * spectra
                                    + q * b * series + 3 * b * series + SPREAD_WORK * b * (series > 1))
                   for sec, b, q in zip(bath.sectors, bright, nodes(samples)))
        work += 8.0 * reduced_state_elements(bath, samples, width)[0] * (sectors + STATE_PASSES)
        seconds = work / FLOP_RATE + spectra * ROOT_SECONDS * sum(b ** ROOT_POWER for b in bright)
        keys = ("bath.modes", "bath.window", "bath.box_length" if bath.dimensions == 1
                else "bath.radial_nodes", "bath.sectors", "run.samples")
        values = {"bath.modes": modes, "bath.sectors": sectors, "run.samples": samples}
        # the parts credited to bath.modes grow about linearly with it; run.samples is resized
        return Estimate(states=modes + 1, memory_bytes=total, work=work, seconds=seconds, keys=keys,
                        breakdown=breakdown, values=values, scaling={"bath.modes": 1.0},
                        resize=lambda count: memory(count)[1])

    def refined(self) -> "ExactSolver":
        """The same solver with every truncation of its bath refined x1.5 (`refined_keys`).

        The window (set or automatic), the modes, the sectors, and the box length (1D) or the
        radial and angular nodes (3D); the cutoff only where it is not part of the model.

        Returns
        -------
        ExactSolver
        """
        return ExactSolver(with_keys(self.scenario, refined_keys(self.bath())),
                           progress=self.progress)

    def evolve(self, times):
        """Exact single-excitation dynamics, sector by sector, at each of `times`.

        Each sector's star spectrum (`star_spectrum`) gives c(P, t) and, by the Duhamel recurrence
        on the sample grid (`StarSpectrum.mode_series`), the mode sums of |c_k(P, t)|^2 at every
        time, and

            P_e(t) = sum_P w_P |c(P, t)|^2,
            <p^n>  = sum_P w_P [ |c|^2 P^n + sum_k |c_k|^2 (P - k)^n ] / norm,
            norm   = sum_P w_P [ |c|^2 + sum_k |c_k|^2 ],

        in 1D for the detector momentum; in 3D along the packet axis, the quanta's direction
        relative to P projected with the conditional direction moments <cos a>, <cos^2 a> of the
        Gaussian packet (`Packet.direction_moments`).  The Lamb shift is `lamb_shift`.

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units).

        Returns
        -------
        Evolution
            P_e(t) (dimensionless), <p>, Var p (momentum units, momentum^2) at every time;
            ground-state momentum densities at the snapshot times
            (1 / momentum units; 1D on the momentum lattice, 3D on `axis_grid`); in 1D, where the
            reduced state fits (`ReducedState1D.fits`), x_var (length^2), purity (dimensionless) and
            the final reduced state; norm at every time; lamb_shift (energy units).

        Raises
        ------
        RuntimeError
            If the secular equation of a sector does not converge (`secular_roots`).

        References
        ----------
        G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318 (the
        secular equation of the arrowhead Hamiltonian).
        """
        s = self.scenario
        bath = self.bath()
        snaps = snapshot_indices(len(times))
        residues, bound = [], []
        spectra = (_spectrum(sec, residues, bound) for sec in _progress(bath.sectors, self.progress))
        evolve_sectors = _evolve_1d if bath.dimensions == 1 else _evolve_3d
        evo = evolve_sectors(s, bath, spectra, times, snaps)
        lamb, lowest = lamb_shift(s, bath)
        evo.lamb_shift = lamb
        evo.warnings = list(bath.notes) + evo.warnings + self._warnings(bath, lowest)
        evo.details.update(sectors=len(bath.sectors), modes_per_sector=bath.mode_count,
                           cutoff=bath.cutoff, spacing=bath.spacing,
                           recurrence_time=bath.recurrence_time, window=bath.window,
                           box_length=bath.box_length, sector_stride=bath.stride,
                           lamb_shift_lowest_modes=lowest,
                           residue_sum_error=max(residues),
                           bound_states=packet_bound_states(bath.sectors, bound))
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


def _spectrum(sector, residues: list, bound: list):
    """The sector's star spectrum; its norm check |sum_j w_j - 1| is appended to `residues` and
    its bound states (`bound_states`) to `bound`."""
    spectrum = star_spectrum(sector.level_energy, sector.mode_energies, sector.couplings)
    residues.append(abs(spectrum.residue_sum - 1))
    bound.append(bound_states(sector, spectrum))
    return spectrum


def reduced_state_elements(bath: Bath, samples: int, width: int | None = None) -> tuple[int, int]:
    """Amplitudes the 1D reduced state holds (`ReducedState1D`), and its times, without building it.

    Parameters
    ----------
    bath : Bath
    samples : int
        Number of sample times.
    width : int, optional
        The bath's lattice width (`ReducedState1D.lattice_range`), when already known.

    Returns
    -------
    elements : int
        rows x sectors x width, with the rows thinned as `ReducedState1D` thins them; 0 in 3D or
        when the state does not fit (`ReducedState1D.fits`: sectors on every lattice point and
        2 sectors width <= STATE_ELEMENTS).
    rows : int
        The number of state times (0 when there is no state).
    """
    if bath.dimensions != 1:
        return 0, 0
    if width is None:
        width = ReducedState1D.lattice_range(bath)[1]
    sectors = len(bath.sectors)
    if bath.stride != 1 or 2 * sectors * width > STATE_ELEMENTS:
        return 0, 0
    rows = ReducedState1D.state_rows(samples, sectors, width).size
    return int(rows * sectors * width), int(rows)


def duhamel_nodes(sector, step: float) -> int:
    """Duhamel quadrature nodes per sample step of a sector, from its energies alone.

    m q of `duhamel_rule` for the span of the level and mode energies widened by
    twice the total coupling sqrt(sum |g|^2) (the eigenvalues lie within it: Weyl's
    inequality); 0 where the Cauchy sums are used instead (q m >= bright modes).

    Parameters
    ----------
    sector : Sector
    step : float
        Sample step h (time units).

    Returns
    -------
    int
        Nodes per step (dimensionless count).
    """
    energies = np.append(sector.mode_energies, sector.level_energy)
    reach = 2 * math.sqrt(sector.coupling_sum)
    span = np.array([energies.min() - reach, energies.max() + reach])
    parts, nodes = duhamel_rule(span, step)
    count = parts * nodes
    return count if count < np.unique(sector.mode_energies).size else 0


def lamb_shift(scenario, bath: Bath) -> tuple[float, float]:
    """Lamb shift of the sector at the packet's mean momentum, and the part of its softest modes.

    Delta = sum_{eps_k != E_e} |g_k|^2 / (E_e - eps_k) - delta_ladder, the discrete
    principal-value sum (`sector_lamb_shift`) less the level's offset from the mode ladder
    (`sim.solvers.exact.baths.discreteness_correction`: in 1D sum_c pi |g_c|^2 / D
    cot(pi (E_e - eps_c) / D) over the emission channels, D the local ladder spacing; 0 in 3D).

    Parameters
    ----------
    scenario : Scenario
    bath : Bath

    Returns
    -------
    shift : float
        Delta (energy units).
    lowest : float
        The discrete sum over the modes with the smallest |k| only (energy units); 0 when the
        sector has no modes.
    """
    sector = lamb_sector(scenario, bath)
    shift = sector_lamb_shift(sector.level_energy, sector.mode_energies, sector.couplings)
    shift -= discreteness_correction(scenario, bath, sector)
    if sector.quanta.size == 0:
        return float(shift), 0.0
    soft = np.abs(sector.quanta) <= np.abs(sector.quanta).min() * (1 + 1e-9)
    lowest = sector_lamb_shift(sector.level_energy, sector.mode_energies[soft], sector.couplings[soft])
    return float(shift), float(lowest)


# --- 1D -----------------------------------------------------------------------------------------


def _evolve_1d(scenario, bath: Bath, spectra, times, snaps) -> Evolution:
    """1D sectors: population, momentum moments, density, and the reduced COM state."""
    packet = packet_for(scenario)
    excited = np.zeros(times.size)
    moments = np.zeros((times.size, 3))  # norm, <p>, <p^2>
    lattice_p, probability = [], []
    state = ReducedState1D(bath, times.size) if ReducedState1D.fits(bath) else None
    rows = np.union1d(snaps, state.times if state is not None else [])
    snap_rows, state_rows = np.searchsorted(rows, snaps), None
    if state is not None:
        state_rows = np.searchsorted(rows, state.times)
    distance = coherence_distance(scenario)
    d = distance[0] if distance is not None else None
    chi = np.zeros(times.size, dtype=complex) if d is not None else None
    # the packet's phase at each sector: the reduced state's coherences between sectors
    momenta = np.array([sec.momentum for sec in bath.sectors])
    phases = np.exp(1j * np.angle(packet.axis_amplitude(momenta)))
    for index, (sector, spectrum) in enumerate(zip(bath.sectors, spectra)):
        level = spectrum.level_amplitude(times)
        level_p = np.abs(level) ** 2
        excited += sector.weight * level_p
        p_after = sector.momentum - sector.quanta
        values = p_after[:, None] ** np.arange(3)
        if d is not None:  # Re and Im of exp(i p d) per mode: chi(t) from the same sums
            values = np.hstack([values, np.cos(p_after * d)[:, None], np.sin(p_after * d)[:, None]])
        sums, bright, _ = spectrum.mode_series(times, values, rows)
        moments += sector.weight * (level_p[:, None] * sector.momentum ** np.arange(3) + sums[:, :3])
        if d is not None:
            chi += sector.weight * (level_p * np.exp(1j * sector.momentum * d)
                                    + sums[:, 3] + 1j * sums[:, 4])
        modes = spectrum.modes_from_bright(bright)
        lattice_p.append(round(sector.momentum / bath.spacing) - sector.lattice)
        probability.append(sector.weight * np.abs(modes[snap_rows].T) ** 2)
        if state is not None:
            state.add(index, sector, phases[index] * level[state.times],
                      phases[index] * modes[state_rows])
    norm = moments[:, 0]
    mean = moments[:, 1] / norm
    variance = moments[:, 2] / norm - mean ** 2
    grid, density, density_notes = lattice_density(scenario, bath, np.concatenate(lattice_p),
                                                   np.concatenate(probability))
    warnings, x_var, purity, final, details = list(density_notes), None, None, None, {}
    if state is None:
        warnings.append("x_var, purity: not computed (the reduced state needs the sectors on "
                        f"every lattice point (stride here {bath.stride}) and at most "
                        f"{STATE_ELEMENTS:.0e} amplitudes per time); lower bath.box_length or "
                        "bath.window, or raise bath.sectors")
    else:
        x_var, purity = state.position_variance(), state.purity()
        x_var, purity = (masked(state.times, times.size, v) for v in (x_var, purity))
        final = state.final_qobj()
        details["final_state_lattice"] = [float(state.component_vectors(-1)[1][0]), bath.spacing]
    return Evolution(excited=excited, p_mean=mean, p_var=variance, momentum_grid=grid,
                     snapshot_times=times[snaps], momentum_density=density,
                     initial_density=packet.axis_density(grid), x_var=x_var, purity=purity,
                     norm=norm, final_state=final, warnings=warnings, details=details,
                     coherence=chi)


# --- 3D -----------------------------------------------------------------------------------------


def _evolve_3d(scenario, bath: Bath, spectra, times, snaps) -> Evolution:
    """3D sectors: population, momentum and position moments along the packet axis and across
    it, the axis density and the purity.

    The position moments need the amplitudes' slopes in |P| at fixed k: each sector is also
    solved at |P| -/+ delta (`neighbour_sectors`) for dc/d|P| (`StarSpectrum.level_slope`), and
    the Duhamel recurrence carries the slopes (`StarSpectrum.mode_series` with `spreading`);
    `position_moments` projects them on the axes.  The purity is the kicked-packet mixture's
    (`KickedPurity3D`), withheld where the emitted line's Doppler spread across the packet
    makes its estimated error exceed PURITY_TOLERANCE (`kicked_purity_error`).
    """
    packet = packet_for(scenario)
    model = model_for(scenario)
    grid = axis_grid(scenario, packet, model)
    excited = np.zeros(times.size)
    moments = np.zeros((times.size, 3))
    positions = np.zeros((times.size, 3))  # <x_z^2>, <x_z>, <x_perp^2>
    density = np.zeros((grid.size, snaps.size))
    distance = coherence_distance(scenario)
    d = distance[0] if distance is not None else None
    chi = np.zeros(times.size, dtype=complex) if d is not None else None
    spreads = grid_from_zero(times)
    step = times[1] - times[0] if spreads else None
    state_times = ReducedState1D.state_rows(times.size, 1, 1)
    rows = np.union1d(snaps, state_times)
    snap_rows, state_rows = np.searchsorted(rows, snaps), np.searchsorted(rows, state_times)
    kicked = KickedPurity3D(packet, bath, state_times.size)
    for sector, spectrum in zip(bath.sectors, spectra):
        level = spectrum.level_amplitude(times)
        level_p = np.abs(level) ** 2
        excited += sector.weight * level_p
        r, u, k = sector.momentum, sector.cosines, sector.quanta
        # per mode: 1, k u, k^2 u^2 and k^2 (1 - u^2) / 2 (emission relative to P)
        values = np.stack([np.ones_like(k), k * u, sector.quanta_square * u * u,
                           0.5 * sector.quanta_square * (1 - u * u)], axis=1)
        if d is not None:  # Re and Im of each mode's <exp(i p_z d)>: chi(t) from the same sums
            level_phase, mode_phases = direction_phases(packet, sector, d)
            values = np.hstack([values, mode_phases.real[:, None], mode_phases.imag[:, None]])
        if spreads:
            below, above, delta = neighbour_sectors(scenario, bath, sector)
            neighbours = tuple(star_spectrum(sec.level_energy, sec.mode_energies, sec.couplings)
                               for sec in (below, above))
        spreading = (sector.slopes, *neighbours, delta) if spreads else None
        sums, bright, spread = spectrum.mode_series(times, values, rows, spreading)
        ground, along, along2, across2 = sums[:, :4].T
        if d is not None:
            chi += sector.weight * (level_p * level_phase + sums[:, 4] + 1j * sums[:, 5])
        cos1, cos2 = packet.direction_moments(r)
        moments += sector.weight * np.stack([
            level_p + ground,
            cos1 * (level_p * r + r * ground - along),
            cos2 * (level_p * r * r + r * r * ground - 2 * r * along + along2)
            + (1 - cos2) * across2], axis=1)
        if spreads:
            slope = spectrum.level_slope(*neighbours, delta, step, times.size, np.zeros(1),
                                         level[:, None])[:, 0]
            positions += sector.weight * position_moments(packet, r, level, slope, spread)
        probability = np.abs(spectrum.modes_from_bright(bright)) ** 2
        kicked.add(sector, level_p[state_times], probability[state_rows])
        density += sector.weight * axis_density(grid, packet, sector, probability[snap_rows].T)
    norm = moments[:, 0]
    mean = moments[:, 1] / norm
    variance = moments[:, 2] / norm - mean ** 2
    warnings, purity = [], None
    eta, error = kicked_purity_error(packet, model, bath)
    error = min(error, 1.0) * (1 - excited[-1])  # the mixture is exact for what has not emitted
    if error <= PURITY_TOLERANCE:
        purity = masked(state_times, times.size, kicked.purity())
    else:
        warnings.append(f"purity: withheld: the emitted line moves across the packet's momentum "
                        f"spread by {eta:.2g} of its width, so the quanta's frequencies tell the "
                        "packet's momenta apart, which the 3D kicked-packet purity leaves out "
                        f"(estimated error {error:.1%}, above {PURITY_TOLERANCE:.0%}); raise "
                        "packet.width to narrow the momentum spread, or use field.dimensions = 1 "
                        "for the exact lattice purity")
    x_var = transverse = None
    if spreads:
        x_var = positions[:, 0] / norm - (positions[:, 1] / norm) ** 2
        transverse = positions[:, 2] / norm
    else:
        warnings.append("x_var: not computed (the amplitudes' slopes in |P| need sample times "
                        "evenly spaced from t = 0)")
    initial = packet.axis_density(grid)
    # the sampled angles leave a histogram: smooth it over DENSITY_SMOOTHING grid cells
    density = gaussian_filter1d(density, DENSITY_SMOOTHING, axis=0, mode="constant")
    return Evolution(excited=excited, p_mean=mean, p_var=variance, momentum_grid=grid,
                     snapshot_times=times[snaps], momentum_density=density,
                     initial_density=initial, norm=norm, coherence=chi, x_var=x_var,
                     x_var_transverse=transverse, purity=purity, warnings=warnings,
                     details={"purity_doppler_ratio": eta, "purity_error_estimate": error})

