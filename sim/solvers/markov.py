"""`method = "markov"`: the Born-Markov-secular Lindblad master equation for internal (x) COM.

Tracing out the field in the Born, Markov and secular approximations (physics.md sec. 4) gives

    d rho/dt = -i [H, rho] + Sum_J ( L_J rho L_J^dag - {L_J^dag L_J, rho} / 2 ),
    H = Sum_p E_e(p) |e,p><e,p| + E_g(p) |g,p><g,p|            (energies from M_g; no Lamb shift),

with one family of jump operators J per on-shell channel: per emission direction (two in 1D,
d = +-1, and one per root k of the energy mismatch), and per absorption direction in a thermal
field.  A channel takes |A, p> to |B, p + kick(p)>, with kick = q - p = -s k n fixed by energy
conservation E_A(p) = E_B(|p - s k n|) + s w_k, at the golden-rule rate (density)
Gamma_c(p) = 2 pi |g|^2 N(w_k) / |d mismatch / dk|, N = 1 + n for emission, n for absorption
(`sim.rates.channels_1d` in 1D, `direction_channels` below in 3D).

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
the same quantum (which is how the exact single-excitation state carries them, physics.md sec. 2):

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

Solved with QuTiP 5 `mesolve` (sparse CSR operators); trajectories (`[run] trajectories`) unravel the
same generator with `mcsolve` (sim.trajectories).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field as dataclass_field, replace

import numpy as np
import qutip
import scipy.sparse as sparse

from ..field import field_for, packet_for
from ..models import EXCITED, GROUND, model_for
from ..rates import (ABSORPTION, EMISSION, Channel, bracketed_roots, channels_1d,
                     coupling_density, kick_moments, reach)
from ..scenario import ScenarioError
from .base import Evolution, Solver, snapshot_indices

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
#: a kick within this fraction of a lattice step from a lattice shift is taken on it
SNAP = 1e-9
#: largest number of states of one sector before the closure is cut
MAX_STATES = 3000
#: thermal closure: generations = EXPECTED_JUMPS_FACTOR * (expected jumps) + 4 sqrt(.) + 3
EXPECTED_JUMPS_FACTOR = 1.0
#: population in the cut states above which the run warns
EDGE_TOLERANCE = 1e-6
#: ODE options of mesolve / mcsolve (QuTiP 5)
SOLVER_OPTIONS = {"method": "adams", "atol": 1e-12, "rtol": 1e-10, "nsteps": 1_000_000,
                  "progress_bar": False}


# ---------------------------------------------------------------------------------------------
# On-shell channels
# ---------------------------------------------------------------------------------------------


def direction_channels(model, field, process, P: float, cos_alpha: float) -> list[Channel]:
    """On-shell quanta of a 3D detector at momentum |P| along a direction n at angle alpha to P.

    Roots k > 0 of E_A(|P|) - E_B(q) - s w_k with q = |P - s k n| = sqrt(P^2 + k^2 - 2 s P k cos a);
    `rate` is the golden-rule rate per solid angle of n (inverse time per steradian),

        dGamma/dOmega = 2 pi k^2 |g(k)|^2 N(w_k) / |d mismatch/dk|,
        d mismatch/dk = -v_B(q) (k - s P cos a) / q - s k / w_k,

    and `kick` = -s k is the recoil along n (q_vec - P = -s k n).  Integrated over all directions
    it is `sim.rates.kick_moments(...).rate` (tested).
    """
    s = process.sign
    e_initial = float(model.energy(process.initial, P))

    def final_momentum(k):
        return np.sqrt(np.maximum(P * P + k * k - 2 * s * P * k * cos_alpha, 0.0))

    def mismatch(k):
        return e_initial - model.energy(process.final, final_momentum(k)) - s * field.frequency(k)

    out = []
    for k in bracketed_roots(mismatch, reach(model, field, process, P)):
        q = float(final_momentum(k))
        slope = (-model.velocity(process.final, q) * (k - s * P * cos_alpha) / max(q, 1e-300)
                 - s * k / field.frequency(k))
        density = 2 * np.pi * k * k * coupling_density(model, field, process, k, P, q) / abs(slope)
        out.append(Channel(float(-s * k), float(density), float(k)))
    return out


@dataclass(frozen=True)
class Direction:
    """One emission direction of the 3D quadrature: n = (sin t cos phi, sin t sin phi, cos t)."""

    polar: float  # cos(theta) about the packet axis
    azimuth: float  # phi, with the detector's transverse momentum along phi = 0
    weight: float  # solid angle it stands for (steradian; mirror pair included)


def direction_quadrature(polar_nodes: int, azimuth_nodes: int = AZIMUTHAL_DIRECTIONS):
    """Gauss-Legendre in cos(theta) x midpoint in phi on [0, pi]; weights sum to 4 pi."""
    u, w = np.polynomial.legendre.leggauss(polar_nodes)
    phis = (np.arange(azimuth_nodes) + 0.5) * np.pi / azimuth_nodes
    return tuple(Direction(float(a), float(phi), float(b * 2 * np.pi / azimuth_nodes))
                 for a, b in zip(u, w) for phi in phis)


def transverse_quadrature(sigma: float, nodes: int = TRANSVERSE_NODES):
    """Magnitudes rho_b and weights of the 2D Gaussian transverse momentum (std sigma per axis).

    rho^2 / (2 sigma^2) is exponentially distributed: Gauss-Laguerre nodes x_b give rho_b =
    sigma sqrt(2 x_b) with the Gauss-Laguerre weights.
    """
    x, w = np.polynomial.laguerre.laggauss(nodes)
    return tuple((float(sigma * np.sqrt(2 * a)), float(b)) for a, b in zip(x, w / w.sum()))


def lattice_shares(kick: float, step: float) -> list[tuple[int, float]]:
    """Hat-function split of a kick onto lattice shifts: [(m, 1 - f), (m + 1, f)], kick/dp = m + f.

    Conserves probability and mean kick; a kick within SNAP of a lattice shift stays whole.
    """
    x = kick / step
    m = math.floor(x)
    f = x - m
    if f < SNAP:
        return [(m, 1.0)]
    if f > 1 - SNAP:
        return [(m + 1, 1.0)]
    return [(m, 1.0 - f), (m + 1, f)]


# ---------------------------------------------------------------------------------------------
# The lattice and its sectors
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MarkovGrid:
    """Momentum lattice p_n = origin + n step (axial), packet window n = 0 .. points - 1."""

    origin: float
    step: float
    points: int
    span: float  # packet widths each side covered by the window
    transverse: tuple  # ((rho_b, weight), ...); ((0, 1),) in 1D
    directions: tuple  # Direction quadrature (3D) or () in 1D
    generations: int  # largest number of jumps the closure follows

    def momentum(self, n):
        """Axial momentum of lattice index n."""
        return self.origin + np.asarray(n) * self.step


def window_size(g) -> tuple[float, int]:
    """(span in sigma_p each side, points) of the packet window: [grid] keys or the defaults."""
    span = g.span if g.span is not None else WINDOW_WIDTHS
    points = g.points if g.points is not None else 2 * math.ceil(span * STEPS_PER_WIDTH) + 1
    return span, points


def grid_for(scenario, times) -> MarkovGrid:
    """The lattice from the [grid] keys or the automatic defaults (see module docstring)."""
    g = scenario.grid
    packet = packet_for(scenario)
    sigma = packet.momentum_std
    span, points = window_size(g)
    step = 2 * span * sigma / (points - 1)
    if scenario.dimensions == 1:
        if g.directions is not None and g.directions != 2:
            raise ScenarioError(f"grid.directions = {g.directions}: a 1D field has two emission "
                                "directions; allowed: 2 (or omit the key)")
        transverse, directions = ((0.0, 1.0),), ()
    else:
        transverse = transverse_quadrature(sigma)
        directions = direction_quadrature(g.directions or POLAR_DIRECTIONS)
    model, field = model_for(scenario), field_for(scenario)
    p0 = scenario.mean_momentum
    if scenario.field.temperature > 0:
        total = (kick_moments(model, field, EMISSION, p0).rate
                 + kick_moments(model, field, ABSORPTION, p0).rate)
        jumps = EXPECTED_JUMPS_FACTOR * total * float(times[-1])
        generations = int(math.ceil(jumps + 4 * math.sqrt(jumps) + 3))
    else:
        generations = 2  # emission, then nothing: absorption needs quanta
    return MarkovGrid(p0 - span * sigma, step, points, span, transverse, directions, generations)


@dataclass
class Sector:
    """States |level, n> of one transverse node and their generator pieces."""

    rho: float
    weight: float
    levels: np.ndarray
    index: np.ndarray  # lattice index n of each state
    energies: np.ndarray
    families: dict  # (process sign, channel label, shift) -> (targets, sources, amplitudes)
    edge: np.ndarray  # states whose jumps were cut (boolean)
    quadrature_error: float = 0.0  # 3D: largest relative error of the direction quadrature's rate

    @property
    def size(self) -> int:
        return len(self.levels)

    def hamiltonian(self) -> qutip.Qobj:
        return qutip.Qobj(sparse.diags(self.energies, format="csr"))

    def jump_operators(self) -> tuple[list[qutip.Qobj], list[tuple]]:
        """The Lindblad operators L_{c,m} (CSR) and their family labels."""
        ops, labels = [], []
        n = self.size
        for label, (targets, sources, amps) in self.families.items():
            ops.append(qutip.Qobj(sparse.csr_matrix((amps, (targets, sources)), shape=(n, n))))
            labels.append(label)
        return ops, labels

    def liouvillian(self) -> qutip.Qobj:
        """The Lindblad generator as one sparse superoperator (one product per ODE step)."""
        ops, _ = self.jump_operators()
        return qutip.liouvillian(self.hamiltonian(), ops)

    def diagonal(self, values) -> qutip.Qobj:
        return qutip.Qobj(sparse.diags(np.asarray(values, dtype=float), format="csr"))

    def initial_ket(self, amplitudes: dict) -> qutip.Qobj:
        psi = np.zeros(self.size, dtype=complex)
        lookup = {(int(l), int(n)): i for i, (l, n) in enumerate(zip(self.levels, self.index))}
        for key, value in amplitudes.items():
            psi[lookup[key]] = value
        return qutip.Qobj(psi.reshape(-1, 1))


def _channels(model, field, process, grid: MarkovGrid, rho: float, n: int):
    """[(label, axial kick, rate)] of `process` from lattice state n at transverse momentum rho."""
    pz = float(grid.momentum(n))
    if not grid.directions:
        out, count = [], {}
        for c in channels_1d(model, field, process, pz):
            direction = -process.sign * int(np.sign(c.kick))
            count[direction] = count.get(direction, -1) + 1
            out.append(((direction, count[direction]), c.kick, c.rate))
        return out
    P = math.hypot(pz, rho)
    out = []
    for j, d in enumerate(grid.directions):
        sin_t = math.sqrt(max(0.0, 1 - d.polar ** 2))
        cos_alpha = (rho * sin_t * math.cos(d.azimuth) + pz * d.polar) / P if P > 0 else 1.0
        for r, c in enumerate(direction_channels(model, field, process, P, cos_alpha)):
            out.append(((j, r), c.kick * d.polar, c.rate * d.weight))
    return out


def build_sector(model, field, grid: MarkovGrid, rho: float, weight: float,
                 start_level: int) -> Sector:
    """Breadth-first closure of the packet window under the jumps, up to grid.generations."""
    processes = {EXCITED: EMISSION, GROUND: ABSORPTION}
    thermal = field.temperature > 0

    quadrature_error = [0.0]

    def jumps(level, n):
        if level == GROUND and not thermal:
            return []
        process = processes[level]
        channels = _channels(model, field, process, grid, rho, n)
        if grid.directions and channels:
            # the direction quadrature carries the angular law; its sum is set to the exact rate
            exact = kick_moments(model, field, process, math.hypot(grid.momentum(n), rho)).rate
            total = sum(c[2] for c in channels)
            quadrature_error[0] = max(quadrature_error[0], abs(total / exact - 1))
            channels = [(label, kick, rate * exact / total) for label, kick, rate in channels]
        out = []
        for label, kick, rate in channels:
            for shift, share in lattice_shares(kick, grid.step):
                out.append(((process.sign, label, shift), shift, rate * share))
        return out

    states = {(start_level, n): None for n in range(grid.points)}
    outgoing = {}
    frontier = list(states)
    for _ in range(grid.generations):
        new = []
        for level, n in frontier:
            outgoing[(level, n)] = jumps(level, n)
            for _, shift, _ in outgoing[(level, n)]:
                target = (1 - level, n + shift)
                if target not in states:
                    states[target] = None
                    new.append(target)
        frontier = new
        if not frontier or len(states) > MAX_STATES:
            break
    edge_states = {s for s in frontier if jumps(*s)}
    order = sorted(states, key=lambda s: (s[1], s[0]))
    position = {s: i for i, s in enumerate(order)}
    levels = np.array([s[0] for s in order])
    index = np.array([s[1] for s in order])
    pz = grid.momentum(index)
    p = np.hypot(pz, rho)
    energies = np.where(levels == EXCITED, model.energy(EXCITED, p), model.energy(GROUND, p))
    families: dict = {}
    for (level, n), out in outgoing.items():
        for label, shift, rate in out:
            if rate <= 0:
                continue
            targets, sources, amps = families.setdefault(label, ([], [], []))
            targets.append(position[(1 - level, n + shift)])
            sources.append(position[(level, n)])
            amps.append(math.sqrt(rate))
    edge = np.array([s in edge_states for s in order])
    return Sector(rho, weight, levels, index, energies, families, edge, quadrature_error[0])


# ---------------------------------------------------------------------------------------------
# The solver
# ---------------------------------------------------------------------------------------------


def packet_amplitudes(scenario, grid: MarkovGrid, level: int) -> dict:
    """sqrt(|psi(p_n)|^2 dp) of the axial packet on the window, normalised on the lattice."""
    packet = packet_for(scenario)
    n = np.arange(grid.points)
    p = grid.momentum(n)
    density = np.exp(-0.5 * ((p - scenario.mean_momentum) / packet.momentum_std) ** 2)
    amps = np.sqrt(density / density.sum())
    return {(level, int(i)): float(a) for i, a in zip(n, amps)}


@dataclass
class SectorRun:
    """Time series of one sector (arrays over the sample times) and its ground snapshots."""

    excited: np.ndarray
    p1: np.ndarray
    p2: np.ndarray
    trace: np.ndarray
    edge: np.ndarray
    purity: np.ndarray
    ground: list = dataclass_field(default_factory=list)  # ground probabilities per snapshot
    final_state: object = None


def com_purity(sector: Sector, rho: np.ndarray) -> float:
    """Tr rho_COM^2 of the COM state reduced over the internal levels (rho_COM = rho_ee + rho_gg)."""
    lattice = sector.index - sector.index.min()
    size = int(lattice.max()) + 1
    com = np.zeros((size, size), dtype=complex)
    for level in (GROUND, EXCITED):
        sel = np.nonzero(sector.levels == level)[0]
        com[np.ix_(lattice[sel], lattice[sel])] += rho[np.ix_(sel, sel)]
    return float(np.sum(np.abs(com) ** 2))


def evolve_sector(sector: Sector, grid: MarkovGrid, psi0: qutip.Qobj, times: np.ndarray,
                  snaps: np.ndarray, purity: bool) -> SectorRun:
    """mesolve of one sector, segment by segment between snapshot times."""
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
    """Lindblad master equation on a momentum lattice (see module docstring)."""

    name = "markov"

    def setup(self, times):
        """(model, field, grid, sectors) for the scenario and sample times."""
        s = self.scenario
        model, field = model_for(s), field_for(s)
        grid = grid_for(s, times)
        start = EXCITED if s.packet.internal == "excited" else GROUND
        sectors = [build_sector(model, field, grid, rho, w, start) for rho, w in grid.transverse]
        return model, field, grid, sectors

    def evolve(self, times):
        s = self.scenario
        model, field, grid, sectors = self.setup(times)
        start = EXCITED if s.packet.internal == "excited" else GROUND
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
            from ..trajectories import unravel

            record = unravel(sectors, grid, amplitudes, times, s.run.trajectories, s.run.seed)
            evo.tables["emissions"] = record.table
            evo.details["trajectories"] = record.summary(times, excited)
        return evo

    def warnings(self, model, grid, edge_population) -> list[str]:
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
        packet = packet_for(s)
        if model.name == "galilean" and packet.fastest_momentum() > model.ground_mass:
            out.append("galilean packet reaches |v| > 1: anomalous-Doppler (counter-rotating) "
                       "emission becomes resonant there and is dropped by the rotating-wave "
                       "master equation")
        return out

    def details(self, grid, sectors) -> dict:
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
        """Half the lattice step over the same span, twice the polar directions in 3D; the
        refined run skips the trajectories (the master equation is what is being refined)."""
        s = self.scenario
        span, points = window_size(s.grid)
        directions = 2 * (s.grid.directions or POLAR_DIRECTIONS) if s.dimensions == 3 else None
        grid = replace(s.grid, points=2 * points - 1, span=span, directions=directions)
        return MarkovSolver(replace(s, grid=grid, run=replace(s.run, trajectories=0, seed=None)),
                            progress=self.progress)
