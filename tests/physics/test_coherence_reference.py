"""The packet's own characteristic function (the reference every solver's chi(0) is checked
against) and the withholding of a coherence whose chi(0) misses it."""

from __future__ import annotations

import numpy as np
import pytest

from sim.physics.checks import load_scenario
from sim.physics.coherence import coherence_check, packet_characteristic
from sim.physics.field import packet_for
from sim.result import run

GAUSSIAN = {"title": "coherence reference", "detector": {"model": "newton-wigner",
                                                         "ground_mass": 1000.0, "gap": 1.0},
            "field": {"dimensions": 1, "mass": 0.3}, "coupling": {"lifetime": 1000.0},
            "packet": {"width": 1.0, "momentum": 0.2, "internal": "excited"},
            "run": {"method": "exact", "t_max": 100.0, "samples": 11, "coherence_at": 3.0}}


@pytest.mark.parametrize("d", [0.5, 3.0, 40.0])
def test_gaussian_characteristic_function(d):
    # Int N(p0, s^2)(p) exp(i p d) dp = exp(i p0 d - s^2 d^2 / 2) (the Gaussian's characteristic
    # function; common practice), with s = 1 / (2 width) for a minimum-uncertainty packet
    packet = packet_for(load_scenario(GAUSSIAN))
    s = packet.momentum_std
    expected = np.exp(1j * 0.2 * d - 0.5 * (s * d) ** 2)
    assert packet_characteristic(packet, d) == pytest.approx(expected, abs=1e-10)


def test_a_chi0_off_the_packets_own_is_named():
    assert coherence_check(0.5, 0.5 + 1e-6, 2.0, "run.coherence_at") == []
    line = coherence_check(0.3, 0.5, 2.0, "run.coherence_at")[0]
    assert "withheld" in line and "run.coherence_at" in line


def test_a_coherence_the_sectors_do_not_resolve_is_withheld():
    # five sectors over +-6 sigma_p sit 1.2 apart: exp(i p d) turns by 3.6 rad between them at
    # d = 3, so the solver's chi(0) is aliased and the coherence is withheld with the reason
    coarse = {**GAUSSIAN, "bath": {"sectors": 5, "window": 0.1}}
    result = run(load_scenario(coarse))
    assert result.coherence is None and result.summary["final_coherence"] is None
    assert any("withheld" in w for w in result.warnings)
    fine = run(load_scenario({**GAUSSIAN, "bath": {"sectors": 61, "window": 0.1}}))
    assert fine.summary["final_coherence"] is not None
