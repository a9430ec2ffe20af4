"""Calibrated bands, long-run stress projection and temperature coefficients from readings.

Simulations here are ours (invented, for testing the methods' promises). The
independent check of the forecast, on a fleet simulated without the fitter's
assumptions, is tests/test_forecast_simulation.py.
"""

import numpy as np
import pytest

from fleet.engineering.calibration import calibrated, estimate_calibration
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


def test_calibrated_crossing_quantiles_match_a_monte_carlo_of_the_widened_path():
    """[derived] The closed form of the calibrated fit against sampling its model:
    z(t) = b0 + b1((1 + a) t - a t0) + spread (1 + a) m1 (t - t0) eps."""
    group, time_h, measured, temperature, _, part = _small_fleet(n=40)
    fit = _fit(group, time_h, measured, temperature, part)
    bias, spread, limit = 0.4, 0.3, 0.94
    closed = crossing_quantiles(calibrated(fit, np.full(40, bias), np.full(40, spread)), limit)
    rng = np.random.default_rng(0)
    for i in (0, 7, 19):
        b = rng.multivariate_normal([fit.intercept[i], fit.slope_per_hour[i]], fit.covariance[i], 200_000)
        eps = rng.standard_normal(200_000)
        t0 = fit.stress_hours_now[i]
        slope = b[:, 1] * (1 + bias) + spread * (1 + bias) * fit.slope_per_hour[i] * eps
        intercept = b[:, 0] - bias * t0 * b[:, 1] - spread * (1 + bias) * fit.slope_per_hour[i] * eps * t0
        crossing = (limit - intercept) / slope
        falling = slope < 0
        sampled = np.quantile(np.where(falling, crossing, np.inf), [0.1, 0.5, 0.9])
        assert closed[:, i] == pytest.approx(sampled, rel=0.02)


def test_calibration_recovers_a_known_bias_and_spread():
    """Method of moments and weighted least squares on errors drawn from the model (ours)."""
    rng = np.random.default_rng(2)
    n = 20_000
    x = -rng.uniform(0.002, 0.05, n)
    known = rng.uniform(1e-5, 4e-5, n)
    error = 0.5 * x + rng.normal(0, np.sqrt(known + (0.3 * x) ** 2))
    result = estimate_calibration(np.zeros(n, int), np.arange(n), x, error, known, 1)
    assert result.slope_bias[0] == pytest.approx(0.5, abs=0.03)
    assert result.slope_spread[0] == pytest.approx(0.3, abs=0.03)


def test_thin_history_keeps_the_conservative_defaults():
    result = estimate_calibration([0, 0, 0], [1, 1, 2], [-0.01, -0.02, -0.01], [0.0, -0.01, 0.01], [1e-5] * 3, 2)
    assert result.slope_bias.tolist() == [0.0, 0.0]
    assert result.slope_spread.tolist() == [0.35, 0.35]


def test_projected_stress_rate_is_the_mean_over_the_seasons_not_the_last_quarter():
    """[derived] Case temperature swinging +/-10 K over the year with the 10-K
    rule: the yearly mean acceleration is I0(ln2) = 1.13, whichever season the
    newest reading fell in; the last quarter's own factor would range 0.6-1.8."""
    settings = TrendSettings()
    rate = []
    for phase in np.linspace(0, 2 * np.pi, 8, endpoint=False):
        time_h = np.arange(1, 25) * 8766.0 / 12  # monthly readings for two years
        temperature = 40.0 + 10.0 * np.cos(2 * np.pi * time_h / 8766.0 + phase)
        group = np.zeros(time_h.size, int)
        _, r = stress_hours(group, time_h, temperature, np.full(time_h.size, 400.0), 400.0, 1, settings)
        rate.append(r[0])
    assert np.array(rate) == pytest.approx(1.13, rel=0.05)


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
