"""Rates fitted to simulated population curves, and whether the curve has a rate at all.

A decay has a rate only where it is exponential, P_e(t) = A exp(-Gamma t): ln P_e is then a
straight line in t.  `fit_decay` fits that line to the samples in a window of populations and
tests it against what a quadratic fit of the same samples finds, on the scale of the smaller of
the fitted and golden-rule rates (`rate_scale`):

* a misfit of ln P_e that leaves the rate uncertain (`rate_uncertainty`) and that the quadratic
  does not take up, or with P_e climbing back, is an oscillation (reversible exchange of the
  excitation with the field); a fast ripple that averages out leaves the rate standing;
* a smooth bend is a decay rate that changes across the window ("curvature");
* a late-time plateau of P_e far above exp(-Gamma t) (`trapped_population`) is trapping in a
  state below the field's threshold, or in a thermal field its steady state;
* a window over which P_e falls by less than a factor e cannot tell an exponential from anything
  else ("short window").

A ground-state packet has an excitation rate where P_e = P_0 + R t rises linearly
(`fit_excitation`), tested the same way.

Noise model: every solver's P_e is deterministic and trusted to POPULATION_NOISE (absolute), so
sigma(ln P_e) = POPULATION_NOISE / P_e.  A departure counts only when it exceeds NOISE_SIGMAS of
its noise; the reduced chi-square of the line under this model is reported, not used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..solvers.common import NORM_TOLERANCE

#: the exponential part of a decay curve: samples with the excited population in this range
#: (above it the short-time quadratic region, below it the long-time tail)
FIT_WINDOW = (0.02, 0.9)
#: the linear part of an excitation curve: samples with P_e <= this share of P_e(t_max).  The
#: approach to a steady state, P_eq (1 - exp(-Gamma t)), bends the line by Gamma T ~ this share
#: across the window, half of MAX_RATE_DRIFT
EXCITATION_WINDOW = 0.05
#: absolute accuracy of a computed population: the solvers warn when the total probability
#: drifts by more (sim.solvers.common.NORM_TOLERANCE), so smaller features are not physics
POPULATION_NOISE = NORM_TOLERANCE
#: a departure from the line counts when it exceeds this many standard errors of the noise
NOISE_SIGMAS = 5.0
#: samples a fit needs: a quadratic has three coefficients, and its residual two degrees of
#: freedom more to be told from the line's
MIN_FIT_SAMPLES = 5
#: an exponential is told from other shapes only once P_e has fallen by a factor e along the
#: fitted line: Gamma_fit (t_end - t_start) >= MIN_LIFETIMES
MIN_LIFETIMES = 1.0
#: largest uncertainty the misfit leaves on the fitted rate, relative to the rate scale
#: (`rate_uncertainty`), for the curve to have one rate: a rate known to 5% still tells the
#: golden rule from its strong-coupling failures, which move it by tens of percent
MAX_RATE_UNCERTAINTY = 0.05
#: a misfit is an oscillation, not a smooth bend, when the quadratic leaves more than this share
#: of it (a bend is taken up almost whole by the quadratic, wiggles of either sign are not)
WIGGLE_SHARE = 0.5
#: largest change of the local rate -d ln P_e / dt (dP_e / dt for an excitation) across the
#: window, on the quadratic, relative to the rate scale, for the window to have one rate (the
#: weak-coupling runs of every method drift by under 3%, measured; a plateau or two decay
#: channels by tens of percent)
MAX_RATE_DRIFT = 0.1
#: the plateau is looked for over this last share of the run
PLATEAU_SHARE = 0.25
#: a plateau changes by at most this share of itself over PLATEAU_SHARE of the run.  A power-law
#: tail t^-a (the field's threshold) changes by 1 - (1 - PLATEAU_SHARE)^a there, more than this
#: for every a >= 0.4, and so is not taken for a plateau
PLATEAU_CHANGE = 0.1
#: a plateau lies at least this factor above the exponential exp(-Gamma t) at the golden-rule
#: rate at the start of the last part (an exponential itself never qualifies)
PLATEAU_EXCESS = 10.0
#: a plateau spoils the fit when it reaches this share of the smallest population fitted: it
#: then bends ln P_e = ln(exp(-Gamma t) + Z) by more than about this much
TRAPPED_SHARE = 0.01

#: verdicts: the curve has a rate ...
EXPONENTIAL = "exponential"
LINEAR = "linear"
#: ... or the reason it has none
TRAPPING = "trapping"
THERMAL = "thermal steady state"
OSCILLATION = "oscillation"
CURVATURE = "curvature"
SHORT_WINDOW = "short window"
TOO_FEW_SAMPLES = "too few samples"
NO_RISE = "no rise"

#: the fitted models, as written into the summary
DECAY_MODEL = "ln P_e = ln A - Gamma t"
EXCITATION_MODEL = "P_e = P_0 + R t"
NOISE_MODEL = (f"sigma(P_e) = {POPULATION_NOISE:g} absolute on every sample (the solvers' norm "
               "tolerance); sigma(ln P_e) = sigma(P_e) / P_e")


@dataclass(frozen=True)
class LineTest:
    """A least-squares line y = a + b t through samples, and what a quadratic finds beyond it.

    Parameters
    ----------
    slope : float
        b, the line's slope (units of y per time unit).
    span : float
        t_end - t_start of the samples (time units).
    residual : float
        rms of y about the line (units of y).
    bend_residual : float
        rms of y about the least-squares quadratic (units of y).
    runs : int
        Stretches of one sign in the residuals about the line (1 + the sign changes): the number
        of independent misfits when neighbouring residuals are correlated.
    slope_change : float
        Change of dy/dt from the first to the last sample on the quadratic, 4 c2 (2 / span)^2
        span with c2 its coefficient in the window coordinate u = (2 t - t_0 - t_1) / span
        (units of y per time unit).
    slope_change_noise : float
        Standard error of `slope_change` under the noise model (same units).
    noise : float
        rms of the noise model's sigma over the samples (units of y).
    chi2_reduced : float
        Sum of (residual_i / sigma_i)^2 over n - 2 degrees of freedom (dimensionless).
    """

    slope: float
    span: float
    residual: float
    bend_residual: float
    runs: int
    slope_change: float
    slope_change_noise: float
    noise: float
    chi2_reduced: float


def line_test(t: np.ndarray, y: np.ndarray, sigma: np.ndarray) -> LineTest:
    """Fit y(t) with a line and a quadratic (ordinary least squares) and compare them.

    Both fits use u = (2 t - t_0 - t_1) / (t_1 - t_0) in [-1, 1] (well conditioned whatever the
    times): y = a0 + a1 u and y = c0 + c1 u + c2 u^2, so the slope is b = 2 a1 / span and the
    quadratic's slope changes by 8 c2 / span across the window.  The standard error of c2 under
    independent noise sigma_i is sqrt(Sum_i (V+_{2i} sigma_i)^2), V+ the pseudo-inverse of the
    quadratic's design matrix.

    Parameters
    ----------
    t : ndarray
        At least three sample times, increasing (time units).
    y : ndarray
        The values fitted (any unit).
    sigma : ndarray
        Standard error of each y (same unit).

    Returns
    -------
    LineTest
    """
    span = float(t[-1] - t[0])
    u = (2.0 * t - (t[0] + t[-1])) / span
    line = np.polynomial.polynomial.polyfit(u, y, 1)
    quad = np.polynomial.polynomial.polyfit(u, y, 2)
    off_line = y - np.polynomial.polynomial.polyval(u, line)
    off_quad = y - np.polynomial.polynomial.polyval(u, quad)
    c2_noise = math.sqrt(float(np.sum((np.linalg.pinv(np.vander(u, 3, increasing=True))[2]
                                       * sigma) ** 2)))
    return LineTest(slope=float(2.0 * line[1] / span), span=span,
                    residual=_rms(off_line), bend_residual=_rms(off_quad),
                    runs=1 + int(np.count_nonzero(np.diff(np.sign(off_line[off_line != 0])))),
                    slope_change=float(8.0 * quad[2] / span),
                    slope_change_noise=8.0 * c2_noise / span, noise=_rms(sigma),
                    chi2_reduced=float(np.sum((off_line / sigma) ** 2) / (len(t) - 2)))


def _rms(values: np.ndarray) -> float:
    return float(np.sqrt(np.mean(np.square(values))))


@dataclass(frozen=True)
class RateFit:
    """A rate fitted to a population curve, and the verdict whether the curve has one.

    Parameters
    ----------
    model : str
        The fitted form, DECAY_MODEL or EXCITATION_MODEL.
    verdict : str
        EXPONENTIAL or LINEAR when the curve has the rate, else the reason it has none
        (TRAPPING, THERMAL, OSCILLATION, CURVATURE, SHORT_WINDOW, TOO_FEW_SAMPLES, NO_RISE).
    reason : str or None
        The verdict in a sentence, with its numbers; None when the curve has the rate.
    bounds : (float, float)
        The populations bounding the window (dimensionless).
    samples : int
        Samples in the window.
    t_start, t_end : float or None
        First and last sample time in the window (time units); None when it is empty.
    line_rate : float or None
        Gamma_fit = -d ln P_e / dt (decay) or R = dP_e / dt (excitation) of the least-squares
        line (inverse time units), whatever the verdict; None with too few samples.
    residual : float or None
        rms of ln P_e (decay, dimensionless) or of P_e (excitation) about the line.
    rate_uncertainty : float or None
        `rate_uncertainty` of the line: how far its misfit leaves the rate undetermined, over
        Gamma_s = `rate_scale`(line_rate, golden-rule rate) (inf when neither is positive).
    rate_drift : float or None
        Change of the local rate across the window on the quadratic, over Gamma_s (negative:
        the rate falls, e.g. a decay slowing down).
    chi2_reduced : float or None
        Reduced chi-square of the line under NOISE_MODEL.
    largest_reversal : float or None
        Largest rise of P_e in the window of a decay (largest fall of an excitation), over all
        sample pairs in time order (dimensionless).
    lifetimes : float or None
        Gamma_fit T: lifetimes the decay window spans (None for an excitation).
    trapped_population : float or None
        The late-time plateau of a decay curve in vacuum (`trapped_population`), else None.
    """

    model: str
    verdict: str
    reason: str | None
    bounds: tuple[float, float]
    samples: int
    t_start: float | None = None
    t_end: float | None = None
    line_rate: float | None = None
    residual: float | None = None
    rate_uncertainty: float | None = None
    rate_drift: float | None = None
    chi2_reduced: float | None = None
    largest_reversal: float | None = None
    lifetimes: float | None = None
    trapped_population: float | None = None

    @property
    def rate(self) -> float | None:
        """The fitted rate (inverse time units) when the curve has one, else None."""
        return self.line_rate if self.verdict in (EXPONENTIAL, LINEAR) else None

    def summary(self) -> dict:
        """The fit as summary["fit"] holds it.

        Returns
        -------
        dict
            model, verdict, reason, t_start and t_end (time units), population_bounds, samples,
            line_rate (inverse time units), residual, rate_uncertainty, rate_drift,
            chi2_reduced with noise_model, largest_reversal, and lifetimes for a decay.
        """
        out = {"model": self.model, "verdict": self.verdict, "reason": self.reason,
               "t_start": self.t_start, "t_end": self.t_end,
               "population_bounds": list(self.bounds), "samples": self.samples,
               "line_rate": self.line_rate, "residual": self.residual,
               "rate_uncertainty": self.rate_uncertainty, "rate_drift": self.rate_drift,
               "chi2_reduced": self.chi2_reduced, "noise_model": NOISE_MODEL,
               "largest_reversal": self.largest_reversal}
        if self.model == DECAY_MODEL:
            out["lifetimes"] = self.lifetimes
        return out


def trapped_population(times: np.ndarray, excited: np.ndarray, golden: float) -> float | None:
    """The late-time plateau Z of a decay curve, where it has one.

    Z is the mean of P_e over the last PLATEAU_SHARE of the run, taken as a plateau when there
    (i) P_e changes by at most PLATEAU_CHANGE Z along its least-squares line, (ii) Z exceeds
    PLATEAU_EXCESS exp(-Gamma t_1), t_1 the start of that part and Gamma the golden-rule rate,
    and (iii) Z exceeds NOISE_SIGMAS POPULATION_NOISE.  A decaying exponential fails (i) or (ii),
    a power-law tail fails (i).

    Parameters
    ----------
    times : ndarray
        Sample times (time units).
    excited : ndarray
        Excited population at those times (dimensionless).
    golden : float
        The golden-rule rate (inverse time units); no plateau is looked for when it is <= 0.

    Returns
    -------
    float or None
        Z (dimensionless), None where the curve has no plateau or its last part has fewer than
        MIN_FIT_SAMPLES samples.
    """
    times, excited = np.asarray(times, dtype=float), np.asarray(excited, dtype=float)
    if not golden > 0:
        return None
    last = times >= times[-1] - PLATEAU_SHARE * (times[-1] - times[0])
    t, p = times[last], excited[last]
    if len(t) < MIN_FIT_SAMPLES:
        return None
    level = float(np.mean(p))
    change = abs(np.polynomial.polynomial.polyfit(t, p, 1)[1]) * (t[-1] - t[0])
    if (level <= NOISE_SIGMAS * POPULATION_NOISE or change > PLATEAU_CHANGE * level
            or level < PLATEAU_EXCESS * math.exp(-golden * t[0])):
        return None
    return level


def fit_decay(times: np.ndarray, excited: np.ndarray, golden: float, window=FIT_WINDOW,
              thermal: bool = False) -> RateFit:
    """Decay rate of the exponential part of a decay curve, if the curve is exponential there.

    Least-squares line ln P_e = ln A - Gamma_fit t over the samples with
    window[0] <= P_e <= window[1], tested in this order (the first that applies is the verdict):
    a plateau (`trapped_population`) reaching TRAPPED_SHARE of the smallest population fitted
    (TRAPPING; THERMAL in a thermal field); fewer than MIN_FIT_SAMPLES samples; a misfit beyond
    the noise that leaves the rate uncertain by more than MAX_RATE_UNCERTAINTY Gamma_s
    (`rate_uncertainty`) and that the quadratic does not take up or with P_e rising again
    (OSCILLATION); Gamma_fit T < MIN_LIFETIMES (SHORT_WINDOW); a
    change of the local rate across the window beyond MAX_RATE_DRIFT Gamma_s and the noise
    (CURVATURE).  T = t_end - t_start; Gamma_s = `rate_scale`(Gamma_fit, golden).

    Parameters
    ----------
    times : ndarray
        Sample times (time units).
    excited : ndarray
        Excited population at those times (dimensionless).
    golden : float
        The golden-rule rate (inverse time units): with Gamma_fit it sets the scale of the
        tests, alone it sets the plateau's test.
    window : (float, float)
        The populations bounding the exponential part.
    thermal : bool
        Whether the field is thermal (a plateau is then its steady state, not trapping).

    Returns
    -------
    RateFit
        Its `rate` is Gamma_fit (inverse time units) when the verdict is EXPONENTIAL, else None.
    """
    times, excited = np.asarray(times, dtype=float), np.asarray(excited, dtype=float)
    plateau = trapped_population(times, excited, golden)
    keep = (excited >= window[0]) & (excited <= window[1])
    t, p = times[keep], excited[keep]
    shared = dict(model=DECAY_MODEL, bounds=tuple(window), samples=int(len(t)),
                  t_start=float(t[0]) if len(t) else None,
                  t_end=float(t[-1]) if len(t) else None,
                  trapped_population=None if thermal else plateau)
    spoils = plateau is not None and (not len(p) or plateau >= TRAPPED_SHARE * p.min())
    verdict, reason = _plateau_verdict(plateau, thermal) if spoils else (None, None)
    if len(t) < MIN_FIT_SAMPLES:
        return RateFit(verdict=verdict or TOO_FEW_SAMPLES,
                       reason=reason or _too_few(len(t), window), **shared)
    test = line_test(t, np.log(p), POPULATION_NOISE / p)
    numbers = _fit_numbers(test, -1.0, golden, largest_rise(p))
    numbers["lifetimes"] = -test.slope * test.span
    if verdict is None:
        verdict, reason = _oscillation(test, numbers, "ln P_e", "rises")
    if verdict is None and numbers["lifetimes"] < MIN_LIFETIMES:
        verdict = SHORT_WINDOW
        reason = (f"the window spans {numbers['lifetimes']:.3g} lifetimes of its own rate "
                  f"(P_e falls by a factor {math.exp(numbers['lifetimes']):.3g} along the line); "
                  f"telling an exponential from other shapes needs at least {MIN_LIFETIMES:g}")
    if verdict is None:
        verdict, reason = _curvature(test, numbers, "decay")
    return RateFit(verdict=verdict or EXPONENTIAL, reason=reason, **shared, **numbers)


def fit_excitation(times: np.ndarray, excited: np.ndarray, golden: float,
                   share: float = EXCITATION_WINDOW) -> RateFit:
    """Initial excitation rate of a ground-state packet, if P_e rises linearly.

    Least-squares line P_e = P_0 + R t over the samples with P_e <= share P_e(t_max), tested as
    `fit_decay` tests its line (misfit, P_e falling again, rate drift), on the scale of
    `rate_scale`(R, golden-rule excitation rate); NO_RISE when P_e(t_max) or the rise R T of
    the window is within the noise.

    Parameters
    ----------
    times : ndarray
        Sample times (time units).
    excited : ndarray
        Excited population at those times (dimensionless).
    golden : float
        The golden-rule excitation rate (inverse time units).
    share : float
        The window's top as a share of P_e(t_max).

    Returns
    -------
    RateFit
        Its `rate` is R = dP_e/dt (inverse time units) when the verdict is LINEAR, else None.
    """
    times, excited = np.asarray(times, dtype=float), np.asarray(excited, dtype=float)
    top = share * float(excited[-1])
    keep = excited <= top
    t, p = times[keep], excited[keep]
    shared = dict(model=EXCITATION_MODEL, bounds=(0.0, top), samples=int(len(t)),
                  t_start=float(t[0]) if len(t) else None,
                  t_end=float(t[-1]) if len(t) else None)
    noise = NOISE_SIGMAS * POPULATION_NOISE
    if excited[-1] <= noise:
        return RateFit(verdict=NO_RISE, reason=f"P_e(t_max) = {excited[-1]:.3g} is within the "
                       "noise of zero: nothing was excited", **shared)
    if len(t) < MIN_FIT_SAMPLES:
        return RateFit(verdict=TOO_FEW_SAMPLES, reason=_too_few(len(t), (0.0, top)), **shared)
    test = line_test(t, p, np.full(len(p), POPULATION_NOISE))
    numbers = _fit_numbers(test, 1.0, golden, largest_rise(-p))
    verdict, reason = _oscillation(test, numbers, "P_e", "falls")
    if verdict is None:
        verdict, reason = _curvature(test, numbers, "excitation")
    if verdict is None and test.slope * test.span <= noise:
        verdict, reason = NO_RISE, (f"P_e rises by {test.slope * test.span:.3g} over the "
                                    "window, within the noise")
    return RateFit(verdict=verdict or LINEAR, reason=reason, **shared, **numbers)


def largest_rise(values: np.ndarray) -> float:
    """Largest increase of a sequence over any pair of its entries in order.

    max_j (v_j - min_{i <= j} v_i).

    Parameters
    ----------
    values : ndarray
        The sequence (e.g. P_e at increasing times; dimensionless).

    Returns
    -------
    float
        >= 0 (same unit as `values`); 0 for a non-increasing sequence.
    """
    return float(np.max(values - np.minimum.accumulate(values)))


def rate_scale(line_rate: float, golden: float) -> float:
    """The rate a misfit or a drift of the line is judged against.

    The smaller of the line's rate and the golden-rule rate, of those that are > 0: at weak
    coupling the two agree; at strong coupling, where they part, a departure is judged against
    the rate it could spoil (an oscillating curve can show a line far slower than the golden
    rule, whose scale would hide the misfit).

    Parameters
    ----------
    line_rate : float
        The line's rate Gamma_fit or R (inverse time units).
    golden : float
        The golden-rule rate (inverse time units).

    Returns
    -------
    float
        min over the positive ones of (line_rate, golden); 0 when neither is positive.
    """
    positive = [r for r in (line_rate, golden) if r > 0]
    return min(positive) if positive else 0.0


def rate_uncertainty(test: LineTest, scale: float) -> float:
    """How far the misfit of a line leaves its rate undetermined, relative to `scale`.

    sqrt(12) r / (T sqrt(runs)) / scale, r the rms residual, T the span, runs the stretches of
    one sign in the residuals.  It is the standard error of a least-squares slope,
    r / (rms(t - mean t) sqrt(n)) with rms(t - mean t) = T / sqrt(12) on a uniform window, with
    the n samples replaced by the runs: residuals of one sign belong to one misfit (an
    oscillation's half period, a bend), independent samples would give about n / 2 runs
    (Wald-Wolfowitz runs count; common practice for correlated residuals).  A slow oscillation
    has few runs and moves the slope; a fast ripple has many and averages out.

    Parameters
    ----------
    test : LineTest
        The line and its residuals.
    scale : float
        The rate scale (`rate_scale`; inverse time units).

    Returns
    -------
    float
        Dimensionless; inf when `scale` is 0.
    """
    if not scale > 0:
        return math.inf
    return math.sqrt(12.0) * test.residual / (test.span * math.sqrt(test.runs)) / scale


def _fit_numbers(test: LineTest, direction: float, golden: float, reversal: float) -> dict:
    """The RateFit entries of a line test whose rate is `direction` times its slope (-1 for a
    decay of ln P_e, +1 for a rise of P_e), judged against `rate_scale`."""
    line_rate = direction * test.slope
    scale = rate_scale(line_rate, golden)
    return {"line_rate": line_rate, "residual": test.residual,
            "rate_uncertainty": rate_uncertainty(test, scale),
            "rate_drift": direction * test.slope_change / scale if scale > 0 else 0.0,
            "chi2_reduced": test.chi2_reduced, "largest_reversal": reversal}


def _plateau_verdict(plateau: float, thermal: bool) -> tuple[str, str]:
    """(THERMAL or TRAPPING, reason) of a plateau that spoils the decay fit."""
    if thermal:
        return THERMAL, (f"P_e relaxes to the thermal steady state {plateau:.3g} instead of "
                         "decaying to zero, so ln P_e is not a straight line")
    return TRAPPING, (f"P_e levels off at {plateau:.3g} over the last {PLATEAU_SHARE:.0%} of the "
                      "run instead of decaying (population trapped below the field's "
                      "threshold), so there is no single rate")


def _oscillation(test: LineTest, numbers: dict, fitted: str,
                 reverses: str) -> tuple[str | None, str | None]:
    """(OSCILLATION, reason) when the misfit is too large, beyond the noise and not a bend (P_e
    reverses, or the quadratic leaves more than WIGGLE_SHARE of it); else (None, None)."""
    misfit = numbers["rate_uncertainty"]
    reversed_ = numbers["largest_reversal"] > NOISE_SIGMAS * POPULATION_NOISE
    if not (misfit > MAX_RATE_UNCERTAINTY and test.residual > NOISE_SIGMAS * test.noise and (
            reversed_ or test.bend_residual > WIGGLE_SHARE * test.residual)):
        return None, None
    share = (f"which leaves its rate uncertain by {misfit:.0%} (at most "
             f"{MAX_RATE_UNCERTAINTY:.0%} for one rate)" if math.isfinite(misfit)
             else "and the line has no positive rate")
    return OSCILLATION, (
        f"{fitted} departs from its straight line by {test.residual:.3g} rms, {share}"
        + (f", and P_e {reverses} again by {numbers['largest_reversal']:.3g}" if reversed_
           else ", in wiggles a quadratic does not take up"))


def _curvature(test: LineTest, numbers: dict, process: str) -> tuple[str | None, str | None]:
    """(CURVATURE, reason) when the rate drifts by more than MAX_RATE_DRIFT of the scale and
    beyond the noise; else (None, None)."""
    drift = numbers["rate_drift"]
    if not (abs(drift) > MAX_RATE_DRIFT
            and abs(test.slope_change) > NOISE_SIGMAS * test.slope_change_noise):
        return None, None
    way = "speeds up" if drift > 0 else "slows down"
    return CURVATURE, (f"the {process} rate {way} by {abs(drift):.0%} across the window (at "
                       f"most {MAX_RATE_DRIFT:.0%} of the rate scale for one rate)")


def _too_few(count: int, bounds) -> str:
    """The reason of TOO_FEW_SAMPLES."""
    return (f"{count} sample{'s' if count != 1 else ''} with {bounds[0]:.3g} <= P_e <= "
            f"{bounds[1]:.3g}; a fit needs at least {MIN_FIT_SAMPLES}")
