"""Spatial coherence of the centre of mass at a distance d along the packet axis.

    coherence(t) = |Tr(rho_COM(t) exp(i P.d))| / |Tr(rho_COM(0) exp(i P.d))|,

with rho_COM the COM state with the internal levels traced out.  exp(i P.d) is diagonal in
momentum, so Tr(rho_COM exp(i P.d)) = Int n(p) exp(i p_z d) d^dp with n = n_g + n_e the COM
momentum density: the characteristic function of the axial momentum at d, i.e. the overlap
Int rho_COM(x, x + d) dx of the packet with itself displaced by d.  A recoil kick k multiplies
it by exp(-i k.d), so averaging over the emission directions lowers it: after one emission from
a heavy (static-limit) detector by cos(k* d) in 1D (kicks -+ k*) and by sin(k* d) / (k* d) in 3D
(isotropic emission; `static_kick_visibility`).
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import trapezoid

#: below this |Tr(rho_COM(0) exp(i P d))| (the packet's own overlap at d, at most 1) the
#: coherence ratio is not formed: the initial packet holds no coherence at that distance
COHERENCE_FLOOR = 1e-8
#: largest |chi(0) - the packet's own| / |the packet's own| a solver's coherence may carry
#: (else it is withheld: the ratio coherence(t) is relative to chi(0))
CHI0_TOLERANCE = 1e-3


def characteristic_from_quadrature(momenta, weights, separation: float):
    """Int n(p) exp(i p d) dp from a quadrature: Sum_i w_i exp(i p_i d).

    Parameters
    ----------
    momenta : array_like
        Axial momenta p_i of the rule (momentum units), shape (..., n) or (n,).
    weights : array_like
        Weights w_i including the density, shape (..., n) (e.g. `Packet.quadrature` with
        along_axis, or the weights times a probability per node; dimensionless).
    separation : float
        Distance d along the packet axis (length units).

    Returns
    -------
    complex or numpy.ndarray of complex
        The characteristic function at d, summed over the last axis (dimensionless).
    """
    phases = np.exp(1j * np.asarray(momenta, dtype=float) * separation)
    return np.sum(np.asarray(weights) * phases, axis=-1)


def characteristic_on_grid(momenta, density, separation: float):
    """Int n(p) exp(i p d) dp of a density sampled on a momentum grid (trapezoidal rule).

    For a smooth density that vanishes at both ends of a uniform grid the trapezoidal rule
    converges exponentially fast in the grid spacing h, as long as h d < pi (the integrand's
    phase advances by less than pi per step).

    Parameters
    ----------
    momenta : array_like
        Increasing axial momenta of the grid, shape (n,) (momentum units).
    density : array_like
        n(p) on the grid, shape (..., n) (1 / momentum units); leading axes e.g. sample times.
    separation : float
        Distance d along the packet axis (length units).

    Returns
    -------
    complex or numpy.ndarray of complex
        The characteristic function at d, shape (...) (dimensionless).

    References
    ----------
    L. N. Trefethen and J. A. C. Weideman, "The exponentially convergent trapezoidal rule",
    SIAM Review 56, 385 (2014) (from memory); SciPy documentation,
    ``scipy.integrate.trapezoid``.
    """
    momenta = np.asarray(momenta, dtype=float)
    return trapezoid(np.asarray(density) * np.exp(1j * momenta * separation), momenta, axis=-1)


def spatial_coherence(characteristic) -> np.ndarray:
    """coherence(t) = |chi(t)| / |chi(0)| from the characteristic function at d over time.

    Parameters
    ----------
    characteristic : array_like of complex
        chi(t_j) = Tr(rho_COM(t_j) exp(i P d)) at the sample times, the first at t = 0
        (dimensionless; `characteristic_on_grid` or `characteristic_from_quadrature`).

    Returns
    -------
    numpy.ndarray
        |chi(t_j)| / |chi(0)| (dimensionless), all nan when |chi(0)| <= COHERENCE_FLOOR (the
        packet has no coherence at d to lose; `coherence_warning` says so).
    """
    chi = np.abs(np.asarray(characteristic))
    if not chi[0] > COHERENCE_FLOOR:
        return np.full(chi.shape, np.nan)
    return chi / chi[0]


def coherence_warning(reference: complex, separation: float, key: str) -> list[str]:
    """A warning when the initial packet holds no coherence at d, else nothing.

    Parameters
    ----------
    reference : complex
        chi(0) = Tr(rho_COM(0) exp(i P d)) (dimensionless).
    separation : float
        d (length units, as shown in the message).
    key : str
        The scenario key that set d ("run.coherence_at" or "packet.separation").

    Returns
    -------
    list of str
        One line when |chi(0)| <= COHERENCE_FLOOR, naming `key`; empty otherwise.
    """
    if abs(reference) > COHERENCE_FLOOR:
        return []
    return [f"the spatial coherence at d = {separation:g} is not reported: the initial packet "
            f"overlaps its copy displaced by d only by {abs(reference):.1e} (below "
            f"{COHERENCE_FLOOR:g}); choose a smaller {key} (a few packet widths at most)"]


def packet_characteristic(packet, separation: float) -> complex:
    """Tr(rho_COM(0) exp(i P d)) of the initial packet, by adaptive oscillatory quadrature.

    Int n(p) exp(i p d) dp over the packet's axial support (`Packet.axis_range`) with n its
    axial density (`Packet.axis_density`), by QUADPACK's weighted rule for cos(p d) and
    sin(p d) (scipy.integrate.quad with weight="cos" / "sin"), which stays accurate for any d:
    the reference a solver's own chi(0) is checked against.

    Parameters
    ----------
    packet : Packet
    separation : float
        d (length units).

    Returns
    -------
    complex
        The characteristic function at d (dimensionless).

    References
    ----------
    SciPy documentation, ``scipy.integrate.quad`` (weight "cos"/"sin": QUADPACK QAWO);
    R. Piessens et al., QUADPACK (Springer 1983).
    """
    from scipy.integrate import quad

    low, high = packet.axis_range()
    parts = [quad(lambda p: float(packet.axis_density(p)), low, high, weight=w, wvar=separation,
                  limit=400)[0] for w in ("cos", "sin")]
    return complex(parts[0], parts[1])


def coherence_check(chi0: complex, reference: complex, separation: float, key: str) -> list[str]:
    """A warning when a solver's chi(0) misses the packet's own by more than CHI0_TOLERANCE of it.

    Parameters
    ----------
    chi0 : complex
        The solver's Tr(rho_COM(0) exp(i P d)) (dimensionless).
    reference : complex
        `packet_characteristic` at the same d (dimensionless).
    separation : float
        d (length units).
    key : str
        The key that set d.

    Returns
    -------
    list of str
        One line (the coherence is then withheld) when |chi0 - reference| > CHI0_TOLERANCE
        |reference|, else empty.
    """
    miss = abs(chi0 - reference)
    if miss <= CHI0_TOLERANCE * abs(reference):
        return []
    return [f"spatial coherence at {key} = {separation:g} withheld: the method's momentum grid does "
            f"not resolve exp(i p d) (its chi(0) misses the packet's own {abs(reference):.3g} by "
            f"{miss:.2g}); choose a smaller {key}, or refine the method's momentum resolution "
            "(bath.sectors, bath.box_length or grid.points)"]


def coherence_distance(scenario) -> tuple[float, str] | None:
    """The distance d at which a run reports the spatial coherence, and the key that set it.

    run.coherence_at when given; otherwise packet.separation of a two-lobe packet; otherwise
    none.

    Parameters
    ----------
    scenario : Scenario
        Its ``run.coherence_at`` and ``packet`` (length units).

    Returns
    -------
    (d, key) or None
        d (length units) and "run.coherence_at" or "packet.separation"; None when the run
        reports no coherence.
    """
    if scenario.run.coherence_at is not None:
        return scenario.run.coherence_at, "run.coherence_at"
    if scenario.packet.shape == "two-lobe":
        return scenario.packet.separation, "packet.separation"
    return None


def static_kick_visibility(k, d, dimensions: int):
    """Coherence left at d after one emission of momentum k from a static detector.

    Every direction n of emission kicks the COM by -k n, multiplying Tr(rho exp(i P.d)) by
    exp(-i k n.d); averaged over the emission pattern: 1D (n = -+1, equally likely)
    |cos(k d)|; 3D isotropic |sin(k d) / (k d)| (the Fourier transform of the uniform
    pattern on the sphere; common practice).  It holds once the decay is complete and while the
    emitted wave train is much longer than d (Gamma d << 1 with c = 1: its finite linewidth
    lowers the 1D value further by about exp(-Gamma d / 2)).

    Parameters
    ----------
    k : float or array_like
        Emitted momentum |k|, e.g. k* = (M_e^2 - M_g^2) / (2 M_e) (momentum units).
    d : float or array_like
        Distance along the packet axis (length units).
    dimensions : int
        1 or 3.

    Returns
    -------
    float or numpy.ndarray
        The visibility (dimensionless, in [0, 1]).

    Raises
    ------
    ValueError
        For dimensions other than 1 or 3.

    References
    ----------
    T. Pfau, S. Spaelter, Ch. Kurtsiefer, C. R. Ekstrom and J. Mlynek, Phys. Rev. Lett. 73,
    1223 (1994): the measured loss of an atom's spatial coherence by one spontaneous emission
    (there with the dipole pattern; from memory).
    """
    phase = np.asarray(k, dtype=float) * np.asarray(d, dtype=float)
    if dimensions == 1:
        return np.abs(np.cos(phase))
    if dimensions == 3:
        return np.abs(np.sinc(phase / np.pi))  # numpy's sinc(x) = sin(pi x) / (pi x)
    raise ValueError(f"dimensions = {dimensions!r}; allowed: 1 or 3")
