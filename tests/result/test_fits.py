"""Fitted rates and their verdicts on closed-form population curves (sim.result.fits).

Every curve here is written out from its formula; the source of each is named beside it.
"""

from __future__ import annotations

import numpy as np
import pytest

from sim.result.fits import (CURVATURE, EXPONENTIAL, LINEAR, OSCILLATION, SHORT_WINDOW,
                             TOO_FEW_SAMPLES, TRAPPING, fit_decay, fit_excitation,
                             trapped_population)


def exponential(t, rate):
    """P_e = exp(-Gamma t): Weisskopf-Wigner decay of a level into a flat continuum
    (common practice)."""
    return np.exp(-rate * t)


def lorentzian_amplitude(t, width, strength):
    """|G(t)|^2 of a level coupled resonantly to a Lorentzian spectral density of width l and
    strength g0: G(t) = exp(-l t / 2) [cosh(d t / 2) + (l / d) sinh(d t / 2)],
    d = sqrt(l^2 - 2 g0 l) (Breuer & Petruccione, The Theory of Open Quantum Systems, OUP 2002,
    sec. 10.1, the damped Jaynes-Cummings model; from memory).  For g0 > l / 2, d is imaginary
    and P_e shows damped vacuum Rabi oscillations; for g0 << l the decay is exponential at
    l - Re d."""
    d = np.sqrt(complex(width ** 2 - 2 * strength * width))
    amplitude = np.exp(-width * t / 2) * (np.cosh(d * t / 2) + width / d * np.sinh(d * t / 2))
    return np.abs(amplitude) ** 2


# --- exponential ----------------------------------------------------------------------------


def test_pure_exponential_gives_its_rate():
    t = np.linspace(0.0, 12.0, 241)
    fit = fit_decay(t, exponential(t, 0.37), golden=0.37)
    assert fit.verdict == EXPONENTIAL and fit.reason is None
    assert fit.rate == pytest.approx(0.37, rel=1e-10)
    assert fit.trapped_population is None
    summary = fit.summary()
    assert summary["population_bounds"] == [0.02, 0.9]
    # the window is where 0.02 <= exp(-Gamma t) <= 0.9: t from ln(1/0.9) / Gamma to ln 50 / Gamma
    assert np.log(1 / 0.9) / 0.37 <= summary["t_start"] < np.log(1 / 0.9) / 0.37 + 0.05
    assert np.log(50) / 0.37 - 0.05 < summary["t_end"] <= np.log(50) / 0.37
    assert summary["residual"] < 1e-12 and summary["lifetimes"] > 3.5


@pytest.mark.parametrize("size, verdict", [(1e-3, EXPONENTIAL), (0.25, OSCILLATION)])
def test_ripple_even_about_the_window_centre(size, verdict):
    # P_e = exp(-G t) (1 + eps cos(2 pi 3 (t - tc) / T)) on equally spaced samples that all lie in
    # the fit window: the ripple is even about the centre tc, so it is orthogonal to (t - tc) and
    # leaves the least-squares slope exactly G (normal equations of a straight-line fit, common
    # practice).  A small ripple keeps the verdict; one large enough that P_e rises again
    # (eps 2 pi 3 / T = 1.5 > G) over three slow periods is an oscillation.
    rate = 1.0
    t = np.linspace(0.4, 3.6, 321)
    centre, span = t.mean(), t[-1] - t[0]
    excited = exponential(t, rate) * (1 + size * np.cos(2 * np.pi * 3 * (t - centre) / span))
    fit = fit_decay(t, excited, golden=rate)
    assert fit.samples == len(t)  # the whole curve is the window
    assert fit.verdict == verdict
    if verdict == EXPONENTIAL:
        assert fit.rate == pytest.approx(rate, rel=1e-10)
    else:
        assert fit.rate is None and "rises again" in fit.reason
        assert fit.line_rate == pytest.approx(rate, rel=1e-10)  # the line is still there


def test_weak_coupling_lorentzian_is_exponential_at_its_pole():
    # g0 << l: the slow exponential exp(-(l - d) t) of the closed form dominates once the fast
    # one, exp(-(l + d) t), has died out (by t ~ 4 / (l + d) = 0.1, before P_e reaches 0.9);
    # what is left of it in the window is below 1e-5 of P_e
    width, strength = 20.0, 0.5
    t = np.linspace(0.0, 10.0, 401)
    fit = fit_decay(t, lorentzian_amplitude(t, width, strength), golden=strength)
    pole = width - np.sqrt(width ** 2 - 2 * strength * width)
    assert fit.verdict == EXPONENTIAL
    assert fit.rate == pytest.approx(pole, rel=1e-4)


# --- not exponential --------------------------------------------------------------------------


def test_plateau_is_trapping():
    # P_e = (1 - Z) exp(-G t) + Z: a bound state below the continuum's threshold keeps Z of the
    # population for ever (common practice: a pole of the resolvent off the continuum).  Over the
    # last quarter of the run (t >= 15 / G) the decaying part is below 1e-6, hence the tolerance.
    rate, plateau = 1.0, 0.1
    t = np.linspace(0.0, 20.0, 401)
    fit = fit_decay(t, (1 - plateau) * exponential(t, rate) + plateau, golden=rate)
    assert fit.rate is None and fit.verdict == TRAPPING
    assert "levels off at 0.1" in fit.reason
    assert fit.trapped_population == pytest.approx(plateau, abs=1e-6)


def test_small_plateau_is_reported_but_leaves_the_rate():
    # the same curve with Z = 1e-5: below 1% of the smallest population fitted (0.02) it bends
    # ln P_e by at most Z / 0.02 = 5e-4 in the window, so the rate stands (to ~1e-4, the bend's
    # effect on the slope) and Z is still reported (the decaying part is below 1e-13 there)
    rate, plateau = 1.0, 1e-5
    t = np.linspace(0.0, 40.0, 801)
    fit = fit_decay(t, (1 - plateau) * exponential(t, rate) + plateau, golden=rate)
    assert fit.verdict == EXPONENTIAL
    assert fit.rate == pytest.approx(rate, rel=1e-3)
    assert fit.trapped_population == pytest.approx(plateau, rel=1e-6)


def test_power_law_tail_is_not_a_plateau():
    # P_e = exp(-G t) + A (1 + t)^-3: the threshold of the continuum gives a power-law tail
    # (common practice: the branch point of the resolvent); it keeps falling, so it is no
    # trapped population, and at A = 1e-3 it leaves the exponential window alone
    t = np.linspace(0.0, 40.0, 801)
    excited = exponential(t, 1.0) + 1e-3 * (1 + t) ** -3.0
    assert trapped_population(t, excited, golden=1.0) is None
    assert fit_decay(t, excited, golden=1.0).verdict == EXPONENTIAL


def test_vacuum_rabi_oscillation_is_no_rate():
    # g0 = 5 >> l / 2 = 0.1: damped vacuum Rabi oscillations of the closed form
    width, strength = 0.2, 5.0
    t = np.linspace(0.0, 30.0, 601)
    fit = fit_decay(t, lorentzian_amplitude(t, width, strength), golden=strength)
    assert fit.rate is None and fit.verdict == OSCILLATION
    assert "rises again" in fit.reason and fit.largest_reversal > 0.1
    assert fit.trapped_population is None  # the Lorentzian continuum has no bound state


def test_single_mode_rabi_cycle_is_no_rate():
    # P_e = cos^2(g t): one level exchanging its excitation with one field mode (vacuum Rabi
    # oscillation, Jaynes-Cummings model; common practice)
    t = np.linspace(0.0, 20.0, 401)
    fit = fit_decay(t, np.cos(0.7 * t) ** 2, golden=0.1)
    assert fit.rate is None and fit.verdict == OSCILLATION


def test_gaussian_decay_is_curvature():
    # P_e = exp(-(t / tau)^2): the quadratic short-time decay carried to all times (common
    # practice: Gaussian decay of an inhomogeneously broadened line); ln P_e is a parabola, so
    # the quadratic takes the misfit up whole and the verdict is a rate that grows
    t = np.linspace(0.0, 8.0, 201)
    fit = fit_decay(t, np.exp(-(t / 2.0) ** 2), golden=0.5)
    assert fit.rate is None and fit.verdict == CURVATURE
    assert "speeds up" in fit.reason and fit.rate_drift > 1


def test_two_channel_decay_is_curvature():
    # P_e = (exp(-G1 t) + exp(-G2 t)) / 2: two decay channels of an incoherent mixture (common
    # practice); the local rate falls from (G1 + G2) / 2 towards G2
    t = np.linspace(0.0, 40.0, 801)
    fit = fit_decay(t, 0.5 * exponential(t, 1.0) + 0.5 * exponential(t, 0.3), golden=1.0)
    assert fit.rate is None and fit.verdict == CURVATURE
    assert "slows down" in fit.reason and fit.rate_drift < -0.1


def test_window_shorter_than_a_lifetime():
    # P_e = exp(-G t) up to G t_max = 0.8: the window 0.9 >= P_e spans 0.69 lifetimes
    t = np.linspace(0.0, 0.8, 81)
    fit = fit_decay(t, exponential(t, 1.0), golden=1.0)
    assert fit.rate is None and fit.verdict == SHORT_WINDOW
    assert fit.lifetimes == pytest.approx(0.8 - np.log(1 / 0.9), abs=0.02)
    assert "lifetimes" in fit.reason
    # the same decay followed to G t_max = 1.5 covers more than one lifetime and has its rate
    longer = np.linspace(0.0, 1.5, 151)
    assert fit_decay(longer, exponential(longer, 1.0), golden=1.0).rate == pytest.approx(1.0)


def test_too_few_samples():
    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0])  # three samples with 0.02 <= P_e <= 0.9
    fit = fit_decay(t, exponential(t, 1.0), golden=1.0)
    assert fit.rate is None and fit.verdict == TOO_FEW_SAMPLES and fit.samples == 3
    assert fit.summary()["residual"] is None


# --- excitation -------------------------------------------------------------------------------


def test_linear_excitation_gives_its_rate():
    t = np.linspace(0.0, 10.0, 101)
    fit = fit_excitation(t, 3e-3 * t, golden=3e-3)
    assert fit.verdict == LINEAR and fit.rate == pytest.approx(3e-3, rel=1e-10)
    assert "lifetimes" not in fit.summary()


def test_thermal_approach_gives_the_absorption_rate():
    # rate equations (Einstein; common practice): a ground-state detector in a thermal field
    # relaxes as P_e = P_eq (1 - exp(-Gamma t)), whose initial slope P_eq Gamma is the absorption
    # rate.  The line through P_e <= 0.05 P_eq lies below that slope by about Gamma T / 2 = 2.5%
    # (Taylor expansion of the exponential over the window), within 3% of it.
    equilibrium, relaxation = 0.12, 0.0131
    t = np.linspace(0.0, 600.0, 6001)
    excited = equilibrium * (1 - np.exp(-relaxation * t))
    fit = fit_excitation(t, excited, golden=equilibrium * relaxation)
    assert fit.verdict == LINEAR
    assert fit.rate == pytest.approx(equilibrium * relaxation, rel=0.03)
    assert fit.rate < equilibrium * relaxation


def test_counter_rotating_excitation_oscillates():
    # second-order vacuum excitation by the counter-rotating terms, P_e = A sin^2(D t / 2)
    # (first-order time-dependent perturbation theory, Sakurai, Modern Quantum Mechanics,
    # sec. 5.6): bounded and oscillating, no rate; the vacuum has no golden-rule excitation
    t = np.linspace(0.0, 60.0, 601)
    fit = fit_excitation(t, 1e-3 * np.sin(0.8 * t / 2) ** 2, golden=0.0)
    assert fit.rate is None and fit.verdict == OSCILLATION and "falls again" in fit.reason
