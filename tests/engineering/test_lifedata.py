"""Weibull life data against published data and reference libraries."""

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from fleet.engineering.lifedata import (
    NoWeibullEstimate,
    WeibullFit,
    age_replacement,
    expected_failures,
    fit_weibull,
    probability_plot_points,
    successor_failures,
    tolerance_life_times,
)

# Lieblein and Zelen's 23 ball-bearing failure times, millions of revolutions, as
# reprinted by Lawless and by Meeker and Escobar [pub].
BEARINGS = np.array([
    17.88, 28.92, 33.00, 41.52, 42.12, 45.60, 48.48, 51.84, 51.96, 54.12, 55.56, 67.80,
    68.64, 68.64, 68.88, 84.12, 93.12, 98.64, 105.12, 105.84, 127.92, 128.04, 173.40,
])  # fmt: skip


def test_ball_bearings_give_the_published_weibull():
    """[pub] beta about 2.10, eta about 81.9 (three libraries agree)."""
    fit = fit_weibull(BEARINGS, np.ones(BEARINGS.size, bool))
    assert fit.beta == pytest.approx(2.10, abs=0.005)
    assert fit.eta == pytest.approx(81.9, abs=0.05)
    assert fit.b_life() == pytest.approx(81.88 * (-np.log(0.9)) ** (1 / 2.102), rel=1e-3)
    low, high = fit.b_life_bounds()
    assert low < fit.b_life() < high


def test_right_censored_fit_solves_the_weibull_likelihood_equations():
    """[pub] Lawless, Statistical Models and Methods for Lifetime Data, the Weibull likelihood
    equations with right censoring: beta solves sum(t^b ln t)/sum(t^b) - 1/b = mean ln t over the
    r failures, and eta^beta = sum(t^beta)/r. Solved here with brentq, independently of the fit."""
    rng = np.random.default_rng(4)
    life = rng.weibull(2.5, 300) * 1000.0
    censor = rng.uniform(200.0, 1500.0, 300)
    observed, failed = np.minimum(life, censor), life <= censor

    def profile_score(b):
        weights = (observed / observed.max()) ** b
        return np.sum(weights * np.log(observed)) / np.sum(weights) - 1.0 / b - np.log(observed[failed]).mean()

    beta = optimize.brentq(profile_score, 0.2, 20.0, xtol=1e-14)
    eta = (np.sum(observed**beta) / failed.sum()) ** (1.0 / beta)
    ours = fit_weibull(observed, failed)
    assert ours.beta == pytest.approx(beta, rel=1e-6)
    assert ours.eta == pytest.approx(eta, rel=1e-6)
    assert (ours.failures, ours.suspensions) == (int(failed.sum()), int((~failed).sum()))


def test_interval_bounds_cover_the_true_shape_about_as_claimed():
    """[derived] Fisher-matrix 90 % bounds on beta hold the true value in most of 300 samples."""
    rng = np.random.default_rng(8)
    inside = 0
    for _ in range(300):
        fit = fit_weibull(rng.weibull(1.8, 40) * 500.0, np.ones(40, bool))
        (low, high), _ = fit.parameter_bounds(0.90)
        inside += low <= 1.8 <= high
    assert 0.84 <= inside / 300 <= 0.95


def test_median_ranks_without_suspensions_are_benards():
    """[pub] Benard: (i - 0.3)/(n + 0.4) for the i-th of n failures."""
    times, fractions = probability_plot_points([30.0, 10.0, 20.0], [True, True, True])
    assert times.tolist() == [10.0, 20.0, 30.0]
    assert fractions == pytest.approx([(i - 0.3) / 3.4 for i in (1, 2, 3)])


def test_johnson_ranks_with_a_suspension_between_failures():
    """[derived] Johnson: a suspension between failures raises the later ranks by
    (n + 1 - previous) / (1 + units beyond): failures at 10 and 30, a suspension at 20,
    n = 3 gives ranks 1 and 1 + 3/2 = 2.5."""
    _, fractions = probability_plot_points([10.0, 20.0, 30.0], [True, False, True])
    assert fractions == pytest.approx([(1 - 0.3) / 3.4, (2.5 - 0.3) / 3.4])


def test_age_replacement_has_an_optimum_only_for_wear_out():
    """[mem] Barlow and Proschan: a finite optimum needs beta > 1 and Cf > Cp."""
    wear_out = fit_weibull(BEARINGS, np.ones(BEARINGS.size, bool))
    plan = age_replacement(wear_out, planned_cost=1.0, failure_cost=10.0)
    assert plan.optimum_age is not None and plan.optimum_age < wear_out.eta
    assert plan.optimum_cost_per_time < plan.run_to_failure_cost_per_time
    # Check the optimum against a direct numerical minimisation of C(T).
    ages = np.linspace(1, 200, 20000)
    fine = age_replacement(wear_out, 1.0, 10.0, ages=ages)
    assert plan.optimum_age == pytest.approx(ages[np.argmin(fine.cost_per_time)], rel=0.02)
    random_failures = WeibullFit(beta=1.0, eta=100.0, failures=10, suspensions=0, covariance_log=np.eye(2))
    assert age_replacement(random_failures, 1.0, 10.0).optimum_age is None
    assert age_replacement(wear_out, planned_cost=10.0, failure_cost=5.0).optimum_age is None


@pytest.mark.parametrize(
    ("beta", "eta", "planned_cost", "failure_cost"),
    [(1.48, 5.5, 60.0, 10_000.0), (1.48, 5.5, 60.0, 100_000.0), (1.48, 5.5, 10.0, 2_500.0), (1.48, 5.5, 60.0, 400.0),
     (3.0, 10.0, 1.0, 5.0), (1.1, 2.0, 1.0, 1_000.0)],
)  # fmt: skip
def test_the_optimum_age_solves_the_barlow_proschan_condition(beta, eta, planned_cost, failure_cost):
    """[pub] Barlow and Proschan, Mathematical Theory of Reliability (1965): with a rising hazard h, the
    optimum age T* solves h(T) integral_0^T R dt - F(T) = Cp / (Cf - Cp). Solved here with scipy's quad and
    brentq, apart from the product's search. Failures that cost far more than a planned change put T* far
    below eta (0.29 years for beta 1.48, eta 5.5 years, 60 against 10,000): the search missed such ages
    and said that no replacement age beat running to failure."""
    fit = WeibullFit(beta=beta, eta=eta, failures=10, suspensions=0, covariance_log=np.eye(2))

    def condition(age):
        hazard = beta / eta * (age / eta) ** (beta - 1)
        area = integrate.quad(lambda t: np.exp(-((t / eta) ** beta)), 0.0, age, epsabs=1e-13, epsrel=1e-12)[0]
        return hazard * area - (1.0 - np.exp(-((age / eta) ** beta))) - planned_cost / (failure_cost - planned_cost)

    expected = optimize.brentq(condition, 1e-6 * eta, 50.0 * eta, xtol=1e-12)
    plan = age_replacement(fit, planned_cost, failure_cost)
    assert plan.optimum_age == pytest.approx(expected, rel=1e-4)
    assert plan.optimum_cost_per_time < plan.run_to_failure_cost_per_time
    assert plan.ages.min() <= plan.optimum_age <= plan.ages.max()  # the curve drawn shows its minimum


def test_conditional_failure_probability():
    """1 - R(t + d)/R(t); for beta = 1 it does not depend on age (no memory)."""
    fit = fit_weibull(BEARINGS, np.ones(BEARINGS.size, bool))
    assert fit.conditional_failure(80.0, 10.0) > fit.conditional_failure(20.0, 10.0)
    memoryless = WeibullFit(beta=1.0, eta=100.0, failures=10, suspensions=0, covariance_log=np.eye(2))
    assert memoryless.conditional_failure(500.0, 10.0) == pytest.approx(1 - np.exp(-0.1))
    assert memoryless.conditional_failure(0.5, 10.0) == pytest.approx(1 - np.exp(-0.1))


def test_expected_failures_match_scipy_conditional_probabilities():
    """[pub] scipy.stats.weibull_min: P(fail in [a+s, a+e] | alive at a) = (sf(a+s) - sf(a+e)) / sf(a);
    [derived] nothing counts after the planned replacement, and a unit fails at most once."""
    beta = np.array([2.5, 1.0, 3.2])
    eta = np.array([8.0, 8.0, 6.0])
    age = np.array([3.0, 5.0, 9.5])  # the third is far past its scale: a large cumulative hazard
    until = np.array([np.inf, 0.5, np.inf])
    edges = np.linspace(0.0, 1.0, 13)  # twelve months, in years
    got = expected_failures(beta, eta, age, until, edges)
    assert got.shape == (3, 12)
    for unit in range(3):
        weibull = stats.weibull_min(beta[unit], scale=eta[unit])
        stop = np.minimum(edges, until[unit])
        want = (weibull.sf(age[unit] + stop[:-1]) - weibull.sf(age[unit] + stop[1:])) / weibull.sf(age[unit])
        assert got[unit] == pytest.approx(want, rel=1e-9, abs=1e-12)
    assert np.all(got[1, 6:] == 0.0)  # replaced after six months
    assert got[0].sum() == pytest.approx(
        1 - stats.weibull_min(2.5, scale=8.0).sf(4.0) / stats.weibull_min(2.5, scale=8.0).sf(3.0)
    )
    assert np.all(got.sum(axis=1) <= 1.0)


def _lawless_estimate(observed, failed, highest_shape=20.0):
    """[pub] Lawless, Statistical Models and Methods for Lifetime Data: the Weibull likelihood equations
    with right censoring (see above), solved with brentq; ages scaled by the oldest so that t^b stays finite."""
    scaled = observed / observed.max()

    def profile_score(b):
        weights = scaled**b
        return np.sum(weights * np.log(scaled)) / np.sum(weights) - 1.0 / b - np.log(scaled[failed]).mean()

    beta = optimize.brentq(profile_score, 0.2, highest_shape, xtol=1e-14)
    return beta, observed.max() * (np.sum(scaled**beta) / failed.sum()) ** (1.0 / beta)


def _observed_information(beta, eta, observed, failed):
    """[derived] Minus the Hessian of the right-censored Weibull log-likelihood in (ln beta, ln eta), in closed
    form: with s = ln t - ln eta and w = exp(beta s), l = r ln beta - r ln eta + (beta - 1) sum_f s - sum w."""
    s = np.log(observed) - np.log(eta)
    w = np.exp(beta * s)
    r = failed.sum()
    d_uu = beta * s[failed].sum() - np.sum(beta * s * w * (1.0 + beta * s))
    d_vv = -(beta**2) * w.sum()
    d_uv = -beta * r + beta * np.sum(w * (1.0 + beta * s))
    return -np.array([[d_uu, d_uv], [d_uv, d_vv]])


def test_tied_ages_give_the_likelihood_solution_and_bounds_from_the_information():
    """Failures tied with each other and with a suspension (several capacitors fitted and removed on the same
    days): the estimate solves Lawless's equations [pub] and the covariance is the inverse of the closed-form
    observed information [derived]."""
    observed = np.array([2.0, 2.0, 3.0, 5.0, 5.0, 2.0, 4.0, 6.0])
    failed = np.array([True, True, True, True, True, False, False, False])
    beta, eta = _lawless_estimate(observed, failed)
    ours = fit_weibull(observed, failed)
    assert ours.beta == pytest.approx(beta, rel=1e-6)
    assert ours.eta == pytest.approx(eta, rel=1e-6)
    assert ours.bounds_available
    covariance = np.linalg.inv(_observed_information(beta, eta, observed, failed))
    assert ours.covariance_log == pytest.approx(covariance, rel=1e-3, abs=1e-6)
    low, high = ours.b_life_bounds()
    assert low < ours.b_life() < high


# Ages in days of one part's seven capacitors: three fitted on one day and removed on one day (two failed,
# one replaced on plan), four in service since later days (ours, after a fresh-eyes import that broke the fit).
TIED_AT_THE_OLDEST = np.array([1596.0, 1596.0, 1596.0, 913.0, 913.0, 913.0, 1150.0])
TIED_FAILED = np.array([True, True, False, False, False, False, False])


def test_failures_all_at_the_oldest_age_have_no_estimate_and_say_why():
    """[derived] With every failure at the oldest age, the profile log-likelihood is r ln(beta) plus a term
    that tends to a constant: it grows without bound, so there is no maximum to report, nor bounds."""
    t, failed = TIED_AT_THE_OLDEST, TIED_FAILED

    def profile_log_likelihood(b):
        scaled = t / t.max()
        return (
            failed.sum() * np.log(b)
            + (b - 1) * np.log(scaled[failed]).sum()
            - failed.sum() * np.log(np.sum(scaled**b) / failed.sum())
        )

    assert np.all(np.diff([profile_log_likelihood(b) for b in (10.0, 100.0, 1e3, 1e4)]) > 0)
    with pytest.raises(NoWeibullEstimate, match="same age and no capacitor has outlived it"):
        fit_weibull(t, failed)
    # One capacitor a day older than the failures (still in service) gives the likelihood its maximum.
    older, still = np.append(t, 1597.0), np.append(failed, False)
    beta, eta = _lawless_estimate(older, still, highest_shape=1e6)
    fit = fit_weibull(older, still)
    assert (fit.beta, fit.eta) == (pytest.approx(beta, rel=1e-5), pytest.approx(eta, rel=1e-9))
    assert fit.bounds_available


def test_an_information_matrix_that_cannot_be_inverted_gives_the_estimate_without_bounds():
    """A capacitor a few seconds older than two tied failures: the estimate exists (Lawless's equations [pub])
    but its shape is so steep that the information matrix overflows; the fit reports the estimate and NaN
    bounds (`bounds_available` false) instead of an error [derived]."""
    older, still = np.append(TIED_AT_THE_OLDEST, 1596.0001), np.append(TIED_FAILED, False)
    beta, eta = _lawless_estimate(older, still, highest_shape=1e9)
    fit = fit_weibull(older, still)
    assert fit.beta == pytest.approx(beta, rel=1e-3)
    assert fit.eta == pytest.approx(eta, rel=1e-9)
    assert not fit.bounds_available
    assert np.isnan(fit.b_life_bounds()).all() and np.isnan(fit.parameter_bounds()).all()
    assert fit.b_life() == pytest.approx(eta * (-np.log(0.9)) ** (1 / beta), rel=1e-6)


def test_successor_failures_of_exponential_units_follow_the_renewal_function():
    """[pub] for exponential lives the renewal function is M(t) = t / eta (a Poisson process; Ross,
    Introduction to Probability Models, ch. 7): a unit fitted mid-month 0 and renewed at each failure fails
    11.5 / 12 / eta times in the rest of the year, whichever month the failures fall in."""
    edges = np.linspace(0.0, 1.0, 13)
    installed = np.zeros((1, 12))
    installed[0, 0] = 1.0
    got = successor_failures([1.0], [10.0], installed, edges)
    assert got.sum() == pytest.approx((11.5 / 12) / 10.0, rel=2e-3)
    assert np.all(got[0, 1:] > 0) and got[0, 0] > 0  # from its own month on, never before


def test_successor_failures_of_wearing_units_match_a_simulated_renewal_process():
    """[derived] against a Monte Carlo of the renewal process itself (each failure replaced at its own
    instant by a new unit with a fresh Weibull life; scipy's weibull_min draws): wear-out start
    capacitors (beta 2.5, eta 1.5 years), units fitted in months 0, 3 and 7; the model fits successors at
    their month's midpoint, within 3 % of the year's total and 0.01 a month."""
    beta, eta = 2.5, 1.5
    edges = np.linspace(0.0, 1.0, 13)
    installed = np.zeros((1, 12))
    installed[0, [0, 3, 7]] = [4.0, 2.0, 3.0]
    got = successor_failures([beta], [eta], installed, edges)[0]
    rng = np.random.default_rng(20261203)
    draws = 200_000
    counts = np.zeros(12)
    for month, units in ((0, 4.0), (3, 2.0), (7, 3.0)):
        clock = np.full(draws, (edges[month] + edges[month + 1]) / 2)
        alive = np.ones(draws, bool)
        while alive.any():
            clock[alive] += stats.weibull_min(beta, scale=eta).rvs(size=int(alive.sum()), random_state=rng)
            alive &= clock < 1.0
            counts += (
                units * np.bincount(np.searchsorted(edges, clock[alive], side="right") - 1, minlength=12)[:12] / draws
            )
    assert got.sum() == pytest.approx(counts.sum(), rel=0.03)
    assert np.abs(got - counts).max() < 0.01


def test_an_age_is_written_in_the_unit_it_is_read_in():
    """[derived] 0.29 years is 3.48 months, 0.02 years 7.3 days (365.25 days a year, 12 months); from one year
    on, years; from one month (1/12 year) on, months; below, whole days."""
    from fleet.engineering.lifedata import age_in_words, age_unit

    assert [age_in_words(y) for y in (2.93, 1.0, 0.29, 1 / 12, 0.02, 1 / 365.25)] == [
        "2.9\u00a0years", "1.0\u00a0years", "3.5\u00a0months", "1.0\u00a0months", "7\u00a0days", "1\u00a0day",
    ]  # fmt: skip
    assert [age_unit(y) for y in (2.93, 0.29, 0.02, 0.0)] == [
        ("years", 1.0), ("months", 12.0), ("days", 365.25), ("days", 365.25),
    ]  # fmt: skip


def test_leaving_tolerance_is_the_first_reading_out_or_failure_else_a_suspension_at_the_last_reading():
    """Leaving tolerance is a soft failure, dated when a degradation path is seen past its threshold (Meeker
    and Escobar, Statistical Methods for Reliability Data, 1998, ch. 13, from memory, unverified); a unit not
    seen past it is right-censored at the last day it was known within (common practice of life-data
    analysis, no single source). Days on a common count, NaN where there is none."""
    nan = np.nan
    fitted = np.array([0.0, 100.0, 0.0, 0.0, 50.0, 0.0])
    first_out = np.array([400.0, nan, 700.0, nan, nan, nan])  # first reading out of tolerance
    last_read = np.array([500.0, 300.0, 800.0, 600.0, nan, nan])
    failed = np.array([nan, 250.0, 650.0, nan, 90.0, nan])  # removal day of a failure in service
    age, left = tolerance_life_times(fitted, first_out, last_read, failed)
    # read out; failed in service before any reading out; failed before its first reading out; last read
    # within, still in service or replaced on plan; failed, never read; never read, not failed: unknown
    np.testing.assert_array_equal(left, [True, True, True, False, True, False])
    np.testing.assert_array_equal(age[:5], [400.0, 150.0, 650.0, 600.0, 40.0])
    assert np.isnan(age[5])
