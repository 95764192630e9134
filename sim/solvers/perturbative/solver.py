"""`method = "perturbative"`: the golden-rule prediction, a cheap first look.

Each packet momentum P keeps its own two-level rate equation with the golden-rule rates
Gamma_down(P) (emission, x (1 + n)) and Gamma_up(P) (absorption, x n), the momentum change of
the rates after a transition neglected:

    P_e(P, t) = P_eq + (P_e(0) - P_eq) exp(-(Gamma_up + Gamma_down) t),  P_eq = Gamma_up / (sum),

so in the vacuum P_e(t) = Int |psi(P)|^2 exp(-Gamma(P) t) d^dP.  The expected numbers of
transitions N(P, t) = Int_0^t Gamma P_level dt' weight the golden-rule recoil moments
(`sim.physics.golden_rule.kick_moments`) to give the momentum mean and variance along the
packet axis.  Snapshots of the ground-state momentum density: in 1D each emission channel maps
the packet density through P -> P + kick(P) exactly; in 3D the packet's axis marginal is
convolved with a uniform kick of the same variance (exact in the static limit: isotropic
emission of |k| = k* makes each Cartesian kick component uniform on [-k*, k*]).
"""

from __future__ import annotations

import numpy as np
from scipy.special import erf

from ...physics.field import field_for, packet_for
from ...physics.golden_rule import ABSORPTION, EMISSION, channel_table, kick_moments
from ...physics.models import EXCITED, level_of, model_for
from ...physics.packet import gaussian_density
from ..base import SAMPLE_BYTES, Estimate, Evolution, Solver
from ..common import axis_grid, snapshot_indices

#: packet quadrature nodes (1D: signed momenta; 3D: |P|)
PACKET_NODES_1D = 401
PACKET_NODES_3D = 64
#: (packet nodes x sample times) float arrays alive at once in `evolve` (populations, their
#: integrals, transition numbers and the temporaries between them)
NODE_TIME_ARRAYS = 6
#: wall-time cost model of `evolve`, measured on a 2-core machine (benchmarks/golden_rule_speed.py
#: times the rates): seconds per golden-rule evaluation over all packet nodes (a call of
#: `kick_moments` or `channel_table`), per packet node and evaluation (by dimension), and per
#: (packet node x sample time) of the rate-equation arrays
RATE_CALL_SECONDS = 2e-3
RATE_NODE_SECONDS = {1: 3e-6, 3: 30e-6}
NODE_SAMPLE_SECONDS = 40e-9


def two_level_populations(up, down, excited_start: bool, t):
    """P_e(t) and its time integral for the two-level rate equation of each packet momentum.

    With Gamma = Gamma_up + Gamma_down and P_eq = Gamma_up / Gamma (0 where Gamma = 0):

        P_e(t)             = P_eq + (P_e(0) - P_eq) exp(-Gamma t),
        Int_0^t P_e dt'    = P_eq t + (P_e(0) - P_eq) (1 - exp(-Gamma t)) / Gamma,

    the last factor taken as t where Gamma = 0.

    Parameters
    ----------
    up : ndarray, shape (N,)
        Absorption rates Gamma_up(P) (1 / time units).
    down : ndarray, shape (N,)
        Emission rates Gamma_down(P) (1 / time units).
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


class PerturbativeSolver(Solver):
    """Golden-rule rate equations per packet momentum.

    Each packet momentum P relaxes by its own two-level rate equation,
    P_e(P, t) = P_eq + (P_e(0) - P_eq) exp(-(Gamma_up + Gamma_down) t), P_eq = Gamma_up / (sum),
    with the golden-rule rates Gamma_down(P) (emission, x (1 + n)) and Gamma_up(P) (absorption,
    x n); the recoil moments are weighted by the expected numbers of transitions
    N(P, t) = Int_0^t Gamma P_level dt'.  No discretisation to refine (`refined` is None).

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

    def estimate(self) -> Estimate:
        """Size of the run: (packet nodes x sample times) arrays dominate, rates the time.

        memory = samples (SAMPLE_BYTES + 8 NODE_TIME_ARRAYS N) bytes with N the packet nodes
        (PACKET_NODES_1D or PACKET_NODES_3D); work = 40 N samples floating-point operations;
        seconds = c (RATE_CALL_SECONDS + RATE_NODE_SECONDS[d] N) + NODE_SAMPLE_SECONDS N samples
        with c the golden-rule evaluations over the nodes that cost: emission, absorption in a
        thermal field (in the vacuum it has no quanta to absorb), and the 1D emission channels
        of the snapshots for an excited start.

        Returns
        -------
        Estimate
            states = N, keyed by run.samples (the only size a scenario sets here); seconds
            (wall time of `evolve`).
        """
        s = self.scenario
        samples, dims = s.run.samples, s.dimensions
        nodes = PACKET_NODES_1D if dims == 1 else PACKET_NODES_3D
        memory = samples * (SAMPLE_BYTES + 8.0 * NODE_TIME_ARRAYS * nodes)
        calls = (1 + (s.field.temperature > 0)
                 + (dims == 1 and level_of(s.packet.internal) == EXCITED))
        seconds = (calls * (RATE_CALL_SECONDS + RATE_NODE_SECONDS[dims] * nodes)
                   + NODE_SAMPLE_SECONDS * nodes * samples)
        return Estimate(states=nodes, memory_bytes=memory, work=40.0 * nodes * samples,
                        seconds=seconds, keys=("run.samples",), breakdown={"run.samples": memory},
                        values={"run.samples": samples}, scaling={"run.samples": 1.0})

    def evolve(self, times):
        """Golden-rule rate equations per packet momentum, with their recoil moments.

        With w_P the packet quadrature weights (`Packet.quadrature`), P_e(P, t) from
        `two_level_populations`, N_down(P, t) = Gamma_down Int_0^t P_e dt' and
        N_up(P, t) = Gamma_up Int_0^t (1 - P_e) dt' the expected numbers of transitions, and per
        transition the mean axial kick <dq_par> and second moments <dq_par^2>, <dq_perp^2>
        (`kick_moments` divided by the rate):

            P_e(t)     = sum_P w_P P_e(P, t),
            <p>(t)     = p0 + sum_P w_P N(P, t) <dq_par> <cos a>,
            <p^2>(t)   = sigma_p^2 + p0^2 + sum_P w_P N(P, t) [2 P <dq_par> <cos^2 a>
                         + <dq_par^2> <cos^2 a> + <dq_perp^2> (1 - <cos^2 a>)],

        summed over both processes, where <cos a>, <cos^2 a> are the packet's conditional direction
        moments at |P| (`Packet.direction_moments`; both 1 in 1D, where P is signed; in 3D P
    stands for |P|).  The
        ground-state snapshots: in 1D the density |psi(P)|^2 (1 - P_e(P, t)) mapped through each
        emission channel P -> q = P + kick(P) with the Jacobian 1 / |dq/dP| and the channel's share
        of the rate (excited start), or left in place (ground start); in 3D
        (1 - P_e(t)) [N(0, sigma_p^2) * U(-h, h)](p - p0 - <kick>), h = sqrt(3 <kick^2>).

        Parameters
        ----------
        times : ndarray
            Sample times, increasing from 0 (time units).

        Returns
        -------
        Evolution
            P_e(t) (dimensionless); <p>, Var p along the packet axis (momentum units, momentum^2);
            ground-state axis momentum densities at the snapshot times and the initial density on
            `axis_grid` (1 / momentum units).  No x variance, purity or norm check.

        References
        ----------
        J. J. Sakurai, Modern Quantum Mechanics, sec. 5.6 (golden-rule rates).
        Abramowitz & Stegun, Handbook of Mathematical Functions, ch. 25 (the Gauss quadrature of
        the packet).
        """
        s = self.scenario
        model, field, packet = model_for(s), field_for(s), packet_for(s)
        excited_start = level_of(s.packet.internal) == EXCITED
        P, weight = packet.quadrature(PACKET_NODES_1D if s.dimensions == 1 else PACKET_NODES_3D)
        if s.dimensions == 1:
            axis_p, cos1, cos2 = P, np.ones_like(P), np.ones_like(P)
        else:
            cos1, cos2 = packet.direction_moments(P)
            axis_p = P
        down = kick_moments(model, field, EMISSION, P)
        up = kick_moments(model, field, ABSORPTION, P)
        excited_P, excited_time = two_level_populations(up.rate, down.rate, excited_start, times)
        ground_time = times[None, :] - excited_time
        n_down = down.rate[:, None] * excited_time
        n_up = up.rate[:, None] * ground_time

        def per_transition(moments):
            safe = np.where(moments.rate > 0, moments.rate, 1.0)
            mean, par2 = moments.mean / safe, moments.square / safe
            perp2 = moments.transverse / safe
            return mean * cos1, 2 * axis_p * mean * cos2, par2 * cos2 + perp2 * (1 - cos2)

        mean0 = s.mean_momentum
        var0 = packet.momentum_std ** 2
        shift = np.zeros_like(times)
        second = np.zeros_like(times)
        for moments, count in ((down, n_down), (up, n_up)):
            m1, cross, m2 = per_transition(moments)
            shift += weight @ (count * m1[:, None])
            second += weight @ (count * (cross + m2)[:, None])
        p_mean = mean0 + shift
        p_var = var0 + mean0 ** 2 + second - p_mean ** 2
        excited = weight @ excited_P
        snaps = snapshot_indices(len(times))
        grid = axis_grid(s, packet, model)
        initial = packet.axis_density(grid)
        if s.dimensions == 1:
            density = _snapshots_1d(model, field, packet, P, excited_P, excited_start, grid, snaps)
        else:
            safe = np.where(down.rate > 0, down.rate, 1.0)
            kick_var = weight @ ((down.square * cos2 + down.transverse * (1 - cos2)) / safe)
            ground = 1 - excited
            mean_kick = weight @ (down.mean * cos1 / safe)
            density = np.stack([ground[j] * _gaussian_uniform(grid - mean0 - mean_kick,
                                                              packet.momentum_std,
                                                              np.sqrt(3 * kick_var))
                                for j in snaps], axis=1)
        return Evolution(excited=excited, p_mean=p_mean, p_var=p_var, momentum_grid=grid,
                         snapshot_times=times[snaps], momentum_density=density,
                         initial_density=initial, norm=None,
                         details={"packet_points": int(len(P))})


def _snapshots_1d(model, field, packet, P, excited_P, excited_start, grid, snaps):
    """Ground density on `grid` at the snapshots (1 / momentum units).

    The packet density |psi(P)|^2 (1 - P_e(P, t)) mapped through each emission channel
    P -> q = P + kick(P) with the Jacobian 1 / |dq/dP| and the channel's share of the rate
    (excited start), or left in place (ground start: the part never excited).
    """
    remaining = packet.axis_density(P)[:, None] * (1 - excited_P[:, snaps])
    if not excited_start:
        return np.stack([np.interp(grid, P, col, left=0.0, right=0.0) for col in remaining.T],
                        axis=1)
    density = np.zeros((len(grid), len(snaps)))
    channels = channel_table(model, field, EMISSION, P)
    total = channels.rate.sum(axis=1)
    for kick, rate in zip(channels.kick.T, channels.rate.T):
        # a channel's share of the emissions; none at all without coupling (all rates zero)
        share = np.divide(rate, total, out=np.zeros_like(rate), where=total > 0)
        target = P + kick
        ok = np.isfinite(target)
        if ok.sum() < 2:
            continue
        jac = np.abs(np.gradient(target[ok], P[ok]))
        order = np.argsort(target[ok])
        for j in range(len(snaps)):
            branch_density = remaining[ok, j] * share[ok] / np.maximum(jac, 1e-300)
            density[:, j] += np.interp(grid, target[ok][order], branch_density[order],
                                       left=0.0, right=0.0)
    return density


def _gaussian_uniform(x, std, half_width):
    """Density of a N(0, std^2) variable plus an independent uniform one on [-h, h]."""
    if half_width <= 0:
        return gaussian_density(x, 0.0, std)
    root2 = np.sqrt(2) * std
    return (erf((x + half_width) / root2) - erf((x - half_width) / root2)) / (4 * half_width)
