"""`method = "perturbative"`: the golden-rule prediction, a cheap first look.

Each packet momentum P keeps its own two-level rate equation with the golden-rule rates
Gamma_down(P) (emission, x (1 + n)) and Gamma_up(P) (absorption, x n), the momentum change of
the rates after a transition neglected:

    P_e(P, t) = P_eq + (P_e(0) - P_eq) exp(-(Gamma_up + Gamma_down) t),  P_eq = Gamma_up / (sum),

so in the vacuum P_e(t) = Int |psi(P)|^2 exp(-Gamma(P) t) d^dP.  The expected numbers of
transitions N(P, t) = Int_0^t Gamma P_level dt' weight the golden-rule recoil moments
(`sim.rates.kick_moments`) to give the momentum mean and variance along the packet axis.
Snapshots of the ground-state momentum density: in 1D each emission channel maps the packet
density through P -> P + kick(P) exactly; in 3D the packet's axis marginal is convolved with a
uniform kick of the same variance (exact in the static limit, physics.md sec. 3).
"""

from __future__ import annotations

import numpy as np
from scipy.special import erf

from ..field import field_for, packet_for
from ..models import model_for
from ..rates import ABSORPTION, EMISSION, channels_1d, kick_moments
from .base import Evolution, Solver, snapshot_indices

#: 1D packet momenta sampled for the perturbative prediction
PACKET_POINTS_1D = 401
#: Gauss-Legendre nodes over |P| in 3D
PACKET_NODES_3D = 64


def two_level_populations(up, down, excited_start: bool, t):
    """P_e(t) and the time integral Int_0^t P_e dt' of the rate equation (arrays over P x t)."""
    total = (up + down)[:, None]
    eq = np.divide(up[:, None], total, out=np.zeros_like(total), where=total > 0)
    start = 1.0 if excited_start else 0.0
    decay = np.exp(-total * t[None, :])
    excited = eq + (start - eq) * decay
    with np.errstate(invalid="ignore", divide="ignore"):
        relaxed = np.where(total > 0, -np.expm1(-total * t[None, :]) / total, t[None, :])
    integral = eq * t[None, :] + (start - eq) * relaxed
    return excited, integral


def langevin_moments(r, a, sigma):
    """E[cos a] and E[cos^2 a] of the direction of a 3D Gaussian momentum of magnitude r.

    Given |p| = r, the direction follows a von Mises-Fisher law with kappa = r a / sigma^2 about
    the mean p0 (|p0| = a): E[cos] = L(kappa) = coth kappa - 1/kappa, E[cos^2] = 1 - 2 L / kappa.
    """
    kappa = np.asarray(r, dtype=float) * a / sigma ** 2
    small = kappa < 1e-4
    k = np.where(small, 1.0, kappa)
    lang = np.where(small, kappa / 3, 1 / np.tanh(k) - 1 / k)
    cos2 = np.where(small, 1 / 3 + 2 * kappa ** 2 / 45, 1 - 2 * lang / k)
    return lang, cos2


class PerturbativeSolver(Solver):
    """Golden-rule rate equations per packet momentum (see module docstring)."""

    name = "perturbative"

    def evolve(self, times):
        s = self.scenario
        model, field, packet = model_for(s), field_for(s), packet_for(s)
        excited_start = s.packet.internal == "excited"
        if s.dimensions == 1:
            P = np.linspace(packet.momentum[0] - 8 * packet.momentum_std,
                            packet.momentum[0] + 8 * packet.momentum_std, PACKET_POINTS_1D)
            weight = packet.density_1d(P) * (P[1] - P[0])
            weight /= weight.sum()
            axis_p, cos1, cos2 = P, np.ones_like(P), np.ones_like(P)
        else:
            x, w = np.polynomial.legendre.leggauss(PACKET_NODES_3D)
            lo = max(0.0, packet.mean_speed - 8 * packet.momentum_std)
            hi = packet.mean_speed + 8 * packet.momentum_std
            P = 0.5 * (hi - lo) * x + 0.5 * (hi + lo)
            weight = 0.5 * (hi - lo) * w * packet.magnitude_density(P)
            weight /= weight.sum()
            cos1, cos2 = langevin_moments(P, packet.mean_speed, packet.momentum_std)
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
        grid = momentum_grid(s, packet, model)
        if s.dimensions == 1:
            density = self._snapshots_1d(model, field, P, weight, excited_P, excited_start,
                                         grid, snaps)
            initial = packet.density_1d(grid)
        else:
            initial = _gaussian(grid, s.mean_momentum, packet.momentum_std)
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

    def _snapshots_1d(self, model, field, P, weight, excited_P, excited_start, grid, snaps):
        """Ground density on `grid`: emitted (excited start) or never excited (ground start)."""
        dP = P[1] - P[0]
        mass = weight[:, None] * (1 - excited_P[:, snaps])  # ground probability per P cell
        if not excited_start:
            return mass / dP
        density = np.zeros((len(grid), len(snaps)))
        channels = [channels_1d(model, field, EMISSION, p) for p in P]
        for branch in range(max(len(c) for c in channels)):
            kick = np.array([c[branch].kick if branch < len(c) else np.nan for c in channels])
            share = np.array([c[branch].rate / sum(x.rate for x in c) if branch < len(c) else 0.0
                              for c in channels])
            target = P + kick
            ok = np.isfinite(target)
            if ok.sum() < 2:
                continue
            jac = np.abs(np.gradient(target[ok], P[ok]))
            order = np.argsort(target[ok])
            for j in range(len(snaps)):
                branch_density = (mass[ok, j] * share[ok] / dP) / np.maximum(jac, 1e-300)
                density[:, j] += np.interp(grid, target[ok][order], branch_density[order],
                                           left=0.0, right=0.0)
        return density


def momentum_grid(scenario, packet, model, points: int = 401) -> np.ndarray:
    """Axis momenta covering the packet and one recoil kick either side."""
    from ..models import EXCITED

    reach = float(model.energy(EXCITED, packet.fastest_momentum()))
    centre, width = scenario.mean_momentum, 6 * packet.momentum_std + 1.5 * reach
    return np.linspace(centre - width, centre + width, points)


def _gaussian(p, mean, std):
    return np.exp(-0.5 * ((p - mean) / std) ** 2) / (np.sqrt(2 * np.pi) * std)


def _gaussian_uniform(x, std, half_width):
    """Density of a N(0, std^2) variable plus an independent uniform one on [-h, h]."""
    if half_width <= 0:
        return _gaussian(x, 0.0, std)
    root2 = np.sqrt(2) * std
    return (erf((x + half_width) / root2) - erf((x - half_width) / root2)) / (4 * half_width)
