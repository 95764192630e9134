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
from ...physics.golden_rule import ABSORPTION, EMISSION, channels_1d, kick_moments
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
        """Size of the run: (packet nodes x sample times) arrays dominate.

        memory = samples (SAMPLE_BYTES + 8 NODE_TIME_ARRAYS N) bytes with N the packet nodes
        (PACKET_NODES_1D or PACKET_NODES_3D); work = 40 N samples floating-point operations.

        Returns
        -------
        Estimate
            states = N, keyed by run.samples (the only size a scenario sets here).
        """
        samples = self.scenario.run.samples
        nodes = PACKET_NODES_1D if self.scenario.dimensions == 1 else PACKET_NODES_3D
        memory = samples * (SAMPLE_BYTES + 8.0 * NODE_TIME_ARRAYS * nodes)
        return Estimate(states=nodes, memory_bytes=memory, work=40.0 * nodes * samples,
                        keys=("run.samples",), breakdown={"run.samples": memory},
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
        down = [kick_moments(model, field, EMISSION, p) for p in P]
        up = [kick_moments(model, field, ABSORPTION, p) for p in P]
        rate_down = np.array([m.rate for m in down])
        rate_up = np.array([m.rate for m in up])
        excited_P, excited_time = two_level_populations(rate_up, rate_down, excited_start, times)
        ground_time = times[None, :] - excited_time
        n_down = rate_down[:, None] * excited_time
        n_up = rate_up[:, None] * ground_time

        def per_transition(moments, rate):
            safe = np.where(rate > 0, rate, 1.0)
            mean = np.array([m.mean for m in moments]) / safe
            par2 = np.array([m.square for m in moments]) / safe
            perp2 = np.array([m.transverse for m in moments]) / safe
            return mean * cos1, 2 * axis_p * mean * cos2, par2 * cos2 + perp2 * (1 - cos2)

        mean0 = s.mean_momentum
        var0 = packet.momentum_std ** 2
        shift = np.zeros_like(times)
        second = np.zeros_like(times)
        for moments, rate, count in ((down, rate_down, n_down), (up, rate_up, n_up)):
            m1, cross, m2 = per_transition(moments, rate)
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
            kick_var = weight @ ((np.array([m.square for m in down]) * cos2
                                  + np.array([m.transverse for m in down]) * (1 - cos2))
                                 / np.where(rate_down > 0, rate_down, 1.0))
            ground = 1 - excited
            mean_kick = weight @ (np.array([m.mean for m in down]) * cos1
                                  / np.where(rate_down > 0, rate_down, 1.0))
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
    channels = [channels_1d(model, field, EMISSION, p) for p in P]
    for branch in range(max(len(c) for c in channels)):
        kick = np.array([c[branch].kick if branch < len(c) else np.nan for c in channels])
        # a channel's share of the emissions; none at all without coupling (all rates zero)
        share = np.array([c[branch].rate / total
                          if branch < len(c) and (total := sum(x.rate for x in c)) > 0 else 0.0
                          for c in channels])
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
