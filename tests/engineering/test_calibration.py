"""Calibrated bands, long-run stress projection and temperature coefficients from readings.

Simulations here are ours (invented, for testing the methods' promises). The
independent check of the forecast, on a fleet simulated without the fitter's
assumptions, is tests/test_forecast_simulation.py.
"""

import dataclasses
import datetime as dt

import numpy as np
import pytest
from scipy.special import i0

from fleet.engineering.calibration import calibrated_crossing_quantiles, estimate_calibration, path_quantiles
from fleet.engineering.trends import MODEL_LINEAR, TrendSettings, crossing_quantiles, fit_trends, stress_hours


def _small_fleet(n=200, seed=5, tempco_ppm=-200.0, temperature_spread=15.0, part=None):
    rng = np.random.default_rng(seed)
    count = np.full(n, 12)
    group = np.repeat(np.arange(n), count)
    time_h = np.tile((np.arange(12) + 1) * 2190.0, n)
    slope = rng.normal(-3e-6, 0.8e-6, n)
    temperature = 35.0 + rng.uniform(-temperature_spread, temperature_spread, group.size)
    true = 1.0 + slope[group] * time_h
    tempco = np.broadcast_to(np.asarray(tempco_ppm, float), (n,))[group] * 1e-6
    measured = 10.0 * true * (1 + tempco * (temperature - 25.0)) * (1 + rng.normal(0, 0.004, group.size))
    return group, time_h, measured, temperature, slope, np.zeros(n, int) if part is None else part


def _fit(group, time_h, measured, temperature, part, **kwargs):
    n = len(part)
    return fit_trends(
        group,
        part,
        time_h,
        measured,
        np.full(n, 10.0),
        temperature,
        np.full(group.size, 400.0),
        np.full(n, 400.0),
        settings=TrendSettings(doubling_k=1e9, model=MODEL_LINEAR),
        **kwargs,
    )


def test_calibrated_crossing_quantiles_match_a_monte_carlo_of_the_calibrated_path():
    """[derived] The grid quantiles against sampling the calibrated model: d hours ahead,
    z = b0 + b1 (t0 + d) + ((bias + accel d) m1 + spread m1 eps1) d + (beta + kappa eps2) d."""
    group, time_h, measured, temperature, _, part = _small_fleet(n=40)
    fit = _fit(group, time_h, measured, temperature, part)
    bias, spread, beta, kappa, accel, limit = 0.4, 0.3, -1e-6, 0.8e-6, 2e-5, 0.85
    terms = np.tile(np.array([[bias], [spread], [beta], [kappa], [accel], [0.0]]), (1, 40))
    grid = calibrated_crossing_quantiles(fit, limit, terms, np.full(40, 3e5), steps=2000)
    rng = np.random.default_rng(0)
    ahead = np.linspace(0, 3e5, 1501)
    for i in (0, 7, 19):
        b = rng.multivariate_normal([fit.intercept[i], fit.slope_per_hour[i]], fit.covariance[i], 8000)
        m1, t0 = fit.slope_per_hour[i], fit.stress_hours_now[i]
        own = (bias + accel * ahead + spread * rng.standard_normal((8000, 1))) * m1
        common = beta + kappa * rng.standard_normal((8000, 1))
        path = b[:, :1] + b[:, 1:] * (t0 + ahead) + (own + common) * ahead
        below = path < limit
        first = np.where(below.any(axis=1), ahead[np.argmax(below, axis=1)], np.inf)
        sampled = t0 + np.quantile(first, [0.1, 0.5, 0.9])
        assert grid[:, i] == pytest.approx(sampled, rel=0.03)


def test_the_drawn_band_meets_the_limit_on_the_crossing_quantiles():
    """[derived] P(crossed by t) = P(path below L at t): the calibrated path's P10, P50 and P90 (the
    capacitor page's band and trend) are at the limit exactly at the crossing's P10, P50 and P90 (its
    dates), with every calibration term in play, on bent and straight fits alike."""
    group, time_h, measured, temperature, _, part = _small_fleet(n=30)
    fit = _fit(group, time_h, measured, temperature, part)
    fit = dataclasses.replace(fit, curvature=np.linspace(-4e-12, 0.0, 30))
    terms = np.tile(np.array([[0.3], [0.25], [-4e-7], [1e-7], [3e-5], [-2e-12]]), (1, 30))
    quantiles = calibrated_crossing_quantiles(fit, 0.85, terms, np.full(30, 4e5), steps=3000)
    drawn = path_quantiles(
        MODEL_LINEAR,
        fit.intercept,
        fit.slope_per_hour,
        fit.bend(),
        fit.covariance,
        fit.stress_hours_now,
        fit.stress_rate,
        terms,
        quantiles,
    )
    drawn = drawn[[0, 1, 2], [0, 1, 2]]  # each probability's path quantile at its own crossing quantile
    reached = np.isfinite(quantiles) & (quantiles > fit.stress_hours_now)
    assert reached.sum() >= 60
    assert drawn[reached] == pytest.approx(np.full(reached.sum(), 0.85), abs=2e-4)
    # Up to the newest reading the drawn trend is the fitted path itself, whatever the terms.
    past = path_quantiles(
        MODEL_LINEAR,
        fit.intercept,
        fit.slope_per_hour,
        fit.bend(),
        fit.covariance,
        fit.stress_hours_now,
        fit.stress_rate,
        terms,
        fit.stress_hours_now * 0.5,
        probabilities=(0.5,),
    )[0]
    assert past == pytest.approx(fit.mean_at(fit.stress_hours_now * 0.5), rel=1e-12)


def test_with_no_calibration_terms_the_grid_equals_the_closed_form():
    """[derived] Zero bias, spread and extra terms leave the fit's own path: both quantile routes agree."""
    group, time_h, measured, temperature, _, part = _small_fleet(n=30)
    fit = _fit(group, time_h, measured, temperature, part)
    grid = calibrated_crossing_quantiles(fit, 0.85, np.zeros((6, 30)), np.full(30, 4e5), steps=3000)
    closed = crossing_quantiles(fit, 0.85)
    finite = np.isfinite(closed) & (closed < 4e5)
    assert grid[finite] == pytest.approx(closed[finite], rel=2e-3)


def test_calibration_recovers_known_biases_and_spreads():
    """Weighted least squares and the method of moments on errors drawn from the model (ours):
    capacitors whose own slopes differ and grow, a common extra slope, spreads of both kinds."""
    rng = np.random.default_rng(2)
    n = 40_000
    span = rng.uniform(2000, 20000, n)
    own_slope = -rng.uniform(0.2e-6, 3e-6, n)
    x = own_slope * span
    known = rng.uniform(1e-5, 4e-5, n)
    noise = rng.normal(0, np.sqrt(known + (0.3 * x) ** 2 + (0.5e-6 * span) ** 2))
    error = 0.5 * x + 2e-5 * x * span - 1e-6 * span - 2e-11 * span**2 + noise
    result = estimate_calibration(np.zeros(n, int), np.arange(n), x, span, error, known, 1)
    assert result.curvature[0] == pytest.approx(-2e-11, abs=0.5e-11)
    assert result.slope_bias[0] == pytest.approx(0.5, abs=0.05)
    assert result.acceleration[0] == pytest.approx(2e-5, abs=0.3e-5)
    assert result.extra_slope[0] == pytest.approx(-1e-6, abs=0.1e-6)
    assert result.slope_spread[0] == pytest.approx(0.3, abs=0.06)
    assert result.extra_sd[0] == pytest.approx(0.5e-6, abs=0.1e-6)


def test_thin_history_keeps_the_conservative_defaults():
    """Ours: a future slope 1.3 times the fit's with a 75 % spread, earlier dates than the fit's own (every fleet
    we calibrated found the slope read off the past too slow)."""
    result = estimate_calibration(
        [0, 0, 0], [1, 1, 2], [-0.01, -0.02, -0.01], [5000.0] * 3, [0.0, -0.01, 0.01], [1e-5] * 3, 2
    )
    assert result.slope_bias.tolist() == [0.3, 0.3]
    assert result.slope_spread.tolist() == [0.75, 0.75]
    assert result.extra_slope.tolist() == [0.0, 0.0] and result.extra_sd.tolist() == [0.0, 0.0]


def test_projected_stress_rate_is_the_mean_over_the_seasons_not_the_last_quarter():
    """[derived] Case temperature swinging +/-10 K over the year with the 10-K
    rule: the yearly mean acceleration is the mean of 2^cos over a cycle, I0(ln 2) = 1.1238
    (scipy.special.i0), whichever season the newest reading fell in; the last quarter's own
    factor would range 0.6-1.8. Twelve monthly readings a year sample the cycle evenly, and an
    even sampling of a smooth periodic function averages it to rounding (its error is of the
    order of I12(ln 2), about 1e-13), hence 1e-9."""
    settings = TrendSettings()
    rate = []
    for phase in np.linspace(0, 2 * np.pi, 8, endpoint=False):
        time_h = np.arange(1, 25) * 8766.0 / 12  # monthly readings for two years
        temperature = 40.0 + 10.0 * np.cos(2 * np.pi * time_h / 8766.0 + phase)
        group = np.zeros(time_h.size, int)
        _, r = stress_hours(group, time_h, temperature, np.full(time_h.size, 400.0), 400.0, 1, settings)
        rate.append(r[0])
    assert np.array(rate) == pytest.approx(i0(np.log(2.0)), rel=1e-9)


def test_a_parts_temperature_coefficient_is_estimated_from_its_readings():
    """An electrolytic part whose capacitance rises 800 ppm/K (ours) is found so,
    from a default of +500, where readings spread over 30 K."""
    n = 400
    part = np.repeat([0, 1], n // 2)
    truth = np.where(part == 0, -220.0, 800.0)
    group, time_h, measured, temperature, _, part = _small_fleet(n=n, tempco_ppm=truth, part=part)
    fit = _fit(group, time_h, measured, temperature, part, tempco_ppm_per_k=np.where(part == 0, -200.0, 500.0))
    assert fit.priors.tempco_ppm_per_k[0] == pytest.approx(-220.0, abs=40.0)
    assert fit.priors.tempco_ppm_per_k[1] == pytest.approx(800.0, abs=60.0)


def test_without_a_temperature_spread_the_default_coefficient_stays():
    group, time_h, measured, temperature, _, part = _small_fleet(n=100, temperature_spread=0.0, tempco_ppm=900.0)
    fit = _fit(group, time_h, measured, temperature, part, tempco_ppm_per_k=np.full(100, 500.0))
    assert fit.priors.tempco_ppm_per_k[0] == pytest.approx(500.0)


def test_a_rising_dissipation_factor_is_projected_to_its_maximum():
    """[derived] DF = 0.03 + 1e-5 per hour read quarterly: from 0.08 at 5000 h, 0.10 is 2000 h away."""
    from fleet.engineering.trends import dissipation_trend

    rng = np.random.default_rng(4)
    time_h = np.arange(1, 13) * 400.0
    group = np.zeros(12, int)
    dissipation = 0.03 + 1e-5 * time_h + rng.normal(0, 2e-4, 12)
    hours = dissipation_trend(group, time_h, dissipation, 1, np.array([0.10]), np.array([5000.0]))
    assert hours[1, 0] == pytest.approx(2000.0, rel=0.05)
    assert hours[0, 0] < hours[1, 0] < hours[2, 0]
    few = dissipation_trend(np.zeros(2, int), time_h[:2], dissipation[:2], 1, np.array([0.10]), np.array([5000.0]))
    assert np.isinf(few).all()


def test_the_alert_level_is_the_most_precise_that_keeps_the_recall():
    """[derived] Ten capacitors cross within the year, ninety do not. P10 flags all ten
    and twenty more; P30 flags nine and two more; P50 five and none. With the recall
    floor at 85 %, P30 is the most precise level that keeps it; with a floor above
    every level's recall, the rule falls back to the level that catches most."""
    from fleet.engineering.backtest import choose_alert_level
    from fleet.engineering.planning import ALERT_LEVELS, PlanningSettings

    crossed = np.r_[np.full(10, 100.0), np.full(90, np.nan)]
    followed = np.full(100, 800.0)
    days = np.full((len(ALERT_LEVELS), 100), 2000.0)
    days[0, :30] = 200.0  # P10
    days[1, :25] = 200.0  # P20: ten crossings and fifteen others
    days[2, :9], days[2, 10:12] = 200.0, 200.0  # P30
    days[3, :7] = 200.0  # P40
    days[4, :5] = 200.0  # P50
    none_now = np.zeros(100, bool)
    level, table = choose_alert_level(days, none_now, crossed, followed)
    assert level == 0.3
    assert table[2][1:] == pytest.approx((9 / 11, 0.9))
    strict = PlanningSettings(alert_min_recall=1.01)
    assert choose_alert_level(days, none_now, crossed, followed, strict)[0] == 0.1


def test_precision_within_a_year_is_scored_only_where_the_year_is_over():
    """A review of the demo's track record: at the three cut-offs less than a year before the newest reading the
    365-day precision was 100 %, and the pooled figure 82 % where the cut-offs whose year was over gave 77 %: a
    flag that came true is known when its capacitor crosses, one that did not only a year on, so within a year
    not yet over only the hits were counted. [derived] Two cut-offs, each forty flags of which ten cross within
    the year at day 100: the old one (500 days of data after it) scores 10 / 40; the new one (200 days) is not
    scored at 365 days, and the pooled precision is the old one's, not (10 + 10) / (40 + 10). At 90 days both
    count: the new one's year is not over but its quarter is."""
    from fleet.engineering.backtest import score

    crossed = np.tile(np.r_[np.full(10, 100.0), np.full(30, np.nan)], 2)
    followed = np.r_[np.full(40, 500.0), np.full(10, 100.0), np.full(30, 200.0)]
    window = np.r_[np.full(40, 500.0), np.full(40, 200.0)]
    days = np.full((3, 80), 150.0)
    risk = np.full(80, "watch", dtype=object)
    scored = score(days, risk, crossed, followed, window_days=window)
    assert scored["precision_365d"] == pytest.approx(10 / 40) and scored["flagged_365d"] == 40
    assert scored["recall_365d"] == pytest.approx(1.0) and scored["crossed_365d"] == 10
    unwindowed = score(days, risk, crossed, followed)  # the old count: the new cut-off's hits alone were known
    assert unwindowed["precision_365d"] == pytest.approx(20 / 50)
    due = np.full(80, "due soon", dtype=object)
    assert score(days, due, crossed, followed, window_days=window)["flagged_90d"] == 80


def test_the_path_model_chosen_is_the_one_that_projected_the_later_readings_best():
    """[derived] Thirty capacitors, ten later readings each, projected by two forms on bent and on
    straight paths with errors of sd 2, 1.5, 1 and 0.5 % of rated: the log-linear form (the better
    on bent paths) is chosen, on straight paths, which beat bent ones by far more than chance.
    Thirty slips (30 % of rated off under one model only) and readings one model did not project
    would make that model the worst if counted: they are left out. Under 100 usable readings
    nothing is chosen."""
    from fleet.engineering.backtest import choose_path_model

    rng = np.random.default_rng(3)
    capacitor = np.repeat(np.arange(30), 10)
    errors = rng.normal(0.0, [0.02, 0.015, 0.01, 0.005], (300, 4))
    slips = np.zeros((30, 4))
    slips[:, 3] = 0.3
    unprojected = np.zeros((5, 4))
    unprojected[:, 0] = np.nan
    squared = np.vstack([errors, slips, unprojected]) ** 2
    cluster = np.r_[capacitor, np.arange(35)]
    choice = choose_path_model(squared, cluster)
    assert (choice.form, choice.straight) == (1, True)
    assert choice.straight_z < -2
    assert np.sqrt(choice.mean_squared_error) == pytest.approx([0.02, 0.015, 0.01, 0.005], rel=0.15)
    assert np.argmin(np.nanmean(np.where(np.isfinite(squared), squared, np.nan), axis=0)) != 3
    few = choose_path_model(squared[:99], cluster[:99])
    assert (few.form, few.straight) == (None, False)


def test_straight_paths_within_chance_of_bent_ones_keep_the_bend():
    """[derived] Straight paths whose projections err 10 % less than bent ones on half the
    capacitors and 9 % more on the other half have the smaller mean squared error overall (by
    about 0.1 %), but a capacitor's readings share its path's error, so the difference is one of
    30 draws, well within chance: the bend, the default, stays. Ten times the capacitors with the
    straight paths 10 % better on every one is a clear difference: straight is chosen."""
    from fleet.engineering.backtest import choose_path_model

    rng = np.random.default_rng(4)
    capacitor = np.repeat(np.arange(30), 10)
    bent = rng.normal(0.0, 0.01, 300)
    straight = bent * np.where(capacitor % 2 == 0, 0.9, 1.09)
    squared = np.column_stack([bent, bent * 2, straight, straight * 2]) ** 2
    choice = choose_path_model(squared, capacitor)
    assert choice.mean_squared_error[2] < choice.mean_squared_error[0]
    assert (choice.form, choice.straight) == (0, False)
    assert -2 < choice.straight_z < 0

    capacitor = np.repeat(np.arange(300), 10)
    bent = rng.normal(0.0, 0.01, 3000)
    squared = np.column_stack([bent, bent * 2, 0.9 * bent, 1.8 * bent]) ** 2
    choice = choose_path_model(squared, capacitor)
    assert (choice.form, choice.straight) == (0, True)


def test_grid_over_the_capacitors_whose_limit_applies_equals_the_grid_over_all():
    """[derived] Evaluating the grid only where the limit applies changes no number: where it
    applies the quantiles equal the grid over every capacitor (blocks of any split), and where
    it does not (NaN limit) the full grid never reaches any level either (inf)."""
    from fleet.engineering import calibration

    group, time_h, measured, temperature, _, part = _small_fleet(n=60, seed=11)
    fit = _fit(group, time_h, measured, temperature, part)
    rng = np.random.default_rng(4)
    limit = np.where(rng.random(60) < 0.5, rng.uniform(0.8, 0.95, 60), np.nan)
    terms = np.vstack(
        [
            rng.normal(0.3, 0.1, 60),
            rng.uniform(0, 0.4, 60),
            np.full(60, -1e-6),
            np.full(60, 5e-7),
            np.full(60, 1e-5),
            np.zeros(60),
        ]
    )
    horizon = rng.uniform(1e5, 4e5, 60)
    levels = np.array([0.1, 0.5, 0.9, 0.05, 0.2])
    full = calibration._grid_quantiles(calibration._take(fit, np.arange(60)), limit, terms, horizon, levels, 240)
    subset = calibrated_crossing_quantiles(fit, limit, terms, horizon, tuple(levels))
    applies = np.isfinite(limit)
    assert 0 < applies.sum() < 60 and np.isfinite(full[:, applies]).any()
    np.testing.assert_array_equal(subset, full)
    assert np.isinf(subset[:, ~applies]).all()


def _dense_grid_quantiles(fit, limit_fraction, terms, horizon_stress_hours, levels, steps=240):
    """The reference: P(crossed) by Phi on every point of the grid, its running maximum, each
    level read off by linear interpolation (as `calibrated_crossing_quantiles` describes it)."""
    from scipy.special import ndtr

    bias, spread, extra_slope, extra_sd, acceleration, curvature = terms
    t0 = fit.stress_hours_now
    horizon = np.maximum(np.asarray(horizon_stress_hours, float), 1.0)
    ahead = horizon[None, :] * (np.linspace(0.0, 1.0, steps) ** 2)[:, None]
    v00, v01, v11 = fit.covariance[:, 0, 0], fit.covariance[:, 0, 1], fit.covariance[:, 1, 1]
    t = t0 + ahead
    hours = ahead / np.maximum(fit.stress_rate, 1e-9)
    own = fit.slope_now() * ahead
    mean = fit.mean_at(t) + (bias + acceleration * hours) * own + extra_slope * hours + curvature * hours**2
    variance = v00 + 2.0 * t * v01 + t * t * v11 + (spread * own) ** 2 + (extra_sd * hours) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        score = (fit.to_z(limit_fraction) - mean) / np.sqrt(np.maximum(variance, 1e-300))
    probability = np.maximum.accumulate(np.nan_to_num(ndtr(score), nan=0.0), axis=0)
    before = crossing_quantiles(fit, limit_fraction, tuple(levels))
    columns = np.arange(len(t0))
    rows = []
    for k, p in enumerate(levels):
        reached = probability >= p
        first = np.argmax(reached, axis=0)
        previous = np.maximum(first - 1, 0)
        p_low, p_high = probability[previous, columns], probability[first, columns]
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.clip((p - p_low) / (p_high - p_low), 0.0, 1.0)
        d = ahead[previous, columns] + share * (ahead[first, columns] - ahead[previous, columns])
        value = np.where(first == 0, np.minimum(before[k], t0), t0 + d)
        rows.append(np.where(reached.any(axis=0), value, np.inf))
    return np.stack(rows)


def test_the_strided_grid_gives_the_dense_grids_quantiles():
    """[derived] The quantiles read from the coarse grid refined inside one stride against
    Phi on all 240 points (`_dense_grid_quantiles`), on varied fits: falling and rising paths,
    bends both ways, log-linear and linear, limits already behind, never reached within the
    horizon, and limits that do not apply (NaN). The same quantiles at t0, finite and infinite,
    and the rest within a millionth of each capacitor's horizon (rounding: the two read the same
    grid points; an interpolation a hundredth of a grid step off shows at about a hundred times that)."""
    from fleet.engineering import calibration
    from fleet.engineering.trends import MODEL_LOG

    n = 600
    group, time_h, measured, temperature, _, part = _small_fleet(n=n, seed=21)
    fit = calibration._take(_fit(group, time_h, measured, temperature, part), np.arange(n))
    rng = np.random.default_rng(8)
    log = rng.random(n) < 0.3
    fit = dataclasses.replace(
        fit,
        model=np.where(log, MODEL_LOG, fit.model),
        intercept=np.where(log, np.log(fit.intercept), fit.intercept),
        slope_per_hour=fit.slope_per_hour * rng.uniform(-1.5, 5.0, n),
        curvature=rng.normal(0.0, 2e-10, n),
        stress_rate=rng.uniform(0.3, 2.0, n),
    )
    limit = rng.uniform(0.75, 0.97, n)  # the paths stand near 0.93 now: some limits already behind
    limit[rng.random(n) < 0.15] = np.nan
    terms = np.vstack(
        [
            rng.normal(0.3, 0.4, n),
            rng.uniform(0.0, 0.8, n),
            rng.normal(-1e-6, 2e-6, n),
            rng.uniform(0.0, 2e-6, n),
            rng.uniform(0.0, 1e-4, n),
            rng.uniform(-1e-10, 0.0, n),
        ]
    )
    horizon = rng.uniform(2e3, 3e4, n)
    levels = (0.1, 0.5, 0.9, 0.1, 0.2, 0.3, 0.4, 0.5)
    strided = calibrated_crossing_quantiles(fit, limit, terms, horizon, levels)
    applies = np.isfinite(limit)
    dense = np.full_like(strided, np.inf)
    dense[:, applies] = _dense_grid_quantiles(
        calibration._take(fit, np.flatnonzero(applies)), limit[applies], terms[:, applies], horizon[applies], levels
    )
    finite = np.isfinite(dense)
    at_now = dense == fit.stress_hours_now
    assert finite.sum() > 1000 and (~finite[:, applies]).sum() > 50 and at_now.sum() > 50
    np.testing.assert_array_equal(np.isfinite(strided), finite)
    np.testing.assert_array_equal(strided == fit.stress_hours_now, at_now)
    error = np.abs(np.where(finite, strided, 0.0) - np.where(finite, dense, 0.0)) / horizon
    assert error.max() <= 1e-6


def test_a_stray_reading_is_not_scored_as_the_crossing():
    """[trade] rule (the off-trend check of the reading rules: a reading more than 8 % of
    the rating from the trend is re-measured). Capacitor 0 drifts through its 0.95 limit:
    nothing is a stray and its first reading below dates the crossing. Capacitor 1 shows
    one stray 0.80 on a trend at 0.98, then reads 0.98 again: a stray, no crossing.
    Capacitor 2 falls suddenly to 0.80 and stays there: each of its two readings confirms
    the other. Capacitor 3's stray high reading is its only one. Readings are given out
    of order, as a database returns them."""
    from fleet.engineering.backtest import first_crossing_day, isolated_off_trend

    group = np.array([0, 0, 0, 1, 1, 1, 2, 2, 3])
    day = np.array([30.0, 120.0, 210.0, 30.0, 120.0, 210.0, 120.0, 30.0, 30.0])
    fraction = np.array([0.96, 0.945, 0.94, 0.98, 0.80, 0.98, 0.79, 0.80, 1.10])
    projected = np.array([0.958, 0.950, 0.943, 0.98, 0.98, 0.98, 0.97, 0.975, 0.98])
    stray = isolated_off_trend(group, day, fraction, projected)
    assert stray.tolist() == [False, False, False, False, True, False, False, False, True]
    below = (fraction < 0.95) & ~stray
    crossed = first_crossing_day(group, day, below, 4)
    assert crossed[0] == pytest.approx(75.0)  # midway between days 30 and 120
    assert np.isnan(crossed[1]) and np.isnan(crossed[3])
    assert crossed[2] == pytest.approx(15.0)  # between the cut-off and its first reading
    # With a threshold wider than every miss, nothing is a stray.
    assert not isolated_off_trend(group, day, fraction, projected, 0.5).any()


def test_the_back_test_sees_a_crossing_where_the_judgement_sees_a_reading_below_its_limit():
    """The back-test's crossing is the application's own "reading below its limit" [trade: a capacitor
    read below its rated tolerance is replaced]: the reading referred to 25 C (`normalise_to_25c`,
    500 ppm/K for an electrolytic), against the capacitance limit that governs the capacitor, by any
    margin; or its removal as failed, whichever first. Before, the back-test wanted a reading one noise
    deviation (2 uF here) below the tolerance limit alone, and a start capacitor the judgement had
    already sent for replacement counted as never crossed.

    Capacitor 0: a 250 uF start capacitor read 226.3 uF at 34 C (225.28 at 25 C), then 224.6 at 33 C
    (223.71), under its 225 uF limit (-10 %). Capacitor 1: 224.0 uF read cold, at 10 C, is 225.69 at
    25 C: not below. Capacitor 2: an operating-point limit at 93 % governs; 0.92 of rated is below it,
    though within tolerance. Capacitor 3: never read below, removed as failed on day 200."""
    from fleet.engineering.backtest import observed_crossings
    from fleet.engineering.capacitor import normalise_to_25c
    from fleet.engineering.planning import EVIDENCE_NONE, judge

    group = np.array([0, 0, 1, 2, 3])
    day = np.array([160.0, 251.0, 90.0, 120.0, 100.0])
    fraction = np.array(
        [
            normalise_to_25c(226.3, 34.0, 500.0) / 250,
            normalise_to_25c(224.6, 33.0, 500.0) / 250,
            normalise_to_25c(224.0, 10.0, 500.0) / 250,
            0.92,
            0.97,
        ]
    )
    assert 250 * fraction[1] == pytest.approx(223.71, abs=0.01)  # the capacitor page's figure
    limit = np.array([0.90, 0.90, 0.93, 0.90])
    failed_day = np.array([np.nan, np.nan, np.nan, 200.0])
    crossed = observed_crossings(group, day, fraction, fraction, limit, failed_day, 4)
    assert crossed[0] == pytest.approx((160.0 + 251.0) / 2)  # midway: last reading above, first below
    assert np.isnan(crossed[1])
    assert crossed[2] == pytest.approx(60.0)
    assert crossed[3] == pytest.approx(200.0)
    # The risk rule's level is chosen on crossings clear of the meter noise (0.8 % here): 223.71 uF is not.
    clear = observed_crossings(group, day, fraction, fraction, limit, failed_day, 4, margin=np.full(4, 0.008))
    assert np.isnan(clear[0]) and clear[2] == pytest.approx(60.0) and clear[3] == pytest.approx(200.0)

    # The judgement of the same readings, each capacitor's newest: "below" exactly where a crossing was seen.
    newest = np.array([1, 2, 3, 4])
    limits = np.stack([np.array([0.90, 0.90, 0.90, 0.90]), np.array([np.nan, np.nan, 0.93, np.nan])])
    judged = judge(
        limit_names=["tolerance", "starting torque"],
        limit_fraction=limits,
        limit_days=np.full((3, 2, 4), 900.0),
        fraction_now=np.full(4, 0.99),
        rated_uf=np.full(4, 250.0),
        latest_uf=250 * fraction[newest],
        latest_fraction_25c=fraction[newest],
        evidence=np.full(4, EVIDENCE_NONE),
        evidence_text=np.full(4, ""),
        today=dt.date(2026, 12, 3),
    )
    assert judged.limit_fraction.tolist() == [0.90, 0.90, 0.93, 0.90]
    assert (judged.risk == "replace now").tolist() == [True, False, True, False]
    assert "below the tolerance limit (225.00 \u00b5F)" in judged.reason[0]
