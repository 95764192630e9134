"""Centre-of-mass wave packets in momentum space: one Gaussian, two Gaussian lobes, or a table.

`width` is the standard deviation of the position density (per axis in 3D) of a Gaussian, so its
momentum density |psi(p)|^2 is Gaussian with standard deviation sigma_p = 1 / (2 width) per axis
(hbar = 1), centred on the mean momentum p0.  A "two-lobe" packet is two such Gaussians whose
centres lie `separation` apart along the packet axis (the direction of p0, z when p0 = 0; in 1D
the line itself), the second with the relative phase `phase`; a "file" packet takes its axial
amplitude from a CSV table (`read_amplitude_table`).  In 3D every shape has the Gaussian
transverse profile of `width`: psi(p) = a(p_z) g(p_x) g(p_y) in the axis frame, with a the axial
amplitude (`Packet.axis_amplitude`) and |g|^2 = N(0, sigma_p^2).  Every solver takes its packet
densities and quadratures from here.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..config.schema import PACKET_SHAPES
from ..errors import ScenarioError
from .quadrature import gauss_legendre_on

#: packet momenta are taken this many standard deviations either side of the mean
PACKET_REACH = 8.0
#: two-lobe axial rule: extra Gauss-Legendre nodes per radian of the fringe phase p d across
#: the half-window PACKET_REACH sigma_p (`Packet.axial_nodes`)
FRINGE_MARGIN = 1.25
#: 3D non-Gaussian |p| rule: Gauss-Laguerre nodes of the transverse momentum per axial node
TRANSVERSE_NODES = 24
#: "file" axial rule: least Gauss-Legendre nodes on each interval of the table
FILE_NODES_PER_INTERVAL = 3
#: largest number of rows of a packet.amplitude_file table
MAX_AMPLITUDE_ROWS = 100_000
#: the key named in the messages about the amplitude table
AMPLITUDE_KEY = "packet.amplitude_file"


def gaussian_density(p, mean: float, std: float):
    """N(mean, std^2) density exp(-(p - mean)^2 / (2 std^2)) / sqrt(2 pi std^2) (1 / momentum).

    Parameters
    ----------
    p : array_like
        Momentum (momentum units).
    mean : float
        Mean (momentum units).
    std : float
        Standard deviation, > 0 (momentum units).

    Returns
    -------
    numpy.ndarray
        The density at `p` (1 / momentum units), the shape of `p`.
    """
    p = np.asarray(p, dtype=float)
    return np.exp(-0.5 * ((p - mean) / std) ** 2) / (np.sqrt(2 * np.pi) * std)


def interval_norms(values, spacings) -> np.ndarray:
    """Int |psi|^2 dp over each interval of a linearly interpolated complex amplitude.

    On [p_i, p_i + h_i] the amplitude runs linearly from a = psi_i to b = psi_{i+1}, so
    Int |psi|^2 dp = h_i (|a|^2 + Re(a b*) + |b|^2) / 3 (a quadratic integrated exactly).

    Parameters
    ----------
    values : array_like of complex
        psi_i at the table momenta (any amplitude unit A).
    spacings : array_like
        h_i = p_{i+1} - p_i, one fewer than `values` (momentum units).

    Returns
    -------
    numpy.ndarray
        The integral over each interval (A^2 momentum units).
    """
    a, b = np.asarray(values[:-1]), np.asarray(values[1:])
    return np.asarray(spacings) * (abs(a) ** 2 + (a * b.conj()).real + abs(b) ** 2) / 3


@dataclass(frozen=True, eq=False)
class AmplitudeTable:
    """A tabulated axial momentum amplitude, linearly interpolated and zero outside the table.

    psi(p) = psi_i + (p - p_i) (psi_{i+1} - psi_i) / (p_{i+1} - p_i) on [p_i, p_{i+1}], 0 for p
    outside [p_first, p_last]; the values are normalised so that Int |psi(p)|^2 dp = 1 exactly
    (`interval_norms`).  Linear rather than cubic interpolation: it adds no wiggles between the
    rows (a spline of a sharply structured amplitude overshoots into fringes the table does not
    have), stays local, and leaves a piecewise-quadratic density whose norm and quadrature are
    exact; its price is an O(h^2) interpolation error, so tabulate finely.  Made by
    `read_amplitude_table`, which checks the rows.

    Parameters
    ----------
    momenta : numpy.ndarray
        Axial momenta p_i, strictly increasing (momentum units).
    values : numpy.ndarray of complex
        Normalised amplitudes psi_i (1 / sqrt(momentum units)).
    source : str
        The file as named in the scenario, for messages.
    """

    momenta: np.ndarray
    values: np.ndarray
    source: str = ""

    def amplitude(self, p):
        """The interpolated amplitude psi(p), 0 outside the table (1 / sqrt(momentum units)).

        Parameters
        ----------
        p : array_like
            Axial momentum (momentum units).

        Returns
        -------
        numpy.ndarray of complex
            psi(p), the shape of `p`.
        """
        p = np.asarray(p, dtype=float)
        re = np.interp(p, self.momenta, self.values.real, left=0.0, right=0.0)
        im = np.interp(p, self.momenta, self.values.imag, left=0.0, right=0.0)
        return re + 1j * im

    def density(self, p):
        """|psi(p)|^2 of the interpolated amplitude (1 / momentum units), 0 outside the table.

        Parameters
        ----------
        p : array_like
            Axial momentum (momentum units).

        Returns
        -------
        numpy.ndarray
            |psi(p)|^2, the shape of `p`.
        """
        return abs(self.amplitude(p)) ** 2

    def nodes_per_interval(self, nodes: int) -> int:
        """Gauss-Legendre nodes per table interval: max(FILE_NODES_PER_INTERVAL, nodes / rows).

        Parameters
        ----------
        nodes : int
            Least total number of nodes asked for.

        Returns
        -------
        int
            q >= FILE_NODES_PER_INTERVAL, with q (rows - 1) >= `nodes`.
        """
        return max(FILE_NODES_PER_INTERVAL, -(-nodes // (len(self.momenta) - 1)))

    def quadrature(self, nodes: int) -> tuple[np.ndarray, np.ndarray]:
        """Composite Gauss-Legendre rule over the table intervals: sum w f(p) = Int |psi|^2 f dp.

        The density is quadratic on each interval, so q = `nodes_per_interval` nodes there
        integrate |psi|^2 f exactly for f of degree 2 q - 3 on each interval.

        Parameters
        ----------
        nodes : int
            Least total number of nodes (the rule has q (rows - 1) >= nodes).

        Returns
        -------
        (p, w) : tuple of ndarray
            Axial momenta (momentum units) and weights (dimensionless, summing to 1).

        References
        ----------
        M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
        eq. 25.4.30 (Gauss-Legendre integration over [a, b]), applied on each interval.
        """
        p, w = gauss_legendre_on(self.nodes_per_interval(nodes), self.momenta[:-1],
                                 self.momenta[1:])
        p, w = p.ravel(), (w * self.density(p)).ravel()
        return p, w / w.sum()

    @property
    def mean(self) -> float:
        """Mean axial momentum Int p |psi(p)|^2 dp (exact: a cubic on each interval).

        Returns
        -------
        float
            Momentum units.
        """
        p, w = self.quadrature(0)
        return float(w @ p)


def read_amplitude_table(path) -> AmplitudeTable:
    """Read a packet.amplitude_file CSV table: a header p,re,im, then one row per momentum.

    Each row gives an axial momentum p (natural momentum units, strictly increasing down the
    file) and the real and imaginary parts of the amplitude there (any common scale: the table
    is normalised, Int |psi|^2 dp = 1 under linear interpolation).  Blank lines are skipped.

    Parameters
    ----------
    path : str or Path
        The CSV file (a relative path is read from the current folder).

    Returns
    -------
    AmplitudeTable
        The normalised table.

    Raises
    ------
    ScenarioError
        Naming packet.amplitude_file and the problem: the file cannot be read or is not UTF-8
        text, the header is not p,re,im, a row has not three numbers, a value is not finite,
        p does not increase, fewer than 2 or more than MAX_AMPLITUDE_ROWS rows, or the
        amplitude is zero everywhere (nothing to normalise).
    """
    name = f'{AMPLITUDE_KEY} = "{path}"'
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise ScenarioError(f"{name}: cannot be read ({exc.strerror}); allowed: a CSV file "
                            "with columns p,re,im") from None
    except UnicodeDecodeError:
        raise ScenarioError(f"{name}: is not UTF-8 text; allowed: a CSV file with columns "
                            "p,re,im") from None
    rows = [(n, row) for n, row in enumerate(csv.reader(text.splitlines()), 1)
            if any(cell.strip() for cell in row)]
    if not rows or [cell.strip().lower() for cell in rows[0][1]] != ["p", "re", "im"]:
        got = ",".join(rows[0][1]) if rows else "an empty file"
        raise ScenarioError(f'{name}: the first line must name the columns p,re,im (got "{got}")')
    data = [(n, _row_numbers(name, n, row)) for n, row in rows[1:]]
    if not 2 <= len(data) <= MAX_AMPLITUDE_ROWS:
        raise ScenarioError(f"{name}: has {len(data)} data rows; allowed: 2 .. "
                            f"{MAX_AMPLITUDE_ROWS} rows p,re,im")
    for (_, previous), (n, row) in zip(data, data[1:]):
        if not row[0] > previous[0]:
            raise ScenarioError(f"{name}: line {n}: p = {row[0]!r} after p = {previous[0]!r}; "
                                "allowed: p strictly increasing down the file")
    table = np.array([row for _, row in data])
    momenta, values = table[:, 0], table[:, 1] + 1j * table[:, 2]
    with np.errstate(over="ignore"):  # an overflow is reported below
        norm = float(interval_norms(values, np.diff(momenta)).sum())
    if not norm > 0:
        raise ScenarioError(f"{name}: the amplitude is zero on every row (Int |psi|^2 dp = 0), "
                            "so it cannot be normalised; allowed: a non-zero amplitude")
    if not math.isfinite(norm):
        raise ScenarioError(f"{name}: Int |psi|^2 dp overflows ({norm}); allowed: amplitudes "
                            "below 1e150")
    return AmplitudeTable(momenta, values / math.sqrt(norm), str(path))


def _row_numbers(name: str, line: int, row: list[str]) -> tuple[float, float, float]:
    """The three finite numbers of one CSV row, ScenarioError naming the line otherwise."""
    if len(row) != 3:
        raise ScenarioError(f"{name}: line {line}: {len(row)} columns; allowed: three numbers "
                            "p,re,im")
    numbers = []
    for cell in row:
        try:
            x = float(cell)
        except ValueError:
            raise ScenarioError(f'{name}: line {line}: "{cell.strip()}" is not a number; '
                                "allowed: three numbers p,re,im") from None
        if not math.isfinite(x):
            raise ScenarioError(f"{name}: line {line}: {cell.strip()} is not finite; allowed: "
                                "finite numbers")
        numbers.append(x)
    return tuple(numbers)


@dataclass(frozen=True)
class Packet:
    """A COM packet: shape, position std `width` (length units), mean momentum vector `momentum`.

    "gaussian": |psi(p)|^2 = prod over the d axes of N(p0_i, sigma_p^2), sigma_p = 1 / (2 width).
    "two-lobe": psi(p) = G(p) (exp(-i p_z d / 2) + exp(i phi) exp(i p_z d / 2)) / N with G the
    Gaussian amplitude above (|G|^2 its density), p_z the axial component, i.e. lobes centred at
    x_z = +d/2 and (with the phase phi) -d/2, and
    N^2 = 2 (1 + cos(m d + phi) exp(-sigma_p^2 d^2 / 2)), m the axial mean of G.
    "file": psi(p) = a(p_z) times the transverse Gaussian, a from `table`.

    Parameters
    ----------
    width : float
        Standard deviation of the position density per axis of the Gaussian (length units,
        i.e. 1 / momentum units); of each lobe, and the transverse profile of a "file" packet.
    momentum : tuple of float
        Mean momentum p0 of the Gaussian envelope: one component in 1D, three in 3D (momentum
        units); a "file" packet uses only its direction in 3D.
    shape : str
        "gaussian", "two-lobe" or "file".
    separation : float, optional
        "two-lobe": distance d between the lobe centres along the axis (length units).
    phase : float
        "two-lobe": relative phase phi of the second lobe (radians).
    table : AmplitudeTable, optional
        "file": the axial amplitude a(p_z) (`read_amplitude_table`).

    Raises
    ------
    ValueError
        For an unknown shape, a two-lobe packet without a separation > 0 or a file packet
        without its table.
    """

    width: float
    momentum: tuple[float, ...]
    shape: str = "gaussian"
    separation: float | None = None
    phase: float = 0.0
    table: AmplitudeTable | None = None

    def __post_init__(self):
        if self.shape not in PACKET_SHAPES:
            raise ValueError(f"packet shape {self.shape!r}; allowed: {', '.join(PACKET_SHAPES)}")
        if self.shape == "two-lobe" and not (self.separation or 0) > 0:
            raise ValueError(f"two-lobe packet separation {self.separation!r}; allowed: > 0")
        if self.shape == "file" and self.table is None:
            raise ValueError("file packet without its amplitude table")

    @property
    def dimensions(self) -> int:
        """Spatial dimensions d of the packet (the number of momentum components).

        Returns
        -------
        int
            1 or 3.
        """
        return len(self.momentum)

    @property
    def momentum_std(self) -> float:
        """Momentum standard deviation per axis, sigma_p = 1 / (2 width) (hbar = 1).

        Returns
        -------
        float
            sigma_p (momentum units).
        """
        return 0.5 / self.width

    @property
    def mean_speed(self) -> float:
        """Magnitude |p0| of the mean momentum (despite the name, a momentum, not a speed).

        Of the Gaussian envelope for "gaussian" and "two-lobe"; |Int p_z |a(p_z)|^2 dp_z|, the
        magnitude of the mean of the table, for "file".

        Returns
        -------
        float
            |p0| (momentum units).
        """
        if self.shape == "file":
            return abs(self.table.mean)
        return float(np.linalg.norm(self.momentum))

    @property
    def axis_mean(self) -> float:
        """Mean momentum along the packet axis: p0 (signed) in 1D, |p0| in 3D.

        Of the Gaussian envelope for "gaussian" and "two-lobe" (a two-lobe density's own mean
        differs from it by terms of order exp(-sigma_p^2 d^2 / 2)); the mean of the table,
        Int p_z |a(p_z)|^2 dp_z, for "file".

        Returns
        -------
        float
            Momentum units.
        """
        if self.shape == "file":
            return self.table.mean
        return self.momentum[0] if self.dimensions == 1 else self.mean_speed

    def axis_range(self) -> tuple[float, float]:
        """The axial momenta the packet reaches: its support along the packet axis.

        m -+ PACKET_REACH sigma_p about the envelope's axial mean m for "gaussian" and
        "two-lobe"; the first and last row of the table for "file" (zero outside).

        Returns
        -------
        (low, high) : tuple of float
            Signed axial momenta (momentum units).
        """
        if self.shape == "file":
            return float(self.table.momenta[0]), float(self.table.momenta[-1])
        reach = PACKET_REACH * self.momentum_std
        return self.axis_mean - reach, self.axis_mean + reach

    def fastest_momentum(self) -> float:
        """|p0| + PACKET_REACH sigma_p: the largest momentum magnitude the packet reaches.

        For "gaussian" and "two-lobe" (the same envelope); for "file" the largest |p_z| of the
        table, in 3D combined with the transverse reach: sqrt(p_z,max^2 + (PACKET_REACH
        sigma_p)^2).

        Returns
        -------
        float
            Momentum units.
        """
        if self.shape == "file":
            axial = max(abs(p) for p in self.axis_range())
            return axial if self.dimensions == 1 else math.hypot(
                axial, PACKET_REACH * self.momentum_std)
        return self.mean_speed + PACKET_REACH * self.momentum_std

    @property
    def lobe_norm(self) -> float:
        """N^2 = 2 (1 + cos(m d + phi) exp(-sigma_p^2 d^2 / 2)) of a two-lobe packet.

        Int |G|^2 (2 + 2 cos(p d + phi)) dp with |G|^2 = N(m, sigma_p^2), whose characteristic
        function is exp(i m s - sigma_p^2 s^2 / 2).

        Returns
        -------
        float
            N^2 (dimensionless); > 0 for d > 0.
        """
        m, s, d = self.axis_mean, self.momentum_std, self.separation
        return 2 * (1 + math.cos(m * d + self.phase) * math.exp(-0.5 * (s * d) ** 2))

    def axis_amplitude(self, p):
        """The axial momentum amplitude a(p): in 1D the whole amplitude psi(p).

        "gaussian": sqrt(N(m, sigma_p^2)(p)) (real, the packet centred at x = 0);
        "two-lobe": sqrt(N(m, sigma_p^2)(p)) (exp(-i p d/2) + exp(i phi) exp(i p d/2)) / N;
        "file": the interpolated table.  |a|^2 = `axis_density`.

        Parameters
        ----------
        p : array_like
            Axial momentum component (momentum units; signed).

        Returns
        -------
        numpy.ndarray of complex
            a(p) (1 / sqrt(momentum units)), the shape of `p`.
        """
        if self.shape == "file":
            return self.table.amplitude(p)
        envelope = np.sqrt(gaussian_density(p, self.axis_mean, self.momentum_std)) + 0j
        if self.shape == "gaussian":
            return envelope
        half = 0.5 * np.asarray(p, dtype=float) * self.separation
        lobes = np.exp(-1j * half) + np.exp(1j * (self.phase + half))
        return envelope * lobes / math.sqrt(self.lobe_norm)

    def axis_density(self, p):
        """Density of the momentum component along the packet axis (1 / momentum units).

        In 1D the packet's whole momentum density |psi(p)|^2, in 3D the marginal of the axial
        component: "gaussian" N(p0_axis, sigma_p^2); "two-lobe" the fringed
        N(m, sigma_p^2)(p) 2 (1 + cos(p d + phi)) / N^2; "file" |a(p)|^2 of the table.

        Parameters
        ----------
        p : array_like
            Axial momentum component (momentum units; signed).

        Returns
        -------
        numpy.ndarray
            gaussian: exp(-(p - p0_axis)^2 / (2 sigma_p^2)) / sqrt(2 pi sigma_p^2); the others
            as above (1 / momentum units).
        """
        if self.shape == "file":
            return self.table.density(p)
        envelope = gaussian_density(p, self.axis_mean, self.momentum_std)
        if self.shape == "gaussian":
            return envelope
        fringes = 1 + np.cos(np.asarray(p, dtype=float) * self.separation + self.phase)
        return envelope * 2 * fringes / self.lobe_norm

    def magnitude_density(self, r):
        """Density of |p| for the 3D Gaussian (a noncentral chi distribution, 3 degrees).

        f(r) = r / (a sigma sqrt(2 pi)) [exp(-(r-a)^2/2 sigma^2) - exp(-(r+a)^2/2 sigma^2)],
        a = |p0|; at a = 0 the Maxwell density sqrt(2/pi) r^2 / sigma^3 exp(-r^2 / 2 sigma^2).
        Here sigma = sigma_p; the Maxwell form is used when a < 1e-6 sigma.

        Parameters
        ----------
        r : array_like
            Momentum magnitude |p| >= 0 (momentum units).

        Returns
        -------
        numpy.ndarray
            f(r) (1 / momentum units), normalised over r >= 0.

        Raises
        ------
        ValueError
            For a shape other than "gaussian" (use `quadrature` there).

        References
        ----------
        N. L. Johnson, S. Kotz and N. Balakrishnan, Continuous Univariate Distributions,
        2nd ed., Vol. 1 (Wiley, 1994; chi and Maxwell distributions) and Vol. 2 (Wiley, 1995;
        noncentral chi-square distributions).
        """
        self._require_gaussian("magnitude_density")
        s, a = self.momentum_std, self.mean_speed
        r = np.asarray(r, dtype=float)
        if a < 1e-6 * s:
            return np.sqrt(2 / np.pi) * r * r / s ** 3 * np.exp(-0.5 * (r / s) ** 2)
        # difference of Gaussians written with -expm1 to stay accurate for small r a / s^2
        return (r / (a * s * np.sqrt(2 * np.pi)) * np.exp(-0.5 * ((r - a) / s) ** 2)
                * -np.expm1(-2 * r * a / s ** 2))

    def quadrature(self, nodes: int = 96, *, along_axis: bool = False) -> tuple[np.ndarray, np.ndarray]:
        """Nodes and weights with sum w f(p) = Int |psi(p)|^2 f(p) d^dp.

        "gaussian": exactly `nodes` nodes (below).  Other shapes: the axial rule
        `axial_quadrature` (1D, or 3D with `along_axis`), whose size `axial_nodes` grows with
        the fringes; in 3D for isotropic f the product of that rule with TRANSVERSE_NODES
        Gauss-Laguerre nodes of the transverse Gaussian, |p| = sqrt(p_z^2 + rho^2) with the
        product weights (`axial_transverse_quadrature`).

        Parameters
        ----------
        nodes : int
            Number of nodes ("gaussian"); the least number of axial nodes (other shapes).
        along_axis : bool
            3D only: nodes of the axial component (for f depending on it alone) instead of |p|.

        Returns
        -------
        (p, w) : tuple of ndarray
            1D: signed momenta; 3D: magnitudes |p| (f isotropic), or axial components with
            `along_axis`.  Weights sum to 1.  "gaussian": Gauss-Legendre over PACKET_REACH
            standard deviations either side of the mean; the axial rule is Gauss-Hermite (exact
            for polynomials of degree 2 nodes - 1 under the Gaussian, so a few nodes suffice).
            Momenta in momentum units, weights dimensionless.

        References
        ----------
        M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
        eqs. 25.4.29-25.4.30 (Gauss-Legendre) and 25.4.46 (Gauss-Hermite, weight exp(-x^2);
        used here in the form with weight exp(-x^2 / 2), NumPy's
        ``numpy.polynomial.hermite_e.hermegauss``).
        """
        gaussian = self.shape == "gaussian"
        if (self.dimensions == 3 and along_axis) or (self.dimensions == 1 and not gaussian):
            return self.axial_quadrature(nodes)
        if not gaussian:
            along, rho, weights = self.axial_transverse_quadrature(nodes)
            return np.hypot(along, rho), weights
        s = self.momentum_std
        if self.dimensions == 1:
            lo, hi = self.momentum[0] - PACKET_REACH * s, self.momentum[0] + PACKET_REACH * s
            density = self.axis_density
        else:
            lo, hi = max(0.0, self.mean_speed - PACKET_REACH * s), self.mean_speed + PACKET_REACH * s
            density = self.magnitude_density
        p, w = gauss_legendre_on(nodes, lo, hi)
        weights = w * density(p)
        return p, weights / weights.sum()

    def axial_nodes(self, nodes: int) -> int:
        """Size of the axial rule (`axial_quadrature`): `nodes`, more where fringes need them.

        "gaussian": `nodes`.  "two-lobe": nodes + ceil(FRINGE_MARGIN PACKET_REACH sigma_p d).
        The fringes cos(p d + phi), probed by a smooth f or by exp(i p d) (the coherence at the
        separation), put phases of up to 2 d (p - m) = 2 PACKET_REACH sigma_p d radians on the
        half-window; Gauss-Legendre resolves exp(i kappa x) on [-1, 1] with about kappa / 2
        nodes beyond what the envelope needs, and FRINGE_MARGIN = 1.25 adds a quarter (measured:
        exp(i 2 d p) under the envelope to 1e-15 absolute for sigma_p d <= 200 with nodes >= 32).
        "file": q (rows - 1) with q = `AmplitudeTable.nodes_per_interval`.

        Parameters
        ----------
        nodes : int
            Least number of nodes asked for.

        Returns
        -------
        int
            The number of axial nodes (dimensionless count).
        """
        if self.shape == "gaussian":
            return nodes
        if self.shape == "file":
            return self.table.nodes_per_interval(nodes) * (len(self.table.momenta) - 1)
        phase_reach = PACKET_REACH * self.momentum_std * self.separation
        return nodes + math.ceil(FRINGE_MARGIN * phase_reach)

    def axial_quadrature(self, nodes: int) -> tuple[np.ndarray, np.ndarray]:
        """Nodes and weights of the axial momentum: sum w f(p_z) = Int axis_density(p_z) f dp_z.

        "gaussian": Gauss-Hermite, as `quadrature` with along_axis.  "two-lobe":
        Gauss-Legendre with `axial_nodes` nodes over `axis_range`, weights times the fringed
        density.  "file": the composite rule of the table (`AmplitudeTable.quadrature`).

        Parameters
        ----------
        nodes : int
            Least number of nodes (`axial_nodes`).

        Returns
        -------
        (p_z, w) : tuple of ndarray
            Signed axial momenta (momentum units) and weights (dimensionless, summing to 1).

        References
        ----------
        M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
        eqs. 25.4.30 (Gauss-Legendre over [a, b]) and 25.4.46 (Gauss-Hermite).
        """
        if self.shape == "file":
            return self.table.quadrature(nodes)
        if self.shape == "gaussian":
            x, w = np.polynomial.hermite_e.hermegauss(nodes)
            return self.axis_mean + self.momentum_std * x, w / w.sum()
        p, w = gauss_legendre_on(self.axial_nodes(nodes), *self.axis_range())
        weights = w * self.axis_density(p)
        return p, weights / weights.sum()

    def axial_transverse_quadrature(self, nodes: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """3D product rule: axial nodes p_z times transverse magnitudes rho, with their weights.

        The 3D density is axis_density(p_z) times the 2D Gaussian of the transverse momentum,
        so the product of `axial_quadrature` (`axial_nodes` nodes) and `transverse_quadrature`
        (TRANSVERSE_NODES) gives sum w f(p_z, rho) = Int |psi(p)|^2 f(p_z, |p_perp|) d^3p; f
        of |p| takes |p| = sqrt(p_z^2 + rho^2) and the angle to the axis cos a = p_z / |p|.

        Parameters
        ----------
        nodes : int
            Least number of axial nodes.

        Returns
        -------
        (p_z, rho, w) : tuple of ndarray
            Flat arrays of axial_nodes x TRANSVERSE_NODES entries: axial components, transverse
            magnitudes (momentum units) and weights (dimensionless, summing to 1).
        """
        along, axial_weights = self.axial_quadrature(nodes)
        rho, transverse_weights = np.array(self.transverse_quadrature(TRANSVERSE_NODES)).T
        return (np.repeat(along, rho.size), np.tile(rho, along.size),
                np.outer(axial_weights, transverse_weights).ravel())

    def transverse_quadrature(self, nodes: int) -> tuple[tuple[float, float], ...]:
        """Magnitudes rho_b and weights of the 2D Gaussian transverse momentum (3D packets).

        rho^2 / (2 sigma_p^2) is exponentially distributed: Gauss-Laguerre nodes x_b give
        rho_b = sigma_p sqrt(2 x_b) with the Gauss-Laguerre weights (normalised to 1).

        Parameters
        ----------
        nodes : int
            Number of Gauss-Laguerre nodes.

        Returns
        -------
        tuple of (float, float)
            (rho_b, weight_b) pairs: rho_b in momentum units, weights dimensionless, summing
            to 1; Sum_b weight_b f(rho_b) ~ E[f(|p_perp|)].

        References
        ----------
        M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions (1964), ch. 25,
        eq. 25.4.45 (Gauss-Laguerre integration); NumPy documentation,
        ``numpy.polynomial.laguerre.laggauss``.
        """
        x, w = np.polynomial.laguerre.laggauss(nodes)
        return tuple((float(self.momentum_std * np.sqrt(2 * a)), float(b))
                     for a, b in zip(x, w / w.sum()))

    def direction_moments(self, r):
        """E[cos a] and E[cos^2 a] of the angle a between a momentum of magnitude r and p0.

        Given |p| = r, the direction of a 3D Gaussian momentum follows a von Mises-Fisher law
        with kappa = r |p0| / sigma_p^2 about p0: E[cos] = L(kappa) = coth kappa - 1/kappa
        (the Langevin function), E[cos^2] = 1 - 2 L / kappa (dimensionless).
        Below kappa = 1e-4 the series L = kappa / 3, E[cos^2] = 1/3 + 2 kappa^2 / 45 is used.

        Parameters
        ----------
        r : array_like
            Momentum magnitude |p| (momentum units).

        Returns
        -------
        (mean_cos, mean_cos2) : tuple of numpy.ndarray
            E[cos a] and E[cos^2 a] (dimensionless), the shape of `r`.

        Raises
        ------
        ValueError
            For a shape other than "gaussian" (use `axial_transverse_quadrature` there).

        References
        ----------
        K. V. Mardia and P. E. Jupp, Directional Statistics (Wiley, 2000): the von
        Mises-Fisher distribution, its mean resultant length coth kappa - 1/kappa on the
        sphere, and its arising from an isotropic normal conditioned on its length.
        """
        self._require_gaussian("direction_moments")
        kappa = np.asarray(r, dtype=float) * self.mean_speed / self.momentum_std ** 2
        small = kappa < 1e-4
        k = np.where(small, 1.0, kappa)
        lang = np.where(small, kappa / 3, 1 / np.tanh(k) - 1 / k)
        cos2 = np.where(small, 1 / 3 + 2 * kappa ** 2 / 45, 1 - 2 * lang / k)
        return lang, cos2

    def _require_gaussian(self, what: str) -> None:
        """ValueError unless the packet is one Gaussian (`what` has a Gaussian closed form)."""
        if self.shape != "gaussian":
            raise ValueError(f"Packet.{what} holds for a gaussian packet only (shape is "
                             f"{self.shape!r})")


def packet_from_config(config) -> Packet:
    """The Packet of a scenario's [packet] table, its amplitude file read for shape "file".

    Parameters
    ----------
    config : sim.config.schema.PacketConfig
        Width (length units), momentum (momentum units), shape, separation (length units),
        phase (radians) and amplitude_file (a path; relative paths in a scenario file are
        taken from the file's folder when it is read, else from the current folder).

    Returns
    -------
    Packet
        The packet in natural units.

    Raises
    ------
    ScenarioError
        For a "file" packet whose table cannot be used (`read_amplitude_table`).
    """
    table = read_amplitude_table(config.amplitude_file) if config.shape == "file" else None
    return Packet(config.width, config.momentum, config.shape, config.separation, config.phase,
                  table)
