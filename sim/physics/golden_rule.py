"""Golden-rule rates: the template function Gamma(p) and its packet average.

For a transition A(P) -> B(q) that emits (s = +1) or absorbs (s = -1) one quantum k,
q = P - s k, Fermi's golden rule reads

    Gamma(P) = 2 pi Int d^dk |g(k)|^2 N(w_k) delta(f),   f = E_A(P) - E_B(|q|) - s w_k,
    |g(k)|^2 = c^2 V^2 F(k)^2 / ((2 pi)^d 2 w_k),  |k| <= K,

with c the model's coupling, V its vertex, N = 1 + n (emission) or n (absorption).  The delta is
resolved exactly, never broadened, and every function here is vectorised over the momenta P
(one call for a whole template grid or packet rule):

* 1D: a sum over the roots k > 0 of the collinear mismatch in each direction, |g|^2 / |f'|.
  The collinear mismatch is concave in k for emission and for absorption of a massless
  quantum (every model's E_B(|x|) is convex in x, w_k is convex): at most two roots, found by
  Newton's method from outside (`_concave_roots`); otherwise by a sign-change scan and the
  Illinois method (`_scan_roots`).
* 3D: with u = cos(k, P), q^2 = P^2 + k^2 - 2 s P k u, the on-shell set f(k, u) = 0 is a curve
  in the (k, u) rectangle.  At fixed k, f is monotone in u (df/du = s v_B P k / q), so a k
  lies on the curve exactly where the collinear mismatches f(k, +1), f(k, -1) differ in sign:
  the curve splits into windows between consecutive collinear roots (or the cutoff).  Each
  window is integrated in the variable that is well conditioned there:

  - wide windows (|k_b - k_a| > NARROW_WINDOW k_b: light and fast detectors) in k,
      Gamma = (2 pi)^2 Int dk k |g|^2 N q* / (v_B(q*) P),
    with q* from E_B(q*) = E_A(P) - s w_k; the integrand is smooth in k (polynomial for a
    massless field and a point-like detector), where in u it has a pole approaching u = +-1 as
    v_B -> 1;
  - narrow windows (heavy or slow detectors: the window's relative width is ~ 2 v_B) in u,
      Gamma = (2 pi)^2 Int du k(u)^2 |g|^2 N / |df/dk|_u,
      df/dk|_u = -(k - s P u) / (q / v_B(q)) - s k / w_k,
    with k(u) the root of f(k, u) = 0 by Newton's method from the straight line between the
    window's edges.  A window of relative width w in k fixes the angle only to eps / w (q*
    comes from the cancelling difference E_A - s w_k) and the mean kick, itself ~ w k, to
    eps / w^2; an atom's window is ~ 2 P / M ~ 1e-12 of k, below what k resolves.  In u
    nothing cancels, and the integrand's nearest singularity (u ~ 1 / v_B) is far enough for
    16 and 32 Gauss-Legendre nodes to agree to rounding.  The u picture needs u(k) monotone
    along the window (no turning point df/dk|_u = 0, where it would have 1/sqrt
    singularities); |df/dk|_u >= v_g(k) - v_B(q) (v_g = k / w_k), and for emission with
    k > P, df/dk|_u < 0 outright, so a narrow window failing both tests (a detector as fast as
    the field's group velocity) stays in k.

  Below P = STATIC_RATIO k* (where an atom's two collinear roots coincide in double
  precision) the windows are seeded from the roots at P = 0 and integrated in u at the actual
  P, so nothing is approximated.  The same integrals weighted by the recoil kick q - P give
  the kick moments.

Level energies are measured from M_g (`sim.physics.models`), so a detector with kinetic energy
K = P^2 / 2M rounds the energy balance to eps (Omega + K): rates stay accurate to ~eps K / Omega
relative, far below 1e-12 for every packet of an atom.

The packet average is a Gauss-Hermite rule (`packet_rate`) grown until two sizes agree.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import constants as const
from scipy.optimize import brentq
from scipy.special import j0

from .field import Field, field_for, packet_for
from .models import EXCITED, GROUND, COMModel, level_of, model_for
from .quadrature import gauss_hermite_normal, gauss_legendre_on

#: acceptance of a fixed window rule: the two rule sizes agree to this (relative to the rate),
#: else the window goes to adaptive quadrature
QUAD_RTOL = 1e-9
#: below this P / k* the 3D windows are seeded from the roots at P = 0
STATIC_RATIO = 1e-8
#: a 3D window narrower than this fraction of its |k| is integrated over the angle u (wider ones
#: over k, where the angle's rounding eps / w and the mean kick's eps / w^2 stay below 1e-13)
NARROW_WINDOW = 0.1
#: Gauss-Legendre sizes (coarse, fine) of the two window pictures
K_RULE = (48, 96)
ANGLE_RULE = (16, 32)
#: iterations for a root at most (the Illinois method needs ~10 from a scan cell, Newton's
#: method from outside a concave function a few)
ROOT_STEPS = 100
#: Newton steps for k(u) at most (quadratic convergence from a start within a narrow window)
NEWTON_STEPS = 12
#: packet rule sizes tried in turn, and the agreement that stops the growth
PACKET_SIZES = (4, 8, 16, 32, 64, 128, 256)
PACKET_RTOL = 1e-10
#: below this |p0| / sigma_p the 3D packet rule is written symmetrically about p = 0
SYMMETRIC_BELOW = 0.1


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
#: the counter-rotating processes, dropped by the rotating-wave approximation: sigma+ a_k^dag
#: excites while it emits, g(P) -> e(P - k) + k (x (1 + n)); sigma- a_k de-excites while it
#: absorbs, e(P) + k -> g(P + k) (x n, so none in the vacuum)
EXCITING_EMISSION = Process(GROUND, EXCITED, +1)
QUENCHING_ABSORPTION = Process(EXCITED, GROUND, -1)
#: the one-quantum process out of each internal level
PROCESS_FROM = {EXCITED: EMISSION, GROUND: ABSORPTION}
#: the counter-rotating one-quantum process out of each internal level
COUNTER_PROCESS_FROM = {EXCITED: QUENCHING_ABSORPTION, GROUND: EXCITING_EMISSION}


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


def processes_out_of(level: int, rotating_wave: bool, thermal: bool = True) -> tuple[Process, ...]:
    """The golden-rule one-quantum processes that leave an internal level.

    Under the rotating-wave approximation only PROCESS_FROM[level] (emission out of e,
    absorption out of g); without it also the counter-rotating COUNTER_PROCESS_FROM[level]
    (g -> e + quantum, e + quantum -> g).  An absorbing process needs quanta: with
    ``thermal = False`` (a vacuum field) it is left out, its rate being exactly zero.

    Parameters
    ----------
    level : int
        GROUND or EXCITED.
    rotating_wave : bool
        `coupling.rotating_wave`.
    thermal : bool, optional
        Whether the field holds quanta (field.temperature > 0).

    Returns
    -------
    tuple of Process
        The rotating process first (dimensionless labels; possibly empty).
    """
    candidates = (PROCESS_FROM[level],) + (() if rotating_wave else (COUNTER_PROCESS_FROM[level],))
    return tuple(p for p in candidates if thermal or p.sign > 0)


def anomalous_doppler_speed(model: COMModel, field: Field) -> float:
    """Lowest detector speed at which g -> e + quantum conserves energy (counter-rotating).

    A galilean detector's ground level at momentum P gives up E_g(P) - E_e(|P - k|) =
    v k cos(k, P) - k^2 / 2M - Omega (v = P / M); the most it offers a quantum of |k| = k is
    at cos = 1, phi(k) = v k - k^2 / 2M - Omega - w_k, concave in k.  The process is on shell
    once max_k phi >= 0; at the threshold phi = phi' = 0, i.e.

        k_t^2 / 2M - m^2 / w(k_t) = Omega,   v_t = k_t / M + k_t / w(k_t),

    (massless field: k_t = sqrt(2 M Omega), v_t = 1 + sqrt(2 Omega / M), the recoil-corrected
    anomalous-Doppler threshold).  A cutoff K < k_t leaves the on-shell |k| inside only from
    phi(K) = 0: v_K = (Omega + K^2 / 2M + w_K) / K.  The relativistic models never qualify:
    the invariant mass of the final e + quantum is at least M_e > M_g.

    Parameters
    ----------
    model : COMModel
    field : Field
        Its mass m (energy units) and cutoff K (momentum units; may be inf).

    Returns
    -------
    float
        The threshold speed (units of c, > 1 for a galilean detector); inf when no speed makes
        the process resonant (relativistic models).

    References
    ----------
    Anomalous Doppler effect (emission with excitation by a source faster than the waves):
    V. L. Ginzburg, Theoretical Physics and Astrophysics (Pergamon, 1979), ch. on
    Vavilov-Cherenkov radiation (from memory); the recoil correction is derived here.
    """
    if model.name != "galilean":
        return math.inf
    mass, gap, m = model.ground_mass, model.gap, field.mass
    if m == 0:
        k_t = math.sqrt(2 * mass * gap)
    else:
        k_t = brentq(lambda k: k * k / (2 * mass) - m * m / math.hypot(k, m) - gap, 0.0,
                     math.sqrt(2 * mass * (gap + m)), xtol=1e-300, rtol=4 * np.finfo(float).eps)
    if field.cutoff < k_t:
        cut = field.cutoff
        return float((gap + cut * cut / (2 * mass) + math.hypot(cut, m)) / cut)
    return float(k_t / mass + k_t / math.hypot(k_t, m))


@dataclass(frozen=True)
class KickMoments:
    """Rate and recoil-weighted rates of one process at one momentum (or at each of many).

    rate = Gamma; mean = Int dGamma dq_par; square = Int dGamma dq_par^2;
    transverse = Int dGamma dq_perp^2 per transverse axis (0 in 1D); dq = q - P, par along P.

    Parameters
    ----------
    rate : float or ndarray
        Gamma (inverse time units).
    mean : float or ndarray
        Int dGamma dq_par (momentum units x inverse time units).
    square : float or ndarray
        Int dGamma dq_par^2 (momentum units^2 x inverse time units).
    transverse : float or ndarray
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


def reach(model: COMModel, field: Field, process: Process, P):
    """Largest |k| the process can involve: the cutoff, or a kinematic bound if it is lower.

    Emission: w_k <= E_e(P) - M_g, so |k| <= E_e(P) - M_g (levels lie above M_g).
    Absorption: n(w) < e^-700 beyond w = 700 T, so the tail is negligible in double precision.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : float or array_like
        Initial COM momentum (momentum units; its magnitude is used).

    Returns
    -------
    float or numpy.ndarray
        min(K, (E_e(|P|) - M_g)(1 + 1e-12)) for emission, min(K, THERMAL_TAIL T) for absorption
        (momentum units); a float for a scalar P.
    """
    if process.sign > 0:
        bound = model.energy(process.initial, np.abs(np.asarray(P, dtype=float))) * (1 + 1e-12)
    else:
        bound = np.full(np.shape(P), THERMAL_TAIL * field.temperature)
    upper = np.minimum(field.cutoff, bound)
    return float(upper) if np.ndim(P) == 0 else upper


#: relative scan points on (0, 1]: 4096 equally spaced and 600 geometric down to 1e-12
_SCAN = np.unique(np.concatenate([np.linspace(0.0, 1.0, 4097)[1:], np.geomspace(1e-12, 1.0, 600)]))


def _illinois(func, a, b, fa, fb, args):
    """Roots of func(x, *args) in the brackets [a, b] (fa, fb of opposite signs), elementwise.

    The Illinois variant of regula falsi: a secant step, with the function value kept at the
    stale end halved, so the bracket shrinks superlinearly (order ~1.44); a step leaving the
    bracket is replaced by bisection.  Stops when every bracket is 4 epsilon of its root wide or
    a zero is hit.  scipy's bracketing ``elementwise.find_root`` does the same job, but its
    per-iteration overhead (~0.5 ms, 5-10 ms a call, measured) exceeds a whole rate evaluation.
    """
    for _ in range(ROOT_STEPS):
        with np.errstate(invalid="ignore", divide="ignore"):
            c = b - fb * (b - a) / (fb - fa)
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        c = np.where((c > lo) & (c < hi), c, 0.5 * (a + b))
        fc = func(c, *args)
        stale = np.sign(fc) == np.sign(fb)
        a, fa = np.where(stale, a, b), np.where(stale, 0.5 * fa, fb)
        b, fb = c, fc
        if np.all((np.abs(b - a) <= 4 * np.finfo(float).eps * np.abs(b)) | (fc == 0)):
            break
    return np.where(np.abs(fa) < np.abs(fb), a, b)


def _scan_roots(func, upper, args=()):
    """Sign changes of func(k, *args) on each row's (0, upper_i], refined by `_illinois`.

    Returns (rows, roots, start_positive): the row and root of each sign change in increasing k
    per row, and per row whether func > 0 at the first scan point.  Non-finite values and zeros
    count as not positive.
    """
    upper = np.asarray(upper, dtype=float)
    start = np.zeros(upper.shape, dtype=bool)
    live = np.nonzero(upper > 0)[0]
    k = upper[live, None] * _SCAN
    values = func(k, *(np.asarray(a)[live, None] for a in args))
    positive = values > 0
    start[live] = positive[:, 0]
    cell_row, cell = np.nonzero(positive[:, 1:] != positive[:, :-1])
    rows = live[cell_row]
    values = np.where(np.isfinite(values), values, -1.0)
    roots = _illinois(func, k[cell_row, cell], k[cell_row, cell + 1], values[cell_row, cell],
                      values[cell_row, cell + 1], tuple(np.asarray(a)[rows] for a in args))
    return rows, roots, start


def bracketed_roots(func, upper: float) -> list[float]:
    """All roots of the vectorised scalar function `func` on (0, upper], by scan and bracketing.

    `func` is sampled on a grid of 4096 equally spaced and 600 geometrically spaced points
    (down to 1e-12 upper); each sign change is refined by the Illinois variant of regula falsi
    (bracketing, superlinear) to 4 machine epsilons relative.  Roots closer together than the
    grid spacing (an even number of sign changes in one cell) are not resolved; a zero at a
    scan point counts as negative.

    Parameters
    ----------
    func : callable
        ``func(k: ndarray) -> ndarray``, elementwise, smooth on (0, upper]; non-finite values
        count as < 0.
    upper : float
        Upper end of the search interval (the unit of the argument of `func`).

    Returns
    -------
    list of float
        The roots in increasing order (same unit as `upper`); empty when upper <= 0.

    References
    ----------
    M. Dowell and P. Jarratt, "A modified regula falsi method for computing the root of an
    equation", BIT 11, 168 (1971) (the Illinois method).
    """
    _, roots, _ = _scan_roots(func, np.array([float(upper)]))
    return [float(r) for r in roots]


def collinear_mismatch(model: COMModel, field: Field, process: Process, k, P, d: int):
    """Energy mismatch E_A(|P|) - E_B(|P - s d k|) - s w_k of a quantum along d = +-1 times P.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
        Gives A (initial level), B (final level) and s.
    k : array_like
        Quantum wavenumber magnitude |k| (momentum units).
    P : array_like
        Initial COM momentum along the axis (momentum units, signed), broadcast with `k`.
    d : int
        +1: the quantum's momentum s d k points along P's axis (forward), -1: against it.

    Returns
    -------
    numpy.ndarray
        The mismatch (energy units); its roots in k > 0 are the collinear on-shell quanta.
    """
    s = process.sign
    return (model.energy(process.initial, np.abs(P))
            - model.energy(process.final, np.abs(P - s * d * k)) - s * field.frequency(k))


def _collinear_slope(model, field, process, k, P, d):
    """d/dk of `collinear_mismatch`: s d v_B(|x|) sign(x) - s k / w_k, x = P - s d k."""
    s = process.sign
    x = P - s * d * k
    v_final = model.velocity(process.final, np.abs(x)) * np.sign(x)
    return s * d * v_final - s * _group_velocity(field, k)


def _group_velocity(field, k):
    """dw/dk = k / w_k of the field; at k = 0 its limit from k > 0 (0, or 1 when massless)."""
    w = field.frequency(k)
    return np.divide(k, w, out=np.ones(np.shape(w)), where=w > 0)


def _outer_newton(func, slope, start, args, direction):
    """Root of a concave func(k, args) by Newton's method from an outer point where func <= 0.

    From the left of a rising branch (direction +1) or the right of a falling one (-1) the
    tangent of a concave function lies above it, so every Newton iterate stays on the outer
    side and moves monotonically to the root: no bracket is needed.  An element stops when its
    step turns back or falls below 4 epsilon (the rounding of func is reached).
    """
    k = start
    active = np.ones(k.shape, dtype=bool)
    for _ in range(ROOT_STEPS if k.size else 0):
        with np.errstate(invalid="ignore", divide="ignore"):
            step = -func(k, args) / slope(k, args)
        active &= (direction * step > 4 * np.finfo(float).eps * np.abs(k))
        if not active.any():
            break
        k = np.where(active, k + step, k)
    return k


def _concave_roots(model, field, process, P, d):
    """Roots of a concave collinear mismatch m on (0, reach]: at most two, about its maximum.

    The maximum k_top is 0 if m'(0) <= 0, the reach U if m'(U) >= 0, else the root of the
    decreasing m' (`_illinois`); a root lies in [0, k_top] when m(0) <= 0 < m(k_top) and in
    [k_top, U] when m(U) <= 0 < m(k_top), each found by `_outer_newton` from the outer end.
    Same returns as `_scan_roots`.
    """
    upper = reach(model, field, process, P)

    def mismatch(k, p):
        return collinear_mismatch(model, field, process, k, p, d)

    def slope(k, p):
        return _collinear_slope(model, field, process, k, p, d)

    zero = np.zeros_like(P)
    m0, m_end, g0, g_end = mismatch(zero, P), mismatch(upper, P), slope(zero, P), slope(upper, P)
    top = np.where(g0 <= 0, 0.0, upper)
    inner = np.nonzero((g0 > 0) & (g_end < 0))[0]
    if inner.size:
        top[inner] = _illinois(slope, zero[inner], upper[inner], g0[inner], g_end[inner],
                               (P[inner],))
    peak = mismatch(top, P)
    live = (upper > 0) & (peak > 0)
    left = np.nonzero(live & (m0 <= 0) & (top > 0))[0]
    right = np.nonzero(live & (m_end <= 0) & (top < upper))[0]
    roots = np.concatenate([_outer_newton(mismatch, slope, zero[left], P[left], +1),
                            _outer_newton(mismatch, slope, upper[right], P[right], -1)])
    rows = np.concatenate([left, right])
    order = np.lexsort((roots, rows))
    return rows[order], roots[order], (m0 > 0) & (upper > 0)


def _collinear_roots(model, field, process, P, d):
    """Roots k > 0 of the collinear mismatch in direction d for each P (rows index P).

    Emission, and absorption of a massless quantum, have a concave mismatch in k (E_B(|x|) is
    convex in x for every model here, p^2 / 2M or sqrt(p^2 + M^2), and w_k is convex, linear
    when massless): `_concave_roots`.  Absorption of a massive quantum mixes a convex -E_B with
    a convex w_k: the scan of `_scan_roots`.  Returns (rows, roots, start_positive).
    """
    if process.sign > 0 or field.mass == 0:
        return _concave_roots(model, field, process, P, d)

    def mismatch(k, p):
        return collinear_mismatch(model, field, process, k, p, d)

    return _scan_roots(mismatch, reach(model, field, process, P), (P,))


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


@dataclass(frozen=True)
class ChannelTable:
    """The 1D channels of many momenta: row i holds those of P_i, padded to a common width.

    Within a row the channels come forward (d = +1) first, each direction in increasing |k|;
    padding has kick and quantum nan and rate 0.

    Parameters
    ----------
    kick : ndarray, shape (n, c)
        q - P = -s d k (momentum units, signed).
    rate : ndarray, shape (n, c)
        Golden-rule rate of each channel (inverse time units).
    quantum : ndarray, shape (n, c)
        |k| of the quantum (momentum units).
    """

    kick: np.ndarray
    rate: np.ndarray
    quantum: np.ndarray


def channel_table(model: COMModel, field: Field, process: Process, P) -> ChannelTable:
    """On-shell channels of a 1D detector at each signed momentum P: directions d = +-1, roots k.

    rate = 2 pi |g(k)|^2 N(w_k) / |d mismatch / dk|, kick = q - P = -s d k.

    The delta of the golden rule is resolved exactly, delta(f(k)) = Sum_i delta(k - k_i) /
    |f'(k_i)| over the roots k_i of the mismatch f(k) = E_A(|P|) - E_B(|q|) - s w_k, with
    q = P - s d k and f'(k) = v_B(|q|) sign(q) s d - s k / w_k.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : array_like, shape (n,)
        Initial COM momenta (momentum units, signed).

    Returns
    -------
    ChannelTable
        One row per momentum: kick and quantum in momentum units, rate in inverse time units.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    P = np.atleast_1d(np.asarray(P, dtype=float))
    s = process.sign
    found = [(_collinear_roots(model, field, process, P, d), d) for d in (+1, -1)]
    rows = np.concatenate([f[0][0] for f in found]).astype(int)
    k = np.concatenate([f[0][1] for f in found])
    d = np.concatenate([np.full(f[0][0].size, f[1]) for f in found])
    order = np.argsort(rows, kind="stable")  # forward before backward, k increasing in each
    rows, k, d = rows[order], k[order], d[order]
    p = P[rows]
    q = p - s * d * k
    slope = (model.velocity(process.final, np.abs(q)) * np.sign(q) * s * d
             - s * k / field.frequency(k))
    density = coupling_density(model, field, process, k, np.abs(p), np.abs(q))
    rate = 2 * np.pi * density / np.abs(slope)
    counts = np.bincount(rows, minlength=P.size)
    column = np.arange(rows.size) - np.repeat(np.cumsum(counts) - counts, counts)
    shape = (P.size, int(counts.max(initial=0)))
    table = {"kick": np.full(shape, np.nan), "rate": np.zeros(shape),
             "quantum": np.full(shape, np.nan)}
    for name, values in (("kick", -s * d * k), ("rate", rate), ("quantum", k)):
        table[name][rows, column] = values
    return ChannelTable(**table)


def channels_1d(model: COMModel, field: Field, process: Process, P: float) -> list[Channel]:
    """On-shell channels of a 1D detector at signed momentum P: directions d = +-1, roots k > 0.

    rate = 2 pi |g(k)|^2 N(w_k) / |d mismatch / dk|, kick = q - P = -s d k: one row of
    `channel_table`, which resolves delta(f(k)) = Sum_i delta(k - k_i) / |f'(k_i)| over the roots
    of f(k) = E_A(|P|) - E_B(|q|) - s w_k, q = P - s d k, f'(k) = v_B(|q|) sign(q) s d - s k / w_k.

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
        One per root k in (0, reach] and direction d (forward first); kick and quantum in
        momentum units, rate in inverse time units.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    table = channel_table(model, field, process, [float(P)])
    return [Channel(float(kick), float(rate), float(k))
            for kick, rate, k in zip(table.kick[0], table.rate[0], table.quantum[0])
            if not math.isnan(k)]


def _rates_1d(model, field, process, P):
    """(4, n) totals of rate * (1, kick, kick^2, 0) over the 1D channels of each P."""
    table = channel_table(model, field, process, P)
    kick = np.nan_to_num(table.kick)
    rate = table.rate
    return np.stack([rate.sum(axis=1), (rate * kick).sum(axis=1), (rate * kick * kick).sum(axis=1),
                     np.zeros(P.size)])


# --- 3D: the on-shell curve f(k, u) = 0 ---------------------------------------------------------


def _final_momentum(P, k, u, s):
    """|q| = |P - s k| at cos(k, P) = u, as sqrt((k - s P u)^2 + P^2 (1 - u)(1 + u))."""
    return np.sqrt((k - s * P * u) ** 2 + P * P * (1 - u) * (1 + u))


def _cosine(model, field, process, P, k):
    """cos(k, P) on shell at |k| (k picture): s (P^2 + k^2 - q*^2) / (2 P k), clipped to [-1, 1]."""
    s = process.sign
    q = model.momentum(process.final, model.energy(process.initial, P) - s * field.frequency(k))
    return np.clip(s * (P * P + k * k - q * q) / (2 * P * k), -1.0, 1.0)


def _moment_stack(density, k, u, s):
    """density x (1, dq_par, dq_par^2, dq_perp^2 per axis) with dq_par = -s k u."""
    kick = -s * k * u
    perp = 0.5 * k * k * (1 - u) * (1 + u)
    return density * np.stack([np.ones_like(kick), kick, kick * kick, perp])


def _k_picture(model, field, process, k, P, stack=_moment_stack, extra=()):
    """Integrand over |k| of the kick moments: (2 pi)^2 k |g|^2 N q* / (v_B(q*) P) x moments.

    `stack(density, k, u, s, *extra)` gives the weighted quantities (default `_moment_stack`).
    """
    final_energy = model.energy(process.initial, P) - process.sign * field.frequency(k)
    q = model.momentum(process.final, final_energy)
    density = (4 * np.pi ** 2 * k * coupling_density(model, field, process, k, P, q)
               * model.inertia(process.final, q) / P)
    return stack(density, k, _cosine(model, field, process, P, k), process.sign, *extra)


def _on_shell_quantum(model, field, process, P, u, k):
    """k(u): Newton's method on f(k, u) = E_A(P) - E_B(q) - s w_k from the start `k`.

    Returns k, q and df/dk|_u = -(k - s P u) / inertia_B(q) - s k / w_k at the root.
    """
    s = process.sign
    initial = model.energy(process.initial, P)
    for _ in range(NEWTON_STEPS):
        q = _final_momentum(P, k, u, s)
        slope = -(k - s * P * u) / model.inertia(process.final, q) - s * k / field.frequency(k)
        step = (initial - model.energy(process.final, q) - s * field.frequency(k)) / slope
        k = k - step
        if np.all(np.abs(step) <= 4 * np.finfo(float).eps * np.abs(k)):
            break
    q = _final_momentum(P, k, u, s)
    return k, q, -(k - s * P * u) / model.inertia(process.final, q) - s * k / field.frequency(k)


def _angle_picture(model, field, process, u, P, k_a, k_b, u_a, u_b, stack=_moment_stack,
                   extra=()):
    """Integrand over u = cos(k, P): (2 pi)^2 k^2 |g|^2 N / |df/dk|_u x moments at k(u).

    Newton starts on the straight line through (u_a, k_a) and (u_b, k_b), the window's edges;
    `stack(density, k, u, s, *extra)` gives the weighted quantities (default `_moment_stack`).
    """
    span = u_b - u_a
    start = k_a + (k_b - k_a) * np.divide(u - u_a, span, out=np.zeros(np.broadcast(u, span).shape),
                                          where=span != 0)
    k, q, slope = _on_shell_quantum(model, field, process, P, u, start)
    density = 4 * np.pi ** 2 * k * k * coupling_density(model, field, process, k, P, q)
    density = density / np.abs(slope)
    return stack(density, k, u, process.sign, *extra)


def _window_integrals(integrand, a, b, args, rule):
    """Int_a^b integrand(x, *args) dx per window, by a Gauss-Legendre pair or adaptively.

    integrand(x, *args) maps x of shape (w, n) and args of shape (w, 1) to (m, w, n); the finer
    rule of `rule` is kept where every component agrees with the coarser one to QUAD_RTOL of
    the largest, else that window goes to scipy's ``quad_vec`` (relative tolerance QUAD_RTOL).
    """
    cols = tuple(np.asarray(x)[:, None] for x in args)
    coarse, fine = ((integrand(x, *cols) * w).sum(axis=-1)
                    for x, w in (gauss_legendre_on(n, a, b) for n in rule))
    scale = np.abs(fine).max(axis=0)
    for j in np.nonzero(np.any(np.abs(fine - coarse) > QUAD_RTOL * scale, axis=0))[0]:
        from scipy.integrate import quad_vec  # rarely needed, and slow to import

        one = tuple(c[j:j + 1] for c in cols)
        fine[:, j] = quad_vec(lambda x: integrand(np.array([[x]]), *one)[:, 0, 0], a[j], b[j],
                              epsrel=QUAD_RTOL, epsabs=1e-14 * scale[j], limit=400)[0]
    return fine


@dataclass(frozen=True)
class _Windows:
    """On-shell windows of the 3D curve: row (index of P), k and u at both edges, picture."""

    row: np.ndarray
    k_a: np.ndarray
    k_b: np.ndarray
    u_a: np.ndarray
    u_b: np.ndarray
    angle: np.ndarray  # integrate over u (True) or over k (False)


def _moving_windows(model, field, process, P):
    """Windows of each P (> 0) between consecutive collinear roots where f(k, +-1) differ in sign.

    A root of f(k, +1) is an edge at u = +1, of f(k, -1) one at u = -1; the sign state of both
    after each edge follows from their signs at the first scan point and the roots passed.  A
    window still open after the last root ends at the reach (the cutoff), u from the k picture.
    """
    found = [(_collinear_roots(model, field, process, P, d), d) for d in (+1, -1)]
    rows = np.concatenate([f[0][0] for f in found]).astype(int)
    k = np.concatenate([f[0][1] for f in found])
    tag = np.concatenate([np.full(f[0][0].size, f[1]) for f in found])
    order = np.lexsort((k, rows))
    rows, k, tag = rows[order], k[order], tag[order]
    first = np.r_[True, rows[1:] != rows[:-1]][:rows.size]
    last = np.r_[rows[1:] != rows[:-1], True][:rows.size]
    head = np.maximum.accumulate(np.where(first, np.arange(rows.size), 0))
    positive = {}
    for f, d in found:
        own = tag == d
        passed = np.cumsum(own)
        passed = passed - (passed - own)[head]  # roots of this direction so far in the row
        positive[d] = f[2][rows] ^ (passed % 2 == 1)
    inside = positive[+1] != positive[-1]
    nxt = np.minimum(np.arange(rows.size) + 1, rows.size - 1)
    end = reach(model, field, process, P)[rows]
    with np.errstate(invalid="ignore", divide="ignore"):
        u_end = _cosine(model, field, process, P[rows], end)
    k_b = np.where(last, end, k[nxt])
    u_b = np.where(last, u_end, tag[nxt])
    sel = inside & (k_b > 0)
    return rows[sel], k[sel], k_b[sel], tag[sel].astype(float), u_b[sel]


def _static_windows(model, field, process, rows):
    """Windows of momenta below STATIC_RATIO k*: each root k0 of f at P = 0, all u in [-1, 1]."""
    if not rows.size:
        return rows, np.zeros(0), np.zeros(0), np.zeros(0), np.zeros(0)
    _, roots, _ = _collinear_roots(model, field, process, np.zeros(1), +1)
    row = np.repeat(rows, roots.size)
    k0 = np.tile(roots, rows.size)
    return row, k0, k0, -np.ones(row.size), np.ones(row.size)


def _windows_3d(model, field, process, P) -> _Windows:
    """Every on-shell window of every P, with the picture it is integrated in (module docstring)."""
    static = P <= STATIC_RATIO * model.rest_emission_momentum()
    idle = np.nonzero(static)[0]
    moving = np.nonzero(~static)[0]
    rows_m, *edges_m = _moving_windows(model, field, process, P[moving])
    parts = [(moving[rows_m], *edges_m), _static_windows(model, field, process, idle)]
    row, k_a, k_b, u_a, u_b = (np.concatenate(x) for x in zip(*parts))
    row = row.astype(int)
    low, top, p = np.minimum(k_a, k_b), np.maximum(k_a, k_b), P[row]
    narrow = top - low <= NARROW_WINDOW * top
    monotone = ((model.velocity(process.final, p + top) < low / field.frequency(low))
                | ((process.sign > 0) & (low > p)))
    angle = (narrow & monotone) | static[row]
    return _Windows(row, k_a, k_b, u_a, u_b, angle)


def _rates_3d(model, field, process, P, stack=_moment_stack, extra=(), count=4):
    """(count, n) integrals of each |P|: the windows of `_windows_3d`, each in its picture.

    `stack(density, k, u, s, *extra)` gives the `count` weighted quantities (default the four
    kick moments of `_moment_stack`); `extra` are per-P arrays handed to it.
    """
    w = _windows_3d(model, field, process, P)
    totals = np.zeros((count, P.size))
    extra = tuple(np.asarray(x, dtype=float) for x in extra)
    angle, plain = np.nonzero(w.angle)[0], np.nonzero(~w.angle)[0]
    if angle.size:
        a, b = np.minimum(w.u_a[angle], w.u_b[angle]), np.maximum(w.u_a[angle], w.u_b[angle])

        def over_u(u, *args):
            return _angle_picture(model, field, process, u, *args[:5], stack=stack,
                                  extra=args[5:])

        rows = w.row[angle]
        values = _window_integrals(over_u, a, b, (P[rows], w.k_a[angle], w.k_b[angle],
                                                  w.u_a[angle], w.u_b[angle],
                                                  *(x[rows] for x in extra)), ANGLE_RULE)
        for m in range(count):
            totals[m] += np.bincount(rows, values[m], minlength=P.size)
    if plain.size:
        a, b = np.minimum(w.k_a[plain], w.k_b[plain]), np.maximum(w.k_a[plain], w.k_b[plain])

        def over_k(k, p, *args):
            return _k_picture(model, field, process, k, p, stack=stack, extra=args)

        rows = w.row[plain]
        values = _window_integrals(over_k, a, b, (P[rows], *(x[rows] for x in extra)), K_RULE)
        for m in range(count):
            totals[m] += np.bincount(rows, values[m], minlength=P.size)
    return totals


def kick_moments(model: COMModel, field: Field, process: Process, P) -> KickMoments:
    """Golden-rule rate and recoil moments at momentum P (signed in 1D, |P| in 3D).

    Gamma(P) = 2 pi Int d^dk |g(k)|^2 N(w_k) delta(E_A(P) - E_B(|q|) - s w_k), q = P - s k,
    and the same integral weighted by the kick q - P (parallel and transverse to P).  1D: a
    sum over the collinear roots (`channel_table`); 3D: with u = cos(k, P) the on-shell curve
    f(k, u) = 0 in windows, each integrated either over k,
    Gamma = (2 pi)^2 Int dk k |g|^2 N q* / (v_B(q*) P), or over u,
    Gamma = (2 pi)^2 Int du k(u)^2 |g|^2 N / |df/dk|_u, whichever is well conditioned there
    (module docstring); kicks dq_par = -s k u, dq_perp^2 = k^2 (1 - u^2) / 2 per axis.

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : float or array_like
        Initial COM momentum (momentum units): signed in 1D, its magnitude is used in 3D.

    Returns
    -------
    KickMoments
        rate in inverse time units, kick moments in momentum units (squared) x inverse time
        units: floats for a scalar P, else arrays of the shape of P.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    p = np.asarray(P, dtype=float)
    flat = p.ravel()
    if field.dimensions == 1:
        totals = _rates_1d(model, field, process, flat)
    else:
        totals = _rates_3d(model, field, process, np.abs(flat))
    if p.ndim == 0:
        return KickMoments(*(float(t[0]) for t in totals))
    return KickMoments(*(t.reshape(p.shape) for t in totals))


def _phase_stack(density, k, u, s, cosine, separation):
    """density x (Re, Im) of the azimuthal average of exp(i dq_axis d), dq = -s k n.

    With n at cos(n, P) = u and the axis at angle a to P, dq_axis = -s k (u cos a +
    sqrt(1 - u^2) sin a cos phi); averaging exp(i dq_axis d) over the azimuth phi gives
    exp(-i s k u d cos a) J0(k d sqrt(1 - u^2) sin a).
    """
    phase = -s * k * u * cosine * separation
    sine = np.sqrt(np.maximum(0.0, 1.0 - cosine * cosine))
    bessel = j0(k * separation * sine * np.sqrt(np.maximum(0.0, (1 - u) * (1 + u))))
    return density * np.stack([np.cos(phase) * bessel, np.sin(phase) * bessel])


def kick_characteristic(model: COMModel, field: Field, process: Process, P, separation: float,
                        cosine=1.0):
    """Int dGamma exp(i dq_axis d): the golden-rule rate weighted by the kick's phase at d.

    A transition kicks the COM by dq = q - P (= -s k); the operator exp(i P_axis d) then gains
    the factor exp(i dq_axis d).  1D (P signed, the axis the line itself): the sum over the
    channels of `channel_table`, Sum rate exp(i kick d).  3D: the kick-moment integral of
    `kick_moments` weighted by the azimuthal average about P of exp(i dq_axis d),
    exp(-i s k u d cos a) J0(k d sin a sqrt(1 - u^2)), u = cos(k, P), a the angle between P
    and the packet axis.  Divided by the rate it is the mean phase <exp(i dq_axis d)> of one
    transition (a static detector's emission: cos(k* d) in 1D, sin(k* d) / (k* d) in 3D).

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : array_like
        Initial COM momenta (momentum units): signed in 1D, magnitudes in 3D.
    separation : float
        d along the packet axis (length units).
    cosine : float or array_like, optional
        3D only: cos a between P and the packet axis, broadcast with P (dimensionless).

    Returns
    -------
    numpy.ndarray of complex
        The shape of P (inverse time units).

    References
    ----------
    Fermi's golden rule, e.g. J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed.
    (Addison-Wesley, 2011); the azimuthal average int dphi exp(i x cos phi) / 2 pi = J0(x):
    Abramowitz & Stegun, Handbook of Mathematical Functions (1964), eq. 9.1.18.
    """
    p = np.atleast_1d(np.asarray(P, dtype=float))
    flat = p.ravel()
    if field.dimensions == 1:
        table = channel_table(model, field, process, flat)
        phases = np.exp(1j * np.nan_to_num(table.kick) * separation)
        return (table.rate * phases).sum(axis=1).reshape(p.shape)
    cos_a = np.broadcast_to(np.asarray(cosine, dtype=float), p.shape).ravel()
    parts = _rates_3d(model, field, process, np.abs(flat), stack=_phase_stack,
                      extra=(cos_a, np.full(flat.size, float(separation))), count=2)
    return (parts[0] + 1j * parts[1]).reshape(p.shape)


def transition_rate(model: COMModel, field: Field, process: Process, P):
    """Gamma(P) for one process (inverse time units).

    Gamma(P) = 2 pi Int d^dk |g(k)|^2 N(w_k) delta(E_A(P) - E_B(|P - s k|) - s w_k).

    Parameters
    ----------
    model : COMModel
    field : Field
    process : Process
    P : float or array_like
        Initial COM momentum (momentum units; signed in 1D, magnitude in 3D).

    Returns
    -------
    float or numpy.ndarray
        Gamma(P) (inverse time units), the shape of P.

    References
    ----------
    Fermi's golden rule (standard first-order time-dependent perturbation theory), e.g.
    J. J. Sakurai and J. Napolitano, Modern Quantum Mechanics, 2nd ed. (Addison-Wesley, 2011).
    """
    return kick_moments(model, field, process, P).rate


def template_rate(scenario, p, model: str | None = None):
    """Template function Gamma(p) of the scenario at momentum magnitude(s) p along the packet axis.

    Emission rate (with 1 + n in a thermal field) for an excited packet, absorption (excitation)
    rate for a ground-state packet; with coupling.rotating_wave = false plus the counter-rotating
    process out of the same level (`processes_out_of`: g -> e + quantum, e + quantum -> g).
    `model` evaluates another COM model with the same parameters.

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
    com, field = model_for(scenario, model), field_for(scenario)
    momenta = np.abs(np.asarray(p, dtype=float))
    processes = processes_out_of(level_of(scenario.packet.internal),
                                 scenario.coupling.rotating_wave)
    return sum(transition_rate(com, field, process, momenta) for process in processes)


def packet_rule(packet, nodes: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Hermite nodes and weights with Sum w f(|p|) ~ Int |psi(p)|^2 f(|p|) d^dp.

    1D: p = p0 + sigma x over the standard-normal rule (x_i, w_i) (signed momenta).  3D, for f
    of |p| alone: the density of r = |p| is h(r) + h(-r) with
    h(r) = r / (a sigma sqrt(2 pi)) exp(-(r - a)^2 / (2 sigma^2)), a = |p0|, so
    E[f] = Int over all real r of f(|r|) h(r) dr, which is, with b = a / sigma,

        E[f] = E_x[f(|a + sigma x|) (1 + x / b)]                 (b >= SYMMETRIC_BELOW),
        E[f] = exp(-b^2 / 2) E_y[f(sigma |y|) y sinh(b y) / b]   (b < SYMMETRIC_BELOW),

    the second the same integral symmetrised about r = 0 (y sinh(b y) / b -> y^2, the Maxwell
    density, as b -> 0), which avoids the first's cancellation eps / b.  The 1D rule, the first
    and the second at b = 0 are exact for f(|p|) a polynomial in p^2 of degree up to n - 2; the
    second's factor sinh(b y) / b = y (1 + b^2 y^2 / 6 + ...) adds an error ~ b^(2n) / (2n)!.
    All converge spectrally for a template smooth in the vector p.  A packet of another shape
    (two lobes, a table) takes its own rule, `Packet.quadrature(nodes)`.

    Parameters
    ----------
    packet : Packet
        Gives sigma = sigma_p (momentum units) and p0.
    nodes : int
        Number of nodes n.

    Returns
    -------
    (p, w) : tuple of ndarray
        Momenta (1D: signed; 3D: magnitudes |p|, momentum units) and weights (dimensionless,
        summing to 1 up to rounding; in 3D with b >= 1 a few far-tail weights are negative).

    References
    ----------
    M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
    eq. 25.4.46 (Gauss-Hermite integration); the density of |p| of a 3D Gaussian (noncentral
    chi distribution): N. L. Johnson, S. Kotz and N. Balakrishnan, Continuous Univariate
    Distributions, 2nd ed., Vol. 2 (Wiley, 1995).
    """
    if getattr(packet, "shape", "gaussian") != "gaussian":
        return packet.quadrature(nodes)
    x, w = gauss_hermite_normal(nodes)
    sigma, a = packet.momentum_std, packet.mean_speed
    if packet.dimensions == 1:
        return packet.momentum[0] + sigma * x, w.copy()
    b = a / sigma
    if b >= SYMMETRIC_BELOW:
        return np.abs(a + sigma * x), w * (1 + x / b)
    ratio = np.sinh(b * x) / b if b > 0 else x
    return sigma * np.abs(x), w * math.exp(-0.5 * b * b) * x * ratio


class PacketRuleWarning(RuntimeWarning):
    """The packet average did not settle within the largest Gauss-Hermite rule."""


@lru_cache(maxsize=1024)
def packet_rate(scenario, model: str | None = None, nodes: int | None = None) -> float:
    """Packet-averaged golden-rule rate Gamma_packet = Int |psi(p)|^2 Gamma(p) d^dp.

    Cached per (scenario, model, nodes): scenarios are frozen and compare by value, so one run
    computes it once however many of its parts ask.

    The average is the Gauss-Hermite rule of `packet_rule`; by default its size is grown
    through PACKET_SIZES until two successive sizes agree to PACKET_RTOL relative (a heavy
    detector's template is flat across its packet: 4 and 8 nodes agree at once).  If even the
    largest two disagree (a kink of the template inside the packet, e.g. a cutoff crossing),
    the largest is returned with a PacketRuleWarning.

    Parameters
    ----------
    scenario : Scenario
    model : str, optional
        Another COM model evaluated with the scenario's parameters.
    nodes : int, optional
        A fixed rule size instead of the growth.

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
    packet = packet_for(scenario)

    def average(n):
        p, w = packet_rule(packet, n)
        return float(np.dot(w, template_rate(scenario, p, model)))

    if nodes is not None:
        return average(nodes)
    previous = average(PACKET_SIZES[0])
    for n in PACKET_SIZES[1:]:
        value = average(n)
        if abs(value - previous) <= PACKET_RTOL * abs(value):
            return value
        change, previous = abs(value - previous), value
    warnings.warn(f"the packet-averaged golden-rule rate changed by {change / abs(value):.1g} "
                  f"(relative) between the two largest Gauss-Hermite rules ({n} nodes): the "
                  "template function has a kink inside the packet (a field.cutoff or a "
                  "field.mass threshold within its momentum spread); a wider packet.width "
                  "narrows the spread", PacketRuleWarning, stacklevel=2)
    return value


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
    roots = bracketed_roots(lambda k: collinear_mismatch(com, free, EMISSION, k, 0.0, +1),
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
