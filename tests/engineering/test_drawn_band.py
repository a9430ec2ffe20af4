"""The drawn band against the stated dates: crossings read off the chart's own numbers.

The capacitor page draws the calibrated path's P10, P50 and P90 at points `CHART_STEP_DAYS` apart
(`calibration.path_quantiles` at `calibration.stress_hours_ahead`) beside the dates the assessment
states (the crossing quantiles of `calibration.calibrated_crossing_quantiles` on the planning
horizon's grid, in days by `calibration.crossing_days_ahead`). For a path that falls monotonically, P(crossed by t) =
P(path below L at t) [derived], so the band's q-quantile meets the limit on the crossing's
q-quantile date: a reader who interpolates the drawn points finds the stated dates to within the
chart's resolution. The fits are ours (invented readings), varied in form, bend, terms and horizon.
"""

import dataclasses

import numpy as np
import pytest

from fleet.engineering.calibration import (
    calibrated_crossing_quantiles,
    crossing_days_ahead,
    path_quantiles,
    stress_hours_ahead,
)
from fleet.engineering.planning import PlanningSettings
from fleet.engineering.trends import MODEL_LINEAR, MODEL_LOG, TrendSettings, fit_trends

CHART_STEP_DAYS = 30.0  # the page's spacing (fleet.services.pages.CHART_STEP_DAYS)
RESOLUTION_DAYS = 3.0  # a 30-day chord on a gently bent curve, and the crossing grid's own interpolation

# The six terms (bias, spread, extra slope and sd per calendar hour, acceleration per hour, curvature per
# hour squared) at the magnitudes a fleet's back-test gives them: the curvature of about 1e-11 is the
# term a stored copy rounded to ten decimal places loses.
FILM_TERMS = (0.41, 0.48, 3.1e-7, 2.75e-7, 0.0, -1.95e-11)
ELECTROLYTIC_TERMS = (0.77, 1.16, 4.0e-7, 4.9e-7, 2e-5, -5.7e-11)


def _fleet_fit(model: str, n: int, seed: int, slope_scale: float):
    """Twelve quarterly readings of n capacitors of one part, ageing at varied rates (ours)."""
    rng = np.random.default_rng(seed)
    group = np.repeat(np.arange(n), 12)
    time_h = np.tile((np.arange(12) + 1) * 2190.0, n)
    slope = -rng.uniform(0.3, 3.0, n) * slope_scale
    measured = 10.0 * (1.0 + slope[group] * time_h) * (1 + rng.normal(0, 0.004, group.size))
    return fit_trends(
        group,
        np.zeros(n, int),
        time_h,
        measured,
        np.full(n, 10.0),
        np.full(group.size, 25.0),
        np.full(group.size, 400.0),
        np.full(n, 400.0),
        settings=TrendSettings(doubling_k=1e9, model=model),
    )


def _read_off(days, values, limit):
    """Days at which each drawn line first falls through its capacitor's limit, linear between its points
    (as a reader of the chart does); nan where it does not within the drawing."""
    below = values < np.asarray(limit, float)[..., None]
    first = np.argmax(below, axis=-1)
    found = below.any(axis=-1) & (first > 0)
    k = np.maximum(first, 1)
    before = np.take_along_axis(values, (k - 1)[..., None], -1)[..., 0]
    after = np.take_along_axis(values, k[..., None], -1)[..., 0]
    share = (before - limit) / (before - after)
    return np.where(found, days[k - 1] + share * (days[k] - days[k - 1]), np.nan)


@pytest.mark.parametrize("model", [MODEL_LINEAR, MODEL_LOG])
@pytest.mark.parametrize("terms", [FILM_TERMS, ELECTROLYTIC_TERMS], ids=["film", "electrolytic"])
@pytest.mark.parametrize("bent", [False, True], ids=["straight", "bent"])
@pytest.mark.parametrize("likely_days", [120, 700, 2500], ids=["months", "years", "years-on"])
def test_the_band_read_off_the_chart_meets_the_limit_on_the_stated_dates(model, terms, bent, likely_days):
    """[derived] The P10 edge, the P50 line and the P90 edge drawn every 30 days cross each capacitor's
    limit within 3 days of its stated P10, P50 and P90, for crossings from days to years ahead, linear and
    log-linear fits, straight and bent paths, with each family's terms (film's and electrolytics' magnitudes).
    Drawn with the terms rounded to ten decimal places, as an assessment once kept them, every case fails."""
    n = 24
    fit = _fleet_fit(model, n, seed=likely_days, slope_scale=0.5e-6)
    if bent:  # bent through the same level and slope at the newest reading
        bend, t0 = np.linspace(-2e-11, -1e-12, n), fit.stress_hours_now
        fit = dataclasses.replace(
            fit,
            curvature=bend,
            intercept=fit.intercept + bend * t0 * t0,
            slope_per_hour=fit.slope_per_hour - 2.0 * bend * t0,
        )
    # Each capacitor's limit where its own straight path would be about `likely_days` ahead.
    limit = fit.fraction_now * (1.0 + fit.slope_now() * fit.stress_rate * 24.0 * likely_days)
    per_capacitor = np.tile(np.asarray(terms, float)[:, None], (1, n))
    horizon = fit.stress_rate * PlanningSettings().horizon_days * 24.0
    stated = crossing_days_ahead(
        calibrated_crossing_quantiles(fit, limit, per_capacitor, horizon), fit.stress_hours_now, fit.stress_rate
    )
    # The page draws up to a quarter past the late date, at most ten years ahead: here the ten years.
    drawn_days = np.arange(0, int(10 * 365 / CHART_STEP_DAYS) + 1) * CHART_STEP_DAYS
    stored = (
        fit.intercept,
        fit.slope_per_hour,
        fit.bend(),
        (fit.covariance[:, 0, 0], fit.covariance[:, 0, 1], fit.covariance[:, 1, 1]),
        fit.stress_hours_now,
        fit.stress_rate,
        per_capacitor,
    )
    drawn = np.stack(
        [
            path_quantiles(model, *stored, stress_hours_ahead(day, fit.stress_hours_now, fit.stress_rate))
            for day in drawn_days
        ],
        axis=-1,
    )
    read = _read_off(drawn_days, drawn, limit)  # (3, n): P10, P50, P90 as read off the chart
    shown = np.isfinite(stated) & (stated > 0) & (stated < drawn_days[-1] - 91)
    assert shown.sum() >= 2 * n  # most of the three dates of most capacitors are on the chart
    assert np.isfinite(read[shown]).all()
    assert np.abs(read[shown] - stated[shown]) == pytest.approx(0.0, abs=RESOLUTION_DAYS)
    # Beyond the drawing, or never: nothing drawn crosses it earlier than the drawing's end.
    assert not np.isfinite(read[~np.isfinite(stated)]).any()


def test_a_crossing_already_made_is_dated_through_the_readings_stress_not_the_long_run_rate():
    """[derived] Between two readings the stress hours grow as the readings say (a hot season fast, a cold one slow),
    so a crossing made between them is dated on the straight line through their (stress hours, day) points, where
    the capacitor page draws it; ahead of the newest reading, and before the first, the long-run rate as before. A
    demo check: past crossings' stated dates were a median 12 days (up to 39) from the drawn band's."""
    from fleet.engineering.calibration import crossing_days_through_readings

    stress_now, rate = np.array([1500.0, 800.0]), np.array([0.5, 0.5])  # stress hours per calendar hour
    # Capacitor 0 read at days -200, -100 and 0 (its newest) with 0, 1000 and 1500 stress hours: a hot first
    # hundred days; capacitor 1 read once, at 800.
    column = np.array([0, 0, 0, 1])
    tau = np.array([0.0, 1000.0, 1500.0, 800.0])
    days = np.array([-200.0, -100.0, 0.0, 0.0])
    crossings = np.array([[500.0, 700.0], [1250.0, 900.0], [2700.0, -1.0]])
    dated = crossing_days_through_readings(crossings, stress_now, rate, column, tau, days)
    assert dated[0, 0] == pytest.approx(-150.0)  # halfway through the hot hundred days (long-run rate: -83)
    assert dated[1, 0] == pytest.approx(-50.0)
    assert dated[2, 0] == pytest.approx((2700.0 - 1500.0) / (0.5 * 24.0))  # ahead: the long-run rate
    assert dated[0, 1] == pytest.approx((700.0 - 800.0) / (0.5 * 24.0))  # before its only reading: long-run
    assert dated[1, 1] == pytest.approx((900.0 - 800.0) / (0.5 * 24.0))
