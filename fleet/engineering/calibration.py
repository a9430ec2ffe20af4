"""Forecast bands calibrated on the fleet's own history.

A trend fitted to a capacitor's readings carries parameter uncertainty only. Its
projection is also wrong in ways the fit cannot see: ageing paths accelerate late
in life (film loses electrode area faster as self-healing clears more of it;
electrolytics dry out), the future stress differs from the past, and the
temperature correction is imperfect. Those errors are measured, not assumed:

1. Rolling-origin evaluation (Tashman, Int. J. Forecasting 16, 2000; from
   memory): at past cut-offs the fleet is refitted with only the readings taken
   before, and each later reading is compared with the path projected to its
   date at the long-run stress rate.
2. The error e of a later reading, h calendar hours (d stress hours) after
   the capacitor's newest reading, is modelled as
       e = bias x + acceleration x h + extra_slope h + curvature h^2 + eps,
       var(eps) = V + (spread x)^2 + (extra_sd h)^2,
   with x = slope d the capacitor's own projected change and V the fit's own
   variance (path and meter). `acceleration` is the relative growth of a
   capacitor's own slope with time ahead (an exponential path a (exp(t/T) - 1)
   gives 1 / 2T to first order); `extra_slope`, `curvature` and `extra_sd` carry
   what its own slope cannot know, such as a path still flat today that bends
   later, common to the family and so reckoned in calendar time. Per family of
   parts (dielectric): the four mean terms by weighted least squares, the two
   spreads by the method of moments (the excess squared error regressed on
   x^2 and h^2).
3. The calibrated forecast's path beyond the newest reading is the fit's plus
   those terms, its variance the fit's plus theirs; the crossing quantiles are
   then found on a grid of times ahead (`calibrated_crossing_quantiles`). This
   is split conformal prediction in spirit (Vovk, Gammerman and Shafer 2005;
   Angelopoulos and Bates 2021; from memory): held-out errors set the width and
   the shift, here through a six-number family so that they carry to every
   horizon and limit.

Families with too little history keep conservative defaults (the future slope
1.3 times the fit's, with a 75 % spread; no acceleration or common term: our
choice, to be replaced by the fleet's own figures). Capacitance loss speeds up
with age in both dielectrics (self-healing clears film area faster as it goes,
an electrolytic dries out past a knee), so a slope read off the past
understates the next one: every calibration of our three fleets (two simulated
from the physics, the demo's) found a bias of +0.11 to +1.64 and a spread of
35 % to 260 % (measured 2026-12-04, `docs/engineering.md` section 7); with no
bias and 35 %, the defaults until then, the demo's first back-test cut-off put
53 % of the crossings before P10.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .trends import MODEL_LOG, TrendFit, crossing_quantiles


@dataclass(frozen=True)
class CalibrationSettings:
    default_bias: float = 0.3
    default_spread: float = 0.75
    min_spread: float = 0.10  # never claim to know a future slope better than +/-10 %
    bias_range: tuple[float, float] = (-0.5, 3.0)
    acceleration_range: tuple[float, float] = (0.0, 1e-3)  # per hour ahead: slopes never assumed to ease
    curvature_range: tuple[float, float] = (-1e-8, 0.0)  # per hour squared: paths never assumed to bend up
    min_bend_span_h: float = 8766.0  # a year of later readings before acceleration and curvature are estimated
    max_spread: float = 3.0
    min_capacitors: int = 20  # with later readings, per family, before its own figures are used
    jump_fraction: float = 0.25  # a later reading this far off is a slip or a failure, not ageing


@dataclass(frozen=True)
class ForecastCalibration:
    """Per family (length F): the calibration's four numbers, and what stood behind them.

    extra_slope and extra_sd are in z units (fraction of rated, or its log) per
    calendar hour, curvature per calendar hour squared, acceleration per
    calendar hour ahead.
    """

    slope_bias: np.ndarray
    slope_spread: np.ndarray
    extra_slope: np.ndarray
    extra_sd: np.ndarray
    acceleration: np.ndarray
    curvature: np.ndarray
    capacitors: np.ndarray
    residuals: np.ndarray

    def per_capacitor(self, family) -> np.ndarray:
        """(6, G) of bias, spread, extra slope, extra sd, acceleration and curvature per capacitor."""
        family = np.asarray(family, np.int64)
        names = ("slope_bias", "slope_spread", "extra_slope", "extra_sd", "acceleration", "curvature")
        return np.stack([np.asarray(getattr(self, name), float)[family] for name in names])


def default_calibration(n_families: int, settings: CalibrationSettings | None = None) -> ForecastCalibration:
    settings = settings or CalibrationSettings()
    return ForecastCalibration(
        slope_bias=np.full(n_families, settings.default_bias),
        slope_spread=np.full(n_families, settings.default_spread),
        extra_slope=np.zeros(n_families),
        extra_sd=np.zeros(n_families),
        acceleration=np.zeros(n_families),
        curvature=np.zeros(n_families),
        capacitors=np.zeros(n_families, int),
        residuals=np.zeros(n_families, int),
    )


def _solve_2x2(a11, a12, a22, r1, r2):
    """Per-family 2x2 normal equations; a singular family gets the first term alone."""
    det = a11 * a22 - a12 * a12
    ok = det > 1e-9 * np.abs(a11 * a22)
    with np.errstate(invalid="ignore", divide="ignore"):
        first = np.where(ok, (a22 * r1 - a12 * r2) / np.where(ok, det, 1.0), r1 / a11)
        second = np.where(ok, (a11 * r2 - a12 * r1) / np.where(ok, det, 1.0), 0.0)
    return np.nan_to_num(first), np.nan_to_num(second)


def estimate_calibration(
    family,
    capacitor,
    projected_change,
    projected_hours,
    error,
    known_variance,
    n_families: int,
    settings: CalibrationSettings | None = None,
) -> ForecastCalibration:
    """The four calibration numbers per family from the errors of later readings.

    All arrays are per later reading: `family` (0..F-1), `capacitor` (any id),
    `projected_change` x (z units, from the newest fitted reading to this one),
    `projected_hours` h (the same span in calendar hours), `error` e =
    observed z minus projected z, `known_variance` the fit's own variance of
    that reading (path plus noise). Families with fewer than `min_capacitors`
    distinct capacitors keep the defaults.
    """
    settings = settings or CalibrationSettings()
    family = np.asarray(family, np.int64)
    x = np.asarray(projected_change, float)
    d = np.asarray(projected_hours, float)
    e = np.asarray(error, float)
    v = np.asarray(known_variance, float)
    ok = np.isfinite(x) & np.isfinite(d) & np.isfinite(e) & np.isfinite(v) & (v > 0) & (d > 0)
    ok &= np.abs(e) < settings.jump_fraction
    family, x, d, e, v = family[ok], x[ok], d[ok], e[ok], v[ok]
    result = default_calibration(n_families, settings)
    if family.size == 0:
        return result
    pairs = np.unique(np.stack([family, np.asarray(capacitor, np.int64)[ok]]), axis=1)
    capacitors = np.bincount(pairs[0], minlength=n_families)
    residuals = np.bincount(family, minlength=n_families)

    def sums(values):
        return np.bincount(family, weights=values, minlength=n_families)

    spread2 = np.full(n_families, settings.default_spread**2)
    extra2 = np.zeros(n_families)
    # The terms that bend the path need errors seen far enough ahead: a family whose
    # later readings reach less than `min_bend_span_h` ahead keeps them at zero.
    reach = np.zeros(n_families)
    np.maximum.at(reach, family, d)
    bends = (reach >= settings.min_bend_span_h)[family]
    regressors = np.stack([x, np.where(bends, x * d, 0.0), d, np.where(bends, d * d, 0.0)])
    coefficients = np.zeros((len(regressors), n_families))
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        for _ in range(4):  # mean terms with the current spreads, then the spreads about those terms
            w = 1.0 / (v + spread2[family] * x * x + extra2[family] * d * d)
            normal = np.stack([[sums(w * a * b) for b in regressors] for a in regressors]).transpose(2, 0, 1)
            rhs = np.stack([sums(w * a * e) for a in regressors]).T
            scale = np.sqrt(np.abs(np.einsum("fii->fi", normal))) + 1e-300
            scaled = normal / scale[:, :, None] / scale[:, None, :] + 1e-9 * np.eye(len(regressors))
            coefficients = (np.linalg.solve(scaled, (rhs / scale)[..., None])[..., 0] / scale).T
            coefficients = np.nan_to_num(coefficients)
            coefficients[0] = np.clip(coefficients[0], *settings.bias_range)
            coefficients[1] = np.clip(coefficients[1], *settings.acceleration_range)
            coefficients[3] = np.clip(coefficients[3], *settings.curvature_range)
            excess = (e - np.einsum("kn,kn->n", coefficients[:, family], regressors)) ** 2 - v
            norm = np.sqrt(sums(x**4) / np.maximum(sums(d**4), 1e-300))
            s2, k2 = _solve_2x2(
                sums(x**4),
                sums(x * x * d * d) * norm,
                sums(d**4) * norm**2,
                sums(excess * x * x),
                sums(excess * d * d) * norm,
            )
            spread2 = np.clip(s2, settings.min_spread**2, settings.max_spread**2)
            extra2 = np.maximum(k2 * norm, 0.0)
    bias, acceleration, extra, curvature = coefficients
    enough = capacitors >= settings.min_capacitors
    return ForecastCalibration(
        slope_bias=np.where(enough, bias, result.slope_bias),
        slope_spread=np.where(enough, np.sqrt(spread2), result.slope_spread),
        extra_slope=np.where(enough, extra, result.extra_slope),
        extra_sd=np.where(enough, np.sqrt(extra2), result.extra_sd),
        acceleration=np.where(enough, acceleration, result.acceleration),
        curvature=np.where(enough, curvature, result.curvature),
        capacitors=capacitors,
        residuals=residuals,
    )


def calibrated_crossing_quantiles(
    fit: TrendFit,
    limit_fraction,
    terms,
    horizon_stress_hours,
    probabilities=(0.1, 0.5, 0.9),
    steps: int = 240,
) -> np.ndarray:
    """Stress hours (from tau = 0) at which each calibrated path reaches its limit, per quantile.

    terms: (6, G) from `ForecastCalibration.per_capacitor`. For d stress hours
    (h = d / stress rate calendar hours) ahead of t0, the newest reading, the
    path's mean is the fit's plus (bias + acceleration h) x + extra_slope h +
    curvature h^2, x = slope d, and its variance the fit's plus (spread x)^2 +
    (extra_sd h)^2. P(crossed by t0 + d) =
    Phi((L - mean) / sd) on a grid of `steps` times d up to each capacitor's
    horizon (denser near now), made non-decreasing, and each quantile read off
    by linear interpolation. A quantile already reached at
    d = 0 gives t0 (or the closed-form crossing before it when the fit's own path
    is past); one never reached gives inf, as does every quantile of a capacitor
    whose limit does not apply (NaN limit fraction): the grid is evaluated only
    over the capacitors whose limit applies. Shape (len(probabilities), G).

    The grid is not evaluated whole (`_grid_quantiles`): every `COARSE_STRIDE`-th
    point first, then every point only inside the stride where each quantile is
    first reached. That gives the dense grid's numbers unless the probability
    rises above a level and falls back between two coarse points (a path that
    turns back within a stride), which the tests bound on varied fits.
    """
    terms = np.asarray(terms, float)
    n = len(fit.intercept)
    horizon = np.broadcast_to(np.asarray(horizon_stress_hours, float), (n,))
    limit_fraction = np.broadcast_to(np.asarray(limit_fraction, float), (n,))
    levels = np.asarray(probabilities, float)
    result = np.full((len(levels), n), np.inf)
    applies = np.flatnonzero(np.isfinite(limit_fraction))
    block = 20_000  # capacitors at a time: the grid is (steps x block)
    for start in range(0, len(applies), block):
        rows = applies[start : start + block]
        result[:, rows] = _grid_quantiles(
            _take(fit, rows), limit_fraction[rows], terms[:, rows], horizon[rows], levels, steps
        )
    return result


COARSE_STRIDE = 8  # grid points a coarse step spans; about sqrt(steps / levels) costs least


def _take(fit: TrendFit, rows: np.ndarray) -> TrendFit:
    """The per-capacitor part of a fit for some capacitors (positions; per-reading arrays dropped)."""
    import dataclasses

    per_capacitor = {
        name: getattr(fit, name)[rows]
        for name in ("model", "intercept", "slope_per_hour", "covariance", "stress_hours_now", "stress_rate")
    }
    per_capacitor["curvature"] = fit.bend()[rows]
    return dataclasses.replace(fit, **per_capacitor)


def path_polynomials(intercept, slope_per_hour, curvature, covariance, stress_hours_now, stress_rate, terms):
    """The calibrated path ahead of the newest reading, as quadratics in d, the stress hours ahead of it.

    Returns (mean, variance), each (3, G): z(d) = mean[0] + mean[1] d + mean[2] d^2, and its variance
    likewise. With s = b1 + 2 c t0 the fit's slope now and r the stress rate, the mean is
    m(t0) + (s (1 + bias) + extra_slope / r) d + (c + acceleration s / r + curvature / r^2) d^2, the variance
    var(t0) + 2 (v01 + t0 v11) d + (v11 + (spread s)^2 + (extra_sd / r)^2) d^2. The one description of the
    calibrated path: the crossing quantiles and the capacitor page's chart both read it. With all six terms
    zero it is the fitted path itself, for d of either sign. `covariance` is (G, 2, 2) or (v00, v01, v11).
    """
    bias, spread, extra_slope, extra_sd, acceleration, curvature_term = np.asarray(terms, float)
    t0 = np.asarray(stress_hours_now, float)
    c = np.asarray(curvature, float)
    covariance = np.asarray(covariance, float)
    if covariance.ndim == 3:
        v00, v01, v11 = covariance[:, 0, 0], covariance[:, 0, 1], covariance[:, 1, 1]
    else:
        v00, v01, v11 = covariance
    rate = np.maximum(np.asarray(stress_rate, float), 1e-9)
    slope = np.asarray(slope_per_hour, float) + 2.0 * c * t0
    mean = np.stack(
        np.broadcast_arrays(
            np.asarray(intercept, float) + slope * t0 - c * t0 * t0,
            slope * (1.0 + bias) + extra_slope / rate,
            c + acceleration * slope / rate + curvature_term / rate**2,
        )
    )
    variance = np.stack(
        np.broadcast_arrays(
            v00 + 2.0 * t0 * v01 + t0 * t0 * v11,
            2.0 * (v01 + t0 * v11),
            v11 + (spread * slope) ** 2 + (extra_sd / rate) ** 2,
        )
    )
    return mean, variance


def path_quantiles(
    model,
    intercept,
    slope_per_hour,
    curvature,
    covariance,
    stress_hours_now,
    stress_rate,
    terms,
    stress_hours,
    probabilities=(0.1, 0.5, 0.9),
):
    """The path's quantiles (fraction of rated) at stress hours `stress_hours`, per probability.

    Up to the newest reading (t0) the fitted path; beyond it the calibrated one (`path_polynomials`).
    The path's p-quantile reaches a limit L on the crossing's p-quantile date (P(crossed by t) =
    P(path below L at t)), so the P10-P90 band drawn from here meets the limit on the forecast's P10
    and P90 dates and the P50 line on its P50 (`calibrated_crossing_quantiles`, for a path that does
    not turn back). The band is of the path,
    not of a new reading: a reading adds its meter noise. Shape (len(probabilities), *stress_hours' shape).
    """
    from scipy.special import ndtri

    args = (intercept, slope_per_hour, curvature, covariance, stress_hours_now, stress_rate)
    d = np.asarray(stress_hours, float) - np.asarray(stress_hours_now, float)
    fitted_mean, fitted_variance = path_polynomials(*args, np.zeros(6))
    mean, variance = path_polynomials(*args, terms)
    ahead = d > 0
    centre = np.where(ahead, _quadratic(mean, d), _quadratic(fitted_mean, d))
    sd = np.sqrt(np.maximum(np.where(ahead, _quadratic(variance, d), _quadratic(fitted_variance, d)), 0.0))
    rows = np.stack([centre + float(ndtri(p)) * sd for p in probabilities])
    return np.exp(rows) if model == MODEL_LOG else rows


HOURS_PER_DAY = 24.0


def crossing_days_ahead(crossing_stress_hours, stress_hours_now, stress_rate):
    """Calendar days from the newest reading to crossing quantiles given in stress hours (from tau = 0),
    at the long-run stress rate: the one mapping the stated dates and the drawn band share."""
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        return (np.asarray(crossing_stress_hours, float) - np.asarray(stress_hours_now, float)) / (
            np.asarray(stress_rate, float) * HOURS_PER_DAY
        )


def crossing_days_through_readings(
    crossing_stress_hours, stress_hours_now, stress_rate, reading_column, reading_stress_hours, reading_days
):
    """`crossing_days_ahead`, but a crossing already made between two of the capacitor's readings is dated where the
    capacitor page draws it: on the straight line between those readings' (stress hours, day) points, the stress
    its readings really saw, not the long-run rate counted back from the newest one (that put the stated dates of
    past crossings 12 days from the drawn band's, up to 39, on the demo). Ahead of the newest reading, and before the
    first, the long-run rate as before.

    crossing_stress_hours (..., G); reading_column, reading_stress_hours, reading_days: per reading, its
    capacitor's column (0..G-1), its stress hours and its calendar days from its capacitor's newest reading (<= 0).
    Vectorised: one sorted search for every crossing of every capacitor."""
    days = np.array(crossing_days_ahead(crossing_stress_hours, stress_hours_now, stress_rate), float)
    column = np.asarray(reading_column, np.int64)
    tau = np.asarray(reading_stress_hours, float)
    known = (column >= 0) & np.isfinite(tau) & np.isfinite(np.asarray(reading_days, float))
    if not known.any():
        return days
    column, tau, when = column[known], tau[known], np.asarray(reading_days, float)[known]
    order = np.lexsort((when, tau, column))
    column, tau, when = column[order], tau[order], when[order]
    span = float(np.nanmax(tau)) + 1.0  # keys of one capacitor never reach the next one's
    keys = column * span + tau
    crossing = np.asarray(crossing_stress_hours, float)
    columns = np.broadcast_to(np.arange(crossing.shape[-1]), crossing.shape)
    with np.errstate(invalid="ignore"):
        past = np.isfinite(crossing) & (crossing >= 0) & (crossing < np.asarray(stress_hours_now, float))
    target = columns[past] * span + crossing[past]
    upper = np.searchsorted(keys, target, side="right")
    lower = upper - 1
    inside = (lower >= 0) & (upper < len(keys))
    lower, upper = np.clip(lower, 0, len(keys) - 1), np.clip(upper, 0, len(keys) - 1)
    inside &= (column[lower] == columns[past]) & (column[upper] == columns[past])
    width = tau[upper] - tau[lower]
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(width > 0, (crossing[past] - tau[lower]) / width, 1.0)
    drawn = when[lower] + share * (when[upper] - when[lower])
    dated = days[past]
    dated[inside] = drawn[inside]
    days[past] = dated
    return days


def stress_hours_ahead(days_ahead, stress_hours_now, stress_rate):
    """Stress hours (from tau = 0) `days_ahead` calendar days after the newest reading, at the long-run
    stress rate: the inverse of `crossing_days_ahead`, where the capacitor page draws the path ahead."""
    days = np.asarray(days_ahead, float)
    return np.asarray(stress_hours_now, float) + np.asarray(stress_rate, float) * days * HOURS_PER_DAY


def _quadratic(coefficients, d):
    return coefficients[0] + d * (coefficients[1] + d * coefficients[2])


def _score_polynomials(fit, limit_fraction, terms, horizon):
    """(3, G) coefficients of L - mean and of the variance as quadratics in u = d / horizon
    (`path_polynomials`)."""
    mean, variance = path_polynomials(
        fit.intercept,
        fit.slope_per_hour,
        fit.bend(),
        fit.covariance,
        fit.stress_hours_now,
        fit.stress_rate,
        terms,
    )
    scale = np.stack([np.ones_like(horizon), horizon, horizon**2])
    gap = -mean * scale
    gap[0] += fit.to_z(limit_fraction)
    return gap, variance * scale


def _scores(gap, variance, u, columns=slice(None)):
    """(L - mean) / sd at grid fractions u (K, G); not a number (no finite score) as -inf."""
    g = gap[:, columns]
    v = variance[:, columns]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        score = (g[0] + u * (g[1] + u * g[2])) / np.sqrt(np.maximum(v[0] + u * (v[1] + u * v[2]), 1e-300))
    return np.where(np.isnan(score), -np.inf, score)


def _grid_quantiles(fit, limit_fraction, terms, horizon_stress_hours, levels, steps):
    """The quantiles of `calibrated_crossing_quantiles` for capacitors whose limit applies.

    Phi is monotone, so the running maximum and the first point at or above each level are
    taken on the score (L - mean) / sd against Phi^-1(p); Phi is evaluated only at the two
    points each quantile is interpolated between.
    """
    from scipy.special import ndtr, ndtri

    t0 = fit.stress_hours_now
    n = len(t0)
    horizon = np.maximum(np.asarray(horizon_stress_hours, float), 1.0)
    fractions = np.linspace(0.0, 1.0, steps) ** 2  # of the horizon: denser near now
    gap, variance = _score_polynomials(fit, limit_fraction, terms, horizon)
    coarse_index = np.unique(np.append(np.arange(0, steps, COARSE_STRIDE), steps - 1))
    coarse = np.maximum.accumulate(_scores(gap, variance, fractions[coarse_index, None]), axis=0)
    unique_levels, level_of = np.unique(levels, return_inverse=True)
    before = crossing_quantiles(fit, limit_fraction, tuple(unique_levels))  # where the fit itself is past
    found = np.empty((len(unique_levels), n))
    for k, p in enumerate(unique_levels):
        target = float(ndtri(p))
        stride = (coarse < target).sum(axis=0)  # coarse points below the level: it is reached after them
        never = stride == len(coarse_index)
        inside = np.flatnonzero((stride > 0) & ~never)
        low = coarse_index[stride[inside] - 1]
        points = np.minimum(low + np.arange(COARSE_STRIDE + 1)[:, None], coarse_index[stride[inside]])
        envelope = np.maximum.accumulate(
            np.vstack(
                [coarse[stride[inside] - 1, inside][None], _scores(gap, variance, fractions[points[1:]], inside)]
            ),
            axis=0,
        )
        first = (envelope < target).sum(axis=0)  # >= 1: the stride's low point is below the level
        span = np.arange(len(inside))
        p_low, p_high = ndtr(envelope[first - 1, span]), ndtr(envelope[first, span])
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.clip((p - p_low) / (p_high - p_low), 0.0, 1.0)
        u_low, u_high = fractions[points[first - 1, span]], fractions[points[first, span]]
        value = np.where(never, np.inf, np.minimum(before[k], t0))
        value[inside] = t0[inside] + horizon[inside] * (u_low + share * (u_high - u_low))
        found[k] = value
    return found[level_of]
