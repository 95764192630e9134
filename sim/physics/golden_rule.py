"""Golden-rule rates: the template function Gamma(p) and its packet average.

For a transition A(P) -> B(q) that emits (s = +1) or absorbs (s = -1) one quantum k,
q = P - s k, Fermi's golden rule reads

    Gamma(P) = 2 pi Int d^dk |g(k)|^2 N(w_k) delta(E_A(P) - E_B(|q|) - s w_k),
    |g(k)|^2 = c^2 V^2 F(k)^2 / ((2 pi)^d 2 w_k),  |k| <= K,

with c the model's coupling, V its vertex, N = 1 + n (emission) or n (absorption).  The delta is
resolved exactly, never broadened:

* 1D: a sum over the roots k > 0 of the energy mismatch in each direction, |g|^2 / |mismatch'|;
* 3D: the delta fixes the angle, cos theta = s (P^2 + k^2 - q*^2) / (2 P k) with q* from
  E_B(q*) = E_A(P) - s w_k, leaving  Gamma = (2 pi)^2 Int dk k |g|^2 N q* / (v_B(q*) P)  over the
  k where |cos theta| <= 1, integrated adaptively between the exactly located edges;
* 3D at P = 0: the isotropic root of E_A(0) - E_B(k) - s w_k.

The same integrals weighted by the recoil kick q - P give the kick moments that recoil needs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import constants as const
from scipy.optimize import brentq

from .field import Field, field_for, packet_for
from .models import EXCITED, GROUND, COMModel, level_of, model_for
from .quadrature import gauss_legendre_on

#: relative tolerance of the 3D window quadrature (rounding in heavy-detector kinematics is ~1e-10)
QUAD_RTOL = 1e-9
#: below this P / k the 3D rate is taken at P = 0 (the error is O((P/k)^2))
STATIC_RATIO = 1e-8


@dataclass(frozen=True)
class Process:
    """A one-quantum transition: `initial` -> `final` level, emitting (+1) or absorbing (-1).

    Parameters
    ----------
    initial : int
        Internal level before the transition (GROUND or EXCITED).
    final : int
        Internal level after it.
    sign : int
        s = +1 for emission of the quantum, -1 for its absorption; the final COM momentum is
        q = P - s k.
    """

    initial: int
    final: int
    sign: int

    def vertex(self, model: COMModel, p_initial, p_final):
        """Vertex factor V(p_e, p_g) of the model, with the excited-level momentum first.

        Parameters
        ----------
        model : COMModel
        p_initial, p_final : array_like
            COM momentum magnitudes before and after the transition (momentum units).

        Returns
        -------
        numpy.ndarray
            V (dimensionless for galilean and newton-wigner, 1 / energy units for
            one-particle, V = 1 / sqrt(2 E_e 2 E_g)).
        """
        if self.initial == EXCITED:
            return model.vertex(p_initial, p_final)
        return model.vertex(p_final, p_initial)

    def occupation(self, field: Field, w):
        """1 + n(w) for emission (spontaneous + stimulated), n(w) for absorption.

        n(w) = 1 / (exp(w/T) - 1) is the Bose-Einstein occupation of the field.

        Parameters
        ----------
        field : Field
        w : array_like
            Frequency of the quantum (energy units).

        Returns
        -------
        numpy.ndarray
            N(w) (dimensionless).
        """
        n = field.occupation(w)
        return 1.0 + n if self.sign > 0 else n


EMISSION = Process(EXCITED, GROUND, +1)
ABSORPTION = Process(GROUND, EXCITED, -1)
#: the one-quantum process out of each internal level
PROCESS_FROM = {EXCITED: EMISSION, GROUND: ABSORPTION}


def process_for(internal: str) -> Process:
    """The one-quantum process out of an internal level: decay or thermal excitation.

    Parameters
    ----------
    internal : str
        `packet.internal`: "excited" or "ground".

    Returns
    -------
    Process
        EMISSION for "excited", ABSORPTION for "ground".
    """
    return PROCESS_FROM[level_of(internal)]


@dataclass(frozen=True)
class KickMoments:
    """Rate and recoil-weighted rates of one process at one momentum.

    rate = Gamma; mean = Int dGamma dq_par; square = Int dGamma dq_par^2;
    transverse = Int dGamma dq_perp^2 per transverse axis (0 in 1D); dq = q - P, par along P.

    Parameters
    ----------
    rate : float
        Gamma (inverse time units).
    mean : float
        Int dGamma dq_par (momentum units x inverse time units).
    square : float
        Int dGamma dq_par^2 (momentum units^2 x inverse time units).
    transverse : float
        Int dGamma dq_perp^2 per transverse axis (momentum units^2 x inverse time units).
    """

    rate: float
    mean: float
    square: float
    transverse: float


def coupling_density(model: COMModel, field: Field, process: Process, k, p_initial, p_final):
    """|g(k)|^2 N(w_k) per d^dk, zero beyond the cutoff.

    |g(k)|^2 N(w_k) = c^2 V(p_e, p_g)^2 F(k)^2 / ((2 pi)^d 2 w_k) N(w_k) for |k| <= K, with c
    the model's coupling factor and N = 1 + n (emission) or n (absorption).

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    k : array_like
        Quantum wavenumber magnitude |k| (momentum units).
    p_initial, p_final : array_like
        COM momentum magnitudes before and after the transition (momentum units).

    Returns
    -------
    numpy.ndarray
        Energy units^(2 - d): energy units in 1D, 1 / energy units in 3D (so that
        Gamma = 2 pi Int d^dk |g|^2 N delta(E) is an inverse time).
    """
    c = model.coupling_factor()
    v = process.vertex(model, p_initial, p_final)
    w = field.frequency(k)
    return c * c * v * v * field.mode_weight(k) * process.occupation(field, w) * field.inside(k)


#: thermal absorption of quanta above this many temperatures is below double precision (e^-700)
THERMAL_TAIL = 700.0


def reach(model: COMModel, field: Field, process: Process, P: float) -> float:
    """Largest |k| the process can involve: the cutoff, or a kinematic bound if it is lower.

    Emission: w_k <= E_e(P) - M_g, so |k| <= E_e(P) - M_g (levels lie above M_g).
    Absorption: n(w) < e^-700 beyond w = 700 T, so the tail is negligible in double precision.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : float
        Initial COM momentum (momentum units; its magnitude is used).

    Returns
    -------
    float
        min(K, (E_e(|P|) - M_g)(1 + 1e-12)) for emission, min(K, THERMAL_TAIL T) for absorption
        (momentum units).
    """
    if process.sign > 0:
        bound = float(model.energy(process.initial, abs(P))) * (1 + 1e-12)
    else:
        bound = THERMAL_TAIL * field.temperature
    return min(field.cutoff, bound)


def _scan_grid(upper: float) -> np.ndarray:
    """Sample points on (0, upper] dense enough to bracket every root of a smooth mismatch."""
    return np.unique(np.concatenate([np.linspace(0.0, upper, 4097)[1:],
                                     np.geomspace(upper * 1e-12, upper, 600)]))


def bracketed_roots(func, upper: float) -> list[float]:
    """All roots of the vectorised scalar function `func` on (0, upper], by scan and Brent.

    `func` is sampled on a grid of 4096 equally spaced and 600 geometrically spaced points
    (down to 1e-12 upper); each sign change is refined by Brent's method to an absolute
    tolerance of 1e-15 times the bracket's upper end.  Roots closer together than the grid
    spacing (an even number of sign changes in one cell) are not resolved.

    Parameters
    ----------
    func : callable
        ``func(k: ndarray) -> ndarray``, smooth on (0, upper]; non-finite values count as < 0.
    upper : float
        Upper end of the search interval (the unit of the argument of `func`).

    Returns
    -------
    list of float
        The roots in increasing order (same unit as `upper`); empty when upper <= 0.

    References
    ----------
    R. P. Brent, Algorithms for Minimization without Derivatives (Prentice-Hall, 1973), ch. 4;
    SciPy documentation, ``scipy.optimize.brentq``.
    """
    if not upper > 0:
        return []
    k = _scan_grid(upper)
    f = func(k)
    f = np.where(np.isfinite(f), f, -1.0)
    roots = list(k[f == 0.0])
    change = np.nonzero(np.sign(f[:-1]) * np.sign(f[1:]) < 0)[0]
    for i in change:
        roots.append(brentq(lambda x: float(func(np.array(x))), k[i], k[i + 1],
                            xtol=1e-15 * k[i + 1], rtol=4 * np.finfo(float).eps))
    return sorted(roots)


def collinear_mismatch(model: COMModel, field: Field, process: Process, P: float, d: int):
    """Energy mismatch E_A(|P|) - E_B(|P - s d k|) - s w_k of a quantum along d = +-1 times P.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
        Gives A (initial level), B (final level) and s.
    P : float
        Initial COM momentum along the axis (momentum units, signed).
    d : int
        +1: the quantum's momentum s d k points along P's axis (forward), -1: against it.

    Returns
    -------
    callable
        ``mismatch(k) -> ndarray`` for |k| (momentum units) in energy units; its roots in
        k > 0 are the collinear on-shell quanta.
    """
    s = process.sign
    e_initial = float(model.energy(process.initial, abs(P)))

    def mismatch(k):
        return e_initial - model.energy(process.final, np.abs(P - s * d * k)) - s * field.frequency(k)

    return mismatch


@dataclass(frozen=True)
class Channel:
    """One 1D decay channel: the signed recoil kick q - P and its golden-rule rate.

    Parameters
    ----------
    kick : float
        q - P = -s d k (momentum units, signed).
    rate : float
        Golden-rule rate of the channel (inverse time units).
    quantum : float
        |k| of the emitted or absorbed quantum (momentum units).
    """

    kick: float
    rate: float
    quantum: float  # |k| of the emitted or absorbed quantum


def channels_1d(model: COMModel, field: Field, process: Process, P: float) -> list[Channel]:
    """On-shell channels of a 1D detector at signed momentum P: directions d = +-1, roots k > 0.

    rate = 2 pi |g(k)|^2 N(w_k) / |d mismatch / dk|, kick = q - P = -s d k.

    The delta of the golden rule is resolved exactly, delta(f(k)) = Sum_i delta(k - k_i) /
    |f'(k_i)| over the roots k_i of the mismatch f(k) = E_A(|P|) - E_B(|q|) - s w_k, with
    q = P - s d k and f'(k) = v_B(|q|) sign(q) s d - s k / w_k.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : float
        Initial COM momentum (momentum units, signed).

    Returns
    -------
    list of Channel
        One per root k in (0, reach] and direction d; kick and quantum in momentum units,
        rate in inverse time units.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    s = process.sign
    out = []
    for d in (+1, -1):
        for k in bracketed_roots(collinear_mismatch(model, field, process, P, d),
                                 reach(model, field, process, P)):
            q = P - s * d * k
            slope = (model.velocity(process.final, abs(q)) * np.sign(q) * s * d
                     - s * k / field.frequency(k))
            rate = 2 * np.pi * coupling_density(model, field, process, k, abs(P), abs(q)) / abs(slope)
            out.append(Channel(float(q - P), float(rate), float(k)))
    return out


def _rates_1d(model: COMModel, field: Field, process: Process, P: float) -> KickMoments:
    """Sum over the 1D channels of rate * kick^n."""
    totals = np.zeros(3)
    for c in channels_1d(model, field, process, P):
        totals += c.rate * np.array([1.0, c.kick, c.kick * c.kick])
    return KickMoments(float(totals[0]), float(totals[1]), float(totals[2]), 0.0)


def _rates_3d_static(model: COMModel, field: Field, process: Process) -> KickMoments:
    """P = 0: isotropic emission at the root k0 of E_A(0) - E_B(k) - s w_k."""
    s = process.sign
    e_initial = float(model.energy(process.initial, 0.0))

    def mismatch(k):
        return e_initial - model.energy(process.final, k) - s * field.frequency(k)

    rate = 0.0
    square = 0.0
    for k in bracketed_roots(mismatch, reach(model, field, process, 0.0)):
        slope = abs(model.velocity(process.final, k) + s * k / field.frequency(k))
        g2 = coupling_density(model, field, process, k, 0.0, k)
        weight = 2 * np.pi * 4 * np.pi * k * k * g2 / slope
        rate += weight
        square += weight * k * k / 3.0
    return KickMoments(float(rate), 0.0, float(square), float(square))


def _rates_3d(model: COMModel, field: Field, process: Process, P: float) -> KickMoments:
    """Angle fixed by the delta; adaptive quadrature over k between the edges |cos theta| = 1."""
    if P <= STATIC_RATIO * model.rest_emission_momentum():
        return _rates_3d_static(model, field, process)
    s = process.sign
    e_initial = float(model.energy(process.initial, P))

    def final_momentum(k):
        return model.momentum(process.final, e_initial - s * field.frequency(k))

    def cosine(k):
        q = final_momentum(k)
        return s * (P * P + k * k - q * q) / (2 * P * k)

    def inside(k):
        return 1.0 - cosine(k) ** 2 > 0

    # the window |cos theta| <= 1 is bounded by the collinear (forward, backward) on-shell momenta
    upper = reach(model, field, process, P)
    if not upper > 0:
        return KickMoments(0.0, 0.0, 0.0, 0.0)
    edges = sorted({0.0, upper}.union(*(bracketed_roots(collinear_mismatch(model, field, process, P, d),
                                                        upper) for d in (+1, -1))))
    windows = [(a, b) for a, b in zip(edges[:-1], edges[1:]) if b > a and inside(0.5 * (a + b))]

    def integrand(k):
        q = final_momentum(k)
        u = np.clip(cosine(k), -1.0, 1.0)
        density = (4 * np.pi ** 2 * k * coupling_density(model, field, process, k, P, q)
                   * model.inertia(process.final, q) / P)
        kick_par = -s * k * u
        return density * np.stack([np.ones_like(kick_par), kick_par, kick_par ** 2,
                                   0.5 * k * k * (1 - u * u)])

    totals = np.zeros(4)
    for a, b in windows:
        totals += window_integral(integrand, a, b)
    return KickMoments(*map(float, totals))


def window_integral(integrand, a: float, b: float) -> np.ndarray:
    """Int_a^b of a smooth vector integrand, by fixed Gauss-Legendre rules or adaptively.

    Gauss-Legendre at 48 and 96 nodes, adaptive quadrature only when the two disagree beyond
    QUAD_RTOL (the integrand is smooth inside a window, so the fixed rules almost always
    suffice and are immune to rounding noise).

    Parameters
    ----------
    integrand : callable
        ``integrand(k: ndarray of shape (n,)) -> ndarray of shape (m, n)``, vectorised over k.
    a, b : float
        Integration limits (momentum units in this module).

    Returns
    -------
    numpy.ndarray
        The m integrals (the integrand's unit times that of k): the 96-node result I_96 when
        every component has |I_96 - I_48| <= QUAD_RTOL max|I_96| (max over the components),
        else scipy's ``quad_vec`` with relative tolerance QUAD_RTOL.

    References
    ----------
    M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
    eqs. 25.4.29-25.4.30 (Gauss-Legendre); SciPy documentation,
    ``scipy.integrate.quad_vec`` (adaptive vector-valued quadrature).
    """
    coarse, fine = (_gauss_legendre(integrand, a, b, n) for n in (48, 96))
    if np.all(np.abs(fine - coarse) <= QUAD_RTOL * np.abs(fine).max()):
        return fine
    from scipy.integrate import quad_vec  # rarely needed, and slow to import

    value, _ = quad_vec(integrand, a, b, epsrel=QUAD_RTOL, epsabs=1e-14 * np.abs(fine).max(),
                        limit=400)
    return value


def _gauss_legendre(integrand, a, b, nodes):
    k, w = gauss_legendre_on(nodes, a, b)
    return integrand(k) @ w


def kick_moments(model: COMModel, field: Field, process: Process, P: float) -> KickMoments:
    """Golden-rule rate and recoil moments at momentum P (signed in 1D, |P| in 3D).

    Gamma(P) = 2 pi Int d^dk |g(k)|^2 N(w_k) delta(E_A(P) - E_B(|q|) - s w_k), q = P - s k,
    and the same integral weighted by the kick q - P (parallel and transverse to P).  1D: a
    sum over the collinear roots (`channels_1d`); 3D: the delta fixes
    cos theta = s (P^2 + k^2 - q*^2) / (2 P k) and
    Gamma = (2 pi)^2 Int dk k |g|^2 N q* / (v_B(q*) P) over the k where |cos theta| <= 1;
    at P = 0 (P / k* <= STATIC_RATIO) the isotropic root of E_A(0) - E_B(k) - s w_k.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : float
        Initial COM momentum (momentum units): signed in 1D, its magnitude is used in 3D.

    Returns
    -------
    KickMoments
        rate in inverse time units, kick moments in momentum units (squared) x inverse time
        units.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    if field.dimensions == 1:
        return _rates_1d(model, field, process, float(P))
    return _rates_3d(model, field, process, abs(float(P)))


def transition_rate(model: COMModel, field: Field, process: Process, P: float) -> float:
    """Gamma(P) for one process (inverse time units).

    Gamma(P) = 2 pi Int d^dk |g(k)|^2 N(w_k) delta(E_A(P) - E_B(|P - s k|) - s w_k).

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : float
        Initial COM momentum (momentum units; signed in 1D, magnitude in 3D).

    Returns
    -------
    float
        Gamma(P) (inverse time units).

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    return kick_moments(model, field, process, P).rate


def template_rate(scenario, p, model: str | None = None):
    """Template function Gamma(p) of the scenario at momentum magnitude(s) p along the packet axis.

    Emission rate (with 1 + n in a thermal field) for an excited packet, absorption (excitation)
    rate for a ground-state packet.  `model` evaluates another COM model with the same parameters.

    Gamma(p) = 2 pi Int d^dk |g(k)|^2 N(w_k) delta(E_A(p) - E_B(|p - s k|) - s w_k), with no
    cutoff unless the scenario gives one.

    Parameters
    ----------
    scenario : Scenario
    p : float or array_like
        COM momentum (momentum units); its magnitude |p| is used.
    model : str, optional
        Another COM model's name, built with the scenario's masses, gap and coupling.

    Returns
    -------
    float or numpy.ndarray
        Gamma(|p|) (inverse time units): a float for a scalar `p`, else the shape of `p`.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    com = model_for(scenario, model)
    field = field_for(scenario)
    process = process_for(scenario.packet.internal)
    p_array = np.asarray(p, dtype=float)
    rates = np.array([transition_rate(com, field, process, abs(x)) for x in p_array.ravel()])
    return rates.reshape(p_array.shape) if p_array.ndim else float(rates[0])


@lru_cache(maxsize=1024)
def packet_rate(scenario, model: str | None = None, nodes: int = 96) -> float:
    """Packet-averaged golden-rule rate Gamma_packet = Int |psi(p)|^2 Gamma(p) d^dp.

    Cached per (scenario, model, nodes): scenarios are frozen and compare by value, so one run
    computes it once however many of its parts ask.

    The average uses the packet's quadrature: in 1D over the signed momentum, in 3D over |p|
    with the noncentral chi density of a Gaussian momentum (Gamma is isotropic).

    Parameters
    ----------
    scenario : Scenario
    model : str, optional
        Another COM model evaluated with the scenario's parameters.
    nodes : int
        Nodes of the packet quadrature (`Packet.quadrature`).

    Returns
    -------
    float
        Inverse time units (natural units): emission rate (x (1 + n) in a thermal field) for an
        excited packet, excitation rate for a ground-state packet.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    p, w = packet_for(scenario).quadrature(nodes)
    return float(np.dot(w, template_rate(scenario, np.abs(p), model)))


def rest_rate(scenario, model: str | None = None) -> float:
    """Gamma(0): the rate of the detector at rest.

    Parameters
    ----------
    scenario : Scenario
    model : str, optional
        Another COM model's name, built with the scenario's parameters.

    Returns
    -------
    float
        Gamma(0) (inverse time units): emission for an excited packet, absorption for a
        ground-state packet.
    """
    return float(template_rate(scenario, 0.0, model))


def rest_emitted_momentum(scenario) -> float | None:
    """|k| of the quantum a detector at rest emits (no cutoff); None if it cannot emit.

    The smallest root k0 > 0 of E_e(0) - E_g(k) - w_k = 0 (k0 = (M_e^2 - M_g^2) / (2 M_e)
    for the relativistic models and a massless field).

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    float or None
        k0 (momentum units); None when there is no root (the field mass exceeds what the
        gap can supply).
    """
    com = model_for(scenario)
    f = scenario.field
    free = Field(f.dimensions, f.mass, f.smearing, np.inf, f.temperature)
    roots = bracketed_roots(collinear_mismatch(com, free, EMISSION, 0.0, +1),
                            reach(com, free, EMISSION, 0.0))
    return roots[0] if roots else None


def template_grid(scenario, points: int = 41) -> np.ndarray:
    """Momenta covering the packet (+-4 sigma_p about the mean; magnitudes >= 0 in 3D).

    Parameters
    ----------
    scenario : Scenario
    points : int
        Number of momenta.

    Returns
    -------
    numpy.ndarray
        Equally spaced momenta from p0 - 4 sigma_p to p0 + 4 sigma_p along the packet axis,
        sigma_p = 1 / (2 width), the lower end clipped at 0 in 3D (momentum units).
    """
    packet = packet_for(scenario)
    s, centre = packet.momentum_std, scenario.mean_momentum
    lo, hi = centre - 4 * s, centre + 4 * s
    if scenario.dimensions == 3:
        lo = max(0.0, lo)
    return np.linspace(lo, hi, points)


def recoil_velocity(scenario) -> float:
    """Rest-frame recoil speed of one emission in m/s (nan if the detector at rest cannot emit).

    The emitted momentum k of a detector at rest comes from the golden-rule kick moments,
    k^2 = <dq^2> summed over the d axes (k* = (M_e^2 - M_g^2)/(2 M_e) for a massless field,
    less for a massive one); the speed is the ground level's dE_g/dp at k (k/M_g Galilean,
    k/E_g relativistic) times c (scipy.constants, CODATA).

    Parameters
    ----------
    scenario : Scenario

    Returns
    -------
    float
        Speed in m/s (SI, not natural units); nan if the detector at rest cannot emit.

    References
    ----------
    SciPy documentation, ``scipy.constants`` (CODATA value of c).
    """
    model = model_for(scenario)
    moments = kick_moments(model, field_for(scenario), EMISSION, 0.0)
    if not moments.rate > 0:
        return math.nan
    square = moments.square + (scenario.dimensions - 1) * moments.transverse
    return float(model.velocity(GROUND, math.sqrt(square / moments.rate))) * const.c
