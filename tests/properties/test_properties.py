"""Property tests (hypothesis) over random valid scenarios: probabilities, norm, total momentum,
non-negative rates, invariance under a change of units, and the Mandelstam-Tamm bound.

Every scenario is drawn at random from ranges invented for the test; the discretisations are
kept small ([bath]/[grid] keys, short runs) so that the whole file stays fast.  Heavier variants
are marked slow.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, reject, settings
from hypothesis import strategies as st
from scipy import constants as const

from sim.solvers.exact.baths import bath_for
from sim.solvers.exact.star import level_amplitude, star_spectrum
from sim.physics.field import packet_for
from sim.io.writers import result_tables
from sim.physics.golden_rule import packet_rate, template_rate
from sim.config.registry import MODEL_NAMES
from sim.errors import ScenarioError
from sim.physics.checks import load_scenario, with_keys
from sim.solvers import solver_for
from sim.result import assemble, result_of
from sim.solvers.common import NORM_TOLERANCE, sample_times
from sim.solvers.exact.solver import ExactSolver

from ..builders import build_scenario

#: rounding slack for probabilities computed as sums of |amplitude|^2
ROUNDING = 1e-9

FAST = settings(deadline=None, max_examples=8, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])


def log_uniform(low: float, high: float):
    return st.floats(math.log(low), math.log(high)).map(math.exp)


def maybe(strategy, zero=0.0):
    """`zero` or a draw from `strategy` (the special value is a common edge case)."""
    return st.one_of(st.just(zero), strategy)


@st.composite
def natural_scenario(draw, method: str, dims: int | None = None, thermal: float = 0.0):
    """A valid scenario dict in natural units with a small discretisation for `method`.

    Scales are drawn relative to each other: gap / M_g, the packet's momentum spread and the
    smearing relative to the emitted momentum ~ gap, the field mass below it, the coupling from a
    golden-rule lifetime 1 / (r gap) with r = Gamma / Omega small, t_max a few lifetimes.
    `thermal`: the highest temperature drawn, in gaps (0: vacuum only).
    """
    dims = dims or draw(st.sampled_from([1, 3]))
    model = draw(st.sampled_from(MODEL_NAMES))
    ground_mass = draw(log_uniform(1.0, 20.0))
    gap = ground_mass * draw(log_uniform(0.02, 0.6))
    sigma = gap * draw(log_uniform(0.02, 0.4))
    speed = draw(st.floats(-0.6, 0.6))
    field = {"field__mass": draw(maybe(log_uniform(0.01 * gap, 0.3 * gap))),
             "field__smearing": draw(maybe(log_uniform(0.05 / gap, 1.0 / gap)))}
    if thermal:
        field["field__temperature"] = draw(maybe(log_uniform(0.1 * gap, thermal * gap)))
    lifetime = 1.0 / (gap * draw(log_uniform(1e-3, 0.03)))
    if dims == 1:
        momentum = speed * ground_mass
    else:
        direction = np.array(draw(st.lists(st.floats(-1, 1), min_size=3, max_size=3)))
        size = np.linalg.norm(direction)
        momentum = ([float(c) for c in direction / size * abs(speed) * ground_mass]
                    if size > 0.1 else abs(speed) * ground_mass)
    internal = "excited"
    if thermal and field["field__temperature"] >= 0.2 * gap and draw(st.booleans()):
        internal = "ground"
    t_max = draw(st.floats(0.5, 3.0)) * lifetime
    samples = draw(st.integers(21, 41))
    matching = None
    if model == "one-particle":
        matching = draw(st.sampled_from(["nonrelativistic", "rest-frame"]))
    discretisation = {f"{table}__{key}": value
                      for table, keys in small_discretisation(draw, method, dims).items()
                      for key, value in keys.items()}
    # hypothesis strategies cannot take fixtures: the plain function behind `make_scenario`
    return build_scenario(title="property test", model=model, ground_mass=ground_mass, gap=gap,
                          dims=dims, **field, strength=None, coupling__lifetime=lifetime,
                          coupling__matching=matching, width=0.5 / sigma, momentum=momentum,
                          internal=internal, method=method, t_max=t_max, samples=samples,
                          **discretisation)


def small_discretisation(draw, method: str, dims: int) -> dict:
    """[bath] / [grid] keys that keep one run well under a second or two."""
    if method == "exact":
        bath = {"modes": draw(st.integers(120, 300)), "sectors": draw(st.integers(3, 9))}
        if dims == 3:
            bath.update(sectors=draw(st.integers(2, 4)), angular_nodes=draw(st.integers(4, 6)))
        return {"bath": bath}
    if method == "markov":
        grid = {"points": draw(st.integers(11, 21))}
        if dims == 3:
            grid["directions"] = draw(st.integers(2, 4))
        return {"grid": grid}
    if method == "fock":
        return {"bath": {"fock_modes": draw(st.integers(3, 6)), "sectors": draw(st.integers(1, 3)),
                         "max_quanta": draw(st.integers(1, 2))},
                "coupling": {"rotating_wave": draw(st.booleans())}}
    return {}


def loaded(raw: dict):
    """The scenario, or a hypothesis rejection when the draw is invalid after all (it is rare:
    e.g. a field mass that closes the emission channel of a slow detector)."""
    try:
        return load_scenario(raw)
    except ScenarioError:
        reject()


def evolved(s):
    """(times, Evolution, Result) of one run of the scenario's own method."""
    solver = solver_for(s)
    evo = solver.run()
    return evo.times, evo, assemble(solver.name, s, evo)


# --- probabilities and norm -------------------------------------------------------------------


def check_probabilities(s):
    times, evo, result = evolved(s)
    assert np.all(np.isfinite(evo.excited))
    assert np.all(evo.excited >= -ROUNDING) and np.all(evo.excited <= 1 + ROUNDING)
    assert evo.excited[0] == pytest.approx(1.0 if s.packet.internal == "excited" else 0.0, abs=1e-12)
    # a momentum density is a density: non-negative, and the variance of a distribution too
    assert np.all(evo.momentum_density >= -ROUNDING * np.max(np.abs(evo.momentum_density)))
    p_var = evo.p_var[np.isfinite(evo.p_var)]
    assert np.all(p_var >= -ROUNDING * max(1.0, float(np.max(np.abs(p_var), initial=0.0))))
    if evo.purity is not None:
        purity = evo.purity[np.isfinite(evo.purity)]
        assert np.all(purity >= -ROUNDING) and np.all(purity <= 1 + ROUNDING)
    if evo.norm is not None:
        # excited + ground = 1: the solver's own total probability.  On a valid draw the drift
        # stays within the tolerance and no drift warning is raised (the warning path itself is
        # checked by test_an_injected_norm_drift_is_reported)
        drift = float(np.max(np.abs(evo.norm - 1.0)))
        assert drift <= NORM_TOLERANCE, drift
        assert not any(w.startswith("norm drift") for w in result.warnings)
        return drift
    return None


def test_an_injected_norm_drift_is_reported():
    # a drift of +-10 x NORM_TOLERANCE injected into a real evolution must produce the "norm
    # drift" warning; the untouched evolution and a drift of half the tolerance must not (one
    # small fixed exact run)
    raw = build_scenario(model="newton-wigner", ground_mass=1.0, gap=0.5, strength=0.05,
                         width=20.0, momentum=0.0, method="exact", t_max=100.0, samples=11,
                         field__mass=0.02, field__cutoff=1.0, bath__sectors=3)
    s = load_scenario(raw)
    solver = solver_for(s)
    evo = solver.run()
    assert evo.norm is not None
    clean = assemble(solver.name, s, evo)
    assert not any(w.startswith("norm drift") for w in clean.warnings)
    for factor, reported in ((10.0, True), (-10.0, True), (0.5, False)):
        bumped = evo.norm.copy()
        bumped[-1] += factor * NORM_TOLERANCE
        drifted = assemble(solver.name, s, dataclasses.replace(evo, norm=bumped))
        assert any(w.startswith("norm drift") for w in drifted.warnings) == reported, factor


@pytest.mark.slow  # evolves random scenarios: minutes on 2 cores
@FAST
@given(natural_scenario("perturbative", thermal=1.0))
def test_perturbative_probabilities(raw):
    check_probabilities(loaded(raw))


@pytest.mark.slow  # evolves random scenarios: minutes on 2 cores
@FAST
@given(natural_scenario("exact"))
def test_exact_probabilities_and_norm(raw):
    # the exact star solution is unitary sector by sector: its norm is 1 to rounding
    assert check_probabilities(loaded(raw)) < 1e-9


@pytest.mark.slow  # evolves random scenarios: minutes on 2 cores
@settings(FAST, max_examples=5)
@given(natural_scenario("markov", dims=1))
def test_markov_probabilities_and_trace_1d(raw):
    # the Lindblad generator is trace preserving; mesolve keeps the trace within NORM_TOLERANCE
    assert check_probabilities(loaded(raw)) <= NORM_TOLERANCE


@pytest.mark.slow
@settings(FAST, max_examples=5)
@given(natural_scenario("markov", dims=3))
def test_markov_probabilities_and_trace_3d(raw):
    assert check_probabilities(loaded(raw)) <= NORM_TOLERANCE


@pytest.mark.slow  # evolves random scenarios: minutes on 2 cores
@settings(FAST, max_examples=6)
@given(natural_scenario("fock"))
def test_fock_probabilities_and_norm(raw):
    # sesolve is not renormalised: at its ODE tolerances the drift stays within NORM_TOLERANCE
    assert check_probabilities(loaded(raw)) <= NORM_TOLERANCE


# --- total momentum -----------------------------------------------------------------------------


@pytest.mark.slow  # evolves random scenarios: minutes on 2 cores
@settings(FAST, max_examples=6)
@given(natural_scenario("exact", dims=1))
def test_exact_total_momentum_is_conserved_1d(raw):
    # total momentum P + sum_k k a_k^dag a_k is conserved (common practice: H is translation
    # invariant, each vertex exp(ik.X) a_k moves the detector by -k as it creates k): the
    # detector's <p>(t) from the run plus the field's <k>(t), recomputed sector by sector from the
    # bath's star spectra (sim.solvers.exact.star), equals the initial <P> at every recoil sample
    s = loaded(raw)
    solver = ExactSolver(s)
    times = sample_times(s)
    evo = solver.evolve(times)
    rows = np.flatnonzero(np.isfinite(evo.p_mean))
    field_momentum = np.zeros(rows.size)
    initial = 0.0
    for sector in solver.bath().sectors:
        spectrum = star_spectrum(sector.level_energy, sector.mode_energies, sector.couplings)
        modes = np.abs(spectrum.mode_amplitudes(times[rows])) ** 2
        field_momentum += sector.weight * modes @ sector.quanta
        initial += sector.weight * sector.momentum
    total = evo.p_mean[rows] * evo.norm + field_momentum
    scale = abs(initial) + packet_for(s).momentum_std + s.detector.gap
    np.testing.assert_allclose(total, initial, atol=1e-9 * scale)
    # and the recoil is not nothing: after a decay the detector's momentum has changed
    emitted = field_momentum[-1]
    assert abs(evo.p_mean[rows][-1] - initial) == pytest.approx(abs(emitted), rel=1e-6, abs=1e-12)


# --- rates --------------------------------------------------------------------------------------


@settings(FAST, max_examples=20)
@given(natural_scenario("perturbative", thermal=1.0), st.lists(st.floats(0, 3), min_size=1,
                                                                max_size=6))
def test_rates_are_non_negative_for_both_processes(raw, speeds):
    s = loaded(raw)
    # the same lambda for every variant (a lifetime would be re-read against each one's rate)
    matching = {"matching": s.coupling.matching} if s.coupling.matching else {}
    # (and no run table: only rates are asked for, so no sampling constraint applies)
    s = load_scenario({**s.source, "coupling": {"strength": s.coupling.strength, **matching},
                       "run": {"method": "perturbative"}})
    p = np.array(speeds) * s.detector.ground_mass
    emission = template_rate(with_keys(s, {"packet.internal": "excited"}), p)
    absorption = template_rate(with_keys(s, {"packet.internal": "ground"}), p)
    assert np.all(np.isfinite(emission)) and np.all(emission >= 0)
    assert np.all(np.isfinite(absorption)) and np.all(absorption >= 0)
    assert packet_rate(s) >= 0
    vacuum = with_keys(s, {"field.temperature": 0.0, "packet.internal": "excited"})
    if s.field.temperature == 0:
        # no quanta to absorb in the vacuum (Einstein relations, common practice: absorption
        # x n(w), n = 0)
        assert np.all(absorption == 0)
    else:
        # stimulated emission: the thermal factor 1 + n(w) >= 1 never lowers a rate
        assert np.all(emission >= template_rate(vacuum, p) * (1 - 1e-9))


# --- change of units ---------------------------------------------------------------------------

#: scipy.constants (CODATA) in eV, nm, s: hbar c and hbar, the atomic mass unit
HBAR_C_EV_NM = const.hbar * const.c / const.e * 1e9
HBAR_EV_S = const.hbar / const.e
U_EV = const.physical_constants["atomic mass constant energy equivalent in MeV"][0] * 1e6
K_B_EV = const.k / const.e


def in_units(raw: dict, gap_ev: float, style: str) -> dict:
    """The natural-unit scenario written with unit strings (energy unit E0 = gap = gap_ev eV).

    "A": eV, nm, ns, eV/c.  "B": the gap as a vacuum wavelength in um, masses in u and meV, the
    temperature in K, lengths in um and pm, momenta as wavenumbers in 1/um, times in ps and fs.
    Every dimensional key is written with a unit: a bare number would be read in gaps.
    """
    e0 = gap_ev / raw["detector"]["gap"]  # eV per natural energy unit
    length_nm, time_s = HBAR_C_EV_NM / e0, HBAR_EV_S / e0  # one natural length, time
    out = {table: dict(keys) for table, keys in raw.items() if isinstance(keys, dict)}
    out["title"] = raw["title"]
    d, f, p, c, r = (out[t] for t in ("detector", "field", "packet", "coupling", "run"))

    def momentum(value):
        if style == "A":
            return f"{value * e0!r} eV/c"
        return f"{value * e0 / HBAR_C_EV_NM * 1e3!r} 1/um"

    mom = p["momentum"]
    p["momentum"] = [momentum(x) for x in mom] if isinstance(mom, list) else momentum(mom)
    if style == "A":
        d["gap"] = f"{gap_ev!r} eV"
        d["ground_mass"] = f"{d['ground_mass'] * e0!r} eV"
        f["mass"] = f"{f['mass'] * e0!r} eV"
        f["temperature"] = f"{f.get('temperature', 0.0) * e0!r} eV"
        f["smearing"] = f"{f['smearing'] * length_nm!r} nm"
        p["width"] = f"{p['width'] * length_nm!r} nm"
        r["t_max"] = f"{r['t_max'] * time_s * 1e9!r} ns"
        c["lifetime"] = f"{c['lifetime'] * time_s * 1e9!r} ns"
    else:
        d["gap"] = f"{2 * math.pi * HBAR_C_EV_NM / gap_ev * 1e-3!r} um"
        d["ground_mass"] = f"{d['ground_mass'] * e0 / U_EV!r} u"
        f["mass"] = f"{f['mass'] * e0 * 1e3!r} meV"
        f["temperature"] = f"{f.get('temperature', 0.0) * e0 / K_B_EV!r} K"
        f["smearing"] = f"{f['smearing'] * length_nm * 1e3!r} pm"
        p["width"] = f"{p['width'] * length_nm * 1e-3!r} um"
        r["t_max"] = f"{r['t_max'] * time_s * 1e12!r} ps"
        c["lifetime"] = f"{c['lifetime'] * time_s * 1e15!r} fs"
    return out


def check_unit_invariance(raw: dict, gap_ev: float):
    natural = loaded(raw)
    e0 = gap_ev / raw["detector"]["gap"]
    reference = result_tables(result_of(solver_for(natural)))["population"]
    for style, unit_s in (("A", 1e-9), ("B", 1e-12)):
        s = load_scenario(in_units(raw, gap_ev, style))
        assert s.units is not None
        table = result_tables(result_of(solver_for(s)))["population"]
        # output times are in the unit written for t_max (ns, ps): back to natural units, where
        # the time unit is hbar / E0 with E0 = gap_ev / gap eV
        natural_t = np.asarray(table["t"]) * unit_s / (HBAR_EV_S / e0)
        np.testing.assert_allclose(natural_t, reference["t"], rtol=1e-9)
        np.testing.assert_allclose(table["excited"], reference["excited"], rtol=1e-7, atol=1e-9)


@pytest.mark.slow  # evolves random scenarios: minutes on 2 cores
@settings(FAST, max_examples=6)
@given(natural_scenario("perturbative", thermal=1.0), log_uniform(0.1, 10.0))
def test_perturbative_population_is_invariant_under_a_change_of_units(raw, gap_ev):
    check_unit_invariance(raw, gap_ev)


@pytest.mark.slow  # evolves random scenarios: minutes on 2 cores
@settings(FAST, max_examples=3)
@given(natural_scenario("exact", dims=1), log_uniform(0.1, 10.0))
def test_exact_population_is_invariant_under_a_change_of_units(raw, gap_ev):
    check_unit_invariance(raw, gap_ev)


@pytest.mark.slow
@settings(FAST, max_examples=4)
@given(st.sampled_from(["exact", "markov", "fock"]).flatmap(natural_scenario),
       log_uniform(0.1, 10.0))
def test_every_method_is_invariant_under_a_change_of_units(raw, gap_ev):
    check_unit_invariance(raw, gap_ev)


# --- Mandelstam-Tamm ----------------------------------------------------------------------------


@settings(FAST, max_examples=10)
@given(natural_scenario("exact"))
def test_sector_survival_respects_the_mandelstam_tamm_bound(raw):
    # quantum speed limit (Mandelstam & Tamm 1945; common practice): a state of energy spread dE
    # survives with P(t) >= cos^2(dE t) for t < pi / (2 dE).  For the star sector started in |e>,
    # dE^2 = <H^2> - <H>^2 = sum_k |g_k|^2 (= Int J_P).  Sectors from sim.solvers.exact.baths,
    # c(t) from sim.solvers.exact.star.level_amplitude.
    s = loaded(raw)
    bath = bath_for(s, float(sample_times(s)[-1]))
    for sector in bath.sectors:
        spread = math.sqrt(float(np.sum(np.abs(sector.couplings) ** 2)))  # from the couplings
        t = np.linspace(0.0, 0.999 * math.pi / (2 * spread), 241)
        survival = np.abs(level_amplitude(sector.level_energy, sector.mode_energies,
                                          sector.couplings, t)) ** 2
        assert np.all(survival >= np.cos(spread * t) ** 2 - 1e-12)
        # the bound is tight in the Zeno region, 1 - P = dE^2 t^2 + O(t^4): the check has teeth
        early = t[1]
        assert 1 - survival[1] == pytest.approx((spread * early) ** 2, rel=0.01)
