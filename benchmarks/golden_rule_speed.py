"""Speed and accuracy of the golden-rule rates from atoms (M/Omega = 1e11) to the Compton scale.

For each dimension and mass ratio (newton-wigner detector, massless vacuum field, Omega = 1,
lambda = 0.1, packet 10 / Omega wide at p0 = 0.1): the time of one `template_rate` call at one
momentum and on a 41-point grid, of one `packet_rate` call (cache cleared), and the same rate
from a straightforward scipy reference on the same problem:

* 3D: scipy.integrate.quad over u = cos theta of the explicit on-shell density of two-body
  kinematics, k(u) = (M_e^2 - M_g^2) / (2 (E_e - P u)),
  dGamma/du = lambda^2 k E_g / (4 pi (E_e - P u)) (E_g = E_e - k);
  near the Compton scale also scipy.integrate.dblquad over (|k|, u) of the golden rule with a
  Gaussian-broadened delta (width 1e-3 Omega: agreement to O(width^2) only);
* 1D: scipy.optimize.brentq on the energy balance of each direction, then 2 pi |g|^2 / |f'|.

Run:  python benchmarks/golden_rule_speed.py     (well under a minute)
"""

from __future__ import annotations

import json
import math
import sys
import time

import numpy as np
from scipy.integrate import dblquad, quad
from scipy.optimize import brentq

from sim.physics.checks import load_scenario
from sim.physics.golden_rule import packet_rate, template_rate

GAP, LAM, MOMENTUM, WIDTH = 1.0, 0.1, 0.1, 10.0
RATIOS = (1e11, 1e6, 10.0, 1.0)
BROADENING = 1e-3


def scenario(mass, dims):
    """A loaded newton-wigner scenario with the benchmark's numbers (natural units)."""
    return load_scenario({"detector": {"model": "newton-wigner", "ground_mass": mass, "gap": GAP},
                          "field": {"dimensions": dims}, "coupling": {"strength": LAM},
                          "packet": {"width": WIDTH, "momentum": MOMENTUM, "internal": "excited"}})


def best_time(function, repeats=5):
    """(result, the shortest wall time of `repeats` calls in seconds)."""
    best, result = math.inf, None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return result, best


def reference_3d(mass, p):
    """Gamma(p) by quad over u of the explicit two-body density."""
    me = mass + GAP
    energy, splitting = math.hypot(p, me), GAP * (2 * mass + GAP)

    def density(u):
        k = splitting / (2 * (energy - p * u))
        return LAM ** 2 * k * (energy - k) / (4 * math.pi * (energy - p * u))

    return quad(density, -1, 1, epsabs=0, epsrel=1e-13)[0]


def k_quadrature_3d(mass, p):
    """Gamma(p) by brentq window edges and quad over |k| (the angle fixed by the delta)."""
    me = mass + GAP
    energy = math.hypot(p, me)
    edges = [brentq(lambda k, d=d: energy - math.hypot(p - d * k, mass) - k, 1e-300, 2 * GAP,
                    xtol=1e-300, rtol=4 * np.finfo(float).eps) for d in (-1, +1)]
    return quad(lambda k: LAM ** 2 * (energy - k) / (4 * math.pi * p), *edges,
                epsabs=0, epsrel=1e-13)[0]


def broadened_3d(mass, p):
    """Gamma(p) by dblquad over (|k|, u) of 2 pi k^2 |g|^2 x 2 pi delta_eps(energy balance)."""
    me = mass + GAP
    energy = math.hypot(p, me)

    def integrand(k, u):
        q2 = p * p + k * k - 2 * p * k * u
        mismatch = energy - math.sqrt(q2 + mass * mass) - k
        delta = (math.exp(-0.5 * (mismatch / BROADENING) ** 2)
                 / (math.sqrt(2 * math.pi) * BROADENING))
        return 4 * math.pi ** 2 * k * k * LAM ** 2 / ((2 * math.pi) ** 3 * 2 * k) * delta

    k_lo = GAP * (2 * mass + GAP) / (2 * (energy + p))
    k_hi = GAP * (2 * mass + GAP) / (2 * (energy - p))
    pad = 12 * BROADENING
    return dblquad(integrand, -1, 1, k_lo - pad, k_hi + pad, epsabs=0, epsrel=1e-8)[0]


def reference_1d(mass, p):
    """Gamma(p) from brentq roots of E_e(p) - E_g(p - d k) - k, d = +-1."""
    me = mass + GAP

    def kinetic(x, m):
        return x * x / (math.sqrt(x * x + m * m) + m)

    total = 0.0
    for d in (+1, -1):
        def balance(k):
            return kinetic(p, me) + GAP - kinetic(p - d * k, mass) - k

        k = brentq(balance, 1e-300, 2 * GAP, xtol=1e-300, rtol=4 * np.finfo(float).eps)
        q = p - d * k
        slope = math.copysign(abs(q) / math.hypot(q, mass), q) * d - 1
        total += 2 * math.pi * LAM ** 2 / (2 * math.pi * 2 * k) / abs(slope)
    return total


def measurements() -> list[dict]:
    """Every case: our per-call times and each reference's time and relative difference."""
    rows = []
    for dims in (3, 1):
        for ratio in RATIOS:
            mass = ratio * GAP
            s = scenario(mass, dims)
            grid = np.linspace(0.0, 0.5, 41)
            value, one = best_time(lambda: template_rate(s, MOMENTUM))
            _, many = best_time(lambda: template_rate(s, grid))
            _, average = best_time(lambda: (packet_rate.cache_clear(), packet_rate(s))[1])
            references = ([("k-quad", k_quadrature_3d, 3), ("explicit-u", reference_3d, 3)]
                          + ([("dblquad", broadened_3d, 1)] if ratio <= 10 else [])
                          if dims == 3 else [("brentq", reference_1d, 3)])
            for name, method, repeats in references:
                expected, slow = best_time(lambda: method(mass, MOMENTUM), repeats=repeats)
                rows.append({"dims": dims, "ratio": ratio, "one": one, "many": many,
                             "packet": average, "reference": name, "reference_seconds": slow,
                             "difference": abs(expected - value) / value})
    return rows


def main():
    rows = measurements()
    if "--json" in sys.argv:  # one row per case (benchmarks/run_all.py): the broadened-delta
        # dblquad for light detectors, the explicit angular density for heavy ones, brentq in 1D
        print(json.dumps([{"benchmark": f"template_rate {r['dims']}D M/Omega={r['ratio']:.0e}",
                           "ours_seconds": r["one"], "reference": f"scipy {r['reference']}",
                           "reference_seconds": r["reference_seconds"],
                           "agreement": r["difference"], "target": "a rate in milliseconds"}
                          for r in rows if r["reference"] in ("dblquad", "brentq")
                          or (r["reference"] == "explicit-u" and r["ratio"] > 10)]))
        return
    print(f"{'case':>14} {'template(1 p)':>14} {'template(41 p)':>15} {'packet':>9}   "
          f"{'reference':>10} {'time':>10} {'ratio':>7} {'difference':>10}")
    last = None
    for r in rows:
        head = "" if (r["dims"], r["ratio"]) == last else (
            f"{r['dims']}D M/Om={r['ratio']:<6.0e} {r['one'] * 1e3:11.2f} ms "
            f"{r['many'] * 1e3:12.2f} ms {r['packet'] * 1e3:6.2f} ms")
        last = (r["dims"], r["ratio"])
        print(f"{head:>60}   {r['reference']:>10} {r['reference_seconds'] * 1e3:7.2f} ms "
              f"{r['reference_seconds'] / r['one']:7.2g} {r['difference']:10.1e}")


if __name__ == "__main__":
    main()
