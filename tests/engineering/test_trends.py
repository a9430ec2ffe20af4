"""Trend fits on simulated fleets whose true ageing is known.

The simulation is ours (invented, for testing): linear paths with a population
spread per part, quarterly readings, meter noise of 0.6 %. It shares the
fitter's own assumptions, so it checks the arithmetic of the method (slopes
recovered, strays flagged, the closed-form quantiles), not the forecast: that
is checked on a fleet simulated independently (tests/test_forecast_simulation.py)
and by back-tests on history (fleet/services/backtest.py).
"""

from types import SimpleNamespace

import numpy as np
import pytest

from fleet.engineering.calibration import path_quantiles
from fleet.engineering.trends import (
    MODEL_LINEAR,
    MODEL_LOG,
    TrendSettings,
    _conditional_bend,
    crossing_quantiles,
    fit_trends,
)

TEMPCO = -200e-6


def simulate(n_capacitors=3000, seed=11, readings=(1, 13), noise=0.006, log_paths=False, slope_scale=1.0):
    rng = np.random.default_rng(seed)
    part = rng.integers(0, 3, n_capacitors)
    mean_slope = slope_scale * np.array([-2e-6, -4e-6, -1e-6])[part]
    slope = rng.normal(mean_slope, 0.3 * np.abs(mean_slope))
    intercept = rng.normal(1.0, 0.015, n_capacitors)
    count = rng.integers(readings[0], readings[1], n_capacitors)
    group = np.repeat(np.arange(n_capacitors), count)
    step = np.concatenate([np.arange(k) for k in count])
    time_h = (step + 1) * 2190.0 + rng.uniform(-100, 100, group.size)
    temperature = rng.uniform(30, 50, group.size)
    # Stress hours equal calendar hours at 40 C and rated voltage; correct per reading.
    if log_paths:
        true_fraction = np.exp(np.log(intercept[group]) + slope[group] * time_h)
    else:
        true_fraction = intercept[group] + slope[group] * time_h
    measured = 10.0 * true_fraction * (1 + TEMPCO * (temperature - 25)) * (1 + rng.normal(0, noise, group.size))
    return dict(
        group=group,
        part=part,
        time_h=time_h,
        capacitance_uf=measured,
        temperature_c=temperature,
        slope=slope,
        intercept=intercept,
        count=count,
    )


def fit(sim, temperature_as_reference=True, dielectric=None, **kwargs):
    n = len(sim["part"])
    # Hold stress time = calendar time: acceleration 1 at 40 C, rated voltage.
    return fit_trends(
        sim["group"],
        sim["part"],
        sim["time_h"],
        sim["capacitance_uf"],
        np.full(n, 10.0),
        sim["temperature_c"],
        np.full(sim["group"].size, 400.0),
        np.full(n, 400.0),
        settings=TrendSettings(doubling_k=1e9, **kwargs),
        dielectric=dielectric,
    )


def test_known_slopes_are_recovered():
    sim = simulate()
    result = fit(sim, model=MODEL_LINEAR)
    rich = sim["count"] >= 8
    assert np.corrcoef(result.slope_per_hour[rich], sim["slope"][rich])[0, 1] > 0.95
    assert np.mean(result.slope_per_hour) == pytest.approx(np.mean(sim["slope"]), rel=0.03)
    z = (sim["slope"] - result.slope_per_hour) / result.slope_sd
    assert abs(z.mean()) < 0.1
    assert z.std() == pytest.approx(1.0, abs=0.1)


def test_closed_form_quantiles_cover_crossings_of_paths_drawn_from_the_fitters_model():
    """A unit test of the closed-form crossing quantiles only: on paths drawn from
    the fitter's own model (straight lines, stress time = calendar time), the
    P10-P90 band holds about 80 % of 3000 true crossings."""
    sim = simulate()
    result = fit(sim, model=MODEL_LINEAR)
    limit = 0.94
    q = crossing_quantiles(result, limit)
    true_crossing = (limit - sim["intercept"]) / sim["slope"]
    future = true_crossing > result.stress_hours_now
    inside = (q[0][future] <= true_crossing[future]) & (true_crossing[future] <= q[2][future])
    below, above = np.mean(true_crossing[future] < q[0][future]), np.mean(true_crossing[future] > q[2][future])
    assert inside.mean() == pytest.approx(0.80, abs=0.04)
    assert below == pytest.approx(0.10, abs=0.04)
    assert above == pytest.approx(0.10, abs=0.04)


def test_a_stray_reading_is_flagged_not_followed():
    sim = simulate(n_capacitors=400, readings=(8, 9))
    clean = fit(sim, model=MODEL_LINEAR)
    target = 7
    rows = np.flatnonzero(sim["group"] == target)
    sim["capacitance_uf"][rows[4]] *= 0.5  # the wrong capacitor measured
    dirty = fit(sim, model=MODEL_LINEAR)
    assert dirty.flagged[rows[4]]
    assert dirty.flagged.sum() <= 2
    assert dirty.slope_per_hour[target] == pytest.approx(clean.slope_per_hour[target], rel=0.05)


def test_a_capacitor_with_one_reading_gets_its_parts_slope_and_low_confidence():
    sim = simulate(n_capacitors=600, readings=(1, 13))
    result = fit(sim, model=MODEL_LINEAR)
    single = np.flatnonzero(sim["count"] == 1)
    assert result.low_confidence[single].all()
    part_means = np.array([-2e-6, -4e-6, -1e-6])
    assert result.slope_per_hour[single] == pytest.approx(part_means[sim["part"][single]], rel=0.25)
    assert not result.low_confidence[sim["count"] >= 3].any()


def test_stored_priors_reproduce_the_fleet_fit_for_a_subset():
    sim = simulate(n_capacitors=500)
    fleet = fit(sim, model=MODEL_LINEAR)
    subset = np.arange(40)
    rows = np.isin(sim["group"], subset)
    alone = fit_trends(
        sim["group"][rows],
        sim["part"][subset],
        sim["time_h"][rows],
        sim["capacitance_uf"][rows],
        np.full(40, 10.0),
        sim["temperature_c"][rows],
        np.full(rows.sum(), 400.0),
        np.full(40, 400.0),
        settings=TrendSettings(doubling_k=1e9, model=MODEL_LINEAR),
        priors=fleet.priors,
    )
    assert alone.slope_per_hour == pytest.approx(fleet.slope_per_hour[subset], rel=1e-9)


def test_curved_paths_choose_the_log_linear_model_and_straight_ones_the_linear():
    curved = simulate(n_capacitors=600, readings=(10, 14), noise=0.003, log_paths=True, slope_scale=6.0)
    straight = simulate(n_capacitors=600, readings=(10, 14), noise=0.003, log_paths=False, slope_scale=6.0)
    # Part 2 ages slowest: over this window its paths are too straight to tell the
    # models apart, and either serves; parts 0 and 1 curve enough to decide.
    resolvable = curved["part"] != 2
    assert set(fit(curved).model[resolvable]) == {MODEL_LOG}
    assert set(fit(straight).model) == {MODEL_LINEAR}


def test_the_path_band_holds_about_80_percent_of_the_true_paths():
    """The drawn P10-P90 band of the path (`calibration.path_quantiles`, no calibration terms) a
    quarter past the newest reading holds about 80 % of the simulated true values [derived: a
    posterior whose prior is the simulation's own population]."""
    sim = simulate(n_capacitors=2000, readings=(6, 7))
    result = fit(sim, model=MODEL_LINEAR)
    tau_next = result.stress_hours_now + 2190.0
    truth = sim["intercept"] + sim["slope"] * tau_next
    low, high = path_quantiles(
        MODEL_LINEAR,
        result.intercept,
        result.slope_per_hour,
        result.bend(),
        result.covariance,
        result.stress_hours_now,
        result.stress_rate,
        np.zeros(6),
        tau_next,
        probabilities=(0.1, 0.9),
    )
    assert np.mean((low <= truth) & (truth <= high)) == pytest.approx(0.80, abs=0.04)


def test_median_crossing_exists_for_a_tight_posterior():
    """Regression: at P50 the quadratic's two roots coincide; rounding split them by
    1e-4 h and a too-strict branch check then dropped both, losing the median date.
    The numbers are those of the capacitor that showed it."""
    path = SimpleNamespace(
        to_z=lambda fraction: np.asarray(fraction, float),
        intercept=np.array([1.0342299619950162]),
        slope_per_hour=np.array([-1.2951398711068078e-05]),
        covariance=np.array([[[9.41178743e-07, -3.01465411e-14], [-3.01465411e-14, 3.99984550e-16]]]),
    )
    q = crossing_quantiles(path, 0.95)
    assert q[1, 0] == pytest.approx((0.95 - 1.0342299619950162) / -1.2951398711068078e-05, rel=1e-6)
    assert q[0, 0] < q[1, 0] < q[2, 0]


def test_a_bend_common_to_a_parts_paths_is_recovered_and_straight_paths_keep_none():
    """Paths drawn (ours, invented) as b0 + b1 t + c t^2 with c shared by the part
    and a 20 % spread between capacitors: the pooled within-capacitor bend recovers
    c [derived], and the fit projects the bent path, so the fitted value now matches
    the truth. Straight paths (test_known_slopes_are_recovered) keep c = 0."""
    rng = np.random.default_rng(5)
    sim = simulate(n_capacitors=1500, readings=(8, 14), noise=0.003)
    bend = -4e-11  # per hour squared: about 1.5 % more loss after 20,000 h than a straight line
    own = bend * rng.normal(1.0, 0.2, len(sim["part"]))
    sim["capacitance_uf"] = sim["capacitance_uf"] + 10.0 * own[sim["group"]] * sim["time_h"] ** 2
    result = fit(sim, model=MODEL_LINEAR)
    assert result.priors.curvature == pytest.approx(np.full(3, bend), rel=0.15)
    tau_now = result.stress_hours_now
    true_now = sim["intercept"] + sim["slope"] * tau_now + own * tau_now**2
    rich = sim["count"] >= 10
    assert np.median(np.abs(result.fraction_now[rich] - true_now[rich])) < 0.003
    assert np.all(fit(simulate(), model=MODEL_LINEAR).priors.curvature == 0.0)


def test_a_capacitor_never_read_in_circuit_runs_at_its_parts_typical_voltage():
    """[derived] Two capacitors of one part age alike; one is read in circuit at 300 V
    on a 400 V part, the other only with a meter after isolation (no voltage). The
    second is stressed as its part's capacitors are (the median 300 V), not at the
    rated 400 V, so both get the same stress rate: with a voltage exponent of 10 the
    rated voltage would have made the meter-read one age 18 times faster."""
    time_h = np.tile(np.arange(1, 9) * 2190.0, 6)
    group = np.repeat(np.arange(6), 8)
    voltage = np.where(group < 3, 300.0, np.nan)
    result = fit_trends(
        group,
        np.zeros(6, int),
        time_h,
        10.0 * (1 - 1e-6 * time_h),
        np.full(6, 10.0),
        np.full(group.size, 40.0),
        voltage,
        np.full(6, 400.0),
        settings=TrendSettings(model=MODEL_LINEAR),
    )
    assert result.stress_rate[3:] == pytest.approx(result.stress_rate[:3], rel=1e-9)
    assert result.stress_rate[0] == pytest.approx(0.75**10, rel=1e-6)


def test_the_prior_bend_given_a_slope_is_the_bivariate_normal_regression():
    """The conditional mean of a bivariate normal given the other variable observed with
    independent noise is linear in it, with gain cov / (var + noise var) (Mood, Graybill
    and Boes, Introduction to the Theory of Statistics, 3rd ed. 1974, ch. 4; from memory):
    checked against an ordinary least-squares line through draws of the pair (numpy)."""
    rng = np.random.default_rng(3)
    slope_mean, slope_sd, bend_mean, bend_sd, rho, noise_sd = -2e-6, 6e-7, -4e-11, 2e-11, 0.7, 3e-7
    covariance = rho * slope_sd * bend_sd
    draws = rng.multivariate_normal(
        [slope_mean, bend_mean], [[slope_sd**2, covariance], [covariance, bend_sd**2]], 400_000
    )
    observed = draws[:, 0] + rng.normal(0, noise_sd, len(draws))
    gain, offset = np.polyfit(observed, draws[:, 1], 1)
    residual_var = np.var(draws[:, 1] - (gain * observed + offset))
    one = np.zeros(1, int)
    for slope in (-3e-6, -2e-6, -1e-6):
        mean, variance = _conditional_bend(
            one,
            np.array([bend_mean]),
            np.array([bend_sd**2]),
            np.array([slope_mean]),
            np.array([slope_sd**2]),
            np.array([covariance]),
            np.array([slope]),
            np.array([noise_sd**2]),
        )
        assert mean[0] == pytest.approx(offset + gain * slope, rel=0.02)
        assert variance[0] == pytest.approx(residual_var, rel=0.02)


def test_film_paths_whose_bend_grows_with_their_slope_are_projected_closer_conditioned():
    """Paths drawn (ours, invented) as b0 + b1 t + c t^2 whose bend is proportional to the
    capacitor's own slope, as for an exponential loss a (exp(t/T) - 1) early in life (c = b1 / 2T,
    derived): with the bend conditioned on the slope (film), a year's projection of the steep
    and flat capacitors alike lands closer to the truth than with one pooled bend (None)."""
    rng = np.random.default_rng(9)
    # Long, dense histories: the bends must differ between capacitors by more than their sampling error.
    sim = simulate(n_capacitors=1500, readings=(30, 40), noise=0.004, slope_scale=3.0)
    own = sim["slope"] / (2 * 300_000.0) * rng.normal(1.0, 0.1, len(sim["part"]))
    sim["capacitance_uf"] = sim["capacitance_uf"] + 10.0 * own[sim["group"]] * sim["time_h"] ** 2

    def year_ahead_error(dielectric):
        result = fit(sim, dielectric=dielectric, model=MODEL_LINEAR)
        tau = result.stress_hours_now + 8766.0
        truth = sim["intercept"] + sim["slope"] * tau + own * tau**2
        return np.median(np.abs(result.mean_at(tau) - truth)), np.corrcoef(result.bend(), own)[0, 1]

    (pooled, pooled_r), (conditioned, conditioned_r) = (
        year_ahead_error(None),
        year_ahead_error(np.full(len(sim["part"]), "film")),
    )
    assert conditioned < 0.9 * pooled, (conditioned, pooled)
    assert conditioned_r > pooled_r + 0.05, (conditioned_r, pooled_r)
