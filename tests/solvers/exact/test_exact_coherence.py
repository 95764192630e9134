"""Spatial coherence from the exact solver, against the static-detector closed forms.

A heavy detector (M_g = 1000 gap units, so the recoil kick barely depends on its momentum) that
has decayed completely leaves chi(t) = Tr(rho_COM exp(i P d)) multiplied by the average of
exp(-i k.d) over its emission: |cos(k* d)| in 1D (two kicks -+ k*) and |sin(k* d)/(k* d)| in 3D
(isotropic emission); common practice, cf. the measured loss of an atom's spatial coherence by
one spontaneous emission, T. Pfau et al., Phys. Rev. Lett. 73, 1223 (1994) (dipole pattern
there; from memory).  In 1D the emitted line's Lorentzian width also enters, by
exp(-Gamma d / (2 v_g)) (the Fourier transform of a Lorentzian of half-width Gamma / (2 v_g) in
k; common practice), and the level's Lamb shift moves k* by Delta / v_g.
"""

from __future__ import annotations

import numpy as np
import pytest

from sim.physics.checks import load_scenario
from sim.result.assemble import run

HEAVY = {"model": "newton-wigner", "ground_mass": 1000.0, "gap": 1.0}


def test_two_lobe_packet_in_1d_keeps_cos_kd_after_decay():
    raw = {"title": "two-lobe check", "detector": HEAVY,
           "field": {"dimensions": 1, "mass": 0.3}, "coupling": {"lifetime": 1000.0},
           "packet": {"shape": "two-lobe", "width": 1.0, "separation": 8.5, "momentum": 0.0,
                      "internal": "excited"},
           "run": {"method": "exact", "t_max": 8000.0, "samples": 101},
           "bath": {"window": 0.05, "sectors": 41}}
    result = run(load_scenario(raw))
    gap = (1001.0 ** 2 - 1000.0 ** 2) / (2 * 1001.0) + result.summary["lamb_shift"]
    k = np.sqrt(gap ** 2 - 0.3 ** 2)  # on-shell momentum of a massive quantum of energy `gap`
    speed = k / gap
    expected = abs(np.cos(k * 8.5)) * np.exp(-result.summary["rate_golden_rule"] * 8.5 / (2 * speed))
    assert result.summary["final_excited"] < 1e-3
    assert result.summary["final_coherence"] == pytest.approx(expected, abs=2e-3)
    assert result.coherence[0] == pytest.approx(1.0)
    assert np.all(result.coherence <= 1 + 1e-9)


def test_gaussian_packet_in_3d_keeps_sinc_kd_after_decay():
    raw = {"title": "3D coherence check", "detector": HEAVY,
           "field": {"dimensions": 3, "mass": 0.0}, "coupling": {"lifetime": 200.0},
           "packet": {"width": 2.0, "momentum": [0.0, 0.0, 0.0], "internal": "excited"},
           "run": {"method": "exact", "t_max": 2000.0, "samples": 41, "coherence_at": 2.0},
           "bath": {"sectors": 10}}
    result = run(load_scenario(raw))
    k = (1001.0 ** 2 - 1000.0 ** 2) / (2 * 1001.0)
    assert result.summary["final_excited"] < 1e-4
    assert result.summary["final_coherence"] == pytest.approx(abs(np.sin(2 * k) / (2 * k)), abs=1e-3)


def test_no_coherence_is_reported_without_a_distance():
    raw = {"title": "no distance", "detector": HEAVY, "field": {"dimensions": 1, "mass": 0.3},
           "coupling": {"lifetime": 1000.0},
           "packet": {"width": 1.0, "momentum": 0.0, "internal": "excited"},
           "run": {"method": "exact", "t_max": 500.0, "samples": 21}, "bath": {"window": 0.05}}
    result = run(load_scenario(raw))
    assert result.coherence is None and "final_coherence" not in result.summary
