"""`method = "fock"`: a few field modes in a truncated Fock space, with or without the RWA.

The full monopole Hamiltonian of physics.md section 1 on a bath of M discrete modes k_j,

    H = E_g(P_com) |g><g| + E_e(P_com) |e><e| + sum_j w_j a_j^dag a_j
        + (sigma+ + sigma-) (x) sum_j c sqrt(mu_j) [a_j e^{i k_j.X} V + h.c.],

with c = model.coupling_factor() (lambda, or lambda_2 for `one-particle`), V(p_e, p_g) the model's
vertex, w_j = sqrt(k_j^2 + m^2) and mu_j = F(k_j)^2 / ((2 pi)^d 2 w_j) x (measure of mode j), so that
sum_j mu_j f(k_j) approximates Int d^dk F^2 / ((2 pi)^d 2 w) f(k).  Every term conserves the total
momentum P = p + sum_j n_j k_j, so one sector is spanned by {|level, n_1..n_M>} with the COM momentum
fixed, p = P - sum_j n_j k_j.  A link adds (or removes) one quantum of mode j and flips the level;
its matrix element is

    <other, n + 1_j| H |level, n> = c V(p_e, p_g) sqrt(mu_j) sqrt(n_j + 1).

Truncation: n_j <= max_occupation, sum_j n_j <= max_quanta.  Only reachable states are kept: with
all terms, the parity (level + sum n) mod 2 is conserved, so the level is fixed by the number of
quanta; under the RWA the excitation number level + sum n is conserved.  Within each rule every
state of the truncated space is reachable from |level0, vac> (quanta can be added one at a time).

Baths:
- 1D: the exact solver's periodic box (`sim.bath.box_sector`): k = 2 pi n / L, |k| <= cutoff
  (n = 0 only for a massive field), mu = F^2 / (L 2 w): Int dk / 2 pi -> (1/L) sum.  When the box
  holds more modes than `bath.fock_modes`, the modes kept are the most strongly coupled to the first
  transition out of the initial state, ranked by |g_j|^2 / (D_j^2 + (2 pi / L)^2) with D_j its
  energy mismatch (the weight of mode j in second-order perturbation theory, regularised by the
  mode spacing).
- 3D: 6 directions (the octahedron +-e1, +-e2, +-e3 with e3 the packet axis: a spherical 3-design,
  weight 4 pi / 6 each; common practice) times R = ceil(fock_modes / 6) Gauss-Legendre nodes in |k|
  on [0, cutoff] with weights W_r k_r^2.  A crude few-mode bath: it models, it does not converge to,
  the 3D continuum.

Packet: one sector per packet momentum P with weight |psi(P)|^2.  1D: the exact solver's lattice
sectors (`sim.bath.sector_lattice`), thinned to at most `bath.sectors` (default
MAX_DEFAULT_SECTORS); 3D: `bath.sectors` (default 3) Gauss-Hermite nodes of the axial marginal, on the axis (the
transverse spread of the packet is neglected).  Each sector is evolved from |level0, P; vac> by
qutip.sesolve; all observables are diagonal in the basis and are read off |psi|^2.

Units: hbar = c = 1; energies and momenta in the energy unit, times and lengths in its inverse.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property
from itertools import combinations_with_replacement

import numpy as np
import qutip
import scipy.sparse as sp

from ..bath import box_sector, emitted_speed, sector_lattice
from ..exact import level_amplitude, sector_lamb_shift
from ..field import field_for, packet_for
from ..models import EXCITED, GROUND, model_for
from ..scenario import ScenarioError, with_keys
from .base import Estimate, Evolution, ResourceError, Solver, sample_times, snapshot_indices

#: default number of 1D box modes kept (the box may hold fewer)
DEFAULT_FOCK_MODES_1D = 24
#: default number of |k| nodes of the 3D bath (6 directions each)
DEFAULT_RADIAL_NODES_3D = 4
#: directions of the 3D bath (octahedron)
DIRECTIONS_3D = 6
#: default total-quanta cutoff with counter-rotating terms: two rounds of virtual pair creation
DEFAULT_MAX_QUANTA = 4
#: default box length: this margin times the time the emitted wave needs to come back, (1 + v) t_max
BOX_MARGIN = 1.1
#: at most this many 1D packet sectors by default (each is one sesolve)
MAX_DEFAULT_SECTORS = 9
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
#: bytes per stored Hamiltonian entry (complex value + index in CSR, plus COO build temporaries)
BYTES_PER_ENTRY = 64
#: bytes per basis state besides the Hamiltonian (ODE work vectors, observables, lookup keys)
BYTES_PER_STATE = 512
#: size keys named in a refusal, the most effective first
SIZE_KEYS = ("bath.max_quanta", "bath.fock_modes", "bath.max_occupation")


# --------------------------------------------------------------------------------------------
# The bath: modes and packet sectors.
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FockModes:
    """M discrete field modes: momenta k_j (M x d), frequencies w_j, measures mu_j (see module).

    `box_length` is L of the 1D box (None in 3D); `available` counts the modes the box holds within
    the cutoff before the `fock_modes` selection.
    """

    momenta: np.ndarray
    frequencies: np.ndarray
    weights: np.ndarray
    box_length: float | None
    available: int

    @property
    def count(self) -> int:
        return len(self.frequencies)


@dataclass(frozen=True)
class FockPlan:
    """Everything a run is built from: modes, sectors (momenta S x d, weights), cutoffs, rule."""

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

    Energies E_other(|P - k_j|) + w_j and couplings g_j = c V(p_e, p_g) sqrt(mu_j) (energy units),
    V taken with the excited leg first.  These define the RWA star (level = EXCITED) and the
    second-order transition probability.
    """
    momentum = np.asarray(momentum, dtype=float)
    after = np.linalg.norm(momentum[None, :] - modes.momenta, axis=1)
    before = float(np.linalg.norm(momentum))
    energies = model.energy(1 - level, after) + modes.frequencies
    vertex = model.vertex(before, after) if level == EXCITED else model.vertex(after, before)
    return energies, model.coupling_factor() * vertex * np.sqrt(modes.weights)


def lattice_modes(field, model, box_length: float, count: int, momentum, level: int):
    """1D box modes, the `count` most strongly coupled to the first transition (module docstring)."""
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
    """3D bath: 6 octahedron directions (e3 = axis) x Gauss-Legendre |k| nodes on [0, cutoff]."""
    e3 = axis / np.linalg.norm(axis)
    helper = np.array([1.0, 0, 0]) if abs(e3[0]) < 0.9 else np.array([0, 1.0, 0])
    e1 = np.cross(e3, helper)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(e3, e1)
    directions = np.array([e1, -e1, e2, -e2, e3, -e3])
    x, w = np.polynomial.legendre.leggauss(radial_nodes)
    k = 0.5 * field.cutoff * (x + 1)
    radial = 0.5 * field.cutoff * w * k ** 2 * field.mode_weight(k) * (4 * np.pi / DIRECTIONS_3D)
    momenta = (k[:, None, None] * directions[None, :, :]).reshape(-1, 3)
    return FockModes(momenta, np.repeat(field.frequency(k), DIRECTIONS_3D),
                     np.repeat(radial, DIRECTIONS_3D), None, len(momenta))


def sector_grid_1d(scenario, spacing: float, sectors: int | None):
    """The exact solver's 1D sectors (`sim.bath.sector_lattice`): lattice momenta over the packet,
    thinned to at most `sectors` (default MAX_DEFAULT_SECTORS), weights |psi(P)|^2 normalised."""
    j, _ = sector_lattice(scenario, spacing, sectors or MAX_DEFAULT_SECTORS)
    momenta = j * spacing
    weights = packet_for(scenario).density_1d(momenta)
    return momenta[:, None], weights / weights.sum()


def sector_grid_3d(packet, axis: np.ndarray, sectors: int):
    """Gauss-Hermite nodes of the axial marginal N(|p0|, sigma_p^2), placed on the packet axis."""
    x, w = np.polynomial.hermite_e.hermegauss(sectors)
    along = packet.mean_speed + packet.momentum_std * x
    return along[:, None] * axis[None, :], w / w.sum()


# --------------------------------------------------------------------------------------------
# The truncated Fock basis and the sector Hamiltonian.
# --------------------------------------------------------------------------------------------


def allowed_level(quanta: int, start_level: int, rotating_wave: bool) -> int | None:
    """The level a reachable state with `quanta` quanta has, or None if there is none.

    All terms: parity (level + quanta) mod 2 conserved.  RWA: level + quanta = start_level.
    """
    if rotating_wave:
        level = start_level - quanta
        return level if level in (GROUND, EXCITED) else None
    return (start_level + quanta) % 2


def occupation_counts(modes: int, max_occupation: int, max_quanta: int) -> np.ndarray:
    """Number of occupation vectors with N quanta, N = 0..max_quanta: coefficients of
    (1 + x + ... + x^max_occupation)^modes truncated at degree max_quanta (exact integers)."""
    one_mode = [1] * (min(max_occupation, max_quanta) + 1)
    counts = [1]
    for _ in range(modes):
        counts = [sum(counts[n - j] for j in range(len(one_mode)) if 0 <= n - j < len(counts))
                  for n in range(min(len(counts) + len(one_mode) - 1, max_quanta + 1))]
    return np.array(counts + [0] * (max_quanta + 1 - len(counts)), dtype=object)


def state_count(plan: FockPlan) -> int:
    """States of one sector (all sectors have the same basis), without enumerating them."""
    counts = occupation_counts(plan.modes.count, plan.max_occupation, plan.max_quanta)
    return int(sum(c for n, c in enumerate(counts)
                   if allowed_level(n, plan.start_level, plan.rotating_wave) is not None))


@dataclass(frozen=True)
class FockBasis:
    """Reachable states: occupations (S x M, unsigned ints), levels (S,), quanta (S,); sorted keys."""

    occupations: np.ndarray
    levels: np.ndarray
    quanta: np.ndarray
    keys: np.ndarray
    order: np.ndarray

    def index_of(self, rows: np.ndarray) -> np.ndarray:
        """Index of each occupation row in the basis, -1 where it is not a basis state."""
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
    """Enumerate the reachable states (module docstring), vacuum first."""
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
    """p = P - sum_j n_j k_j of every basis state (S x d)."""
    return np.asarray(total_momentum, dtype=float)[None, :] - basis.occupations @ modes.momenta


def sector_hamiltonian(model, plan: FockPlan, basis: FockBasis, total_momentum) -> sp.csr_matrix:
    """H of one total-momentum sector in the basis (module docstring), energies from M_g.

    Diagonal: E_level(|p|) + sum_j n_j w_j.  Off-diagonal: every creation link n -> n + 1_j inside
    the basis, c V(p_e, p_g) sqrt(mu_j) sqrt(n_j + 1), and its Hermitian conjugate.
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
    """States from which a term of the untruncated H would leave the basis (bool, S).

    A state may create a quantum if it is excited or the counter-rotating terms are kept; the link
    is cut if the state already holds max_quanta quanta or a mode at max_occupation.
    """
    may_create = (basis.levels == EXCITED) | (not plan.rotating_wave)
    full = ((basis.quanta >= plan.max_quanta)
            | (basis.occupations.max(axis=1, initial=0) >= plan.max_occupation))
    return may_create & full


# --------------------------------------------------------------------------------------------
# Closed-form references on the same modes.
# --------------------------------------------------------------------------------------------


def second_order_transition(model, modes: FockModes, momentum, level: int, times) -> np.ndarray:
    """Probability to have left |level, P; vac> at time t, to second order in the coupling.

    Standard time-dependent perturbation theory (e.g. Sakurai, Modern Quantum Mechanics, sec. 5.6):
        P(t) = sum_j |g_j|^2 4 sin^2(D_j t / 2) / D_j^2,   D_j = E_other(P - k_j) + w_j - E_level(P),
    with g_j from `first_links`.  For a ground-state start this is the vacuum excitation
    probability P_e(t) through the counter-rotating terms; for an excited start, 1 - P_e(t).
    """
    energies, couplings = first_links(model, modes, momentum, level)
    mismatch = energies - model.energy(level, float(np.linalg.norm(momentum)))
    t = np.asarray(times, dtype=float)[:, None]
    half = 0.5 * mismatch[None, :] * t
    # 4 sin^2(D t/2)/D^2 = t^2 sinc^2(D t / 2 pi) (numpy's normalised sinc); finite at D = 0
    return (t * np.sinc(half / np.pi)) ** 2 @ np.abs(couplings) ** 2


def rotating_wave_excited(model, modes: FockModes, momentum, times) -> np.ndarray:
    """|c_e(t)|^2 of the RWA star on the same modes, by the exact secular solver (sim.exact)."""
    energies, couplings = first_links(model, modes, momentum, EXCITED)
    level = model.energy(EXCITED, float(np.linalg.norm(momentum)))
    return np.abs(level_amplitude(level, energies, couplings, times)) ** 2


def transition_shift(model, modes: FockModes, momentum, rotating_wave: bool) -> float:
    """Discrete second-order shift of the transition, Delta_e - Delta_g (energy units).

    Delta_level = sum_j |g_j|^2 / (E_level(P) - E_other(P - k_j) - w_j) (`sim.exact.sector_lamb_shift`);
    under the RWA the vacuum ground state is not shifted (Delta_g = 0).  The counter-rotating part
    of Delta_g is the Bloch-Siegert-type shift.
    """
    size = float(np.linalg.norm(momentum))
    shift = sector_lamb_shift(model.energy(EXCITED, size), *first_links(model, modes, momentum,
                                                                         EXCITED))
    if not rotating_wave:
        shift -= sector_lamb_shift(model.energy(GROUND, size),
                                   *first_links(model, modes, momentum, GROUND))
    return shift


# --------------------------------------------------------------------------------------------
# The solver.
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SectorRun:
    """Observables of one sector over time (arrays over times) and ground probabilities per bin."""

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

    Ground-state probabilities are summed in the bins of the axis-momentum `grid`.
    """
    hamiltonian = sector_hamiltonian(model, plan, basis, total_momentum)
    p_axis = com_momenta(basis, plan.modes, total_momentum) @ plan.axis
    edge = truncation_edge(plan, basis)
    columns = np.stack([basis.levels == EXCITED, np.ones(len(p_axis)), basis.quanta, p_axis,
                        p_axis ** 2, edge], axis=1).astype(float)
    ground = basis.levels == GROUND
    ground_bins, count = nearest_bin(grid, p_axis[ground]), len(grid)

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
    """Truncated Fock space of a few field modes, total-momentum sectors (module docstring)."""

    name = "fock"

    @cached_property
    def model(self):
        return model_for(self.scenario)

    @cached_property
    def plan(self) -> FockPlan:
        """Modes, sectors and cutoffs, defaults chosen from the scenario (module docstring)."""
        s, model = self.scenario, self.model
        if s.field.temperature > 0:
            raise ScenarioError(f"field.temperature = {s.field.temperature!r}: method \"fock\" "
                                "starts from the field vacuum; allowed: 0 (use method \"markov\" "
                                "for a thermal field)")
        field, packet, bath = field_for(s, model), packet_for(s), s.bath
        start = EXCITED if s.packet.internal == "excited" else GROUND
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
        """States of one sector (exact count), memory of its Hamiltonian and ODE, rough flops."""
        plan = self.plan
        states = state_count(plan)
        entries = states * (2 * plan.modes.count + 1)
        memory = entries * BYTES_PER_ENTRY + states * (BYTES_PER_STATE + plan.modes.count)
        span = float(sample_times(self.scenario)[-1]) * float(plan.max_quanta
                                                              * plan.modes.frequencies.max())
        work = 8.0 * entries * 20 * max(span, 1.0) * len(plan.sector_weights)
        return Estimate(states=states, memory_bytes=float(memory), work=work, keys=SIZE_KEYS)

    def refined(self) -> "FockSolver | None":
        """The same bath with max_quanta and max_occupation raised by one; None under the RWA,
        whose excitation-number sector is complete (nothing is truncated)."""
        plan = self.plan
        if plan.rotating_wave:
            return None
        finer = with_keys(self.scenario, {"bath.max_quanta": plan.max_quanta + 1,
                                          "bath.max_occupation": plan.max_occupation + 1})
        return FockSolver(finer, progress=self.progress)

    def evolve(self, times):
        s, model, plan = self.scenario, self.model, self.plan
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
        np.add.at(initial, nearest_bin(grid, plan.sector_momenta @ plan.axis), w / width)
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
        """P_e of the RWA star on the same modes and sectors, and second-order perturbation theory."""
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
            recurrence = length / (1 + emitted_speed(self.model, self.scenario))
            if times[-1] > recurrence:
                out.append(f"bath recurrence: the emitted wave returns after t = {recurrence:.4g} "
                           f"in the box of length {length:.4g}, before t_max = {times[-1]:.4g}; "
                           "raise bath.box_length (with bath.fock_modes) or lower run.t_max")
        if plan.modes.count < plan.modes.available and self.scenario.bath.fock_modes is None:
            out.append(f"bath truncated to the {plan.modes.count} most strongly coupled of the "
                       f"{plan.modes.available} box modes within the cutoff; raise bath.fock_modes "
                       "to keep more")
        return out


def fock_box_length(scenario, model) -> float:
    """L = BOX_MARGIN (1 + v) t_max, v the fastest recoil speed (`sim.bath.emitted_speed`): the
    emitted wave returns just after t_max (length units).  Shorter than the exact solver's
    default box, which also resolves the packet: a Fock bath holds only a few modes."""
    t_max = float(sample_times(scenario)[-1])
    return BOX_MARGIN * (1 + emitted_speed(model, scenario)) * t_max


def nearest_bin(grid: np.ndarray, values) -> np.ndarray:
    """Index of the grid point nearest each value (uniform grid)."""
    step = grid[1] - grid[0] if len(grid) > 1 else 1.0
    return np.clip(np.rint((np.asarray(values) - grid[0]) / step).astype(int), 0, len(grid) - 1)


def momentum_grid(plan: FockPlan, basis: FockBasis):
    """Axis-momentum grid covering every reachable p = P - sum n k, and its spacing.

    1D: the box lattice itself (every reachable momentum is a lattice point, one bin each);
    3D: MOMENTUM_BINS_3D uniform bins over the reachable range.
    """
    kicks = basis.occupations @ (plan.modes.momenta @ plan.axis)
    along = plan.sector_momenta @ plan.axis
    low, high = along.min() - kicks.max(), along.max() - kicks.min()
    if plan.modes.box_length is not None:
        step = 2 * np.pi / plan.modes.box_length
        return np.arange(round(low / step), round(high / step) + 1) * step, step
    grid = np.linspace(low, high, MOMENTUM_BINS_3D) if high > low else np.array([low, low + 1.0])
    return grid, grid[1] - grid[0]


def counter_rotating_figure(result):
    """Decay (or vacuum-excitation) curve with all terms against the RWA on the same modes.

    Top: P_e(t) of the fock run, of the RWA star (sim.exact) and of second-order perturbation
    theory (`second_order_transition`); bottom: the counter-rotating correction P_e - P_e^RWA.
    Needs a fock result with rotating_wave = false (its table "counter_rotating").
    """
    import matplotlib.pyplot as plt

    from ..figures import METHOD_COLOURS, output_times, stamp, time_label

    table = result.tables["counter_rotating"]
    t = output_times(result)
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(6, 5.5), sharex=True,
                                      constrained_layout=True, height_ratios=(2, 1))
    top.plot(t, table["excited"], color=METHOD_COLOURS["fock"], label="all terms (simulated)")
    top.plot(t, table["excited_rotating_wave"], "k--", lw=1, label="rotating-wave approximation")
    second = np.asarray(table["excited_second_order"], dtype=float)
    valid = (second >= 0) & (second <= 1)  # the expansion of an excited start fails at late times
    top.plot(t, np.where(valid, second, np.nan), ":", color="0.5", lw=1,
             label="second-order perturbation theory")
    top.set_ylabel("excited population $P_e(t)$")
    top.set_title(result.scenario.title, fontsize=9, loc="left")
    top.legend(fontsize=8)
    bottom.plot(t, table["excited"] - table["excited_rotating_wave"], color=METHOD_COLOURS["fock"])
    bottom.axhline(0.0, color="0.7", lw=0.8)
    bottom.set_ylabel(r"$P_e - P_e^{\mathrm{RWA}}$")
    bottom.set_xlabel(time_label(result))
    bottom.set_title("counter-rotating correction (simulated)", fontsize=10)
    stamp(fig)
    return fig
