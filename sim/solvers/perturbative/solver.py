"""`method = "perturbative"`: the golden-rule prediction, a cheap first look.

Each packet momentum P keeps its own two-level rate equation with the golden-rule rates
Gamma_down(P) out of e and Gamma_up(P) out of g, the momentum change of the rates after a
transition neglected:

    P_e(P, t) = P_eq + (P_e(0) - P_eq) exp(-(Gamma_up + Gamma_down) t),  P_eq = Gamma_up / (sum),

so in the vacuum under the rotating-wave approximation P_e(t) = Int |psi(P)|^2 exp(-Gamma(P) t).

The processes (`sim.physics.golden_rule.processes_out_of`): out of e the emission e -> g + k
(x (1 + n)); out of g the absorption g + k -> e (x n).  With coupling.rotating_wave = false the
counter-rotating terms add, at the same (golden-rule) order, excitation with emission
g -> e + k (x (1 + n): sigma+ a_k^dag, on shell only for a galilean detector faster than
`anomalous_doppler_speed`) and de-excitation with absorption e + k -> g (x n: sigma- a_k).  An
excited detector in the vacuum gains no new channel: sigma+ a_k^dag annihilates |e> and
sigma- a_k needs a quantum, so the counter-rotating terms only shift its level (a second-order
energy shift, not a rate; not computed here); once decayed, its ground population is open to
g -> e + k like any other.  The virtual dressing of the ground state (P_e of order lambda^2
without a real transition, which method "fock" shows) is not a golden-rule rate and is absent.

The expected numbers of transitions N(P, t) = Int_0^t Gamma P_level dt' weight each process's
golden-rule recoil moments (`kick_moments`) to give the momentum mean and variance along the
packet axis; each channel carries its own kick q - P (-k for both emissions, +k for both
absorptions).

Packet: any shape (`packet_shapes`) through `Packet.quadrature` (1D) and the axial x transverse
product rule (3D: `Packet.axial_transverse_quadrature`, the angle a between each node's P and the
axis exact).  The ground-state snapshots follow one transition cycle: the part still in its
initial level stays in place, the rest carries one kick (excited start) or an up and a down kick
(ground start).  In 1D each channel maps the packet density through P -> P + kick(P) exactly;
in 3D the axis marginal is smoothed by a uniform kick of the same mean and variance (exact in
the static limit: isotropic emission of |k| = k* makes each Cartesian kick component uniform
on [-k*, k*]).  The spatial coherence chi(t) = Tr(rho_COM exp(i P_axis d)) follows the same
cycle (`coherence_series`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import cumulative_trapezoid
from scipy.special import erf

from ...physics.coherence import coherence_distance
from ...physics.field import field_for, packet_for
from ...physics.golden_rule import (
    EXCITING_EMISSION,
    QUENCHING_ABSORPTION,
    channel_table,
    kick_characteristic,
    kick_moments,
    processes_out_of,
)
from ...physics.models import EXCITED, GROUND, level_of, model_for
from ...physics.packet import TRANSVERSE_NODES
from ..base import SAMPLE_BYTES, Estimate, Evolution, Solver
from ..common import AXIS_POINTS, axis_grid, snapshot_indices

#: packet quadrature nodes (1D: signed momenta; 3D: least axial nodes, times TRANSVERSE_NODES)
PACKET_NODES_1D = 401
PACKET_NODES_3D = 64
#: (packet nodes x sample times) float arrays alive at once in `evolve` (populations, their
#: integrals, the never-left share and the temporaries between them), and the complex
#: coherence's extra ones (counted as floats)
NODE_TIME_ARRAYS = 6
COHERENCE_ARRAYS = 4
#: wall-time cost model of `evolve`, measured on a 2-core machine (benchmarks/golden_rule_speed.py
#: times the rates): seconds per golden-rule evaluation over all packet nodes (a call of
#: `kick_moments`, `channel_table` or `kick_characteristic`), per packet node and evaluation (by
#: dimension), and per (packet node x sample time) of the rate-equation arrays
RATE_CALL_SECONDS = 2e-3
RATE_NODE_SECONDS = {1: 3e-6, 3: 30e-6}
NODE_SAMPLE_SECONDS = 40e-9
#: the snapshot grid resolves a two-lobe packet's fringes (period 2 pi / d) with a spacing of at
#: most pi / (FRINGE_GRID d), and a "file" packet's table with at most its median row spacing
FRINGE_GRID = 8
#: the snapshot grid resolves the packet envelope with a spacing of at most this many sigma_p
ENVELOPE_GRID = 0.25
#: the snapshot grid holds at most this many points (else a warning names the key)
MAX_AXIS_POINTS = 20_001
#: 3D snapshots of a non-Gaussian packet: points of the axial grid its cumulative density is
#: integrated on, per snapshot-grid point
CDF_REFINEMENT = 4
#: `recoil_warning`: warn when one kick changes the next transition's rate by this share while
#: more than RECOIL_EVENTS such transitions are expected by t_max
RECOIL_RATE_CHANGE = 0.1
RECOIL_EVENTS = 0.05
#: names of the processes for summary.json
PROCESS_NAMES = {EXCITING_EMISSION: "excitation with emission g -> e + k (counter-rotating)",
                 QUENCHING_ABSORPTION: "de-excitation with absorption e + k -> g "
                                       "(counter-rotating)"}


@dataclass(frozen=True)
class PacketNodes:
    """A packet quadrature with each node's rate argument, axial momentum and angle to the axis.

    Sum_i weight_i f(p_i) ~ Int |psi(p)|^2 f(p) d^dp.

    Parameters
    ----------
    momentum : ndarray, shape (N,)
        The rates' argument: signed P in 1D, |P| in 3D (momentum units).
    axial : ndarray, shape (N,)
        P along the packet axis, signed (momentum units).
    cosine : ndarray, shape (N,)
        cos a between P and the axis: 1 in 1D (dimensionless).
    weight : ndarray, shape (N,)
        Quadrature weights including the density, summing to 1 (dimensionless).
    """

    momentum: np.ndarray
    axial: np.ndarray
    cosine: np.ndarray
    weight: np.ndarray


def packet_nodes(packet) -> PacketNodes:
    """The packet's quadrature nodes: `Packet.quadrature` in 1D, the axial x transverse rule in 3D.

    1D: PACKET_NODES_1D nodes (more for fringes: `Packet.axial_nodes`), P signed, cos a = 1.
    3D: `Packet.axial_transverse_quadrature` with PACKET_NODES_3D axial nodes, |P| =
    sqrt(p_z^2 + rho^2) and cos a = p_z / |P| (1 where |P| = 0).

    Parameters
    ----------
    packet : Packet
        Any shape.

    Returns
    -------
    PacketNodes
        Momenta in momentum units, cosines and weights dimensionless.

    References
    ----------
    Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (the Gauss rules of
    `sim.physics.packet`).
    """
    if packet.dimensions == 1:
        P, weight = packet.quadrature(PACKET_NODES_1D)
        return PacketNodes(P, P, np.ones_like(P), weight)
    along, rho, weight = packet.axial_transverse_quadrature(PACKET_NODES_3D)
    size = np.hypot(along, rho)
    cosine = np.divide(along, size, out=np.ones_like(size), where=size > 0)
    return PacketNodes(size, along, cosine, weight)


def node_count(packet) -> int:
    """Number of nodes of `packet_nodes` without building them (dimensionless count).

    Parameters
    ----------
    packet : Packet

    Returns
    -------
    int
        axial_nodes(PACKET_NODES_1D) in 1D, axial_nodes(PACKET_NODES_3D) TRANSVERSE_NODES in 3D
        (`Packet.axial_nodes`).
    """
    if packet.dimensions == 1:
        return packet.axial_nodes(PACKET_NODES_1D)
    return packet.axial_nodes(PACKET_NODES_3D) * TRANSVERSE_NODES


def two_level_populations(up, down, excited_start: bool, t):
    """P_e(t) and its time integral for the two-level rate equation of each packet momentum.

    With Gamma = Gamma_up + Gamma_down and P_eq = Gamma_up / Gamma (0 where Gamma = 0):

        P_e(t)             = P_eq + (P_e(0) - P_eq) exp(-Gamma t),
        Int_0^t P_e dt'    = P_eq t + (P_e(0) - P_eq) (1 - exp(-Gamma t)) / Gamma,

    the last factor taken as t where Gamma = 0.

    Parameters
    ----------
    up : ndarray, shape (N,)
        Rates out of g, Gamma_up(P) (1 / time units).
    down : ndarray, shape (N,)
        Rates out of e, Gamma_down(P) (1 / time units).
    excited_start : bool
        P_e(0) = 1 if True, else 0.
    t : ndarray, shape (T,)
        Times (time units).

    Returns
    -------
    excited : ndarray, shape (N, T)
        P_e(P, t) (dimensionless).
    integral : ndarray, shape (N, T)
        Int_0^t P_e(P, t') dt' (time units).

    References
    ----------
    H.-P. Breuer & F. Petruccione, The Theory of Open Quantum Systems (OUP 2002), ch. 3: the
    populations of the Born-Markov-secular master equation of a two-level system obey these
    rate equations.
    """
    total = (up + down)[:, None]
    eq = np.divide(up[:, None], total, out=np.zeros_like(total), where=total > 0)
    start = 1.0 if excited_start else 0.0
    decay = np.exp(-total * t[None, :])
    excited = eq + (start - eq) * decay
    with np.errstate(invalid="ignore", divide="ignore"):
        relaxed = np.where(total > 0, -np.expm1(-total * t[None, :]) / total, t[None, :])
    integral = eq * t[None, :] + (start - eq) * relaxed
    return excited, integral


@dataclass(frozen=True)
class LevelExits:
    """The golden-rule processes out of one internal level, evaluated at the packet nodes.

    Parameters
    ----------
    processes : tuple of Process
        `processes_out_of` the level.
    moments : tuple of KickMoments
        `kick_moments` of each process at the nodes (rates in 1 / time units, kick moments in
        momentum units (squared) / time units).
    """

    processes: tuple
    moments: tuple

    @property
    def rate(self) -> np.ndarray:
        """Total rate out of the level at each node (1 / time units).

        Returns
        -------
        numpy.ndarray, shape (N,)
            Sum of the processes' rates (0 with no process).
        """
        return sum((m.rate for m in self.moments), 0.0)

    def axial_moments(self, nodes: PacketNodes):
        """Per node: Int dGamma dq_axis and Int dGamma dq_axis^2, summed over the processes.

        dq_axis = dq_par cos a + dq_perp (the transverse component along the axis), whose
        azimuthal average about P leaves <dq_axis> = <dq_par> cos a and <dq_axis^2> =
        <dq_par^2> cos^2 a + <dq_perp^2> sin^2 a.

        Parameters
        ----------
        nodes : PacketNodes

        Returns
        -------
        (mean, square) : tuple of ndarray, shape (N,)
            Momentum units / time units and momentum^2 / time units.
        """
        cos, cos2 = nodes.cosine, nodes.cosine ** 2
        mean = sum((m.mean * cos for m in self.moments), np.zeros_like(cos))
        square = sum((m.square * cos2 + m.transverse * (1 - cos2) for m in self.moments),
                     np.zeros_like(cos))
        return mean, square

    def mean_phase(self, model, field, nodes: PacketNodes, separation: float) -> np.ndarray:
        """<exp(i dq_axis d)> of one transition out of the level at each node (dimensionless).

        Sum over the processes of `kick_characteristic`, divided by the total rate; 1 where the
        level has no rate (nothing leaves it).

        Parameters
        ----------
        model : COMModel
        field : Field
        nodes : PacketNodes
        separation : float
            d (length units).

        Returns
        -------
        numpy.ndarray of complex, shape (N,)
        """
        total = np.zeros(nodes.weight.size, dtype=complex)
        for process in self.processes:
            total += kick_characteristic(model, field, process, nodes.momentum, separation,
                                         nodes.cosine)
        rate = np.broadcast_to(self.rate, total.shape)
        return np.divide(total, rate, out=np.ones_like(total), where=rate > 0)


def level_exits(model, field, processes, nodes: PacketNodes) -> LevelExits:
    """Evaluate the processes out of one level at the packet nodes (`kick_moments`).

    Parameters
    ----------
    model : COMModel
    field : Field
    processes : tuple of Process
    nodes : PacketNodes

    Returns
    -------
    LevelExits
    """
    return LevelExits(tuple(processes),
                      tuple(kick_moments(model, field, p, nodes.momentum) for p in processes))


def coherence_series(nodes: PacketNodes, separation: float, start_share, start_never_left,
                     away_phase, back_phase):
    """chi(t) = Tr(rho_COM(t) exp(i P_axis d)) over one transition cycle.

    With A the initial level and B the other, s(P, t) = exp(-Gamma_A t) the share never to have
    left A, P_A(P, t) the population of A and phi_AB, phi_BA the mean phases of one transition
    A -> B and back (`LevelExits.mean_phase`):

        chi(t) = Sum_P w_P exp(i P_axis d) [s + (1 - P_A) phi_AB + (P_A - s) phi_AB phi_BA].

    Excited start in the vacuum (RWA): s = P_e, so chi = Sum w e^{i p d} [P_e + (1 - P_e)
    <e^{-i k.d}>_emission].

    Parameters
    ----------
    nodes : PacketNodes
    separation : float
        d (length units).
    start_share : ndarray, shape (N, T)
        P_A(P, t) (dimensionless).
    start_never_left : ndarray, shape (N, T)
        s(P, t) (dimensionless).
    away_phase, back_phase : ndarray of complex, shape (N,)
        phi_AB and phi_BA (dimensionless).

    Returns
    -------
    numpy.ndarray of complex, shape (T,)
        chi(t) (dimensionless).
    """
    cycle = (start_never_left + (1 - start_share) * away_phase[:, None]
             + (start_share - start_never_left) * (away_phase * back_phase)[:, None])
    return (nodes.weight * np.exp(1j * nodes.axial * separation)) @ cycle


class PerturbativeSolver(Solver):
    """Golden-rule rate equations per packet momentum, counter-rotating channels included.

    Each packet momentum P relaxes by its own two-level rate equation,
    P_e(P, t) = P_eq + (P_e(0) - P_eq) exp(-(Gamma_up + Gamma_down) t), P_eq = Gamma_up / (sum),
    with Gamma_down(P), Gamma_up(P) the golden-rule rates out of e and g
    (`processes_out_of`: with coupling.rotating_wave = false also the counter-rotating
    g -> e + k and e + k -> g); the recoil moments are weighted by the expected numbers of
    transitions N(P, t) = Int_0^t Gamma P_level dt'.  No discretisation to refine (`refined` is
    None).

    Parameters
    ----------
    scenario : Scenario
    progress : bool, optional
        Accepted for a uniform interface; no progress bar.

    References
    ----------
    J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (the golden-rule transition rate).
    """

    name = "perturbative"
    packet_shapes = ("gaussian", "two-lobe", "file")

    def _exits(self):
        """The processes out of e and out of g for this scenario (`processes_out_of`)."""
        s = self.scenario
        thermal, rwa = s.field.temperature > 0, s.coupling.rotating_wave
        return processes_out_of(EXCITED, rwa, thermal), processes_out_of(GROUND, rwa, thermal)

    def estimate(self) -> Estimate:
        """Size of the run: (packet nodes x sample times) arrays dominate, rates the time.

        memory = samples (SAMPLE_BYTES + 8 A N) bytes with N the packet nodes (`node_count`) and
        A = NODE_TIME_ARRAYS (+ COHERENCE_ARRAYS when the coherence is asked for); work =
        40 N samples floating-point operations; seconds = c (RATE_CALL_SECONDS +
        RATE_NODE_SECONDS[d] N) + NODE_SAMPLE_SECONDS N samples with c the golden-rule
        evaluations over the nodes: one per process out of each level (`processes_out_of`),
        twice when both levels have exits (`recoil_warning`), the 1D snapshot channels of the processes that move the ground population, and one
        per process for the coherence.

        Returns
        -------
        Estimate
            states = N, keyed by run.samples (the only size a scenario sets here); seconds
            (wall time of `evolve`).
        """
        s = self.scenario
        samples, dims = s.run.samples, s.dimensions
        nodes = node_count(packet_for(s))
        out_e, out_g = self._exits()
        coherent = coherence_distance(s) is not None
        arrays = NODE_TIME_ARRAYS + (COHERENCE_ARRAYS if coherent else 0)
        memory = samples * (SAMPLE_BYTES + 8.0 * arrays * nodes)
        excited_start = level_of(s.packet.internal) == EXCITED
        moving = len(out_e) + (0 if excited_start or not out_g else len(out_g))
        cycles = 2 * len(out_e) + 2 * len(out_g) if out_e and out_g else len(out_e) + len(out_g)
        calls = cycles + (dims == 1) * moving + coherent * (len(out_e) + len(out_g))
        seconds = (calls * (RATE_CALL_SECONDS + RATE_NODE_SECONDS[dims] * nodes)
                   + NODE_SAMPLE_SECONDS * nodes * samples)
        return Estimate(states=nodes, memory_bytes=memory, work=40.0 * nodes * samples,
                        seconds=seconds, keys=("run.samples",), breakdown={"run.samples": memory},
                        values={"run.samples": samples}, scaling={"run.samples": 1.0})

    def evolve(self, times):
        """Golden-rule rate equations per packet momentum, with their recoil moments.

        With w_P the packet nodes' weights (`packet_nodes`), P_e(P, t) from
        `two_level_populations`, T_e(P, t) = Int_0^t P_e dt' and T_g = t - T_e the times spent
        in each level, and per level the rate-weighted axial kick moments
        m1 = Int dGamma dq_axis, m2 = Int dGamma dq_axis^2 summed over its processes
        (`LevelExits.axial_moments`):

            P_e(t)     = sum_P w_P P_e(P, t),
            <p>(t)     = <p>_0 + sum_P w_P sum_levels T_level m1,
            <p^2>(t)   = <p^2>_0 + sum_P w_P sum_levels T_level (2 P_axis m1 + m2),

        with <p>_0, <p^2>_0 the packet's own axial moments over the same nodes.  The
        ground-state snapshots (`_snapshots_1d`, `_snapshots_3d`) and chi(t)
        (`coherence_series`, when `coherence_distance` gives a d) follow one transition cycle.

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units).

        Returns
        -------
        Evolution
            P_e(t) (dimensionless); <p>, Var p along the packet axis (momentum units, momentum^2);
            ground-state axis momentum densities at the snapshot times and the initial density
            (1 / momentum units); chi(t) (complex, dimensionless) or None.  No x variance,
            purity or norm check.

        References
        ----------
        J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (golden-rule rates).
        Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (the Gauss quadrature of
        the packet).
        """
        s = self.scenario
        model, field, packet = model_for(s), field_for(s), packet_for(s)
        excited_start = level_of(s.packet.internal) == EXCITED
        nodes = packet_nodes(packet)
        out_e, out_g = self._exits()
        down, up = (level_exits(model, field, p, nodes) for p in (out_e, out_g))
        down_rate = np.broadcast_to(down.rate, nodes.weight.shape)
        up_rate = np.broadcast_to(up.rate, nodes.weight.shape)
        excited_P, excited_time = two_level_populations(up_rate, down_rate, excited_start, times)
        ground_time = times[None, :] - excited_time
        w, axial = nodes.weight, nodes.axial
        p_mean = np.full_like(times, w @ axial)
        p_square = np.full_like(times, w @ axial ** 2)
        for exits, spent in ((down, excited_time), (up, ground_time)):
            m1, m2 = exits.axial_moments(nodes)
            p_mean += w @ (m1[:, None] * spent)
            p_square += w @ ((2 * axial * m1 + m2)[:, None] * spent)
        excited = w @ excited_P
        leaving = down_rate if excited_start else up_rate
        never_left = np.exp(-leaving[:, None] * times[None, :])
        start_share = excited_P if excited_start else 1 - excited_P
        snaps = snapshot_indices(len(times))
        grid, warnings = snapshot_grid(s, packet, model)
        cycle = _Cycle(excited_start, excited_P[:, snaps], never_left[:, snaps], down, up)
        if s.dimensions == 1:
            density = _snapshots_1d(model, field, packet, nodes, grid, cycle)
        else:
            density = _snapshots_3d(packet, nodes, grid, cycle)
        coherence = None
        asked = coherence_distance(s)
        if asked is not None:
            d = asked[0]
            away, back = (down, up) if excited_start else (up, down)
            coherence = coherence_series(nodes, d, start_share, never_left,
                                         away.mean_phase(model, field, nodes, d),
                                         back.mean_phase(model, field, nodes, d))
        warnings += recoil_warning(model, field, nodes, (down, excited_time[:, -1]),
                                   (up, ground_time[:, -1]))
        names = [PROCESS_NAMES.get(p, None) for p in out_e + out_g]
        return Evolution(excited=excited, p_mean=p_mean, p_var=p_square - p_mean ** 2,
                         momentum_grid=grid, snapshot_times=times[snaps],
                         momentum_density=density, initial_density=packet.axis_density(grid),
                         norm=None, coherence=coherence, warnings=warnings,
                         details={"packet_points": int(nodes.weight.size),
                                  "counter_rotating_channels": [n for n in names if n]})


def recoil_warning(model, field, nodes: PacketNodes, excited, ground) -> list[str]:
    """A warning when one transition's kick changes the rate of the next one by much.

    The rate equations keep each packet momentum's rates fixed.  For each level L with exits,
    the momentum after one L transition is P' = P + <dq_par> (|P + <dq_par>| in 3D) and the
    other level O's rate there is compared with its rate at P: the relative change
    delta = Sum w |Gamma_O(P') - Gamma_O(P)| / Sum w Gamma_O(P).  A warning when delta exceeds
    RECOIL_RATE_CHANGE while the expected number of O transitions by t_max,
    Sum w Gamma_O T_O(t_max), exceeds RECOIL_EVENTS.

    Parameters
    ----------
    model : COMModel
    field : Field
    nodes : PacketNodes
    excited, ground : tuple of (LevelExits, ndarray)
        Each level's exits and the time spent in it by t_max at each node (time units).

    Returns
    -------
    list of str
        At most one warning per level (naming run.t_max and run.method).
    """
    out = []
    w = nodes.weight
    for (leave, _), (other, spent), name in ((excited, ground, "e"), (ground, excited, "g")):
        if not leave.processes or not other.processes:
            continue
        rate = np.broadcast_to(leave.rate, w.shape)
        kick = np.divide(sum(m.mean for m in leave.moments), rate, out=np.zeros_like(w),
                         where=rate > 0)
        after = nodes.momentum + kick
        after = after if field.dimensions == 1 else np.abs(after)
        before = np.broadcast_to(other.rate, w.shape)
        moved = sum(kick_moments(model, field, p, after).rate for p in other.processes)
        scale = w @ before
        events = w @ (before * spent)
        if not scale > 0 or events <= RECOIL_EVENTS:
            continue
        change = (w @ (np.abs(moved - before) * (rate > 0))) / scale
        if change > RECOIL_RATE_CHANGE:
            out.append(f"recoil changes the golden-rule rates: after one transition out of {name} "
                       f"the kick changes the rate of the next transition by {change:.0%} on "
                       f"average, and {events:.2g} such transitions are expected by t_max; the "
                       "perturbative method keeps each packet momentum's rates fixed, so what "
                       "follows the first transition is rough; lower run.t_max or use run.method"
                       " = \"fock\"")
    return out


@dataclass(frozen=True)
class _Cycle:
    """One transition cycle at the snapshot times: P_e, the never-left share, both levels' exits."""

    excited_start: bool
    excited: np.ndarray  # (N, S)
    never_left: np.ndarray  # (N, S)
    down: LevelExits
    up: LevelExits

    @property
    def ground_parts(self):
        """(stay, moved) shares of each node at the snapshots: unkicked ground, kicked ground."""
        ground = 1 - self.excited
        if self.excited_start:
            return np.zeros_like(ground), ground
        return self.never_left, ground - self.never_left


def snapshot_grid(scenario, packet, model):
    """Axis momenta of the snapshots, and a warning when they cannot resolve the packet.

    The range of `axis_grid` (the envelope +-6 sigma_p and 1.5 kicks either side) for
    "gaussian" and "two-lobe"; for "file" the table's range widened by the same 1.5 kicks,
    1.5 (E_e(p_fast) - M_g).  Points: at least AXIS_POINTS; a spacing <= ENVELOPE_GRID sigma_p
    where MAX_AXIS_POINTS allow it, and for "two-lobe" <= pi / (FRINGE_GRID d), for "file" <=
    the median row spacing, at most MAX_AXIS_POINTS (else the warning).

    Parameters
    ----------
    scenario : Scenario
    packet : Packet
    model : COMModel

    Returns
    -------
    grid : ndarray
        Uniform axis momenta (momentum units).
    warnings : list of str
        One line naming packet.separation or packet.amplitude_file when the spacing needed
        exceeds MAX_AXIS_POINTS points; else empty.
    """
    step = None
    if packet.shape == "file":
        kicks = 1.5 * float(model.energy(EXCITED, packet.fastest_momentum()))
        low, high = packet.axis_range()
        low, high = low - kicks, high + kicks
        step, key = float(np.median(np.diff(packet.table.momenta))), "packet.amplitude_file"
    else:
        coarse = axis_grid(scenario, packet, model)
        low, high = coarse[0], coarse[-1]
        if packet.shape == "two-lobe":
            step, key = math.pi / (FRINGE_GRID * packet.separation), "packet.separation"
    envelope = math.ceil((high - low) / (ENVELOPE_GRID * packet.momentum_std)) + 1
    wanted = AXIS_POINTS if step is None else math.ceil((high - low) / step) + 1
    points = min(max(AXIS_POINTS, wanted, envelope), MAX_AXIS_POINTS)
    warnings = []
    if wanted > MAX_AXIS_POINTS:
        warnings.append(f"the momentum snapshots cannot resolve the packet's structure: a spacing "
                        f"of {step:.3g} over {high - low:.3g} needs {wanted:,} points, more than "
                        f"{MAX_AXIS_POINTS:,}; the densities are sampled coarser (rates, moments "
                        f"and coherence are not affected); lower {key}")
    return np.linspace(low, high, points), warnings


def _channels(model, field, exits: LevelExits, P):
    """1D channels of a level's processes: (kick, share of the level's rate) arrays over P."""
    out = []
    total = np.broadcast_to(exits.rate, P.shape)
    for process in exits.processes:
        table = channel_table(model, field, process, P)
        for kick, rate in zip(table.kick.T, table.rate.T):
            out.append((kick, np.divide(rate, total, out=np.zeros_like(rate), where=total > 0)))
    return out


def _snapshots_1d(model, field, packet, nodes: PacketNodes, grid, cycle: _Cycle):
    """Ground density on `grid` at the snapshots (1 / momentum units), one transition cycle.

    The unkicked share stays at P; the kicked share is mapped through P -> q = P + kick(P) for
    each down channel (excited start) or each pair of an up and a down channel (ground start,
    kick_up + kick_down), with the channels' shares of their level's rate and the Jacobian
    1 / |dq/dP|.  The packet density is evaluated exactly at P(q), so its fringes survive.
    """
    P = nodes.momentum
    stay, moved = cycle.ground_parts
    density = _mapped(packet, P, np.zeros_like(P), stay, grid)
    down = _channels(model, field, cycle.down, P)
    if cycle.excited_start:
        paths = down
    else:
        paths = [(k_up + k_down, s_up * s_down) for k_up, s_up in _channels(model, field, cycle.up, P)
                 for k_down, s_down in down]
    for kick, share in paths:
        density += _mapped(packet, P, kick, moved * share[:, None], grid)
    return density


def _mapped(packet, P, kick, share, grid):
    """Density on `grid` of the packet share `share` (N, S) moved by P -> q = P + kick(P)."""
    target = P + kick
    ok = np.isfinite(target) & np.any(share > 0, axis=1)
    density = np.zeros((len(grid), share.shape[1]))
    if ok.sum() < 2:
        return density
    order = np.argsort(target[ok])
    q, source = target[ok][order], P[ok][order]
    jac = np.abs(np.gradient(target[ok], P[ok]))[order]
    inside = (grid >= q[0]) & (grid <= q[-1])
    origin = np.interp(grid[inside], q, source)
    base = packet.axis_density(origin)
    for j in range(share.shape[1]):
        factor = share[ok, j][order] / np.maximum(jac, 1e-300)
        density[inside, j] = base * np.interp(grid[inside], q, factor)
    return density


def _snapshots_3d(packet, nodes: PacketNodes, grid, cycle: _Cycle):
    """Ground density on `grid` at the snapshots (1 / momentum units), one transition cycle.

    The unkicked share keeps the axis marginal n(q); the kicked share is n smoothed by a
    uniform kick on [mu - h, mu + h] with h = sqrt(3 var) (`_uniform_smoothed`), mu and var the
    packet-averaged mean and variance of the axial kick of one transition (excited start: down;
    ground start: up plus down, means and variances adding).
    """
    stay, moved = cycle.ground_parts
    w = nodes.weight
    parts = [cycle.down] if cycle.excited_start else [cycle.up, cycle.down]
    mean = var = 0.0
    for exits in parts:
        rate = np.broadcast_to(exits.rate, w.shape)
        safe = np.where(rate > 0, rate, 1.0)
        m1, m2 = exits.axial_moments(nodes)
        share = w @ (rate > 0)
        if share == 0:
            continue
        step_mean = (w @ (m1 / safe)) / share
        mean += step_mean
        var += max(0.0, (w @ (m2 / safe)) / share - step_mean ** 2)
    unkicked = packet.axis_density(grid)
    kicked = _uniform_smoothed(packet, grid - mean, math.sqrt(3 * var))
    return np.outer(unkicked, w @ stay) + np.outer(kicked, w @ moved)


def _uniform_smoothed(packet, x, half_width):
    """The axis marginal n convolved with the uniform density on [-h, h], at x (1 / momentum).

    (C(x + h) - C(x - h)) / 2h with C the cumulative of n: erf for a Gaussian, else the
    trapezoidal integral of `Packet.axis_density` on CDF_REFINEMENT times as many points as
    `x` over `Packet.axis_range`; n itself when h = 0.
    """
    if half_width <= 0:
        return packet.axis_density(x)
    if packet.shape == "gaussian":
        root2 = np.sqrt(2) * packet.momentum_std
        centred = x - packet.axis_mean
        return (erf((centred + half_width) / root2) - erf((centred - half_width) / root2)) \
            / (4 * half_width)
    fine = np.linspace(*packet.axis_range(), CDF_REFINEMENT * len(x))
    cdf = cumulative_trapezoid(packet.axis_density(fine), fine, initial=0.0)
    return (np.interp(x + half_width, fine, cdf) - np.interp(x - half_width, fine, cdf)) \
        / (2 * half_width)
