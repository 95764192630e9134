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
where the rates are then taken at the pre-kick transverse momentum (a warm 3D run says so in its
warnings, with the size of the rate change over one kick).  Following the transverse kicks needs a
lattice of the transverse momentum too: for the bundled warm 3D scenario the axial closure spans
about 1560 lattice points, so even a (p_z, |p_perp|) population lattice would hold about 1e6
states per level instead of 3100 per sector (measured), hence the warning.  The per-axis recoil
variance along the axis is right (k*^2/3 per quantum in the static limit); the 3D purity and the
position variance are not computed (None, with a warning).

Packets: the window holds the axial amplitude a(p_n) (`Packet.axis_amplitude`, complex for the
two-lobe and "file" shapes), so in 1D rho(0) = |psi><psi| with all its coherences.  A run with a
coherence distance d (`sim.physics.coherence.coherence_distance`) records
chi(t) = Tr(rho_COM exp(i P d)) = sum_s P_s exp(i p_z,s d) (diagonal: the populations suffice, so
1D and 3D alike); its default lattice step resolves exp(i p d) and the fringes of period 2 pi / d
(`lattice.window_size`), a coarser grid.points is warned about (`coherence_warnings`).

Position variance (1D): from the lattice Fourier transform - the lattice state is a periodic wave
function on the ring of length 2 pi / dp, and x = i d/dp is multiplication by x there - with the
moments of the density integrated exactly about its circular mean (`position_moments`).  It is
the continuum packet's Var x while the packet fits in the ring (checked: `ring_overflow`) and no
kick is split on the lattice: the hat split gives a kicked branch heavy position tails, a lattice
artifact, so Var x is then withheld (SPLIT_POSITION_TOLERANCE).

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

import math
from dataclasses import dataclass, replace
from dataclasses import field as dataclass_field

import numpy as np
import qutip
from scipy.sparse.linalg import expm_multiply

from ...physics.coherence import coherence_distance
from ...physics.field import field_for, packet_for
from ...physics.golden_rule import ABSORPTION, EMISSION, kick_moments
from ...physics.models import EXCITED, GROUND, level_of, model_for
from ...errors import ScenarioError
from ..base import Estimate, Evolution, Solver, credit
from ..common import last_sample_time, snapshot_indices
from .cost import SectorSize, peak_bytes, run_seconds, run_work, series_bytes
from .lattice import (
    COHERENCE_PHASE_STEP,
    EDGE_TOLERANCE,
    MAX_STATES,
    MIN_FRINGE_STEPS,
    POLAR_DIRECTIONS,
    SOLVER_OPTIONS,
    SPLIT_COHERENCE_TOLERANCE,
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


#: Var x is withheld-with-a-warning when more than this share of the COM position density lies
#: in the outer quarter of the lattice's ring 2 pi / dp (|x - x_c| > 3/8 of it): the packet's
#: periodic images then overlap (a Gaussian reaches it at a standard deviation of ring / 10.4)
RING_TOLERANCE = 1e-4
#: Var x is withheld when a followed jump's lattice split has f (1 - f) above this: a split
#: kick gives each of its two lattice shifts the envelope sqrt(max(0, 1 - |kick(p) / dp - m|))
#: in p, whose square-root cusp puts heavy position tails (density ~ 1 / x^3) on the kicked
#: branch, a lattice artifact that dominates Var x and does not shrink with the step (measured:
#: Var x = 833 instead of about 420 at t = 40 for the 1D default, at 37, 73 and 145 points)
SPLIT_POSITION_TOLERANCE = 1e-6
SPLIT_POSITION_NOTE = ("x_var: not computed: markov splits each recoil kick between neighbouring "
                       "lattice momenta, which gives the position density tails of the lattice "
                       "that dominate Var x (a finer grid.points does not remove them); "
                       'run.method = "exact" gives Var x in 1D')
#: a thermal closure of more than this many states per window point is set by the thermal walk
#: (run.t_max), not by the window (the window, one kick either way and both levels: about 4)
THERMAL_WINDOW_STATES = 4


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
    x_var : ndarray, shape (T,)
        Var x of rho_COM (`position_moments`; length^2), or nan when not computed.
    ring : ndarray, shape (T,)
        Share of the COM position density in the outer quarter of the lattice's ring
        (`position_moments`; dimensionless), or nan when not computed.
    chi : ndarray of complex, shape (T,), or None
        Sum_s P_s exp(i p_z,s d) at the coherence distance d (dimensionless); None when the run
        asks for no coherence.
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
    x_var: np.ndarray
    ring: np.ndarray
    chi: np.ndarray | None = None
    ground: list = dataclass_field(default_factory=list)  # ground probabilities per snapshot
    final_state: object = None


def com_lattice(sector: Sector, rho: np.ndarray) -> np.ndarray:
    """rho_COM(p_j, p_j') on the sector's lattice: the levels traced out.

    rho_COM(p, p') = rho_ee(p, p') + rho_gg(p, p') (the e-g coherences drop out of the partial
    trace); each level holds every lattice point at most once.

    Parameters
    ----------
    sector : Sector
        Supplies each state's level and lattice index.
    rho : ndarray, shape (n, n)
        The sector's density matrix in its state basis (complex, dimensionless).

    Returns
    -------
    ndarray of complex, shape (S, S)
        rho_COM on the lattice points j = n - min(n) of the sector (dimensionless).
    """
    lattice = sector.index - sector.index.min()
    size = int(lattice.max()) + 1
    com = np.zeros((size, size), dtype=complex)
    for level in (GROUND, EXCITED):
        mine = np.nonzero(sector.levels == level)[0]
        at = lattice[mine]
        com[np.ix_(at, at)] += rho[np.ix_(mine, mine)]
    return com


def com_purity(com: np.ndarray) -> float:
    """Tr rho_COM^2 = sum_pp' |rho_COM(p, p')|^2 of a Hermitian rho_COM.

    Parameters
    ----------
    com : ndarray, shape (S, S)
        rho_COM on the lattice (`com_lattice`; dimensionless).

    Returns
    -------
    float
        Tr rho_COM^2 (dimensionless).
    """
    return float(np.sum(np.abs(com) ** 2))


def lattice_diagonals(com: np.ndarray, band: int) -> np.ndarray:
    """C_m = sum_j rho_COM(p_{j+m}, p_j), m = 0 .. band - 1: the sums along the diagonals.

    Parameters
    ----------
    com : ndarray, shape (S, S)
        rho_COM on the lattice (`com_lattice`; dimensionless).
    band : int
        Number of diagonals wanted (the others are zero: see `position_moments`).

    Returns
    -------
    ndarray of complex, shape (min(band, S),)
        C_m (dimensionless); C_0 = Tr rho_COM, C_{-m} = conj(C_m).
    """
    return np.array([np.trace(com, offset=-m) for m in range(min(band, com.shape[0]))])


def position_moments(diagonals: np.ndarray, step: float) -> tuple[float, float]:
    """Var x of a lattice state from the lattice Fourier transform, integrated exactly.

    A state on the lattice p_j = p_0 + j dp is the periodic wave function
    psi(x) = sum_j a_j e^{i p_j x} / sqrt(L) on the ring of length L = 2 pi / dp, the position
    operator x = i d/dp being the multiplication by x there (common practice: the discrete
    Fourier transform).  The density is the trigonometric polynomial
    n(x) = (1/L) sum_m C_m e^{i m dp x} (C_m: `lattice_diagonals`).  Centred on the circular mean
    x_c = -arg(C_1) / dp, with u = x - x_c in [-L/2, L/2], D_m = C_m e^{i m dp x_c} and
    k_m = m dp, the moments are integrated exactly term by term:

        C_0 <u>   = sum_{m>0} 2 (-1)^m Im D_m / k_m,
        C_0 <u^2> = C_0 L^2 / 12 + sum_{m>0} 4 (-1)^m Re D_m / k_m^2,
        C_0 P(|u| > 3L/8) = C_0 / 4 - sum_{m>0} 2 Re D_m sin(3 pi m / 4) / (pi m),

    and Var x = <u^2> - <u>^2.  This is the variance of the continuum packet as long as that
    packet (with its kicked copies) fits in the ring, which the outer share P(|u| > 3L/8)
    checks.  The markov generator shifts both momenta of a coherence by the same lattice shift,
    so rho_COM(p_j, p_j') vanishes for |j - j'| >= points: only that band of C_m is needed.

    Parameters
    ----------
    diagonals : ndarray of complex
        C_m, m = 0 .. K - 1 (dimensionless).
    step : float
        Lattice step dp (momentum units).

    Returns
    -------
    variance : float
        Var x (length^2, i.e. 1 / momentum^2 units).
    outer : float
        P(|u| > 3L/8), the share of the density in the outer quarter of the ring
        (dimensionless).
    """
    total = float(diagonals[0].real)
    m = np.arange(1, diagonals.size)
    if not m.size:  # one lattice point: the density is uniform on the ring
        return (2 * np.pi / step) ** 2 / 12, 0.25
    shifted = diagonals[1:] * np.exp(-1j * m * np.angle(diagonals[1]))
    k, sign = m * step, (-1.0) ** m
    mean = 2 * np.sum(sign * shifted.imag / k) / total
    second = (2 * np.pi / step) ** 2 / 12 + 4 * np.sum(sign * shifted.real / k ** 2) / total
    outer = 0.25 - 2 * np.sum(shifted.real * np.sin(0.75 * np.pi * m) / (np.pi * m)) / total
    return float(second - mean * mean), float(outer)


def com_statistics(sector: Sector, step: float, band: int):
    """An e_ops callable of mesolve: (Tr rho_COM^2, Var x, ring share) of the state at t.

    Parameters
    ----------
    sector : Sector
    step : float
        Lattice step dp (momentum units).
    band : int
        Diagonals of rho_COM that can be non-zero (the window's points).

    Returns
    -------
    callable
        ``f(t, state) -> ndarray [purity, variance, outer]`` (`com_purity`,
        `position_moments`: dimensionless, length^2, dimensionless).
    """
    def statistics(t, state):
        com = com_lattice(sector, state.full())
        return np.array([com_purity(com),
                         *position_moments(lattice_diagonals(com, band), step)])

    return statistics


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


def coherence_phases(momenta, distance: float | None):
    """The rows cos(p_z d), sin(p_z d) of the diagonal observable exp(i P d), or none.

    Parameters
    ----------
    momenta : ndarray, shape (n,)
        Axial momentum of each state (momentum units).
    distance : float or None
        The coherence distance d (length units); None when no coherence is asked for.

    Returns
    -------
    list of ndarray
        [cos(p d), sin(p d)] (dimensionless), or [] without a distance.
    """
    if distance is None:
        return []
    return [np.cos(momenta * distance), np.sin(momenta * distance)]


def evolve_sector(sector: Sector, grid: MarkovGrid, psi0: qutip.Qobj, times: np.ndarray,
                  snaps: np.ndarray, distance: float | None = None,
                  progress: bool = False) -> SectorRun:
    """Lindblad evolution of one sector by qutip.mesolve, segment by segment between snapshots.

    d rho/dt = -i [H, rho] + sum_J (L_J rho L_J^dag - {L_J^dag L_J, rho} / 2) with the
    sector's diagonal H and jump operators (`Sector.liouvillian`), from rho(0) = |psi0><psi0|;
    the expectation values of the excited projector, p_z, p_z^2, the cut-edge projector, the
    trace, the COM purity, Var x and the ring share (`com_statistics`) and, at a coherence
    distance d, chi = Tr(rho exp(i P d)) (cos and sin of p_z d) are recorded at every sample
    time, and the ground-state lattice probabilities at each snapshot time.

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
    distance : float, optional
        The coherence distance d (length units); None: no chi.
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
    phases = coherence_phases(pz, distance)
    e_ops = [sector.diagonal(v) for v in (sector.levels == EXCITED, pz, pz * pz, sector.edge,
                                          *phases)]
    e_ops += [lambda t, state: state.tr(), com_statistics(sector, grid.step, grid.points)]
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
    *diagonal, trace, statistics = [np.real(np.array(c)) for c in series]
    excited, p1, p2, edge = diagonal[:4]
    chi = diagonal[4] + 1j * diagonal[5] if phases else None
    return SectorRun(excited, p1, p2, trace, edge, *statistics.T, chi, ground, state)


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
                       snaps: np.ndarray, distance: float | None = None,
                       tick=None) -> SectorRun:
    """The sector's populations under its rate equation dP/dt = W P (`Sector.rate_matrix`).

    The Lindblad generator maps the diagonal of rho onto itself and the coherences never feed it
    (`Sector.rate_matrix`), so every diagonal observable - P_e, <p_z>, <p_z^2>, the cut-edge
    population, the trace, chi = sum_s P_s exp(i p_z,s d) and the ground-state lattice
    probabilities - follows from the populations alone, exactly: P(0) = |psi0|^2,
    P(t) = exp(W t) P(0) (`propagate`, segment by segment between snapshots).  The COM purity
    and Var x need the coherences and are not computed.

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
    distance : float, optional
        The coherence distance d (length units); None: no chi.
    tick : callable, optional
        Called once per segment (a progress bar's update).

    Returns
    -------
    SectorRun
        With purity, Var x and the ring share nan and no final state.

    References
    ----------
    H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3
    (the Pauli master equation).
    """
    generator = sector.rate_matrix()
    pz = grid.momentum(sector.index)
    phases = coherence_phases(pz, distance)
    observed = np.stack([sector.levels == EXCITED, pz, pz * pz, np.ones(sector.size),
                         sector.edge, *phases]).astype(float)
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
    excited, p1, p2, trace, edge, *chi = np.vstack([series[0][None, :], *series[1:]]).T
    missing = np.full(len(times), np.nan)
    return SectorRun(excited, p1, p2, trace, edge, missing, missing, missing,
                     chi[0] + 1j * chi[1] if chi else None, ground)


def transverse_warning(model, field, momentum: float) -> str:
    """The warning of a warm 3D run: the transverse part of the recoil kicks is not followed.

    Its size: the largest relative change of the emission or absorption rate (`kick_moments`)
    between |p| = |p0| and sqrt(p0^2 + k*^2), one transverse kick k* (the rest-frame emitted
    momentum) away.

    Parameters
    ----------
    model : COMModel
    field : Field
    momentum : float
        |p0|, the packet's mean momentum (momentum units).

    Returns
    -------
    str
        One line in plain words, with what to do.
    """
    kick = float(model.rest_emission_momentum())
    moved = float(np.hypot(momentum, kick))
    change = 0.0
    for process in (EMISSION, ABSORPTION):
        before = float(kick_moments(model, field, process, momentum).rate)
        if before > 0:
            after = float(kick_moments(model, field, process, moved).rate)
            change = max(change, abs(after / before - 1))
    return ("3D thermal field: markov follows only the axial part of each recoil kick; every "
            "transverse momentum sector keeps its initial |p_perp|, so each jump after the first "
            "takes its rate at the pre-kick transverse momentum (here the rates change by "
            f"{change:.2%} over one transverse kick k* = {kick:.4g}), an error that enters all "
            "outputs of repeated jumps and is small only where that change is; no method here "
            "follows the transverse recoil of a warm 3D field (following it needs a lattice of "
            "the transverse momentum too, hundreds of times larger); in the vacuum "
            "(field.temperature = 0) there is one jump and markov is unaffected, and "
            'run.method = "exact" evolves that case without a lattice')


def ring_overflow(times: np.ndarray, x_var: np.ndarray, ring: np.ndarray, grid: MarkovGrid):
    """Var x withheld from the first time the packet outgrows the lattice's ring, and why.

    From the first sample whose ring share (`position_moments`) exceeds RING_TOLERANCE on,
    the packet overlaps its periodic images on the ring 2 pi / dp and Var x comes out too
    small: it is set to nan there.  The advice extrapolates the last good standard deviation
    linearly in time to t_max (free spreading and the recoil's separating branches grow
    linearly) and asks for a ring 10.4 such standard deviations long (RING_TOLERANCE for a
    Gaussian).

    Parameters
    ----------
    times : ndarray, shape (T,)
        Sample times (time units).
    x_var : ndarray, shape (T,)
        Var x (length^2).
    ring : ndarray, shape (T,)
        Share of the position density in the outer quarter of the ring (dimensionless).
    grid : MarkovGrid

    Returns
    -------
    x_var : ndarray, shape (T,)
        Var x with nan from the overflow on (length^2).
    warnings : list of str
        Empty, or one line naming grid.points and the value to raise it to.
    """
    bad = np.maximum.accumulate(ring > RING_TOLERANCE)
    if not bad.any():
        return x_var, []
    first = int(np.argmax(bad))
    good = max(first - 1, 0)
    length = 2 * np.pi / grid.step
    std = np.sqrt(max(float(x_var[good]), 0.0))
    stretch = times[-1] / times[good] if times[good] > 0 else 2.0
    needed = 10.4 * std * stretch
    half = math.ceil(0.5 * (grid.points - 1) * max(needed / length, 2.0))
    kept = np.where(bad, np.nan, x_var)
    return kept, [f"x_var: withheld from t = {times[first]:.4g} on: the COM position density "
                  f"outgrows the lattice's position ring 2 pi / step = {length:.4g} (more than "
                  f"{RING_TOLERANCE:g} of it in the ring's outer quarter), so the packet overlaps "
                  f"its periodic images; raise grid.points to about {2 * half + 1} (a finer "
                  "lattice step lengthens the ring)"]


def coherence_warnings(grid: MarkovGrid, sectors, distance: float, key: str) -> list[str]:
    """Warnings of a coherence run whose lattice resolves exp(i p d) too coarsely.

    The phase p d advances by theta = dp d per lattice step.  Fewer than MIN_FRINGE_STEPS steps
    per fringe period 2 pi / d do not resolve the packet's fringes nor exp(i P d); otherwise a
    kick split with weights (1 - f, f) multiplies Tr(rho exp(i P d)) by
    (1 - f) + f e^{-i theta} instead of a pure phase, lowering its magnitude by
    1 - sqrt(1 - 2 f (1 - f) (1 - cos theta)) per jump (worst f (1 - f): Sector.split_spread),
    warned about above SPLIT_COHERENCE_TOLERANCE.

    Parameters
    ----------
    grid : MarkovGrid
    sectors : list of Sector
    distance : float
        d (length units).
    key : str
        The key that set d.

    Returns
    -------
    list of str
        Zero or one warning, naming grid.points and the value that resolves d
        (COHERENCE_PHASE_STEP radians per step).
    """
    theta = grid.step * distance
    half = math.ceil(0.5 * (grid.points - 1) * theta / COHERENCE_PHASE_STEP)
    advice = f"raise grid.points to at least {2 * half + 1}"
    where = f"coherence at d = {distance:.4g} ({key})"
    if theta > 2 * np.pi / MIN_FRINGE_STEPS:
        return [f"{where}: the lattice step {grid.step:.3g} gives only {2 * np.pi / theta:.3g} "
                f"steps per fringe period 2 pi / d (fewer than {MIN_FRINGE_STEPS}), so the "
                f"lattice resolves neither exp(i p d) nor the packet's fringes; {advice}"]
    spread = max(sec.split_spread for sec in sectors)
    loss = 1 - math.sqrt(max(0.0, 1 - 2 * spread * (1 - math.cos(theta))))
    if loss > SPLIT_COHERENCE_TOLERANCE:
        return [f"{where}: splitting the recoil kicks between neighbouring lattice momenta "
                f"lowers |Tr(rho exp(i P d))| by up to {loss:.2g} per jump (lattice step "
                f"{grid.step:.3g}: {theta:.2g} rad of p d per step); {advice}"]
    return []


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

    Raises
    ------
    ScenarioError
        If coupling.rotating_wave = false (the counter-rotating terms are not kept).

    References
    ----------
    H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3.
    The QuTiP 5 documentation: mesolve, mcsolve.
    """

    name = "markov"
    packet_shapes = ("gaussian", "two-lobe", "file")

    def __init__(self, scenario, *, progress: bool = False):
        super().__init__(scenario, progress=progress)
        if not scenario.coupling.rotating_wave:
            raise ScenarioError("coupling.rotating_wave = false: method \"markov\" keeps the "
                                "rotating-wave jumps only and cannot include the counter-rotating "
                                "terms; allowed: true (use method \"perturbative\" or \"fock\", "
                                "which keep them)")

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
            grid.span, grid.directions (3D) and run.samples, and in a thermal field first by
            run.t_max; the sectors are credited to grid.points (scaling 2 in 1D: the density
            matrix holds n^2 numbers; 1 in 3D), except in a thermal field whose closure holds
            more than THERMAL_WINDOW_STATES states per window point: there the jumps of the run
            set its size (lowering grid.points hardly shrinks a closure cut at MAX_STATES), so
            they are credited to run.t_max (no scaling: the cut makes it no power law); the
            series over the sample times to run.samples.

        Raises
        ------
        ScenarioError
            If grid.directions is given and is not 2 in 1D (`grid_for`).
        """
        s = self.scenario
        t_max, samples = last_sample_time(s), s.run.samples
        span, points = window_size(s)
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
        thermal = field.temperature > 0
        # in a thermal field the closure grows with the jumps of the run (run.t_max) and is cut
        # at MAX_STATES, so a closure beyond the window and its first kicks is the walk's
        walk = {"run.t_max": max(size.states for size in sizes)} if thermal else {}
        credit(breakdown, peak_bytes(sizes, samples, segments, density),
               {"grid.points": THERMAL_WINDOW_STATES * points if thermal else points, **walk})
        credit(breakdown, series_bytes(samples, len(sizes)), {"run.samples": samples})
        keys = (tuple(walk) + ("grid.points", "grid.span")
                + (("grid.directions",) if s.dimensions == 3 else ()) + ("run.samples",))
        values = {"grid.points": points, "grid.span": span, "run.samples": samples,
                  **({"run.t_max": t_max} if thermal else {})}
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
        Var p = <p_z^2> - <p_z>^2, chi = sum_b W_b sum_s P_s exp(i p_z,s d).  With
        run.trajectories > 0 the same generator is unravelled into quantum trajectories
        (`unravel`), recorded in the table "emissions".

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units).

        Returns
        -------
        Evolution
            P_e(t) (dimensionless); <p>, Var p along the axis (momentum units, momentum^2);
            ground-state densities at the snapshot times and the initial density on the lattice
            (1 / momentum units); norm = Tr rho (dimensionless); chi(t) = Tr(rho_COM exp(i P d))
            (dimensionless) when the run reports a coherence at d
            (`sim.physics.coherence.coherence_distance`); in 1D the COM purity, Var x
            (`position_moments`, length^2) and the final density matrix; in 3D no purity and
            no Var x (withheld with a warning).  No Lamb shift.

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
        distance = coherence_distance(s)
        d = distance[0] if distance else None
        one_d = s.dimensions == 1
        if one_d:
            runs = [evolve_sector(sec, grid, sec.initial_ket(amplitudes), times, snaps, d,
                                  self.progress) for sec in sectors]
        else:
            bar = progress_bar(self.progress, len(sectors) * (len(snaps) - 1), "rate equation")
            runs = [evolve_populations(sec, grid, sec.initial_ket(amplitudes), times, snaps, d,
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
            initial[n - lo] += abs(a) ** 2 / grid.step
        warnings = self.warnings(model, field, grid, sectors, combine("edge"))
        x_var = None
        if one_d and sectors[0].split_spread > SPLIT_POSITION_TOLERANCE:
            warnings.append(SPLIT_POSITION_NOTE)
        elif one_d:
            x_var, withheld = ring_overflow(times, runs[0].x_var, runs[0].ring, grid)
            warnings += withheld
        evo = Evolution(excited=excited, p_mean=p1, p_var=p2 - p1 * p1,
                        momentum_grid=grid.momentum(lattice), snapshot_times=times[snaps],
                        momentum_density=density, initial_density=initial,
                        x_var=x_var,
                        purity=runs[0].purity if one_d else None, norm=combine("trace"),
                        final_state=runs[0].final_state if one_d else None,
                        details=self.details(grid, sectors), warnings=warnings,
                        coherence=combine("chi") if distance else None)
        if s.run.trajectories > 0:
            record = unravel(sectors, grid, amplitudes, times, s.run.trajectories, s.run.seed)
            evo.tables["emissions"] = record.table
            evo.details["trajectories"] = record.summary(times, excited)
        return evo

    def warnings(self, model, field, grid, sectors, edge_population) -> list[str]:
        """Warnings of the run: what it cannot give, and what its lattice resolves too coarsely.

        Parameters
        ----------
        model : COMModel
        field : Field
        grid : MarkovGrid
        sectors : list of Sector
        edge_population : ndarray
            Population on the cut states over time (dimensionless).

        Returns
        -------
        list of str
            A warning when the largest edge population exceeds EDGE_TOLERANCE; in 3D that
            Var x and the purity are withheld, and in a warm 3D field that the transverse kicks
            are not followed (`transverse_warning`); and the coherence lattice's warnings
            (`coherence_warnings`).  (The ring overflow of Var x: `ring_overflow`.)
        """
        s = self.scenario
        out = []
        worst = float(np.max(edge_population))
        if worst > EDGE_TOLERANCE:
            out.append(f"markov closure cut: population {worst:.2e} reached states after "
                       f"{grid.generations} jumps (or {MAX_STATES} states), whose further jumps "
                       "are not followed; shorten run.t_max or coarsen grid.points")
        if s.dimensions == 3:
            out.append("x_var, purity: not computed in 3D (markov evolves only the populations "
                       "there, exactly for every momentum output, and holds the transverse "
                       "momentum as a mixture, while the position variance and the purity need "
                       "the coherences); markov gives both with field.dimensions = 1")
            if field.temperature > 0:
                out.append(transverse_warning(model, field, packet_for(s).axis_mean))
        distance = coherence_distance(s)
        if distance is not None:
            out += coherence_warnings(grid, sectors, *distance)
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
        span, points = window_size(s)
        directions = 2 * (s.grid.directions or POLAR_DIRECTIONS) if s.dimensions == 3 else None
        grid = replace(s.grid, points=2 * points - 1,
                       span=None if s.packet.shape == "file" else span, directions=directions)
        return MarkovSolver(replace(s, grid=grid, run=replace(s.run, trajectories=0, seed=None)),
                            progress=self.progress)
