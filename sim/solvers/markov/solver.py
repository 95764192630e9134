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

Solved with QuTiP 5 `mesolve` (sparse CSR operators); trajectories (`[run] trajectories`)
unravel the same generator with `mcsolve` (`trajectories`).

References: H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3
(Lindblad form, Born-Markov-secular derivation); the QuTiP 5 documentation (mesolve, mcsolve).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from dataclasses import field as dataclass_field

import numpy as np
import qutip

from ...physics.field import field_for
from ...physics.models import EXCITED, GROUND, level_of, model_for
from ..base import SAMPLE_BYTES, Estimate, Evolution, Solver, credit
from ..common import last_sample_time, snapshot_indices
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

#: bytes per stored entry of the CSR Liouvillian (complex value + 64-bit column index)
LIOUVILLIAN_ENTRY_BYTES = 24
#: qutip.liouvillian sums Kronecker products: peak memory while building, in final sizes
LIOUVILLIAN_BUILD_FACTOR = 3.0
#: n^2-long complex vectors alive while mesolve runs: the ODE's work arrays, the state, the dense
#: copy for the COM purity, the expectation values and qutip's copies of them; calibrated on a
#: measured 1D vacuum run (876 states: about 1 kB per density-matrix element at the peak)
ODE_VECTORS = 60
#: ODE steps per unit of (largest decay rate x time), on top of one step per sample time
STEPS_PER_DECAY = 20.0

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
        sel = np.nonzero(sector.levels == level)[0]
        com[np.ix_(lattice[sel], lattice[sel])] += rho[np.ix_(sel, sel)]
    return float(np.sum(np.abs(com) ** 2))


def evolve_sector(sector: Sector, grid: MarkovGrid, psi0: qutip.Qobj, times: np.ndarray,
                  snaps: np.ndarray, purity: bool) -> SectorRun:
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
    for a, b in zip(snaps[:-1], snaps[1:]):
        res = qutip.mesolve(generator, state, times[a:b + 1], [], e_ops=e_ops,
                            options={**SOLVER_OPTIONS, "store_final_state": True})
        for column, values in zip(series, res.expect):
            column.extend(list(values) if not column else list(values)[1:])
        state = res.final_state
        ground.append(np.real(state.diag())[ground_sel])
    arrays = [np.real(np.array(c)) for c in series]
    return SectorRun(arrays[0], arrays[1], arrays[2], arrays[4], arrays[3],
                     arrays[5] if purity else np.full(len(times), np.nan), ground, state)


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
        Accepted for a uniform interface (default False).

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
        sectors = [build_sector(model, field, grid, rho, w, start) for rho, w in grid.transverse]
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
        """Size of the run: the sector states of the lattice closure and their Liouvillian.

        For a sector of n states with jump operators of m_J entries, qutip.liouvillian stores
        N = n^2 (the diagonal: H and the anticommutators) + sum_J m_J^2 (the L (x) L* products)
        entries, so memory = max over sectors of LIOUVILLIAN_BUILD_FACTOR (LIOUVILLIAN_ENTRY_BYTES
        N + 8 n^2) + 16 ODE_VECTORS n^2, plus SAMPLE_BYTES per sample time and sector; work =
        8 N (samples + STEPS_PER_DECAY Gamma_max t_max) per sector.  The closure is built (as
        the run builds it) in the vacuum when the packet window has at most MAX_STATES points;
        otherwise it is bounded without building it: n = grid.points (1 + generations) states
        (at least MAX_STATES, where the closure is cut, or 2 grid.points), and 2 x directions x
        processes jump operators of n / 2 entries each.

        Returns
        -------
        Estimate
            states = the largest sector, keyed by grid.points, grid.span, grid.directions (3D)
            and run.samples; the Liouvillian is credited to grid.points, the series over the
            sample times to run.samples.

        Raises
        ------
        ScenarioError
            If grid.directions is given and is not 2 in 1D (`grid_for`).
        """
        s = self.scenario
        t_max, samples = last_sample_time(s), s.run.samples
        span, points = window_size(s.grid)
        grid = grid_for(s, np.array([0.0, t_max]))
        if points > MAX_STATES or grid.generations > 2:
            # not built: a thermal closure costs about as much as the run's own setup
            nodes = len(grid.transverse)
            n = points * (1 + grid.generations)
            n = n if n <= MAX_STATES else max(MAX_STATES, 2 * points)
            families = 2 * (len(grid.directions) or 2) * (2 if grid.generations > 2 else 1)
            sizes = [(n, [n // 2] * families, 0.0)] * nodes
        else:
            sizes = []
            for sec in self._sectors(t_max)[3]:
                out = np.zeros(sec.size)
                for _, sources, amps in sec.families.values():
                    np.add.at(out, np.asarray(sources, dtype=int), np.square(amps))
                sizes.append((sec.size, [len(a) for _, _, a in sec.families.values()],
                              float(out.max(initial=0.0))))
        peak, work = 0.0, 0.0
        for n, entries, top_rate in sizes:
            stored = n * n + sum(m * m for m in entries)
            peak = max(peak, LIOUVILLIAN_BUILD_FACTOR * (LIOUVILLIAN_ENTRY_BYTES * stored
                                                         + 8.0 * n * n) + 16.0 * ODE_VECTORS * n * n)
            work += 8.0 * stored * (samples + STEPS_PER_DECAY * top_rate * t_max)
        breakdown: dict = {}
        credit(breakdown, peak, {"grid.points": points})
        credit(breakdown, SAMPLE_BYTES * samples * len(sizes), {"run.samples": samples})
        keys = ("grid.points", "grid.span") + (("grid.directions",) if s.dimensions == 3 else ()) \
            + ("run.samples",)
        values = {"grid.points": points, "grid.span": span, "run.samples": samples}
        if s.dimensions == 3:
            values["grid.directions"] = s.grid.directions or POLAR_DIRECTIONS
        # the Liouvillian and the ODE vectors hold ~ states^2 ~ grid.points^2 numbers
        return Estimate(states=max(n for n, _, _ in sizes), memory_bytes=sum(breakdown.values()),
                        work=work, keys=keys, breakdown=breakdown, values=values,
                        scaling={"grid.points": 2.0, "run.samples": 1.0})

    def evolve(self, times):
        """Solve the Lindblad master equation of every sector and combine them.

        Each transverse sector b (weight W_b; one in 1D) is evolved by mesolve (`evolve_sector`) and
        the observables are the weighted sums P_e = sum_b W_b P_e,b, <p_z^n> = sum_b W_b <p_z^n>_b,
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
        runs = [evolve_sector(sec, grid, sec.initial_ket(amplitudes), times, snaps, one_d)
                for sec in sectors]
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
            quadrature's largest relative rate error (dimensionless), and two descriptive strings.
        """
        return {"grid_step": grid.step, "grid_points": grid.points, "grid_span": grid.span,
                "directions": len(grid.directions) or 2,
                "transverse_nodes": len(grid.transverse), "generations": grid.generations,
                "states": [sec.size for sec in sectors],
                "jump_operators": [len(sec.families) for sec in sectors],
                "direction_quadrature_error": max(sec.quadrature_error for sec in sectors),
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
