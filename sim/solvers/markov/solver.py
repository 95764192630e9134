"""`method = "markov"`: the Born-Markov-secular Lindblad master equation for internal (x) COM.

Tracing out the field in the Born, Markov and secular approximations gives

    d rho/dt = -i [H, rho] + Sum_J ( L_J rho L_J^dag - {L_J^dag L_J, rho} / 2 ),
    H = Sum_p E_e(p) |e,p><e,p| + E_g(p) |g,p><g,p|            (energies from M_g; no Lamb shift),

with one family of jump operators J per on-shell channel: per emission direction (two in 1D,
d = +-1, and one per root k of the energy mismatch), and per absorption direction in a thermal
field.  A channel takes |A, p> to |B, p + kick(p)>, with kick = q - p = -s k n fixed by energy
conservation E_A(p) = E_B(|p - s k n|) + s w_k, at the golden-rule rate (density)
Gamma_c(p) = 2 pi |g|^2 N(w_k) / |d mismatch / dk|, N = 1 + n for emission, n for absorption
(`sim.physics.golden_rule.channels_1d` in 1D, `lattice.direction_channels` in 3D).

Momentum lattice.  COM momenta along the packet axis live on the lattice p_n = p_ref + n dp.  A kick
that does not land on the lattice is split between the two neighbouring lattice shifts m and m + 1
with the hat weights 1 - f and f (kick / dp = m + f, 0 <= f < 1): this conserves the rate and the
mean kick exactly and adds the variance f (1 - f) dp^2 <= dp^2 / 4 per jump (no split with
non-negative weights can do better).  Each family member J = (channel c, shift m) is a rigid shift

    L_{c,m} = Sum_p sqrt(gamma_{c,m}(p)) |B, p + m dp><A, p|,
    gamma_{c,m}(p) = Gamma_c(p) max(0, 1 - |kick_c(p) / dp - m|),

so L^dag L = Sum_p gamma |A,p><A,p| is diagonal: every lattice momentum decays at exactly its
golden-rule rate, and in the vacuum P_e(t) = Sum_p |psi(p)|^2 exp(-Gamma(p) t).

Ground-state coherences are fed only through a common lattice shift, as if both branches emitted
the same quantum (which is how the exact single-excitation state carries them: one c_k(P) per
mode k):

    d rho_g(p + m dp, p' + m dp)/dt  gets  Sum_c sqrt(gamma_{c,m}(p) gamma_{c,m}(p')) rho_e(p, p');

different channels (directions) and different shifts feed no coherence (orthogonal field states).
Coherences between |e> and |g> are never created.  The lattice holds only the states the jumps can
reach from the packet window (a breadth-first closure); in a thermal field the closure is cut after
`generations` jumps (several times the expected number of jumps by t_max) and the population that
reaches the cut is reported in the run's warnings.

3D: a full 3D lattice is too large.  The reduced representation keeps the axial momentum p_z on the
lattice (coherently) and the transverse momentum as an incoherent mixture over its magnitude,
|p_perp| = rho_b with Gauss-Laguerre weights of the 2D Gaussian (TRANSVERSE_NODES nodes).  Each
state |level, rho_b, p_z> has the energy and rates of |p| = sqrt(p_z^2 + rho_b^2), so the vacuum
decay Int |psi(p)|^2 exp(-Gamma(|p|) t) is exact up to that (smooth, fast-converging) quadrature.
Emission directions n are a product quadrature: Gauss-Legendre in cos(theta) about the packet axis
(`grid.directions` nodes) times AZIMUTHAL_DIRECTIONS midpoint nodes in phi, mirror pairs +-phi
merged (their rates are equal).  Only the axial kick -s k n_z moves the state; the transverse kick
is not followed (rho_b stays), which matters only for repeated transitions in a thermal field,
where the rates are then taken at the pre-kick transverse momentum.  The per-axis recoil variance
along the axis is therefore right (k*^2/3 per quantum in the static limit); the 3D purity and the
position variance are not computed (nan).

The generator maps diagonal density matrices to diagonal ones (H is diagonal, each L_{c,m} moves
one state to one state, L^dag L is diagonal) and the coherences never feed the populations, which
obey the Pauli rate equation dP/dt = W P on their own (`Sector.rate_matrix`).  1D: the density
matrix is solved with QuTiP 5 `mesolve` (the COM purity and the final state need the coherences);
3D, where every output is diagonal: the populations, exactly, by scipy's `expm_multiply`.
Jumps that would move less than NEGLIGIBLE_TRANSFER of probability over the run are dropped
(e.g. the absorption of quanta many temperatures above the gap, which would otherwise grow the
closure).  Trajectories (`[run] trajectories`) unravel the same generator with `mcsolve`
(`trajectories`).

References: H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3
(Lindblad form, Born-Markov-secular derivation, the Pauli master equation); the QuTiP 5
documentation (mesolve, mcsolve); A. H. Al-Mohy & N. J. Higham, SIAM J. Sci. Comput. 33, 488
(2011) (expm_multiply).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from dataclasses import field as dataclass_field

import numpy as np
import qutip
import scipy.sparse as sparse
from scipy.sparse.linalg import expm_multiply

from ...physics.field import field_for
from ...physics.models import EXCITED, GROUND, level_of, model_for
from ..base import Estimate, Evolution, Solver, credit
from ..common import last_sample_time, snapshot_indices
from .cost import SectorSize, peak_bytes, run_seconds, run_work, series_bytes
from .lattice import (
    EDGE_TOLERANCE,
    MAX_STATES,
    POLAR_DIRECTIONS,
    SOLVER_OPTIONS,
    MarkovGrid,
    Sector,
    build_sector,
    grid_for,
    packet_amplitudes,
    window_size,
)
from .trajectories import unravel

# ---------------------------------------------------------------------------------------------
# The solver
# ---------------------------------------------------------------------------------------------


@dataclass
class SectorRun:
    """Time series of one sector (arrays over the sample times) and its ground snapshots.

    Parameters
    ----------
    excited : ndarray, shape (T,)
        Excited-state population (dimensionless).
    p1 : ndarray, shape (T,)
        <p_z>, axial momentum mean (momentum units).
    p2 : ndarray, shape (T,)
        <p_z^2> (momentum^2).
    trace : ndarray, shape (T,)
        Tr rho, the total probability (dimensionless).
    edge : ndarray, shape (T,)
        Population on the states whose jumps were cut (dimensionless).
    purity : ndarray, shape (T,)
        Tr rho_COM^2 (`com_purity`; dimensionless), or nan when not computed.
    ground : list of ndarray, optional
        Ground-state lattice probabilities (dimensionless) at each snapshot time.
    final_state : qutip.Qobj, optional
        The density matrix at the last sample time.
    """

    excited: np.ndarray
    p1: np.ndarray
    p2: np.ndarray
    trace: np.ndarray
    edge: np.ndarray
    purity: np.ndarray
    ground: list = dataclass_field(default_factory=list)  # ground probabilities per snapshot
    final_state: object = None


def com_purity(sector: Sector, rho: np.ndarray) -> float:
    """Tr rho_COM^2 of the COM state reduced over the internal levels.

    rho_COM(p, p') = rho_ee(p, p') + rho_gg(p, p') on the lattice (the e-g coherences drop out of
    the partial trace), and Tr rho_COM^2 = sum_pp' |rho_COM(p, p')|^2 for a Hermitian rho_COM.

    Parameters
    ----------
    sector : Sector
        Supplies each state's level and lattice index.
    rho : ndarray, shape (n, n)
        The sector's density matrix in its state basis (complex, dimensionless).

    Returns
    -------
    float
        Tr rho_COM^2 (dimensionless).
    """
    lattice = sector.index - sector.index.min()
    size = int(lattice.max()) + 1
    com = np.zeros((size, size), dtype=complex)
    for level in (GROUND, EXCITED):
        # A_l: the level's states -> their lattice points, so that rho_ll on the lattice is
        # A_l rho A_l^T; A_l (A_l rho)^T = A_l rho^T A_l^T = conj(A_l rho A_l^T), rho Hermitian
        mine = sector.levels == level
        A = sparse.csr_matrix((np.ones(int(mine.sum())), (lattice[mine], np.nonzero(mine)[0])),
                              shape=(size, sector.size))
        com += A @ (A @ rho).T
    return float(np.sum(np.abs(com) ** 2))


def progress_bar(enabled: bool, total: int, what: str):
    """A tqdm progress bar over `total` steps of `what` on stderr, or a silent stand-in.

    Parameters
    ----------
    enabled : bool
        Show the bar (the solver's `progress`).
    total : int
        Number of steps.
    what : str
        The step's description.

    Returns
    -------
    tqdm.tqdm
        Disabled (prints nothing, `update` and `close` do nothing) unless `enabled`.
    """
    from tqdm import tqdm

    return tqdm(total=total, desc=f"markov: {what}", leave=False, disable=not enabled)


def evolve_sector(sector: Sector, grid: MarkovGrid, psi0: qutip.Qobj, times: np.ndarray,
                  snaps: np.ndarray, purity: bool, progress: bool = False) -> SectorRun:
    """Lindblad evolution of one sector by qutip.mesolve, segment by segment between snapshots.

    d rho/dt = -i [H, rho] + sum_J (L_J rho L_J^dag - {L_J^dag L_J, rho} / 2) with the
    sector's diagonal H and jump operators (`Sector.liouvillian`); the expectation values of the
    excited projector, p_z, p_z^2, the cut-edge projector, the trace and (optionally) the COM
    purity are recorded at every sample time, and the ground-state lattice probabilities at each
    snapshot time.

    Parameters
    ----------
    sector : Sector
    grid : MarkovGrid
    psi0 : qutip.Qobj
        Initial ket of the sector (`Sector.initial_ket`).
    times : ndarray, shape (T,)
        Sample times (time units).
    snaps : ndarray of int
        Snapshot indices into `times`, first and last included.
    purity : bool
        Record Tr rho_COM^2 (`com_purity`).
    progress : bool, optional
        Show mesolve's progress bar for each segment.

    Returns
    -------
    SectorRun

    References
    ----------
    The QuTiP 5 documentation: mesolve.
    H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3.
    """
    generator = sector.liouvillian()
    pz = grid.momentum(sector.index)
    e_ops = [sector.diagonal(sector.levels == EXCITED), sector.diagonal(pz),
             sector.diagonal(pz * pz), sector.diagonal(sector.edge),
             lambda t, state: state.tr()]
    if purity:
        e_ops.append(lambda t, state: com_purity(sector, state.full()))
    series = [[] for _ in e_ops]
    ground_sel = sector.levels == GROUND
    state = qutip.ket2dm(psi0)
    ground = [np.real(state.diag())[ground_sel]]
    options = {**SOLVER_OPTIONS, "store_final_state": True,
               "progress_bar": "tqdm" if progress else False}
    for a, b in zip(snaps[:-1], snaps[1:]):
        res = qutip.mesolve(generator, state, times[a:b + 1], [], e_ops=e_ops, options=options)
        for column, values in zip(series, res.expect):
            column.extend(list(values) if not column else list(values)[1:])
        state = res.final_state
        ground.append(np.real(state.diag())[ground_sel])
    arrays = [np.real(np.array(c)) for c in series]
    return SectorRun(arrays[0], arrays[1], arrays[2], arrays[4], arrays[3],
                     arrays[5] if purity else np.full(len(times), np.nan), ground, state)


def propagate(generator, start: np.ndarray, times: np.ndarray) -> np.ndarray:
    """P(t) = exp(W (t - t_0)) P(t_0) at each of `times`, by scipy's expm_multiply.

    Equally spaced times are done in one call (`expm_multiply` over an interval), others one
    interval at a time.

    Parameters
    ----------
    generator : scipy.sparse matrix, shape (n, n)
        W (1 / time units).
    start : ndarray, shape (n,)
        P(t_0) (dimensionless).
    times : ndarray, shape (T,)
        Increasing times, t_0 first (time units).

    Returns
    -------
    ndarray, shape (T, n)
        P at each time (dimensionless).

    References
    ----------
    A. H. Al-Mohy & N. J. Higham, "Computing the action of the matrix exponential, with an
    application to exponential integrators", SIAM J. Sci. Comput. 33, 488 (2011) (the algorithm
    of scipy.sparse.linalg.expm_multiply).
    """
    steps = np.diff(times)
    if np.allclose(steps, steps[0], rtol=1e-12, atol=0.0):
        return expm_multiply(generator, start, start=0.0, stop=times[-1] - times[0],
                             num=len(times), endpoint=True)
    out = [start]
    for step in steps:
        out.append(expm_multiply(generator * step, out[-1]))
    return np.array(out)


def evolve_populations(sector: Sector, grid: MarkovGrid, psi0: qutip.Qobj, times: np.ndarray,
                       snaps: np.ndarray, tick=None) -> SectorRun:
    """The sector's populations under its rate equation dP/dt = W P (`Sector.rate_matrix`).

    The Lindblad generator maps the diagonal of rho onto itself and the coherences never feed it
    (`Sector.rate_matrix`), so every diagonal observable - P_e, <p_z>, <p_z^2>, the cut-edge
    population, the trace and the ground-state lattice probabilities - follows from the
    populations alone, exactly: P(0) = |psi0|^2, P(t) = exp(W t) P(0) (`propagate`, segment by
    segment between snapshots).  The COM purity needs the coherences and is not computed.

    Parameters
    ----------
    sector : Sector
    grid : MarkovGrid
    psi0 : qutip.Qobj
        Initial ket of the sector (`Sector.initial_ket`).
    times : ndarray, shape (T,)
        Sample times (time units).
    snaps : ndarray of int
        Snapshot indices into `times`, first and last included.
    tick : callable, optional
        Called once per segment (a progress bar's update).

    Returns
    -------
    SectorRun
        With purity nan and no final state.

    References
    ----------
    H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3
    (the Pauli master equation).
    """
    generator = sector.rate_matrix()
    pz = grid.momentum(sector.index)
    observed = np.stack([sector.levels == EXCITED, pz, pz * pz, np.ones(sector.size),
                         sector.edge]).astype(float)
    ground_sel = sector.levels == GROUND
    populations = np.abs(psi0.full().ravel()) ** 2
    series, ground = [observed @ populations], [populations[ground_sel]]
    for a, b in zip(snaps[:-1], snaps[1:]):
        segment = propagate(generator, populations, times[a:b + 1])
        series.append(segment[1:] @ observed.T)
        populations = segment[-1]
        ground.append(populations[ground_sel])
        if tick is not None:
            tick()
    excited, p1, p2, trace, edge = np.vstack([series[0][None, :], *series[1:]]).T
    return SectorRun(excited, p1, p2, trace, edge, np.full(len(times), np.nan), ground)


class MarkovSolver(Solver):
    """Born-Markov-secular Lindblad master equation on a momentum lattice.

    d rho/dt = -i [H, rho] + sum_J (L_J rho L_J^dag - {L_J^dag L_J, rho} / 2), with
    H = sum_p E_e(p) |e,p><e,p| + E_g(p) |g,p><g,p| (no Lamb shift) and, for each on-shell
    channel c and lattice shift m, L_{c,m} = sum_p sqrt(gamma_{c,m}(p)) |B, p + m dp><A, p|,
    gamma_{c,m}(p) = Gamma_c(p) max(0, 1 - |kick_c(p) / dp - m|), Gamma_c the golden-rule rate
    of the channel.  3D: the axial momentum on the lattice, the transverse momentum as a mixture
    over Gauss-Laguerre nodes of its magnitude.

    Parameters
    ----------
    scenario : Scenario
    progress : bool, optional
        Show progress bars on stderr: the closure's jump operators (per generation), and the
        evolution (mesolve's bar in 1D, per segment of the rate equation in 3D); default False.

    References
    ----------
    H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3.
    The QuTiP 5 documentation: mesolve, mcsolve.
    """

    name = "markov"

    def setup(self, times):
        """The model, field, lattice and sectors for the scenario and sample times.

        Parameters
        ----------
        times : ndarray
            Sample times (time units); the last one sets the thermal closure depth.

        Returns
        -------
        tuple
            (model, field, grid, sectors): the COMModel, the Field, the MarkovGrid and one Sector
            per transverse node (one in 1D).

        Raises
        ------
        ScenarioError
            If grid.directions is given and is not 2 in 1D (`grid_for`).
        """
        s = self.scenario
        model, field = model_for(s), field_for(s)
        grid = grid_for(s, times)
        start = level_of(s.packet.internal)
        bar = progress_bar(self.progress, len(grid.transverse) * grid.generations, "jump operators")
        sectors = [build_sector(model, field, grid, rho, w, start, bar.update)
                   for rho, w in grid.transverse]
        bar.close()
        return model, field, grid, sectors

    def _sectors(self, t_max: float):
        """`setup` for the sample times ending at t_max, built once and kept.

        Parameters
        ----------
        t_max : float
            The last sample time (time units); only it enters the lattice (`grid_for`).

        Returns
        -------
        tuple
            (model, field, grid, sectors) as `setup` returns them.
        """
        cached = getattr(self, "_setup_cache", None)
        if cached is None or cached[0] != t_max:
            cached = (t_max, self.setup(np.array([0.0, t_max])))
            self._setup_cache = cached
        return cached[1]

    def estimate(self) -> Estimate:
        """Size of the run: its sectors' lattice closures, their memory and wall time.

        Each sector is sized by `cost.SectorSize` (states, jump entries, rate-matrix pairs, the
        Liouvillian's entries); memory and seconds follow from the measured cost model of
        `sim.solvers.markov.cost` (`cost.peak_bytes`, `cost.run_seconds`: the closure's build
        and the evolution, the density matrix by mesolve in 1D, the populations in 3D).  The
        closure is built (as the run builds it, and kept for it) when the packet window has at
        most MAX_STATES points; otherwise it is bounded without building it
        (`cost.SectorSize.bound`).

        Returns
        -------
        Estimate
            states = the largest sector; memory (bytes), work (floating-point operations) and
            seconds (wall time of set-up and evolution, this machine); keyed by grid.points,
            grid.span, grid.directions (3D) and run.samples; the sectors are credited to
            grid.points (scaling 2 in 1D: the density matrix holds n^2 numbers; 1 in 3D), the
            series over the sample times to run.samples.

        Raises
        ------
        ScenarioError
            If grid.directions is given and is not 2 in 1D (`grid_for`).
        """
        s = self.scenario
        t_max, samples = last_sample_time(s), s.run.samples
        span, points = window_size(s.grid)
        density = s.dimensions == 1
        if points <= MAX_STATES:
            _, field, grid, sectors = self._sectors(t_max)
            sizes = [SectorSize.of(sec, grid, field.temperature > 0) for sec in sectors]
        else:
            model, field = model_for(s), field_for(s)
            grid = grid_for(s, np.array([0.0, t_max]))
            sizes = [SectorSize.bound(model, field, grid, rho) for rho, _ in grid.transverse]
        segments = len(snapshot_indices(samples)) - 1
        breakdown: dict = {}
        credit(breakdown, peak_bytes(sizes, samples, segments, density), {"grid.points": points})
        credit(breakdown, series_bytes(samples, len(sizes)), {"run.samples": samples})
        keys = ("grid.points", "grid.span") + (("grid.directions",) if s.dimensions == 3 else ()) \
            + ("run.samples",)
        values = {"grid.points": points, "grid.span": span, "run.samples": samples}
        if s.dimensions == 3:
            values["grid.directions"] = s.grid.directions or POLAR_DIRECTIONS
        return Estimate(states=max(size.states for size in sizes),
                        memory_bytes=sum(breakdown.values()),
                        work=run_work(sizes, samples, segments, t_max, density),
                        seconds=run_seconds(sizes, samples, segments, t_max, density),
                        keys=keys, breakdown=breakdown, values=values,
                        scaling={"grid.points": 2.0 if density else 1.0, "run.samples": 1.0})

    def evolve(self, times):
        """Solve the Lindblad master equation of every sector and combine them.

        Each transverse sector b (weight W_b; one in 1D) is evolved - its density matrix by
        mesolve in 1D (`evolve_sector`), its populations by the rate equation in 3D
        (`evolve_populations`) - and the observables are the weighted sums
        P_e = sum_b W_b P_e,b, <p_z^n> = sum_b W_b <p_z^n>_b,
        Var p = <p_z^2> - <p_z>^2.  With run.trajectories > 0 the same generator is unravelled into
        quantum trajectories (`unravel`), recorded in the table "emissions".

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units).

        Returns
        -------
        Evolution
            P_e(t) (dimensionless); <p>, Var p along the axis (momentum units, momentum^2);
            ground-state densities at the snapshot times and the initial density on the lattice
            (1 / momentum units); norm = Tr rho (dimensionless); in 1D the COM purity and the final
            density matrix.  No x variance and no Lamb shift.

        Raises
        ------
        ScenarioError
            If grid.directions is given and is not 2 in 1D.

        References
        ----------
        H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3.
        J. Dalibard, Y. Castin & K. Molmer, Phys. Rev. Lett. 68, 580 (1992) (trajectories).
        The QuTiP 5 documentation: mesolve, mcsolve.
        """
        s = self.scenario
        model, field, grid, sectors = self._sectors(float(times[-1]))
        start = level_of(s.packet.internal)
        amplitudes = packet_amplitudes(s, grid, start)
        snaps = snapshot_indices(len(times))
        one_d = s.dimensions == 1
        if one_d:
            runs = [evolve_sector(sec, grid, sec.initial_ket(amplitudes), times, snaps, True,
                                  self.progress) for sec in sectors]
        else:
            bar = progress_bar(self.progress, len(sectors) * (len(snaps) - 1), "rate equation")
            runs = [evolve_populations(sec, grid, sec.initial_ket(amplitudes), times, snaps,
                                       bar.update) for sec in sectors]
            bar.close()
        weights = [sec.weight for sec in sectors]

        def combine(attr):
            return sum(w * getattr(r, attr) for w, r in zip(weights, runs))

        excited, p1, p2 = combine("excited"), combine("p1"), combine("p2")
        lo = min(int(sec.index.min()) for sec in sectors)
        hi = max(int(sec.index.max()) for sec in sectors)
        lattice = np.arange(lo, hi + 1)
        density = np.zeros((len(lattice), len(snaps)))
        for w, sec, run in zip(weights, sectors, runs):
            at = sec.index[sec.levels == GROUND] - lo
            for j, probs in enumerate(run.ground):
                np.add.at(density[:, j], at, w * probs / grid.step)
        initial = np.zeros(len(lattice))
        for (_, n), a in amplitudes.items():
            initial[n - lo] += a * a / grid.step
        warnings = self.warnings(model, grid, combine("edge"))
        evo = Evolution(excited=excited, p_mean=p1, p_var=p2 - p1 * p1,
                        momentum_grid=grid.momentum(lattice), snapshot_times=times[snaps],
                        momentum_density=density, initial_density=initial,
                        purity=runs[0].purity if one_d else None, norm=combine("trace"),
                        final_state=runs[0].final_state if one_d else None,
                        details=self.details(grid, sectors), warnings=warnings)
        if s.run.trajectories > 0:
            record = unravel(sectors, grid, amplitudes, times, s.run.trajectories, s.run.seed)
            evo.tables["emissions"] = record.table
            evo.details["trajectories"] = record.summary(times, excited)
        return evo

    def warnings(self, model, grid, edge_population) -> list[str]:
        """Warnings of the run: the closure cut, and the secular generator's dropped terms.

        Parameters
        ----------
        model : COMModel
        grid : MarkovGrid
        edge_population : ndarray
            Population on the cut states over time (dimensionless).

        Returns
        -------
        list of str
            A warning when the largest edge population exceeds EDGE_TOLERANCE, and one when
            coupling.rotating_wave = false (only energy-conserving jumps are kept).
        """
        s = self.scenario
        out = []
        worst = float(np.max(edge_population))
        if worst > EDGE_TOLERANCE:
            out.append(f"markov closure cut: population {worst:.2e} reached states after "
                       f"{grid.generations} jumps (or {MAX_STATES} states), whose further jumps "
                       "are not followed; shorten run.t_max or coarsen grid.points")
        if not s.coupling.rotating_wave:
            out.append("coupling.rotating_wave = false: the secular master equation keeps only "
                       "energy-conserving (rotating-wave) jumps; counter-rotating terms are dropped")
        return out

    def details(self, grid, sectors) -> dict:
        """Facts of the discretisation for summary.json.

        Parameters
        ----------
        grid : MarkovGrid
        sectors : list of Sector

        Returns
        -------
        dict
            grid_step (momentum units), grid_points, grid_span (sigma_p each side), directions,
            transverse_nodes, generations, states and jump_operators per sector, the direction
            quadrature's largest relative rate error (dimensionless), and three descriptive
            strings (what was evolved, the Lamb shift, the kick split).
        """
        return {"grid_step": grid.step, "grid_points": grid.points, "grid_span": grid.span,
                "directions": len(grid.directions) or 2,
                "transverse_nodes": len(grid.transverse), "generations": grid.generations,
                "states": [sec.size for sec in sectors],
                "jump_operators": [len(sec.families) for sec in sectors],
                "direction_quadrature_error": max(sec.quadrature_error for sec in sectors),
                "evolution": ("density matrix (mesolve)" if not grid.directions else
                              "populations (the rate equation, exact for every 3D output)"),
                "lamb_shift": "not included (secular Lindblad generator without it)",
                "kick_split": "hat weights on neighbouring lattice shifts (rate and mean kick "
                              "conserved; extra variance <= step^2/4 per jump)"}

    def refined(self):
        """The same solver on a finer lattice.

        Half the lattice step over the same span (2 points - 1), twice the polar directions in 3D;
        the refined run skips the trajectories (the master equation is what is being refined).

        Returns
        -------
        MarkovSolver
        """
        s = self.scenario
        span, points = window_size(s.grid)
        directions = 2 * (s.grid.directions or POLAR_DIRECTIONS) if s.dimensions == 3 else None
        grid = replace(s.grid, points=2 * points - 1, span=span, directions=directions)
        return MarkovSolver(replace(s, grid=grid, run=replace(s.run, trajectories=0, seed=None)),
                            progress=self.progress)
