"""`method = "fock"`: a few field modes in a truncated Fock space, with or without the RWA.

The full monopole Hamiltonian
H_I = lambda (sigma+ + sigma-) (x) Int d^dk F(k) / sqrt((2 pi)^d 2 w_k) [a_k e^{ik.X} V + h.c.]
on a bath of M discrete modes k_j,

    H = E_g(P_com) |g><g| + E_e(P_com) |e><e| + sum_j w_j a_j^dag a_j
        + (sigma+ + sigma-) (x) sum_j c sqrt(mu_j) [a_j e^{i k_j.X} V + h.c.],

with c = model.coupling_factor() (lambda, or lambda_2 for `one-particle`), V(p_e, p_g) the
model's vertex, w_j = sqrt(k_j^2 + m^2) and mu_j = F(k_j)^2 / ((2 pi)^d 2 w_j) x (measure of
mode j), so that sum_j mu_j f(k_j) approximates Int d^dk F^2 / ((2 pi)^d 2 w) f(k).  Every term
conserves the total momentum P = p + sum_j n_j k_j, so one sector is spanned by
{|level, n_1..n_M>} with the COM momentum fixed, p = P - sum_j n_j k_j.  A link adds (or
removes) one quantum of mode j and flips the level; its matrix element is

    <other, n + 1_j| H |level, n> = c V(p_e, p_g) sqrt(mu_j) sqrt(n_j + 1).

Truncation: n_j <= max_occupation, sum_j n_j <= max_quanta.  Only reachable states are kept:
with all terms, the parity (level + sum n) mod 2 is conserved, so the level is fixed by the
number of quanta; under the RWA the excitation number level + sum n is conserved.  Within each
rule every state of the truncated space is reachable from |level0, vac> (quanta can be added one
at a time).

Baths:
- 1D: the exact solver's periodic box (`sim.solvers.exact.baths.box_sector`): k = 2 pi n / L,
  |k| <= cutoff (n = 0 only for a massive field), mu = F^2 / (L 2 w): Int dk / 2 pi ->
  (1/L) sum.  When the box holds more modes than `bath.fock_modes`, the modes kept are the most
  strongly coupled to the first transition out of the initial state, ranked by
  |g_j|^2 / (D_j^2 + (2 pi / L)^2) with D_j its energy mismatch (the weight of mode j in
  second-order perturbation theory, regularised by the mode spacing).
- 3D: 6 directions (the octahedron +-e1, +-e2, +-e3 with e3 the packet axis: a spherical
  3-design, weight 4 pi / 6 each; common practice) times R = ceil(fock_modes / 6)
  Gauss-Legendre nodes in |k| on [0, cutoff] with weights W_r k_r^2.  A crude few-mode bath: it
  models, it does not converge to, the 3D continuum.

Packet: one sector per packet momentum P with weight |psi(P)|^2.  1D: the exact solver's
lattice sectors (`sim.solvers.exact.baths.sector_lattice`), thinned to at most `bath.sectors`
(default MAX_DEFAULT_SECTORS); 3D: `bath.sectors` (default 3) Gauss-Hermite nodes of the axial
marginal (`Packet.quadrature(along_axis=True)`), on the axis (the transverse spread of the
packet is neglected).  Each sector is evolved from |level0, P; vac> by qutip.sesolve; all
observables are diagonal in the basis and are read off |psi|^2.

Units: hbar = c = 1; energies and momenta in the energy unit, times and lengths in its inverse.

References: the QuTiP 5 documentation (sesolve); Abramowitz & Stegun, Handbook of Mathematical
Functions, ch. 25 (Gauss-Legendre and Gauss-Hermite quadratures).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import qutip

from ...errors import ResourceError, ScenarioError
from ...physics.checks import with_keys
from ...physics.field import field_for, packet_for
from ...physics.models import EXCITED, GROUND, level_of, model_for
from ..base import SAMPLE_BYTES, Estimate, Evolution, Solver
from ..common import (
    bin_index,
    box_return_time,
    emitted_speed,
    last_sample_time,
    recurrence_warning,
    returning_box_length,
    snapshot_indices,
)
from .basis import (
    DIRECTIONS_3D,
    FockBasis,
    FockPlan,
    allowed_level,
    com_momenta,
    fock_basis,
    lattice_modes,
    link_count,
    octahedral_modes,
    sector_grid_1d,
    sector_grid_3d,
    sector_hamiltonian,
    state_count,
    truncation_edge,
)
from .cost import fastest_frequency, run_seconds, run_work, space_bytes
from .references import rotating_wave_excited, second_order_transition, transition_shift

#: default number of 1D box modes kept (the box may hold fewer)
DEFAULT_FOCK_MODES_1D = 24
#: default number of |k| nodes of the 3D bath (6 directions each)
DEFAULT_RADIAL_NODES_3D = 4
#: default total-quanta cutoff with counter-rotating terms: two rounds of virtual pair creation
DEFAULT_MAX_QUANTA = 4
#: default box length: this margin times the time the emitted wave needs to come back, (1 + v) t_max
BOX_MARGIN = 1.1
#: default number of 3D packet sectors (Gauss-Hermite nodes on the axis)
DEFAULT_SECTORS_3D = 3
#: warn when the probability on the truncation edge exceeds this
FOCK_EDGE_TOLERANCE = 1e-3
#: refuse sectors with more states than this (an ODE over them would take hours)
MAX_SECTOR_STATES = 400_000
#: bins of the 3D ground-state momentum histogram
MOMENTUM_BINS_3D = 121
#: ODE settings of qutip.sesolve: tight tolerances, no renormalisation (the norm is checked)
ODE_OPTIONS = {"atol": 1e-12, "rtol": 1e-10, "nsteps": 10**7, "normalize_output": False}
#: size keys named in a refusal, the most effective first
SIZE_KEYS = ("bath.max_quanta", "bath.fock_modes", "bath.max_occupation")



# --------------------------------------------------------------------------------------------
# The solver.
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SectorRun:
    """Observables of one sector over time (arrays over times) and ground probabilities per bin.

    Parameters
    ----------
    excited : ndarray, shape (T,)
        Excited-state population (dimensionless).
    norm : ndarray, shape (T,)
        Total probability |psi|^2 summed (dimensionless).
    quanta : ndarray, shape (T,)
        Mean number of field quanta (dimensionless).
    p_axis : ndarray, shape (T,)
        <p> along the packet axis (momentum units).
    p_axis_sq : ndarray, shape (T,)
        <p^2> along the packet axis (momentum^2).
    edge : ndarray, shape (T,)
        Probability on the truncation edge (`truncation_edge`; dimensionless).
    ground_bins : ndarray, shape (T, G)
        Ground-state probability in each cell of the axis-momentum grid (dimensionless).
    """

    excited: np.ndarray
    norm: np.ndarray
    quanta: np.ndarray
    p_axis: np.ndarray
    p_axis_sq: np.ndarray
    edge: np.ndarray
    ground_bins: np.ndarray  # (times, bins)


def evolve_sector(model, plan: FockPlan, basis: FockBasis, total_momentum, times, grid,
                  progress: bool = False) -> SectorRun:
    """Evolve |level0, P; vac> by qutip.sesolve and read the diagonal observables off |psi|^2.

    i d psi/dt = H psi with H the sector Hamiltonian (`sector_hamiltonian`); every observable is
    diagonal in the Fock basis, so <O>(t) = sum_s O_s |psi_s(t)|^2.  Ground-state probabilities
    are summed in the cells of the axis-momentum `grid` (`bin_index`).

    Parameters
    ----------
    model : COMModel
    plan : FockPlan
    basis : FockBasis
    total_momentum : ndarray, shape (d,)
        P of the sector (momentum units).
    times : ndarray, shape (T,)
        Sample times (time units).
    grid : ndarray, shape (G,)
        Axis-momentum grid (momentum units, `momentum_grid`).
    progress : bool, optional
        Show sesolve's progress bar.

    Returns
    -------
    SectorRun

    References
    ----------
    The QuTiP 5 documentation: sesolve.
    """
    hamiltonian = sector_hamiltonian(model, plan, basis, total_momentum)
    p_axis = com_momenta(basis, plan.modes, total_momentum) @ plan.axis
    edge = truncation_edge(plan, basis)
    columns = np.stack([basis.levels == EXCITED, np.ones(len(p_axis)), basis.quanta, p_axis,
                        p_axis ** 2, edge], axis=1).astype(float)
    ground = basis.levels == GROUND
    ground_bins, count = bin_index(grid, p_axis[ground]), len(grid)

    def observe(t, state):
        probability = np.abs(state.full().ravel()) ** 2
        binned = np.bincount(ground_bins, weights=probability[ground], minlength=count)
        return np.concatenate([probability @ columns, binned])

    start = qutip.basis(len(p_axis), 0)  # the vacuum is the first basis state
    options = {**ODE_OPTIONS, "progress_bar": "tqdm" if progress else ""}
    result = qutip.sesolve(qutip.Qobj(hamiltonian), start, times, e_ops=[observe], options=options)
    data = np.asarray(result.expect[0], dtype=float)
    return SectorRun(*data[:, :6].T, ground_bins=data[:, 6:])


class FockSolver(Solver):
    """Truncated Fock space of a few field modes, in total-momentum sectors.

    H = E_g(p) |g><g| + E_e(p) |e><e| + sum_j w_j a_j^dag a_j
    + (sigma+ + sigma-) (x) sum_j c sqrt(mu_j) [a_j e^{i k_j.X} V + h.c.] in each sector of total
    momentum P = p + sum_j n_j k_j, truncated to n_j <= max_occupation and sum_j n_j <= max_quanta,
    with or without the counter-rotating terms; each sector is evolved by qutip.sesolve.

    Parameters
    ----------
    scenario : Scenario
    progress : bool, optional
        Show sesolve's progress bar (default False).

    References
    ----------
    The QuTiP 5 documentation: sesolve.
    """

    name = "fock"

    @cached_property
    def model(self):
        """The scenario's centre-of-mass model (built once).

        Returns
        -------
        COMModel
        """
        return model_for(self.scenario)

    @cached_property
    def plan(self) -> FockPlan:
        """Modes, sectors and cutoffs, defaults chosen from the scenario (built once).

        1D: a box of length bath.box_length or `fock_box_length`, sectors from
        `sector_grid_1d`, the bath.fock_modes (default DEFAULT_FOCK_MODES_1D) box modes most
        strongly coupled at the most probable sector (`lattice_modes`).  3D: `octahedral_modes`
        with ceil(fock_modes / 6) (default DEFAULT_RADIAL_NODES_3D) radial nodes, bath.sectors
        (default DEFAULT_SECTORS_3D) axial Gauss-Hermite sectors.  max_quanta =
        bath.max_quanta, default 1 under the RWA and DEFAULT_MAX_QUANTA otherwise;
        max_occupation = bath.max_occupation, default max_quanta.

        Returns
        -------
        FockPlan

        Raises
        ------
        ScenarioError
            If field.temperature > 0 (the method starts from the field vacuum).
        """
        s, model = self.scenario, self.model
        if s.field.temperature > 0:
            raise ScenarioError(f"field.temperature = {s.field.temperature!r}: method \"fock\" "
                                "starts from the field vacuum; allowed: 0 (use method \"markov\" "
                                "for a thermal field)")
        field, packet, bath = field_for(s, model), packet_for(s), s.bath
        start = level_of(s.packet.internal)
        axis = np.asarray(s.packet_axis, dtype=float)
        if s.dimensions == 1:
            length = bath.box_length or fock_box_length(s, model)
            sectors, weights = sector_grid_1d(s, 2 * np.pi / length, bath.sectors)
            centre = sectors[np.argmax(weights)]
            modes = lattice_modes(field, model, length, bath.fock_modes or DEFAULT_FOCK_MODES_1D,
                                  centre, start)
        else:
            radial = (math.ceil(bath.fock_modes / DIRECTIONS_3D) if bath.fock_modes
                      else DEFAULT_RADIAL_NODES_3D)
            modes = octahedral_modes(field, axis, radial)
            sectors, weights = sector_grid_3d(packet, axis, bath.sectors or DEFAULT_SECTORS_3D)
        rwa = s.coupling.rotating_wave
        max_quanta = bath.max_quanta or (1 if rwa else DEFAULT_MAX_QUANTA)
        return FockPlan(modes, sectors, weights, axis, start, rwa,
                        bath.max_occupation or max_quanta, max_quanta)

    def estimate(self) -> Estimate:
        """States of one sector (exact count), memory and wall time of the run, rough flops.

        With S = `state_count(plan)`, entries E = S + 2 `link_count(plan)` (exact: the stored
        Hamiltonian), G the axis-momentum bins (`grid_points`), T = run.samples and K sectors,
        memory = `cost.space_bytes` + T (8 K (6 + G) + SAMPLE_BYTES) and seconds =
        `cost.run_seconds` (the measured cost model of `sim.solvers.fock.cost`, with the fastest
        phase bounded by `cost.fastest_frequency`).  Nothing is enumerated (the counts are
        polynomial arithmetic, `occupation_counts`).

        Returns
        -------
        Estimate
            Keyed by SIZE_KEYS and run.samples; the Fock space is credited to bath.max_quanta
            (no suggested value: it grows combinatorially), the series over the sample times to
            run.samples (linear).

        Raises
        ------
        ScenarioError
            If field.temperature > 0 (`plan`).
        """
        plan = self.plan
        states = state_count(plan)
        entries = states + 2 * link_count(plan)
        samples = self.scenario.run.samples
        sectors = len(plan.sector_weights)
        space = space_bytes(states, entries, sectors)
        series = samples * (8.0 * sectors * (6 + grid_points(plan)) + SAMPLE_BYTES)
        # the Fock space grows fastest with max_quanta (SIZE_KEYS[0]); the series with samples
        breakdown = {SIZE_KEYS[0]: space, "run.samples": series}
        t_max, frequency = last_sample_time(self.scenario), fastest_frequency(self.model, plan)
        values = {"bath.max_quanta": plan.max_quanta, "bath.fock_modes": plan.modes.count,
                  "bath.max_occupation": plan.max_occupation, "run.samples": samples}
        return Estimate(states=states, memory_bytes=space + series,
                        work=run_work(states, entries, sectors, frequency, t_max),
                        seconds=run_seconds(states, entries, plan.modes.count, sectors, frequency,
                                            t_max),
                        keys=(*SIZE_KEYS, "run.samples"), breakdown=breakdown, values=values,
                        scaling={"run.samples": 1.0})

    def refined(self) -> "FockSolver | None":
        """The same bath with max_quanta and max_occupation raised by one.

        Returns
        -------
        FockSolver or None
            None under the RWA, whose excitation-number sector is complete (nothing is truncated).
        """
        plan = self.plan
        if plan.rotating_wave:
            return None
        finer = with_keys(self.scenario, {"bath.max_quanta": plan.max_quanta + 1,
                                          "bath.max_occupation": plan.max_occupation + 1})
        return FockSolver(finer, progress=self.progress)

    def evolve(self, times):
        """Evolve every packet sector in its truncated Fock space and combine them.

        With w_P the sector weights, <O>(t) = sum_P w_P <O>_P(t) for P_e, the mean number of quanta,
        <p> and <p^2> along the axis (`evolve_sector`).  Without the RWA the table
        "counter_rotating" compares P_e with the rotating-wave star on the same modes and with
        second-order perturbation theory (`_references`).  The Lamb shift is
        sum_P w_P (Delta_e - Delta_g)(P) (`transition_shift`).

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units).

        Returns
        -------
        Evolution
            P_e(t), norm (dimensionless); <p>, Var p along the axis (momentum units, momentum^2);
            ground-state densities at the snapshot times and the initial density (1 / momentum
            units); lamb_shift (energy units); the table "field" (t, mean quanta) and, without the
            RWA, "counter_rotating".  No x variance or purity.

        Raises
        ------
        ResourceError
            If one sector would hold more than MAX_SECTOR_STATES states.
        ScenarioError
            If field.temperature > 0.

        References
        ----------
        The QuTiP 5 documentation: sesolve.
        J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (the second-order reference).
        G. H. Golub, "Some modified matrix eigenvalue problems", SIAM Review 15 (1973) 318 (the
        rotating-wave star reference).
        """
        model, plan = self.model, self.plan
        estimate = self.estimate()
        if estimate.states > MAX_SECTOR_STATES:
            raise ResourceError(f"{SIZE_KEYS[0]} = {plan.max_quanta}: the Fock space would need "
                                f"{estimate.describe()} per sector, more than the limit of "
                                f"{MAX_SECTOR_STATES:,} states; lower {', '.join(SIZE_KEYS)}")
        basis = fock_basis(plan)
        grid, width = momentum_grid(plan, basis)
        runs = [evolve_sector(model, plan, basis, P, times, grid, self.progress)
                for P in plan.sector_momenta]
        w = plan.sector_weights

        def total(name):
            return sum(weight * getattr(run, name) for weight, run in zip(w, runs))

        excited, quanta, p_mean = total("excited"), total("quanta"), total("p_axis")
        snaps = snapshot_indices(len(times))
        initial = np.zeros(len(grid))
        np.add.at(initial, bin_index(grid, plan.sector_momenta @ plan.axis), w / width)
        tables = {"field": {"t": times, "quanta": quanta}}
        warnings = self._warnings(times, total("edge"))
        if not plan.rotating_wave:
            tables["counter_rotating"] = self._references(times, excited)
        return Evolution(
            excited=excited, p_mean=p_mean, p_var=total("p_axis_sq") - p_mean ** 2,
            momentum_grid=grid, snapshot_times=times[snaps],
            momentum_density=total("ground_bins")[snaps].T / width, initial_density=initial,
            norm=total("norm"), tables=tables, warnings=warnings,
            lamb_shift=float(sum(weight * transition_shift(model, plan.modes, P, plan.rotating_wave)
                                 for weight, P in zip(w, plan.sector_momenta))),
            details={"fock_modes": plan.modes.count, "box_modes": plan.modes.available,
                     "box_length": plan.modes.box_length, "max_quanta": plan.max_quanta,
                     "max_occupation": plan.max_occupation, "sectors": len(w),
                     "states_per_sector": len(basis.levels),
                     "norm_drift": float(np.max(np.abs(total("norm") - 1.0))),
                     "truncation_edge_max": float(np.max(total("edge")))})

    def _references(self, times, excited) -> dict:
        """P_e of the RWA star on the same modes and sectors, and of second-order perturbation
        theory."""
        model, plan = self.model, self.plan
        pairs = list(zip(plan.sector_weights, plan.sector_momenta))
        leaving = sum(w * second_order_transition(model, plan.modes, P, plan.start_level, times)
                      for w, P in pairs)
        if plan.start_level == EXCITED:
            rwa = sum(w * rotating_wave_excited(model, plan.modes, P, times) for w, P in pairs)
            second = 1.0 - leaving
        else:
            rwa, second = np.zeros_like(times), leaving
        return {"t": times, "excited": excited, "excited_rotating_wave": rwa,
                "excited_second_order": second}

    def _warnings(self, times, edge) -> list[str]:
        plan, out = self.plan, []
        if edge.max() > FOCK_EDGE_TOLERANCE:
            out.append(f"Fock cutoff reached: probability {edge.max():.2e} on states at the "
                       f"truncation (max_quanta = {plan.max_quanta}, max_occupation = "
                       f"{plan.max_occupation}), above {FOCK_EDGE_TOLERANCE:g}; raise "
                       "bath.max_quanta or bath.max_occupation (run --check measures the change)")
        length = plan.modes.box_length
        if length is not None:
            out += recurrence_warning(
                float(times[-1]), box_return_time(length, emitted_speed(self.model, self.scenario)),
                f"the emitted wave returns in the box of length {length:.4g}",
                "bath.box_length (with bath.fock_modes) or lower run.t_max")
        if plan.modes.count < plan.modes.available and self.scenario.bath.fock_modes is None:
            out.append(f"bath truncated to the {plan.modes.count} most strongly coupled of the "
                       f"{plan.modes.available} box modes within the cutoff; raise bath.fock_modes "
                       "to keep more")
        return out


def fock_box_length(scenario, model) -> float:
    """Default 1D box length L = BOX_MARGIN (1 + v) t_max.

    v is the fastest recoil speed (`emitted_speed`), so the emitted wave returns just after t_max.
    Shorter than the exact solver's default box, which also resolves the packet: a Fock bath holds
    only a few modes.

    Parameters
    ----------
    scenario : Scenario
    model : COMModel

    Returns
    -------
    float
        L (length units).
    """
    t_max = last_sample_time(scenario)
    return returning_box_length(t_max, emitted_speed(model, scenario), BOX_MARGIN)


def grid_points(plan: FockPlan) -> int:
    """Bins of the axis-momentum grid `momentum_grid` will build, without the basis.

    The reachable kicks sum_j n_j k_j.axis are bounded by filling the modes with the largest
    (smallest) axial momenta first, up to max_occupation each and N quanta in all, N the largest
    quanta number with an allowed level (`allowed_level`).  1D: the box lattice points between
    the bounds; 3D: MOMENTUM_BINS_3D.

    Parameters
    ----------
    plan : FockPlan

    Returns
    -------
    int
        G, at least the bins `momentum_grid` builds (exact when the extreme kicks are reachable).
    """
    if plan.modes.box_length is None:
        return MOMENTUM_BINS_3D
    quanta = max((n for n in range(plan.max_quanta + 1)
                  if allowed_level(n, plan.start_level, plan.rotating_wave) is not None),
                 default=0)
    along = plan.modes.momenta @ plan.axis

    def extreme(values):
        left, total = quanta, 0.0
        for value in values:
            take = min(plan.max_occupation, left)
            if value <= 0 or take <= 0:
                break
            total, left = total + take * value, left - take
        return total

    top = extreme(np.sort(along)[::-1])
    bottom = -extreme(np.sort(-along)[::-1])
    sectors = plan.sector_momenta @ plan.axis
    step = 2 * np.pi / plan.modes.box_length
    return int(round((sectors.max() - bottom) / step) - round((sectors.min() - top) / step) + 1)


def momentum_grid(plan: FockPlan, basis: FockBasis):
    """Axis-momentum grid covering every reachable p = P - sum n k, and its spacing.

    1D: the box lattice itself (every reachable momentum is a lattice point, one bin each);
    3D: MOMENTUM_BINS_3D uniform bins over the reachable range.

    Parameters
    ----------
    plan : FockPlan
    basis : FockBasis

    Returns
    -------
    grid : ndarray
        Axis momenta (momentum units).
    step : float
        Grid spacing (momentum units).
    """
    kicks = basis.occupations @ (plan.modes.momenta @ plan.axis)
    along = plan.sector_momenta @ plan.axis
    low, high = along.min() - kicks.max(), along.max() - kicks.min()
    if plan.modes.box_length is not None:
        step = 2 * np.pi / plan.modes.box_length
        return np.arange(round(low / step), round(high / step) + 1) * step, step
    grid = np.linspace(low, high, MOMENTUM_BINS_3D) if high > low else np.array([low, low + 1.0])
    return grid, grid[1] - grid[0]
