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
- 3D: the directions of `basis.direction_rule` (the octahedron +-e1, +-e2, +-e3 with e3 the
  packet axis, a spherical 3-design, by default; with bath.directions = n the product of n
  Gauss-Legendre nodes in cos(theta) and 2n azimuths, exact to spherical-harmonic degree
  2n - 1) times R = ceil(fock_modes / D) Gauss-Legendre nodes in |k| on [0, cutoff] with
  weights W_r k_r^2.  A few-mode bath: it models the 3D continuum and approaches it only as
  both rules grow (`FockSolver.convergence` measures the change).

Packet: one sector per packet momentum P with weight |psi(P)|^2.  1D Gaussian: the exact
solver's lattice sectors (`sim.solvers.exact.baths.sector_lattice`), thinned to at most
`bath.sectors` (default MAX_DEFAULT_SECTORS, more when the coherence at d needs them); other 1D
shapes: `Packet.axial_quadrature` (fringe-resolving for two lobes).  3D: `bath.sectors`
(default DEFAULT_SECTORS_3D, more for a Gaussian when the coherence needs them, and
SHAPED_AXIAL_NODES for the other shapes) axial nodes of
`Packet.axial_quadrature`, each at the TRANSVERSE_SECTORS transverse magnitudes of a
Gauss-Laguerre rule (`basis.sector_grid_3d`): the transverse spread is included, exactly for
observables polynomial of degree 2 TRANSVERSE_SECTORS - 1 in |p_perp|^2.  Each sector is evolved from |level0, P; vac> by
qutip.sesolve; all observables are diagonal in the basis and are read off |psi|^2, the
coherence chi(t) = sum_P w_P sum_s |psi_s|^2 exp(i p_s.axis d) too (exp(i P d) is diagonal).

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
from ...physics.coherence import coherence_distance
from ...physics.field import field_for, packet_for
from ...physics.golden_rule import EMISSION
from ...physics.models import EXCITED, GROUND, level_of, model_for
from ..base import SAMPLE_BYTES, Estimate, Evolution, Solver, check_resources
from ..markov.lattice import direction_table
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
    SHAPED_AXIAL_NODES,
    FockBasis,
    FockPlan,
    allowed_level,
    axis_frame,
    coherent_sector_count,
    com_momenta,
    direction_degree,
    direction_rule,
    fock_basis,
    hermite_nodes_for,
    lattice_modes,
    link_count,
    sector_grid_1d,
    sector_grid_3d,
    sector_hamiltonian,
    sphere_modes,
    state_count,
    truncation_edge,
)
from .cost import fastest_frequency, run_seconds, run_work, space_bytes
from .references import rotating_wave_excited, second_order_transition, transition_shift

#: default number of 1D box modes kept (the box may hold fewer)
DEFAULT_FOCK_MODES_1D = 24
#: default number of 3D modes (the octahedron's 6 directions x 4 |k| nodes)
DEFAULT_FOCK_MODES_3D = 24
#: the key of the 3D direction rule (`basis.direction_rule`): Gauss-Legendre nodes in cos(theta)
DIRECTIONS_KEY = "bath.directions"
#: the direction rule `convergence` moves to from the octahedron (degree 3): the product rule of
#: order 3 (degree 5, 18 directions)
FIRST_PRODUCT_ORDER = 3
#: `convergence`: the tolerance of its verdict, and the growth of bath.fock_modes it tries
CONVERGENCE_TOLERANCE = 1e-3
MODE_GROWTH = 1.5
#: `decay_rate`: the samples fitted have P_e in this range (above: the short-time quadratic
#: start; below: the tail), at least MIN_RATE_SAMPLES of them
RATE_WINDOW = (0.02, 0.9)
MIN_RATE_SAMPLES = 3
#: axis-momentum bins per pi / d when the coherence at d is asked for (3D grid; the 1D box
#: lattice is checked against it): fringes of period 2 pi / d get 2 FRINGE_BINS bins each
FRINGE_BINS = 4
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
    chi : ndarray of complex, shape (T,), or None
        sum_s |psi_s|^2 exp(i p_s.axis d), both levels (dimensionless); None without a d.
    """

    excited: np.ndarray
    norm: np.ndarray
    quanta: np.ndarray
    p_axis: np.ndarray
    p_axis_sq: np.ndarray
    edge: np.ndarray
    ground_bins: np.ndarray  # (times, bins)
    chi: np.ndarray | None = None


def evolve_sector(model, plan: FockPlan, basis: FockBasis, total_momentum, times, grid,
                  separation: float | None = None, progress: bool = False) -> SectorRun:
    """Evolve |level0, P; vac> by qutip.sesolve and read the diagonal observables off |psi|^2.

    i d psi/dt = H psi with H the sector Hamiltonian (`sector_hamiltonian`); every observable is
    diagonal in the Fock basis, so <O>(t) = sum_s O_s |psi_s(t)|^2, the characteristic function
    chi(t) = sum_s |psi_s|^2 exp(i p_s d) (p_s = (P - sum n k).axis) included.  Ground-state
    probabilities are summed in the cells of the axis-momentum `grid` (`bin_index`).

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
    separation : float, optional
        d of the coherence (length units); None: chi is not computed.
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
    phases = [] if separation is None else [np.cos(p_axis * separation),
                                            np.sin(p_axis * separation)]
    columns = np.stack([basis.levels == EXCITED, np.ones(len(p_axis)), basis.quanta, p_axis,
                        p_axis ** 2, edge, *phases], axis=1).astype(float)
    width = columns.shape[1]
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
    chi = None if separation is None else data[:, 6] + 1j * data[:, 7]
    return SectorRun(*data[:, :6].T, ground_bins=data[:, width:], chi=chi)


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
    packet_shapes = ("gaussian", "two-lobe", "file")

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
        strongly coupled at the most probable sector (`lattice_modes`).  3D: `sphere_modes`
        with the direction rule of DIRECTIONS_KEY (default: the octahedron) and
        ceil(fock_modes / D) radial nodes (fock_modes default DEFAULT_FOCK_MODES_3D), sectors
        from `sector_grid_3d` with bath.sectors axial nodes (default DEFAULT_SECTORS_3D, or
        `hermite_nodes_for` sigma_p d for a Gaussian when the coherence at d is asked for;
        SHAPED_AXIAL_NODES for the other shapes).
        max_quanta = bath.max_quanta, default 1 under the RWA and DEFAULT_MAX_QUANTA
        otherwise; max_occupation = bath.max_occupation, default max_quanta.

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
        distance = coherence_distance(s)
        separation = None if distance is None else float(distance[0])
        order = None
        if s.dimensions == 1:
            length = bath.box_length or fock_box_length(s, model)
            sectors, weights = sector_grid_1d(s, 2 * np.pi / length, bath.sectors, separation)
            centre = sectors[np.argmax(weights)]
            modes = lattice_modes(field, model, length, bath.fock_modes or DEFAULT_FOCK_MODES_1D,
                                  centre, start)
        else:
            order = getattr(bath, DIRECTIONS_KEY.split(".")[1])
            count = len(direction_rule(order)[1])
            modes = sphere_modes(field, axis, order,
                                 math.ceil((bath.fock_modes or DEFAULT_FOCK_MODES_3D) / count))
            axial = bath.sectors or (DEFAULT_SECTORS_3D if packet.shape == "gaussian"
                                     else SHAPED_AXIAL_NODES)
            if bath.sectors is None and separation and packet.shape == "gaussian":
                axial = max(axial, hermite_nodes_for(packet.momentum_std * separation))
            sectors, weights = sector_grid_3d(packet, axis, axial)
        rwa = s.coupling.rotating_wave
        max_quanta = bath.max_quanta or (1 if rwa else DEFAULT_MAX_QUANTA)
        return FockPlan(modes, sectors, weights, axis, start, rwa,
                        bath.max_occupation or max_quanta, max_quanta, order, separation)

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
            RWA, "counter_rotating"; coherence chi(t) = sum_P w_P chi_P(t) when a coherence
            distance is set (`coherence_distance`), else None; details with "truncation"
            (`truncation`) and in 3D the direction rule (directions, direction_degree,
            radial_nodes).  No x variance or purity; `convergence` adds its record on request.

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
        runs = [evolve_sector(model, plan, basis, P, times, grid, plan.separation,
                              self.progress) for P in plan.sector_momenta]
        w = plan.sector_weights

        def total(name):
            return sum(weight * getattr(run, name) for weight, run in zip(w, runs))

        excited, quanta, p_mean = total("excited"), total("quanta"), total("p_axis")
        snaps = snapshot_indices(len(times))
        initial = np.zeros(len(grid))
        np.add.at(initial, bin_index(grid, plan.sector_momenta @ plan.axis), w / width)
        tables = {"field": {"t": times, "quanta": quanta}}
        warnings = self._warnings(times, total("edge"), width)
        if not plan.rotating_wave:
            tables["counter_rotating"] = self._references(times, excited)
        details = {"fock_modes": plan.modes.count, "box_modes": plan.modes.available,
                   "box_length": plan.modes.box_length, "max_quanta": plan.max_quanta,
                   "max_occupation": plan.max_occupation, "sectors": len(w),
                   "states_per_sector": len(basis.levels),
                   "norm_drift": float(np.max(np.abs(total("norm") - 1.0))),
                   "truncation_edge_max": float(np.max(total("edge"))),
                   "truncation": self.truncation()}
        if plan.modes.box_length is None:
            details.update(directions=len(direction_rule(plan.direction_order)[1]),
                           direction_degree=direction_degree(plan.direction_order),
                           radial_nodes=plan.modes.count // len(direction_rule(
                               plan.direction_order)[1]))
        return Evolution(
            excited=excited, p_mean=p_mean, p_var=total("p_axis_sq") - p_mean ** 2,
            momentum_grid=grid, snapshot_times=times[snaps],
            momentum_density=total("ground_bins")[snaps].T / width, initial_density=initial,
            norm=total("norm"), tables=tables, warnings=warnings,
            lamb_shift=float(sum(weight * transition_shift(model, plan.modes, P, plan.rotating_wave)
                                 for weight, P in zip(w, plan.sector_momenta))),
            details=details,
            coherence=None if plan.separation is None else total("chi"))

    def truncation(self) -> dict:
        """The bath truncation of the run, for the result layer to flag in 1D and 3D alike.

        "kept" is the number of modes M; "of" is the number of modes of the box bath the
        truncated one stands for: in 1D the box modes within the cutoff; in 3D those of a cubic
        periodic box of side L = `fock_box_length` (the emitted wave returns just after t_max,
        as the 1D default box), |k| <= cutoff, counted by the ball's volume
        (4 pi / 3) (K L / (2 pi))^3 (to within its surface term): what a box bath resolving
        the 3D continuum up to t_max would hold.  "converged" is None until `convergence` has
        judged it.

        Returns
        -------
        dict
            {"kept": M, "of": m, "what": "modes", "converged": None, "key": "bath.fock_modes"}.
        """
        modes = self.plan.modes
        if modes.box_length is not None:
            available = modes.available
        else:
            side = fock_box_length(self.scenario, self.model)
            cutoff = field_for(self.scenario, self.model).cutoff
            available = max(modes.count, round(4 * np.pi / 3 * (cutoff * side / (2 * np.pi)) ** 3))
        return {"kept": modes.count, "of": int(available), "what": "modes", "converged": None,
                "key": "bath.fock_modes"}

    def refinements(self) -> list[tuple[str, list, dict | None, str | None]]:
        """The finer runs `convergence` compares with: one more quantum, more modes, more
        directions (3D).

        One more quantum: bath.max_quanta + 1 (max_occupation too where it equals max_quanta);
        none under the RWA, whose excitation-number sector is complete.  More modes:
        bath.fock_modes x MODE_GROWTH (rounded up; in 1D at most the box's modes, none when all
        are kept).  More directions (3D): the octahedron -> the product rule of order
        FIRST_PRODUCT_ORDER, order n -> n + 1, with the same radial nodes.

        Returns
        -------
        list of (key, values, changes, reason)
            The key refined, its [old, new] values, the scenario keys to change (None when
            the refinement does not apply) and why it does not (None when it does).
        """
        plan, out = self.plan, []
        if plan.rotating_wave:
            out.append(("bath.max_quanta", [plan.max_quanta, plan.max_quanta], None,
                        "under the rotating-wave approximation the excitation-number sector is "
                        "complete: more quanta add no reachable state"))
        else:
            keys = {"bath.max_quanta": plan.max_quanta + 1}
            if plan.max_occupation >= plan.max_quanta:
                keys["bath.max_occupation"] = plan.max_occupation + 1
            out.append(("bath.max_quanta", [plan.max_quanta, plan.max_quanta + 1], keys, None))
        count, modes = plan.modes.count, math.ceil(MODE_GROWTH * plan.modes.count)
        if plan.modes.box_length is not None:
            modes = min(modes, plan.modes.available)
        if modes > count:
            out.append(("bath.fock_modes", [count, modes], {"bath.fock_modes": modes}, None))
        else:
            out.append(("bath.fock_modes", [count, count], None,
                        f"all {count} box modes within the cutoff are kept; bath.box_length and "
                        "field.cutoff set the bath"))
        if plan.modes.box_length is None:
            order = plan.direction_order
            finer = FIRST_PRODUCT_ORDER if order is None else order + 1
            radial = count // len(direction_rule(order)[1])
            out.append((DIRECTIONS_KEY, [order, finer],
                        {DIRECTIONS_KEY: finer,
                         "bath.fock_modes": radial * len(direction_rule(finer)[1])}, None))
        return out

    def convergence(self, times, evolution: Evolution | None = None,
                    tolerance: float = CONVERGENCE_TOLERANCE) -> dict:
        """Change of P_e and of the decay rates on each refinement of the truncation (opt-in).

        Each finer run of `refinements` is evolved over the same `times` and compared with this
        one: max_t |P_e'(t) - P_e(t)|, the decay rates of `decay_rate` (relative change
        |G' - G| / |G'|) and in 3D, for the directions, the golden-rule rate on the direction
        rule (`direction_golden_rate`).  A finer run over MAX_SECTOR_STATES states or the
        memory guard is not run and says so.  Each costs a run at least as large as this one.

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units).
        evolution : Evolution, optional
            This solver's run over `times` (evolved here when omitted).  Given, its
            details["convergence"] is set to the returned dict and
            details["truncation"]["converged"] to its verdict (True, False or None).
        tolerance : float, optional
            Largest change of P_e (absolute) and of a rate (relative) for "converged".

        Returns
        -------
        dict
            {"checks": [{"key", "values", "max_change_excited", "rate_fitted": [G, G'],
            "relative_change_rate", ("rate_golden_directions", "relative_change_golden"),
            "converged"} or {"key", "values", "skipped": reason}], "tolerance", "verdict":
            "converged" | "not converged" | "not checked"}.

        Raises
        ------
        ScenarioError
            If field.temperature > 0 (`plan`).
        """
        base = evolution if evolution is not None else self.evolve(times)
        rate = decay_rate(times, base.excited, self.plan.start_level)
        checks = []
        for key, values, changes, reason in self.refinements():
            if changes is None:
                checks.append({"key": key, "values": values, "skipped": reason})
                continue
            finer = FockSolver(with_keys(self.scenario, changes))
            try:
                check_resources(finer.estimate(), self.name)
                evolved = finer.evolve(times)
            except ResourceError as exc:
                checks.append({"key": key, "values": values, "skipped": f"not run: {exc}"})
                continue
            entry = {"key": key, "values": values,
                     "max_change_excited": float(np.max(np.abs(evolved.excited - base.excited))),
                     "rate_fitted": [rate, decay_rate(times, evolved.excited,
                                                      self.plan.start_level)]}
            entry["relative_change_rate"] = relative_change(*entry["rate_fitted"])
            changes_seen = [entry["max_change_excited"], entry["relative_change_rate"]]
            if key == DIRECTIONS_KEY:
                field = field_for(self.scenario, self.model)
                golden = [direction_golden_rate(self.model, field, plan)
                          for plan in (self.plan, finer.plan)]
                entry["rate_golden_directions"] = golden
                entry["relative_change_golden"] = relative_change(*golden)
                changes_seen.append(entry["relative_change_golden"])
            entry["converged"] = all(c is None or c <= tolerance for c in changes_seen)
            checks.append(entry)
        judged = [c["converged"] for c in checks if "converged" in c]
        verdict = ("not checked" if not judged else
                   "converged" if all(judged) else "not converged")
        report = {"checks": checks, "tolerance": float(tolerance), "verdict": verdict}
        if evolution is not None:
            evolution.details["convergence"] = report
            evolution.details.setdefault("truncation", self.truncation())["converged"] = (
                None if not judged else all(judged))
        return report

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

    def _warnings(self, times, edge, step) -> list[str]:
        """The run's warnings: Fock cutoff reached, box recurrence, modes dropped, fringes."""
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
        record = self.truncation()
        if length is None and record["kept"] < record["of"]:
            out.append(f"3D bath truncated to {record['kept']} modes on the direction rule, where a "
                       f"box resolving the continuum up to t_max would hold about {record['of']:,}: "
                       "a narrow line between its |k| nodes is not resolved and the decay can stall; "
                       "raise bath.fock_modes (compare checks the convergence), or use method "
                       "\"exact\" under the rotating-wave approximation")
        if plan.separation and length is not None and step > np.pi / (FRINGE_BINS * plan.separation):
            out.append(f"the box lattice step {step:.3g} of the momentum densities does not resolve "
                       f"structure of period 2 pi / d = {2 * np.pi / plan.separation:.3g} (fringes "
                       f"of a two-lobe packet); raise bath.box_length to at least "
                       f"{2 * FRINGE_BINS * plan.separation:.4g} for densities that show them "
                       "(P_e and the coherence do not depend on it)")
        out += self._sector_warnings()
        return out

    def _sector_warnings(self) -> list[str]:
        """A warning when a given bath.sectors is too few for the coherence of a Gaussian."""
        s, plan = self.scenario, self.plan
        packet = packet_for(s)
        if not plan.separation or s.bath.sectors is None or packet.shape != "gaussian":
            return []
        if plan.modes.box_length is None:
            needed = hermite_nodes_for(packet.momentum_std * plan.separation)
        else:
            needed = coherent_sector_count(packet, 2 * np.pi / plan.modes.box_length,
                                           plan.separation)
        if s.bath.sectors >= needed:
            return []
        return [f"bath.sectors = {s.bath.sectors}: too few packet sectors to resolve exp(i P d) "
                f"at d = {plan.separation:g}, so the coherence is inaccurate; raise bath.sectors "
                f"to at least {needed} (or omit it)"]


def relative_change(coarse, fine) -> float | None:
    """|fine - coarse| / |fine| of two rates, None when either is missing or fine is 0.

    Parameters
    ----------
    coarse, fine : float or None
        Rates (inverse time units).

    Returns
    -------
    float or None
        Dimensionless.
    """
    if coarse is None or fine is None or not fine:
        return None
    return float(abs(fine - coarse) / abs(fine))


def decay_rate(times, excited, start_level: int) -> float | None:
    """The decay rate of a P_e curve: the least-squares slope of -ln P_e over RATE_WINDOW.

    ln P_e(t) = ln A - G t fitted to the samples with P_e in RATE_WINDOW.  A plain line, for
    comparing runs of one truncation with each other; whether the curve has a rate at all is
    judged one layer up (`sim.result.fits`).

    Parameters
    ----------
    times : ndarray, shape (T,)
        Sample times (time units).
    excited : ndarray, shape (T,)
        P_e(t) (dimensionless).
    start_level : int
        The initial level: no decay rate for a ground-state start.

    Returns
    -------
    float or None
        G (inverse time units); None for a ground start or fewer than MIN_RATE_SAMPLES samples
        in the window.
    """
    inside = (excited > RATE_WINDOW[0]) & (excited < RATE_WINDOW[1])
    if start_level != EXCITED or inside.sum() < MIN_RATE_SAMPLES:
        return None
    return float(-np.polyfit(times[inside], np.log(excited[inside]), 1)[0])


def direction_golden_rate(model, field, plan: FockPlan) -> float | None:
    """Golden-rule decay rate of the packet with the angles replaced by the direction rule.

    G = sum_P w_P sum_i W_i dG/dOmega(|P|, cos a_i), cos a_i = n_i.P / |P|, with dG/dOmega the
    on-shell rate per solid angle of the continuum in |k| (`sim.solvers.markov.lattice.
    direction_table`, emission, the bath's cutoff): the 3D golden rule as the fock bath's
    directions see it.  It tends to the golden-rule rate as the rule's degree grows.

    Parameters
    ----------
    model : COMModel
    field : Field
        The bath's field (its cutoff bounds |k|).
    plan : FockPlan

    Returns
    -------
    float or None
        G (inverse time units); None in 1D or for a ground-state start.

    References
    ----------
    J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (the golden-rule transition rate).
    """
    if plan.modes.box_length is not None or plan.start_level != EXCITED:
        return None
    directions, solid = direction_rule(plan.direction_order)
    n = directions @ axis_frame(plan.axis)
    P = plan.sector_momenta
    size = np.linalg.norm(P, axis=1)
    unit = np.where(size[:, None] > 0, P / np.maximum(size, 1e-300)[:, None], plan.axis)
    cosine = np.clip(unit @ n.T, -1.0, 1.0)
    table = direction_table(model, field, EMISSION, np.repeat(size, len(solid)), cosine.ravel())
    per_direction = np.bincount(table.row, weights=table.rate,
                                minlength=cosine.size).reshape(cosine.shape)
    return float(plan.sector_weights @ (per_direction @ solid))


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


def axis_bins(span: float, separation: float | None) -> int:
    """Bins of the 3D axis-momentum grid over `span`: MOMENTUM_BINS_3D, more for fringes.

    With a coherence distance d, at least FRINGE_BINS bins per pi / d, so that structure of
    period 2 pi / d (the fringes of a two-lobe density) is resolved.

    Parameters
    ----------
    span : float
        Width of the grid (momentum units).
    separation : float or None
        d (length units).

    Returns
    -------
    int
        Number of grid points.
    """
    if not separation:
        return MOMENTUM_BINS_3D
    return max(MOMENTUM_BINS_3D, math.ceil(span * FRINGE_BINS * separation / np.pi) + 1)


def grid_points(plan: FockPlan) -> int:
    """Bins of the axis-momentum grid `momentum_grid` will build, without the basis.

    The reachable kicks sum_j n_j k_j.axis are bounded by filling the modes with the largest
    (smallest) axial momenta first, up to max_occupation each and N quanta in all, N the largest
    quanta number with an allowed level (`allowed_level`).  1D: the box lattice points between
    the bounds; 3D: `axis_bins` over the sectors' axial range widened by the bounds.

    Parameters
    ----------
    plan : FockPlan

    Returns
    -------
    int
        G, at least the bins `momentum_grid` builds (exact when the extreme kicks are reachable).
    """
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
    if plan.modes.box_length is None:
        return axis_bins(float(sectors.max() - bottom - (sectors.min() - top)), plan.separation)
    step = 2 * np.pi / plan.modes.box_length
    return int(round((sectors.max() - bottom) / step) - round((sectors.min() - top) / step) + 1)


def momentum_grid(plan: FockPlan, basis: FockBasis):
    """Axis-momentum grid covering every reachable p = P - sum n k, and its spacing.

    1D: the box lattice itself (with lattice sectors every reachable momentum is a lattice
    point, one bin each; quadrature sectors fall into the nearest cell); 3D: `axis_bins`
    uniform bins over the reachable range.

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
    grid = (np.linspace(low, high, axis_bins(high - low, plan.separation)) if high > low
            else np.array([low, low + 1.0]))
    return grid, grid[1] - grid[0]
