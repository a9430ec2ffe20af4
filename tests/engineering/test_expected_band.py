"""The band scores a back-test should show if every forecast were right, given how long each was followed.

References: `scipy.stats.lognorm` (its cdf and ppf) as the independent implementation of the
log-normal; the truncation argument itself is elementary probability (a distribution observed only
up to a follow-up end), checked here by simulation rather than by the formula it is built on.
"""

import numpy as np
import pytest
from scipy import stats

from fleet.engineering.backtest import expected_band_shares, probability_crossed_by, score
from fleet.engineering.planning import RISK_SOUND

LEVELS = (0.1, 0.2, 0.3, 0.4, 0.5, 0.9)


def _log_normal_forecasts(n, seed):
    rng = np.random.default_rng(seed)
    median_days = rng.uniform(300, 6000, n)
    sigma = rng.uniform(0.3, 1.2, n)
    distributions = stats.lognorm(s=sigma, scale=median_days)
    return distributions, np.stack([distributions.ppf(p) for p in LEVELS]), rng


def test_the_probability_read_off_log_normal_quantiles_is_scipys_log_normal_cdf():
    """[pub] scipy.stats.lognorm; [derived] Between and beyond the quantiles: the normal score is linear in log time
    for a log-normal, so the reading must equal scipy.stats.lognorm.cdf everywhere, not only at the quantiles."""
    distributions, level_days, rng = _log_normal_forecasts(2000, seed=1)
    for day in (rng.uniform(1, 20000, 2000), level_days[0] * 0.3, level_days[-1] * 3.0, level_days[2]):
        np.testing.assert_allclose(probability_crossed_by(LEVELS, level_days, day), distributions.cdf(day), atol=1e-9)


def test_no_probability_is_counted_past_a_quantile_beyond_the_horizon():
    """[derived] A P90 beyond the horizon (inf) says only that the crossing is later than the horizon with at
    least 10 % probability: past the last finite quantile the reading stops at 0.9, never above."""
    days = np.array([[100.0, 100.0], [200.0, 200.0], [300.0, 300.0], [400.0, 400.0], [500.0, 500.0], [2000.0, np.inf]])
    far = probability_crossed_by(LEVELS, days, np.array([1e6, 1e6]))
    assert far[0] == pytest.approx(1.0)
    assert far[1] == pytest.approx(0.9)
    assert probability_crossed_by(LEVELS, np.full((6, 1), np.inf), np.array([1e6]))[0] == 0.0


def test_right_forecasts_followed_briefly_show_many_crossings_before_p10_and_the_expected_share_says_so():
    """Ours (a simulation testing the method's promise; the forecasts drawn from scipy.stats.lognorm): Forecasts
    drawn exactly right, each followed 200 to 1,500 days: among the crossings seen, far more than one in ten lie
    before P10, and `expected_band_shares` predicts the observed shares."""
    distributions, level_days, rng = _log_normal_forecasts(40000, seed=2)
    crossing = distributions.rvs(random_state=rng)
    followed = rng.uniform(200, 1500, crossing.size)
    crossed_day = np.where(crossing <= followed, crossing, np.nan)
    days = level_days[[0, 4, 5]]
    risk = np.full(crossing.size, RISK_SOUND)
    observed = score(days, risk, crossed_day, followed, quantiles=(LEVELS, level_days))
    assert observed["before_p10"] > 0.3  # the follow-up's selection, not a miscalibration
    assert observed["expected_before_p10"] == pytest.approx(observed["before_p10"], abs=0.015)
    assert observed["expected_inside_p10_p90"] == pytest.approx(observed["inside_p10_p90"], abs=0.015)
    assert observed["expected_after_p90"] == pytest.approx(observed["after_p90"], abs=0.01)
    assert observed["expected_crossed"] == pytest.approx(observed["crossed"], rel=0.03)


def test_forecasts_running_early_are_told_apart_from_right_ones():
    """Ours (a simulation testing the method's promise): The same forecasts, but the capacitors really last 60 %
    longer: fewer crossings than expected, fewer before P10 than expected. The expected figures do not follow the
    outcome."""
    distributions, level_days, rng = _log_normal_forecasts(40000, seed=3)
    crossing = 1.6 * distributions.rvs(random_state=rng)
    followed = rng.uniform(200, 1500, crossing.size)
    crossed_day = np.where(crossing <= followed, crossing, np.nan)
    observed = score(
        level_days[[0, 4, 5]], np.full(crossing.size, RISK_SOUND), crossed_day, followed, quantiles=(LEVELS, level_days)
    )
    assert observed["crossed"] < 0.8 * observed["expected_crossed"]
    assert observed["before_p10"] < observed["expected_before_p10"] - 0.05


def test_followed_past_every_p90_the_expected_shares_are_the_nominal_ones():
    """[derived] Followed long enough to see every crossing, the expected shares are the band's own 10/80/10."""
    _, level_days, _ = _log_normal_forecasts(500, seed=4)
    shares = expected_band_shares(LEVELS, level_days, np.full(500, 1e9))
    assert shares["expected_before_p10"] == pytest.approx(0.1, abs=1e-6)
    assert shares["expected_after_p90"] == pytest.approx(0.1, abs=1e-6)
    assert shares["expected_inside_p10_p90"] == pytest.approx(0.8, abs=1e-6)
    assert expected_band_shares(LEVELS, np.full((6, 3), np.inf), np.full(3, 100.0))["expected_before_p10"] is None
