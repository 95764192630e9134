"""Bound states of the exact solver (sim/solvers/exact/bound.py) against the continuum, and the
automatic bath (sim/solvers/exact/baths.py) where a bound state traps population.

Reference: the continuum resolvent of the single-excitation sector (physics reference,
/work/shared/physics.md section 2; common practice): below the threshold of the band a bound
state E_b solves

    E_b - E_e(P) - Sigma_P(E_b) = 0,   Sigma_P(z) = Int dk |g_P(k)|^2 / (z - E_g(P - k) - w_k),

with g_P(k) = lambda F(k) V / sqrt(2 pi 2 w_k) in 1D, F = 1 for |k| <= K (a point-like
detector with a hard cutoff), V = 1 for the newton-wigner and galilean models (section 1), and
its level weight is the residue Z = |<e|b>|^2 = 1 / (1 - Sigma_P'(E_b)); it keeps Z^2 of P_e
for ever.  Sigma is integrated here with scipy.integrate.quad from those formulas alone (no
helper of sim.solvers or sim.physics).  Every scenario is invented for the test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
from scipy.integrate import quad
from scipy.optimize import brentq, minimize_scalar

import sim
from sim.errors import ResourceError
from sim.physics.checks import load_scenario
from sim.solvers.exact.baths import bath_for, refined_keys
from sim.solvers.exact.bound import BELOW, bound_states, packet_bound_states
from sim.solvers.exact.star import star_spectrum

#: the strong-coupling case: lambda = 0.5, M_g = 1, Omega = 0.5, field mass 0.2, cutoff 3
LAMBDA, GROUND, GAP, FIELD_MASS, CUTOFF = 0.5, 1.0, 0.5, 0.2, 3.0


def strong_case(model="newton-wigner", momentum=0.0, width=200.0, t_max=200.0, samples=401,
                **bath) -> dict:
    """The invented strong-coupling 1D scenario as a raw dict; `bath` fills [bath]."""
    return dict(title="bound state (invented)",
                detector=dict(model=model, ground_mass=GROUND, gap=GAP),
                field=dict(dimensions=1, mass=FIELD_MASS, cutoff=CUTOFF),
                coupling=dict(strength=LAMBDA),
                packet=dict(width=width, momentum=momentum, internal="excited"),
                run=dict(method="exact", t_max=t_max, samples=samples), bath=bath)


def energies(model: str):
    """E_g(q) and E_e(P), measured from M_g (physics reference section 1)."""
    excited_mass = GROUND + GAP
    if model == "galilean":
        return (lambda q: q * q / (2 * GROUND)), (lambda p: p * p / (2 * GROUND) + GAP)
    return (lambda q: math.sqrt(q * q + GROUND ** 2) - GROUND,
            lambda p: math.sqrt(p * p + excited_mass ** 2) - GROUND)


def continuum_bound_state(model: str, P: float) -> tuple[float, float]:
    """(E_b, Z) of the continuum sector P by quadrature of Sigma_P (module docstring)."""
    ground, excited = energies(model)

    def frequency(k):
        return math.sqrt(k * k + FIELD_MASS ** 2)

    def mode(k):
        return ground(P - k) + frequency(k)

    def coupling(k):  # |g_P(k)|^2 per dk, 1D, F = 1, V = 1
        return LAMBDA ** 2 / (2 * math.pi * 2 * frequency(k))

    edge = minimize_scalar(mode, bounds=(-CUTOFF, CUTOFF), method="bounded",
                           options={"xatol": 1e-12})
    threshold, k_edge = float(edge.fun), float(edge.x)

    def sigma(z, power=1):
        def integrand(k):
            return coupling(k) / (z - mode(k)) ** power
        return sum(quad(integrand, a, b, limit=400, epsabs=1e-13, epsrel=1e-10)[0]
                   for a, b in ((-CUTOFF, k_edge), (k_edge, CUTOFF)))

    E_b = brentq(lambda z: z - excited(P) - sigma(z), threshold - 5.0, threshold - 1e-6,
                 xtol=1e-15)
    return E_b, 1.0 / (1.0 + sigma(E_b, 2))


def late_mean(result) -> float:
    """Mean of P_e over the last quarter of the run."""
    excited = np.asarray(result.excited)
    return float(excited[3 * excited.size // 4:].mean())


# --- the bound state of one sector ----------------------------------------------------------------


@pytest.mark.parametrize("model, momentum", [("newton-wigner", 0.0), ("newton-wigner", 0.3),
                                             ("galilean", 0.0)])
def test_bound_state_matches_the_continuum_resolvent(model, momentum):
    # one sector in a box of length 2000 (spacing 3.1e-3): the discrete sums of Sigma below the
    # band converge to the integral up to the lattice's end terms at |k| = K, O(dk f(K))
    # (Euler-Maclaurin summation; Abramowitz & Stegun, Handbook of Mathematical Functions,
    # 23.1.30, from memory); measured 1.1e-5 relative in E_b and Z for newton-wigner at rest
    raw = strong_case(model, momentum, width=10.0, t_max=30.0, samples=61, box_length=2000.0,
                      sectors=1)
    sector = bath_for(load_scenario(raw), 30.0).sectors[0]
    spectrum = star_spectrum(sector.level_energy, sector.mode_energies, sector.couplings)
    found = bound_states(sector, spectrum)
    assert [state.side for state in found] == [BELOW]
    energy, weight = continuum_bound_state(model, sector.momentum)
    assert found[0].energy < sector.mode_energies.min()
    assert found[0].energy == pytest.approx(energy, rel=1e-4)
    assert found[0].weight == pytest.approx(weight, rel=1e-4)


def test_bound_states_agree_with_dense_diagonalisation():
    # a small sector (box 200, 191 modes) diagonalised densely by scipy.linalg.eigh (LAPACK;
    # reference library), independently of the secular equation: the eigenvalue below the band
    # and its level weight |<e|b>|^2; the packet summary's energy is taken from E_e(P)
    raw = strong_case(width=10.0, t_max=30.0, samples=61, box_length=200.0, sectors=1)
    sector = bath_for(load_scenario(raw), 30.0).sectors[0]
    hamiltonian = np.diag(np.concatenate(([sector.level_energy], sector.mode_energies)))
    hamiltonian[0, 1:] = hamiltonian[1:, 0] = sector.couplings.real
    values, vectors = scipy.linalg.eigh(hamiltonian)
    spectrum = star_spectrum(sector.level_energy, sector.mode_energies, sector.couplings)
    (state,) = bound_states(sector, spectrum)
    assert state.energy == pytest.approx(values[0], abs=1e-12)
    assert state.weight == pytest.approx(vectors[0, 0] ** 2, abs=1e-12)
    summary = packet_bound_states([sector], [[state]])
    assert summary["below"]["energy_from_level"] == pytest.approx(values[0] - sector.level_energy,
                                                                  abs=1e-12)
    assert summary["trapped_population"] == pytest.approx(vectors[0, 0] ** 4, abs=1e-12)
    assert summary["above"] is None


def test_weak_coupling_has_no_resolved_bound_state():
    # at lambda = 0.01 the 1D bound state's binding energy is of order lambda^4 (common
    # practice: a threshold divergence of Sigma ~ (thr - z)^(-1/2)), ~1e-9 here, below the
    # lattice's spacing at the band edge (dk^2 / 2 mu ~ 5e-6 for a box of 200): not reported
    raw = strong_case(width=10.0, t_max=30.0, samples=61, box_length=200.0, sectors=1)
    raw["coupling"]["strength"] = 0.01
    sector = bath_for(load_scenario(raw), 30.0).sectors[0]
    spectrum = star_spectrum(sector.level_energy, sector.mode_energies, sector.couplings)
    assert bound_states(sector, spectrum) == []


# --- the automatic bath where a bound state traps population --------------------------------------


def trapped_reference(raw: dict) -> float:
    """sum_P w_P Z(P)^2 over the run's sectors, Z from the continuum resolvent."""
    bath = bath_for(load_scenario(raw), raw["run"]["t_max"])
    return sum(s.weight * continuum_bound_state("newton-wigner", s.momentum)[1] ** 2
               for s in bath.sectors)


def test_automatic_bath_keeps_the_band_of_a_bound_state():
    # packet width 200 (sigma_p = 2.5e-3) needs a box of 1e4: the full band has 9,600 modes,
    # above the 6,000 at which a weakly coupled bath is windowed; here (Gamma/Omega ~ 0.9, a bound
    # state 0.1 below the threshold) the automatic bath keeps it, and the late P_e equals
    # sum_P w_P Z^2 of the continuum (about 0.0857); measured 6e-6 apart at t = 150..200
    raw = strong_case(sectors=3)
    result = sim.run(raw)
    assert result.summary["warnings"] and any("whole band" in w for w in result.summary["warnings"])
    bath = bath_for(load_scenario(raw), 200.0)
    assert bath.window is None and bath.mode_count > 9000
    assert late_mean(result) == pytest.approx(trapped_reference(raw), abs=2e-4)
    # a window chosen by the user (bath.modes) truncates the band: about 0.0788, and says so
    windowed = sim.run(strong_case(sectors=3, modes=6000))
    assert abs(late_mean(windowed) - trapped_reference(raw)) > 5e-3
    assert any("raise bath.modes" in w for w in windowed.summary["warnings"])


@pytest.mark.slow
def test_automatic_bath_traps_the_bound_state_weight_with_every_sector():
    # the same case with the default 49 sectors (about 80 s): measured 6e-6 from sum_P w_P Z^2
    raw = strong_case()
    result = sim.run(raw)
    assert late_mean(result) == pytest.approx(trapped_reference(raw), abs=1e-4)


def test_full_band_that_cannot_fit_is_refused():
    raw = strong_case(width=10.0, t_max=30.0, samples=61, box_length=1e10)
    with pytest.raises(ResourceError, match="bath.box_length") as caught:
        bath_for(load_scenario(raw), 30.0)
    assert "bath.window" in str(caught.value) and "strong coupling" in str(caught.value)


# --- refinement -------------------------------------------------------------------------------------


def test_refined_keys_refine_every_truncation_1d():
    full = bath_for(load_scenario(strong_case(sectors=3)), 200.0)
    keys = refined_keys(full)
    assert keys["bath.box_length"] == pytest.approx(1.5 * full.box_length)
    assert keys["bath.sectors"] == 5
    assert keys["bath.modes"] >= 1.5 ** 2 * full.mode_count  # stays a full band
    assert "bath.window" not in keys
    assert "field.cutoff" not in keys  # fixed for a point-like detector: part of the model
    weak = strong_case(sectors=3)
    weak["coupling"]["strength"] = 0.02
    weak["field"]["smearing"] = 0.1  # F(k) < 1: the cutoff truncates it, so it is refined
    windowed = bath_for(load_scenario(weak), 200.0)
    assert windowed.window is not None
    keys = refined_keys(windowed)
    assert keys["bath.window"] == pytest.approx(1.5 * windowed.window)
    assert keys["field.cutoff"] == pytest.approx(1.5 * windowed.cutoff)
    assert {"bath.modes", "bath.box_length", "bath.sectors"} <= set(keys)


def test_refined_keys_refine_every_truncation_3d():
    raw = strong_case(width=10.0, t_max=30.0, samples=61, sectors=4, angular_nodes=4,
                      radial_nodes=40)
    raw["field"].update(dimensions=3)
    raw["coupling"]["strength"] = 0.2
    bath = bath_for(load_scenario(raw), 30.0)
    keys = refined_keys(bath)
    assert keys["bath.sectors"] == 6 and keys["bath.angular_nodes"] == 6
    assert keys["bath.radial_nodes"] >= 60 and keys["bath.modes"] >= 2.25 * bath.mode_count
    assert "field.cutoff" not in keys and "bath.box_length" not in keys
