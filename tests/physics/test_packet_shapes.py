"""Packet shapes beyond one Gaussian (sim.physics.packet) and the coherence helpers
(sim.physics.coherence), each checked against a closed form written out here.

Closed forms used (common practice: the characteristic function of a normal law,
E[exp(i s X)] = exp(i m s - sigma^2 s^2 / 2) for X ~ N(m, sigma^2), and completing the square):
    E[X^k exp(i s X)] = exp(i m s - sigma^2 s^2 / 2) E[(m + i sigma^2 s + sigma Z)^k], Z ~ N(0, 1),
with E[Z^j] = (j - 1)!! for even j, 0 for odd j.  The two-lobe density is
n(p) = N(m, sigma^2)(p) 2 (1 + cos(p d + phi)) / N^2 with
N^2 = 2 (1 + cos(m d + phi) exp(-sigma^2 d^2 / 2)), so E_n[g] = (2 E_G[g] + exp(i phi) E_G[g exp(i p d)] + exp(-i phi) E_G[g exp(-i p d)]) / N^2.
"""

import cmath
import math

import numpy as np
import pytest
from scipy.integrate import quad

from sim.config.schema import PacketConfig
from sim.errors import ScenarioError
from sim.physics.coherence import (characteristic_from_quadrature, characteristic_on_grid,
                                   coherence_warning, spatial_coherence, static_kick_visibility)
from sim.physics.packet import Packet, packet_from_config, read_amplitude_table

#: two-lobe packets (width, separation, phase, 1D momentum): close, overlapping, far apart
TWO_LOBES = [(1.0, 0.5, 0.0, 0.0), (1.0, 3.0, 2.0, 0.4), (0.5, 8.5, math.pi, -1.0),
             (2.0, 60.0, 0.7, 0.25), (1.0, 200.0, -1.3, 0.0)]


def normal_moment(k: int, mean: complex, std: float) -> complex:
    """E[(mean + std Z)^k] for Z ~ N(0, 1) (binomial expansion; E[Z^j] = (j - 1)!!)."""
    total = 0j
    for j in range(0, k + 1, 2):
        total += math.comb(k, j) * mean ** (k - j) * std ** j * math.prod(range(j - 1, 0, -2))
    return total


def gaussian_fourier_moment(k: int, s: float, m: float, std: float) -> complex:
    """E[X^k exp(i s X)] for X ~ N(m, std^2), by completing the square."""
    shifted = m + 1j * std ** 2 * s
    return cmath.exp(1j * m * s - 0.5 * (std * s) ** 2) * normal_moment(k, shifted, std)


def two_lobe_moment(k: int, s: float, m: float, std: float, d: float, phi: float) -> complex:
    """E_n[p^k exp(i s p)] under the two-lobe density."""
    norm2 = 2 * (1 + math.cos(m * d + phi) * math.exp(-0.5 * (std * d) ** 2))
    return (2 * gaussian_fourier_moment(k, s, m, std)
            + cmath.exp(1j * phi) * gaussian_fourier_moment(k, s + d, m, std)
            + cmath.exp(-1j * phi) * gaussian_fourier_moment(k, s - d, m, std)) / norm2


def two_lobe(width, d, phi, momentum, dims=1):
    p0 = (momentum,) if dims == 1 else (0.0, 0.0, momentum)
    return Packet(width, p0, "two-lobe", d, phi)


def write_table(path, rows, header="p,re,im"):
    lines = ([header] if header is not None else []) + [",".join(map(str, r)) for r in rows]
    path.write_text("\n".join(lines) + "\n")
    return path


def gaussian_rows(m=0.3, std=0.5, shift=2.0, n=1601):
    """A sampled Gaussian amplitude sqrt(N(m, std^2)) exp(-i p shift) (a packet centred at
    x = shift), on m -+ 9 std."""
    p = np.linspace(m - 9 * std, m + 9 * std, n)
    amp = (2 * np.pi * std ** 2) ** -0.25 * np.exp(-0.25 * ((p - m) / std) ** 2 - 1j * p * shift)
    return [(float(a), float(b.real), float(b.imag)) for a, b in zip(p, amp)]


# --- the Gaussian stays as it was -------------------------------------------------------------


def test_gaussian_density_and_rules_keep_their_closed_forms():
    # N(0.3, 0.25^2) for width 2: sigma_p = 1 / (2 width) (hbar = 1)
    packet = Packet(2.0, (0.3,))
    for p in (-0.4, 0.3, 0.55, 1.1):
        expected = math.exp(-0.5 * ((p - 0.3) / 0.25) ** 2) / (math.sqrt(2 * math.pi) * 0.25)
        assert packet.axis_density(p) == pytest.approx(expected, rel=1e-14)
    p, w = packet.quadrature(96)
    assert len(p) == 96 and w.sum() == pytest.approx(1, abs=1e-15)
    assert w @ p == pytest.approx(0.3, rel=1e-13)
    assert w @ p ** 2 == pytest.approx(0.3 ** 2 + 0.25 ** 2, rel=1e-13)
    assert packet.fastest_momentum() == pytest.approx(0.3 + 8 * 0.25, rel=1e-15)
    # 3D at p0 = (0.1, 0, 0.3): E|p|^2 = |p0|^2 + 3 sigma_p^2 (Gauss-Legendre over |p|), and the
    # axial Gauss-Hermite rule has mean |p0| and variance sigma_p^2
    packet = Packet(2.0, (0.1, 0.0, 0.3))
    r, w = packet.quadrature(96)
    assert len(r) == 96 and w @ r ** 2 == pytest.approx(0.1 + 3 * 0.25 ** 2, rel=1e-12)
    z, w = packet.quadrature(6, along_axis=True)
    assert len(z) == 6 and w @ z == pytest.approx(math.sqrt(0.1), rel=1e-14)
    assert w @ (z - math.sqrt(0.1)) ** 2 == pytest.approx(0.25 ** 2, rel=1e-13)
    # the noncentral chi density at one point, written out
    a, s, x = math.sqrt(0.1), 0.25, 0.5
    chi = x / (a * s * math.sqrt(2 * math.pi)) * (math.exp(-(x - a) ** 2 / (2 * s * s))
                                                  - math.exp(-(x + a) ** 2 / (2 * s * s)))
    assert packet.magnitude_density(x) == pytest.approx(chi, rel=1e-13)


def test_gaussian_amplitude_is_the_square_root_of_its_density():
    packet = Packet(0.7, (-1.2,))
    p = np.linspace(-6, 4, 201)
    np.testing.assert_allclose(abs(packet.axis_amplitude(p)) ** 2, packet.axis_density(p),
                               rtol=1e-14, atol=0)


def test_gaussian_only_closed_forms_refuse_other_shapes():
    packet = two_lobe(1.0, 3.0, 0.0, 0.2, dims=3)
    with pytest.raises(ValueError, match="gaussian packet only"):
        packet.magnitude_density(1.0)
    with pytest.raises(ValueError, match="gaussian packet only"):
        packet.direction_moments(1.0)


# --- two lobes --------------------------------------------------------------------------------


@pytest.mark.parametrize("width, d, phi, m", TWO_LOBES)
def test_two_lobe_is_normalized_and_its_density_has_the_closed_form(width, d, phi, m):
    packet = two_lobe(width, d, phi, m)
    std = 0.5 / width
    p = np.linspace(m - 8 * std, m + 8 * std, 2001)
    # the density written out, and |amplitude|^2 agreeing with it
    norm2 = 2 * (1 + math.cos(m * d + phi) * math.exp(-0.5 * (std * d) ** 2))
    envelope = np.exp(-0.5 * ((p - m) / std) ** 2) / (math.sqrt(2 * math.pi) * std)
    expected = envelope * 2 * (1 + np.cos(p * d + phi)) / norm2
    np.testing.assert_allclose(packet.axis_density(p), expected, rtol=1e-12, atol=1e-300)
    np.testing.assert_allclose(abs(packet.axis_amplitude(p)) ** 2, expected, rtol=1e-12,
                               atol=1e-14 * expected.max())
    # Int |psi|^2 dp = 1 by adaptive quadrature (QUADPACK) of the amplitude itself, to 1e-10
    total, _ = quad(lambda x: abs(packet.axis_amplitude(x)) ** 2, m - 12 * std, m + 12 * std,
                    limit=2000, epsabs=1e-13, epsrel=1e-13)
    assert total == pytest.approx(1, abs=1e-10)


@pytest.mark.parametrize("width, d, phi, m", TWO_LOBES)
def test_two_lobe_axial_rule_integrates_polynomials_times_fringes(width, d, phi, m):
    # Sum w p^k cos(p s + psi) against Re(exp(i psi) E_n[p^k exp(i s p)]) for k = 0..3 and
    # s = 0, d / 3, d (the rule is sized for phases up to 2 d: the fringes times exp(i p d));
    # tolerance 1e-12 of the scale (|m| + sigma_p)^k
    packet = two_lobe(width, d, phi, m)
    std = 0.5 / width
    p, w = packet.quadrature(48)
    assert len(p) == packet.axial_nodes(48) == 48 + math.ceil(1.25 * 8 * std * d)
    assert w.sum() == pytest.approx(1, abs=1e-14)
    for k in range(4):
        for s in (0.0, d / 3, d):
            for psi in (0.0, 0.9):
                expected = (cmath.exp(1j * psi) * two_lobe_moment(k, s, m, std, d, phi)).real
                got = w @ (p ** k * np.cos(p * s + psi))
                assert got == pytest.approx(expected, abs=1e-12 * (abs(m) + std) ** k), (k, s, psi)


@pytest.mark.parametrize("width, d, phi, m", TWO_LOBES)
def test_two_lobe_characteristic_at_the_separation(width, d, phi, m):
    # <exp(i P d)> = (2 chi(d) + exp(i phi) chi(2 d) + exp(-i phi)) / N^2, chi the Gaussian's
    # characteristic function (common practice); -> exp(-i phi) / 2 for lobes far apart
    packet = two_lobe(width, d, phi, m)
    std = 0.5 / width

    def chi(s):
        return cmath.exp(1j * m * s - 0.5 * (std * s) ** 2)

    norm2 = 2 * (1 + math.cos(m * d + phi) * math.exp(-0.5 * (std * d) ** 2))
    expected = (2 * chi(d) + cmath.exp(1j * phi) * chi(2 * d) + cmath.exp(-1j * phi)) / norm2
    p, w = packet.quadrature(32)
    assert characteristic_from_quadrature(p, w, d) == pytest.approx(expected, abs=1e-13)
    # the same from the density on a uniform grid (trapezoidal rule), h d < pi
    grid = np.linspace(m - 10 * std, m + 10 * std, 4001)
    on_grid = characteristic_on_grid(grid, packet.axis_density(grid), d)
    assert on_grid == pytest.approx(expected, abs=1e-12)
    if std * d > 10:
        assert abs(expected) == pytest.approx(0.5, abs=1e-15)


def test_two_lobe_in_3d_product_rule():
    # E|p|^2 = E[p_z^2] + 2 sigma_p^2 and E|p|^4 = E[p_z^4] + 4 sigma_p^2 E[p_z^2] + 8 sigma_p^4
    # (the transverse |p_perp|^2 is exponential with mean 2 sigma_p^2); tolerance 1e-12 relative
    width, d, phi, m = 0.8, 7.0, 0.4, 0.3
    packet = two_lobe(width, d, phi, m, dims=3)
    std = 0.5 / width
    r, w = packet.quadrature(40)
    assert len(r) == packet.axial_nodes(40) * 24 and w.sum() == pytest.approx(1, abs=1e-14)
    z2 = two_lobe_moment(2, 0.0, m, std, d, phi).real
    z4 = two_lobe_moment(4, 0.0, m, std, d, phi).real
    assert w @ r ** 2 == pytest.approx(z2 + 2 * std ** 2, rel=1e-12)
    assert w @ r ** 4 == pytest.approx(z4 + 4 * std ** 2 * z2 + 8 * std ** 4, rel=1e-12)
    along, rho, w = packet.axial_transverse_quadrature(40)
    assert w @ (along * rho ** 2) == pytest.approx(
        2 * std ** 2 * two_lobe_moment(1, 0.0, m, std, d, phi).real, rel=1e-12)
    z, wz = packet.quadrature(40, along_axis=True)
    assert wz @ z ** 2 == pytest.approx(z2, rel=1e-12)
    # normalization in 3D: the axial amplitude integrates to 1, the transverse part is a density
    total, _ = quad(lambda x: abs(packet.axis_amplitude(x)) ** 2, m - 12 * std, m + 12 * std,
                    limit=500, epsabs=1e-13, epsrel=1e-13)
    assert total == pytest.approx(1, abs=1e-10)
    assert packet.fastest_momentum() == pytest.approx(m + 8 * std, rel=1e-15)


def test_packet_from_config_two_lobe():
    config = PacketConfig(1.5, (0.2,), shape="two-lobe", separation=4.0, phase=1.0)
    packet = packet_from_config(config)
    assert (packet.shape, packet.separation, packet.phase) == ("two-lobe", 4.0, 1.0)
    assert packet_from_config(PacketConfig(1.5, (0.2,))) == Packet(1.5, (0.2,))


# --- tabulated amplitude ----------------------------------------------------------------------


def test_file_shape_reproduces_a_sampled_gaussian(tmp_path):
    # a displaced Gaussian packet tabulated on 1601 rows (h = 0.0056): its density and its
    # characteristic function exp(i m s - sigma^2 s^2 / 2) to the O(h^2) error of linear
    # interpolation (tolerances 1e-4 relative to the peak; measured about 3e-5)
    m, std, shift = 0.3, 0.5, 2.0
    rows = [(p, 3 * a, 3 * b) for p, a, b in gaussian_rows(m, std, shift)]  # any scale
    path = write_table(tmp_path / "amp.csv", rows)
    config = PacketConfig(1.0, (0.0,), shape="file", amplitude_file=str(path))
    packet = packet_from_config(config)
    p = np.linspace(m - 5 * std, m + 5 * std, 301)
    expected = np.exp(-0.5 * ((p - m) / std) ** 2) / (math.sqrt(2 * math.pi) * std)
    np.testing.assert_allclose(packet.axis_density(p), expected, atol=1e-4 * expected.max())
    assert packet.axis_density(m + 9.01 * std) == 0 and packet.axis_density(m - 9.01 * std) == 0
    q, w = packet.quadrature(96)
    for s in (0.0, 1.0, 3.0):
        assert characteristic_from_quadrature(q, w, s) == pytest.approx(
            cmath.exp(1j * m * s - 0.5 * (std * s) ** 2), abs=1e-4)
    assert packet.axis_mean == pytest.approx(m, abs=1e-6)
    assert packet.axis_range() == pytest.approx((m - 9 * std, m + 9 * std), rel=1e-15)
    assert packet.fastest_momentum() == pytest.approx(m + 9 * std, rel=1e-15)
    # the phase exp(-i p shift) is kept at the rows: it is the packet's position
    a, b = rows[800][0], rows[810][0]
    assert np.angle(packet.axis_amplitude(a) / packet.axis_amplitude(b)) == pytest.approx(
        (b - a) * shift, abs=1e-12)


def test_file_shape_is_normalized_exactly_and_its_rule_is_exact(tmp_path):
    # a coarse, lopsided table: Int |psi|^2 = 1 by adaptive quadrature with the rows as break
    # points (to 1e-10), and the composite rule integrates the piecewise-quadratic density times
    # p^3 exactly (3 Gauss-Legendre nodes per interval are exact to degree 5)
    rows = [(-1.0, 0.0, 0.0), (-0.2, 1.0, 0.5), (0.1, 2.0, -1.0), (0.9, 0.3, 0.3), (2.0, 0.0, 0.1)]
    path = write_table(tmp_path / "amp.csv", rows)
    table = read_amplitude_table(path)
    for dims in (1, 3):
        packet = Packet(1.0, (0.0,) if dims == 1 else (0.0, 0.0, 1.0), "file", table=table)
        breaks = [r[0] for r in rows]
        total = sum(quad(lambda x: abs(packet.axis_amplitude(x)) ** 2, a, b, epsabs=1e-14)[0]
                    for a, b in zip(breaks, breaks[1:]))
        assert total == pytest.approx(1, abs=1e-10)
        z, w = packet.quadrature(8, along_axis=True)
        assert len(z) == 3 * 4
        cube = sum(quad(lambda x: x ** 3 * packet.axis_density(x), a, b, epsabs=1e-14)[0]
                   for a, b in zip(breaks, breaks[1:]))
        assert w @ z ** 3 == pytest.approx(cube, abs=1e-12)
    assert len(packet.quadrature(100, along_axis=True)[0]) == 25 * 4  # ceil(100 / 4) per interval
    r, w = packet.quadrature(8)  # 3D: the product with the transverse Gaussian (width 1)
    second = sum(quad(lambda x: x ** 2 * packet.axis_density(x), a, b, epsabs=1e-14)[0]
                 for a, b in zip(breaks, breaks[1:]))
    assert w @ r ** 2 == pytest.approx(second + 2 * 0.5 ** 2, rel=1e-12)
    assert packet.fastest_momentum() == pytest.approx(math.hypot(2.0, 8 * 0.5), rel=1e-15)


@pytest.mark.parametrize("text, needle", [
    (None, "cannot be read"),
    ("x,y,z\n0,1,0\n1,1,0\n", "the first line must name the columns p,re,im"),
    ("", "the first line must name the columns p,re,im"),
    ("p,re,im\n0,1\n1,1,0\n", "line 2: 2 columns"),
    ("p,re,im\n0,1,0\n1,one,0\n", 'line 3: "one" is not a number'),
    ("p,re,im\n0,1,0\n1,nan,0\n", "line 3: nan is not finite"),
    ("p,re,im\n0,1,0\n1,1,inf\n", "line 3: inf is not finite"),
    ("p,re,im\n0,0,0\n1,0,0\n2,0,0\n", "cannot be normalised"),
    ("p,re,im\n0,1,0\n2,1,0\n1,1,0\n", "line 4: p = 1.0 after p = 2.0"),
    ("p,re,im\n0,1,0\n0,1,0\n", "line 3: p = 0.0 after p = 0.0"),
    ("p,re,im\n0,1,0\n", "has 1 data rows"),
    ("p,re,im\n0,1e200,0\n1,1,0\n", "overflows"),
])
def test_file_shape_errors_name_the_key(tmp_path, text, needle):
    path = tmp_path / "amp.csv"
    if text is not None:
        path.write_text(text)
    config = PacketConfig(1.0, (0.0,), shape="file", amplitude_file=str(path))
    with pytest.raises(ScenarioError) as info:
        packet_from_config(config)
    message = str(info.value)
    assert message.startswith(f'packet.amplitude_file = "{path}": ') and needle in message, message


def test_file_shape_refuses_a_folder_and_binary_text(tmp_path):
    for path, needle in ((tmp_path, "cannot be read"), (tmp_path / "b.csv", "not UTF-8")):
        if path != tmp_path:
            path.write_bytes(b"p,re,im\n\xff\xfe,1,0\n")
        with pytest.raises(ScenarioError, match="packet.amplitude_file") as info:
            read_amplitude_table(path)
        assert needle in str(info.value)


# --- coherence helpers ------------------------------------------------------------------------


@pytest.mark.parametrize("dims", [1, 3])
def test_static_kicks_of_a_two_lobe_packet_lower_the_coherence_by_the_visibility(dims):
    # Built independently of the closed form: the axial density after one emission of |k| from
    # a static detector is the average of the kicked densities, n(p) -> <n(p + k u)> with u = -+1
    # (1D) or u uniform on [-1, 1] (3D: the axial component of an isotropic direction is uniform,
    # Archimedes' hat-box theorem; common practice).  Its characteristic function at d over the
    # initial one is |cos(k d)| or |sin(k d) / (k d)|; tolerance 1e-10.
    packet = two_lobe(1.0, 8.5, 0.3, 0.0)
    k, d = 2001 / 2002, 8.5
    grid = np.linspace(-8, 8, 6401)
    before = characteristic_on_grid(grid, packet.axis_density(grid), d)
    if dims == 1:
        after = 0.5 * (packet.axis_density(grid + k) + packet.axis_density(grid - k))
    else:
        u, wu = np.polynomial.legendre.leggauss(64)
        after = 0.5 * sum(wi * packet.axis_density(grid + k * ui) for ui, wi in zip(u, wu))
    ratio = abs(characteristic_on_grid(grid, after, d)) / abs(before)
    assert ratio == pytest.approx(float(static_kick_visibility(k, d, dims)), abs=1e-10)
    expected = abs(math.cos(k * d)) if dims == 1 else abs(math.sin(k * d) / (k * d))
    assert float(static_kick_visibility(k, d, dims)) == pytest.approx(expected, rel=1e-14)
    coherence = spatial_coherence([before, characteristic_on_grid(grid, after, d)])
    assert coherence[0] == 1 and coherence[1] == pytest.approx(ratio, rel=1e-14)


def test_static_kick_visibility_refuses_other_dimensions():
    with pytest.raises(ValueError, match="allowed: 1 or 3"):
        static_kick_visibility(1.0, 1.0, 2)


def test_no_coherence_to_lose_gives_nan_and_a_warning_naming_the_key():
    # one Gaussian of width 1 overlaps its copy displaced by d as exp(-d^2 / (8 width^2)):
    # 1e-11 at d = 14.2 (common practice: the Gaussian characteristic function)
    packet = Packet(1.0, (0.0,))
    p, w = packet.quadrature(96)
    reference = characteristic_from_quadrature(p, w, 14.2)
    assert abs(reference) == pytest.approx(math.exp(-14.2 ** 2 / 8), rel=1e-6)
    assert np.isnan(spatial_coherence([reference, reference])).all()
    (line,) = coherence_warning(reference, 14.2, "run.coherence_at")
    assert "run.coherence_at" in line and "14.2" in line
    assert coherence_warning(characteristic_from_quadrature(p, w, 2.0), 2.0, "x") == []
