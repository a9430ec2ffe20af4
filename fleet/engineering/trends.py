"""Degradation trends of a whole fleet of capacitors at once, and remaining life.

Method (degradation-path analysis, Meeker and Escobar 1998 ch. 13, from memory):
1. Each reading's capacitance is referred to 25 C with its dielectric's
   temperature coefficient (film negative, electrolytic positive; estimated per
   part from the fleet's own readings where their temperatures spread enough,
   shrunk towards the dielectric's default) and divided by the rated value.
2. Time is stress-equivalent hours: the sum of calendar intervals times the
   acceleration factor of the interval's case temperature and capacitor voltage.
   The future is projected at the long-run stress rate (the trailing year, or
   the whole life if shorter), not the last interval's: quarterly readings
   follow the seasons; a capacitor whose readings have not yet sampled the
   seasons is drawn towards its part's typical rate, with what is still
   unknown of its rate in its band (`_borrowed_stress_rate`). A capacitor never read
   in circuit is taken at its part's median measured voltage ratio, not at its rating.
3. Each capacitor's path z = b0 + b1 tau (z = C/C_rated, or its log for the
   log-linear model) is fitted as a Bayesian linear regression whose prior is its
   part's population of paths (empirical Bayes: the prior mean and spread are
   estimated from the capacitors of that part with enough readings, or of its
   dielectric where the part has too few). A capacitor
   with one or two readings thus gets its part's slope, and says so. Readings
   are discounted with age (weight halving every `recency_half_life_h`): ageing
   paths accelerate late in life, so the recent slope is the one to project.
   Paths bend: z = b0 + b1 tau + c tau^2. The part's c is the pooled mean of
   its capacitors' own quadratic bends (DerSimonian-Laird, shrunk towards none
   by its standard error); each capacitor's c is its own bend shrunk to the
   part's (normal-normal posterior mean) or, for film, to the part's bend
   conditioned on the capacitor's own slope (random-coefficient paths, Lu and
   Meeker, Technometrics 35, 1993; from memory), and it then fits z - c tau^2 with the
   2-parameter prior above, whose slope mean is a line in the readings' mean
   stress age. Parametric empirical Bayes with covariates (Morris, JASA 78,
   1983; from memory): a young capacitor gets the slope of its part's young
   ones, not the steep slope of the worn ones, and a path that has started to
   bend is projected bending.
4. A stray reading (a unit slip, the wrong capacitor) is flagged when it sits more
   than `outlier_sigma` noise deviations off its capacitor's fit, and the fit is
   redone without it; one reading per capacitor per pass, two passes.
5. The stress time at which the path crosses the limit is a random variable
   through (b0, b1); its quantiles solve (L - b0 - b1 t) = z_p sd(b0 + b1 t),
   a quadratic in t, so every quantile of every capacitor comes in closed form.

All arrays are "long": one entry per reading, with `group` the capacitor's index
0..G-1, and per-capacitor arrays of length G. No loop runs over capacitors.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.special import ndtri

from .capacitor import acceleration_factor, normalise_to_25c

MODEL_LINEAR = "linear"
MODEL_LOG = "log-linear"

# The path's shape: bent (each capacitor's own quadratic bend shrunk to its part's) or
# straight (no bend: the band calibration's terms alone carry any acceleration).
PATH_BENT = "bent"
PATH_STRAIGHT = "straight"

DIELECTRIC_FILM = "film"
DIELECTRIC_ELECTROLYTIC = "electrolytic"


@dataclass(frozen=True)
class TrendSettings:
    """Constants of the ageing model; all from the primer, all adjustable."""

    # Temperature coefficients of capacitance (from memory, unverified): polypropylene
    # film about -200 ppm/K; aluminium electrolytic rises a few percent from 25 to 85 C.
    tempco_film_ppm_per_k: float = -200.0
    tempco_electrolytic_ppm_per_k: float = 500.0
    tempco_prior_sd_ppm_per_k: float = 300.0  # how far the fleet's data may move a default
    reference_temperature_c: float = 40.0
    doubling_k: float = 10.0
    voltage_exponent: float = 10.0
    recency_half_life_h: float = 2 * 8766.0  # a reading two years older counts half
    projection_window_h: float = 8766.0  # long-run stress rate over the trailing year
    outlier_sigma: float = 4.0
    outlier_floor_fraction: float = 0.03  # never flag a miss smaller than 3 % of rated
    noise_floor_fraction: float = 0.004  # meter resolution floor for the noise sd
    slope_prior_sd_floor: float = 2e-8  # per stress hour (0.002 % of rated per 1000 h)
    min_capacitors_for_curvature: int = 5  # rich capacitors of a part before its curvature is estimated
    min_visits_for_confidence: int = 3  # visits (`_visits`), not readings: fewer leave the slope to the part
    model: str = "auto"  # "linear", "log-linear" or "auto" (per part, smaller noise)
    # Dielectrics whose prior bend is conditioned on the capacitor's own slope (`_conditional_bend`):
    # film, whose self-healing clears area faster the more it has lost; an electrolytic's drying-out
    # sets in late whatever its early slope, and conditioned it lost recall (docs/engineering.md 7).
    bend_given_slope_dielectrics: tuple[str, ...] = (DIELECTRIC_FILM,)
    # Readings of one capacitor within one such span of its calendar hours since fitting are one visit: a value
    # read again minutes later (a doubt, a second meter) shares that day's temperature, leads and judgement, so
    # the visit counts as one reading in the fit, not as k independent ones (`_visit_shares`).
    visit_window_h: float = 24.0


def default_tempco_ppm_per_k(dielectric, settings: TrendSettings | None = None) -> np.ndarray:
    """The dielectric's default temperature coefficient, per capacitor or part."""
    settings = settings or TrendSettings()
    return np.where(
        np.asarray(dielectric) == DIELECTRIC_ELECTROLYTIC,
        settings.tempco_electrolytic_ppm_per_k,
        settings.tempco_film_ppm_per_k,
    ).astype(float)


@dataclass(frozen=True)
class PartPriors:
    """Each part's population of paths (length P arrays), in its model's z units."""

    model: np.ndarray
    intercept_mean: np.ndarray
    intercept_var: np.ndarray
    slope_mean: np.ndarray
    slope_var: np.ndarray
    noise_var: np.ndarray
    capacitors: np.ndarray  # capacitors with enough readings behind the estimate
    tempco_ppm_per_k: np.ndarray  # temperature coefficient used for the part
    curvature: np.ndarray | None = None  # z per stress hour squared (None: straight paths)
    curvature_var: np.ndarray | None = None  # its variance between the part's capacitors
    slope_per_age: np.ndarray | None = None  # change of the prior slope b1 per stress hour of mean age
    voltage_ratio: np.ndarray | None = None  # median measured capacitor voltage / rated (nan: none measured)
    stress_rate: np.ndarray | None = None  # typical long-run stress rate of the part's capacitors (nan: none known)
    stress_rate_log_var: np.ndarray | None = None  # variance of their log rates between capacitors
    reading_log_var: np.ndarray | None = None  # variance of a reading's log ageing factor within a capacitor
    bend_slope_mean: np.ndarray | None = None  # mean of the capacitors' own slopes at their readings' centre
    bend_slope_var: np.ndarray | None = None  # their variance between capacitors
    bend_slope_cov: np.ndarray | None = None  # covariance of the bend with that slope between capacitors


@dataclass(frozen=True)
class TrendFit:
    """Per-capacitor results (length G) and per-reading flags (length N)."""

    model: np.ndarray  # MODEL_* per capacitor
    intercept: np.ndarray  # z at tau = 0
    slope_per_hour: np.ndarray  # dz / d(stress hour)
    intercept_sd: np.ndarray
    slope_sd: np.ndarray
    covariance: np.ndarray  # (G, 2, 2) posterior covariance of (b0, b1)
    noise_sd: np.ndarray  # per capacitor (its part's pooled value), z units
    readings_used: np.ndarray
    readings_flagged: np.ndarray
    low_confidence: np.ndarray
    stress_hours_now: np.ndarray  # tau at the newest reading
    hours_now: np.ndarray  # calendar hours since fitting at the newest reading
    stress_rate: np.ndarray  # stress hours per calendar hour, long-run mean (trailing year)
    fraction_now: np.ndarray  # fitted C/C_rated at the newest reading
    tempco_ppm_per_k: np.ndarray  # per capacitor, the coefficient its readings were referred with
    flagged: np.ndarray  # per reading
    stress_hours: np.ndarray  # per reading
    fraction_25c: np.ndarray  # per reading, C(25 C)/C_rated
    priors: PartPriors
    curvature: np.ndarray | None = None  # per capacitor, z per stress hour squared (own, shrunk to its part's)
    typical_temperature_c: np.ndarray | None = None  # per capacitor, median recorded case temperature (nan: none)
    visits_used: np.ndarray | None = None  # per capacitor, the visits its readings used came from (`_visits`)

    def case_temperatures_of(self, temperature_c, rows) -> np.ndarray:
        """Later readings' case temperatures (capacitors `rows`), a missing one taken as its capacitor's
        typical one, as the fit took its own readings' (`case_temperatures`)."""
        temperature = np.asarray(temperature_c, float)
        if self.typical_temperature_c is None:
            return temperature
        return np.where(np.isfinite(temperature), temperature, np.asarray(self.typical_temperature_c, float)[rows])

    def bend(self) -> np.ndarray:
        """Per capacitor, the path's curvature c (zeros for straight paths)."""
        return np.zeros(len(self.intercept)) if self.curvature is None else np.asarray(self.curvature, float)

    def mean_at(self, tau, rows=slice(None)):
        """The fitted path b0 + b1 tau + c tau^2 at stress hours `tau` (capacitors `rows`)."""
        return self.intercept[rows] + self.slope_per_hour[rows] * tau + self.bend()[rows] * tau * tau

    def slope_now(self) -> np.ndarray:
        """dz / d(stress hour) at the newest reading: b1 + 2 c tau_now."""
        return self.slope_per_hour + 2.0 * self.bend() * self.stress_hours_now

    def to_z(self, fraction):
        fraction = np.asarray(fraction, float)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.model == MODEL_LOG, np.log(fraction), fraction)


def reading_factors(temperature_c, voltage_v, rated_voltage_v, settings):
    """The ageing factor at each reading (section 1's acceleration), clipped to 1e-3..1e3 so a wild
    reading cannot make the stress time non-finite."""
    factor = acceleration_factor(
        temperature_c,
        voltage_v,
        settings.reference_temperature_c,
        rated_voltage_v,
        settings.doubling_k,
        settings.voltage_exponent,
    )
    return np.clip(np.nan_to_num(factor, nan=1.0, posinf=1e3), 1e-3, 1e3)


def stress_hours(group, time_h, temperature_c, voltage_v, rated_voltage_v, n_groups, settings):
    """Cumulative stress-equivalent hours per reading, and each capacitor's
    long-run stress rate; input sorted by group, time.

    Interval i uses the mean acceleration of its two end readings; the first
    interval (fitting to first reading) uses the first reading's. The rate is
    the stress gained over the trailing `projection_window_h` (from the last
    reading at least that old, or from fitting): a mean over the seasons, which
    the last quarter's interval alone is not. Factors are clipped to 1e-3..1e3 so
    a wild reading cannot make the stress time non-finite.
    """
    factor = reading_factors(temperature_c, voltage_v, rated_voltage_v, settings)
    first = np.r_[True, group[1:] != group[:-1]]
    previous_time = np.where(first, 0.0, np.r_[0.0, time_h[:-1]])
    previous_factor = np.where(first, factor, np.r_[factor[:1], factor[:-1]])
    increment = np.maximum(time_h - previous_time, 0.0) * 0.5 * (factor + previous_factor)
    total = np.cumsum(increment)
    group_start = np.flatnonzero(first)
    offset = np.repeat(total[group_start] - increment[group_start], np.diff(np.r_[group_start, len(group)]))
    tau = total - offset
    last_index = np.r_[group_start[1:] - 1, len(group) - 1]
    rate = np.full(n_groups, 1.0)
    if len(group):
        t_now = np.zeros(n_groups)
        t_now[group[last_index]] = time_h[last_index]
        tau_now = np.zeros(n_groups)
        tau_now[group[last_index]] = tau[last_index]
        old_enough = time_h <= t_now[group] - settings.projection_window_h
        anchor = np.full(n_groups, -1)
        np.maximum.at(anchor, group, np.where(old_enough, np.arange(len(group)), -1))
        t_anchor = np.where(anchor >= 0, time_h[np.maximum(anchor, 0)], 0.0)
        tau_anchor = np.where(anchor >= 0, tau[np.maximum(anchor, 0)], 0.0)
        span = t_now - t_anchor
        with np.errstate(invalid="ignore", divide="ignore"):
            long_run = (tau_now - tau_anchor) / span
        last_factor = np.ones(n_groups)
        last_factor[group[last_index]] = factor[last_index]
        rate = np.where(span > 0, long_run, last_factor)
    return tau, rate


def _borrowed_stress_rate(
    g, t, rate, log_factor, part, n_groups, n_parts, part_family, settings, stored=None, share=None
):
    """Each capacitor's long-run stress rate, a young one's drawn towards its part's.

    A capacitor's own rate is a mean over the seasons once its readings have sampled them all: four
    quarterly readings, spanning two thirds of the trailing `projection_window_h` or more (rounds
    come early or late). Before, the mean ageing factor of its k readings samples a season or two,
    each reading's log factor off the capacitor's long-run log rate with the within-capacitor
    variance s2 (the seasons, the day, the motor running or stopped), and the log mean factors of its
    part's capacitors read for a whole year spread about their median m with the between-capacitor
    variance p2. Its log rate is the normal-normal posterior mean (k / s2 own + m / p2) /
    (k / s2 + 1 / p2), and 1 / (k / s2 + 1 / p2) the variance still unknown (empirical Bayes, as for
    the slopes; ours): one reading counts for little where the seasons swing more than the part's
    capacitors differ, for much where they differ more. `log_factor`: each reading's log ageing
    factor. The three figures (`stored`: m as a rate, p2, s2; or estimated here) are over the part's
    capacitors read for a whole year: the median and a robust variance, (1.4826 MAD)^2, of their log
    mean factors (three or more), and the pooled variance of their readings' log factors about each
    one's mean; a part without them takes its family's (`part_family`, the dielectric), and with none
    there either (nan) each capacitor keeps its own. Input sorted by group, time. `share`: each
    reading's share of its visit (`_visit_shares`; None: one reading a visit), so k readings of one
    visit sample its season once. Returns per capacitor the rate and the variance of its log still
    unknown; per part the three figures.
    """
    share = np.ones(len(g)) if share is None else share
    window = settings.projection_window_h
    first = np.full(n_groups, np.inf)
    newest = np.full(n_groups, -np.inf)
    np.minimum.at(first, g, t)
    np.maximum.at(newest, g, t)
    count = np.bincount(g, weights=share, minlength=n_groups)  # its visits
    whole = ~(newest - first < 2.0 / 3.0 * window)  # a capacitor without readings keeps its own (1.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        own_mean = np.bincount(g, weights=share * np.exp(log_factor), minlength=n_groups) / count  # its visits' mean
    if stored is not None:
        part_rate, between, within = (_stored(values, n_parts, fill=np.nan) for values in stored)
    else:
        family = part_family[part]
        n_families = int(part_family.max(initial=0)) + 1
        log_rate = np.log(np.where(whole, own_mean, np.nan))
        mean_log = np.bincount(g, weights=share * log_factor, minlength=n_groups) / np.maximum(count, 1.0)
        squares = np.bincount(g, weights=share * (log_factor - mean_log[g]) ** 2, minlength=n_groups)
        dof = np.where(whole & (count >= 2), count - 1.0, 0.0)

        def pooled(index, n_bins):
            with np.errstate(invalid="ignore", divide="ignore"):
                return np.bincount(index, weights=np.where(dof > 0, squares, 0.0), minlength=n_bins) / np.bincount(
                    index, weights=dof, minlength=n_bins
                )

        part_log_rate, between = _median_and_spread(part, log_rate, n_parts)
        family_log_rate, family_between = _median_and_spread(family, log_rate, n_families)
        within, family_within = pooled(part, n_parts), pooled(family, n_families)
        own_figures = np.isfinite(part_log_rate) & np.isfinite(between) & np.isfinite(within) & (within > 0)
        part_rate = np.exp(np.where(own_figures, part_log_rate, family_log_rate[part_family]))
        between = np.where(own_figures, between, family_between[part_family])
        within = np.where(own_figures, within, family_within[part_family])
    m, p2, s2 = (values[part] if n_groups else np.zeros(0) for values in (np.log(part_rate), between, within))
    with np.errstate(invalid="ignore", divide="ignore"):
        precision = count / s2 + 1.0 / np.maximum(p2, 1e-12)
        blended = np.exp((count / s2 * np.log(own_mean) + m / np.maximum(p2, 1e-12)) / precision)
    young = ~whole & np.isfinite(blended) & (blended > 0) & np.isfinite(precision)
    return np.where(young, blended, rate), np.where(young, 1.0 / precision, 0.0), part_rate, between, within


def _with_rate_spread(covariance, slope_now, tau_now, rate_log_var):
    """The path's covariance with the spread of a borrowed stress rate (`_borrowed_stress_rate`).

    Projected at a rate r (1 + e) instead of r, a path of slope s moves s e more per stress hour ahead
    of the newest reading: a slope variance s^2 var(e) pivoting there (b0 takes tau_now^2 of it and
    (b0, b1) -tau_now), so the band widens ahead by the part's spread of rates, and not at the readings.
    """
    rate_log_var = np.asarray(rate_log_var, float)
    with np.errstate(invalid="ignore", over="ignore"):
        added = np.where(rate_log_var > 0, rate_log_var * np.asarray(slope_now, float) ** 2, 0.0)
    pivot = np.stack(
        [np.stack([tau_now**2, -tau_now], axis=-1), np.stack([-tau_now, np.ones_like(tau_now)], axis=-1)], axis=-2
    )
    return covariance + added[:, None, None] * pivot


def _median_and_spread(index, values, n_bins):
    """Per bin, the median of the finite values and a robust variance, (1.4826 MAD)^2, from three or more."""
    known = np.isfinite(values)
    series = pd.Series(values[known]).groupby(np.asarray(index)[known])
    median = series.median().reindex(range(n_bins)).to_numpy(float)
    deviation = pd.Series(np.abs(values[known] - median[np.asarray(index)[known]])).groupby(np.asarray(index)[known])
    mad = deviation.median().reindex(range(n_bins)).to_numpy(float)
    count = series.size().reindex(range(n_bins)).fillna(0).to_numpy(float)
    return median, np.where(count >= 3, (1.4826 * mad) ** 2, np.nan)


def _group_median(group, values, n_groups):
    """Median per group of the finite values (nan for a group with none)."""
    values = np.asarray(values, float)
    known = np.isfinite(values)
    return pd.Series(values[known]).groupby(group[known]).median().reindex(range(n_groups)).to_numpy(float)


def case_temperatures(group, temperature_c, n_groups):
    """Each reading's case temperature, a missing one taken as the median of its capacitor's recorded
    ones (nan where the capacitor has none, read as at the 25 C reference).

    A reading without a case temperature was taken as the others were, on the same capacitor at work:
    taken as at 25 C instead, a start capacitor usually read at 55-60 C (electrolytic, some +700 ppm/K)
    read 2 % above its referred history, and two such readings turned a capacitor below its limit into
    one judged a year away (a walk of the demo). The fit, its stress clock, the back-test and the chart
    refer readings this way.
    """
    group = np.asarray(group, np.int64)
    temperature = np.asarray(temperature_c, float)
    return _fill_per_group(group, np.where(np.isfinite(temperature), temperature, np.nan), n_groups)


def _fill_per_group(group, values, n_groups):
    """Missing (non-finite) values replaced by the median of the same capacitor's others.

    A capacitor sits at its operating voltage and temperature whether or not a
    reading measured them: a meter reading after isolation records no capacitor
    voltage, and must not count as stress at the rated voltage between two
    in-circuit readings at 80 % of it. A capacitor with none keeps nan (the
    reference conditions) unless its part's typical voltage is known (`fit_trends`).
    """
    values = np.asarray(values, float)
    known = np.isfinite(values)
    if known.all() or not known.any():
        return values
    return np.where(known, values, _group_median(group, values, n_groups)[group])


def _part_median(part_of_reading, values, n_parts):
    """Median per part of the finite values (nan for a part with none)."""
    known = np.isfinite(values)
    series = pd.Series(values[known]).groupby(part_of_reading[known]).median()
    return series.reindex(range(n_parts)).to_numpy(float)


def _group_sums(group, x, z, weight, n_groups):
    def s(values):
        return np.bincount(group, weights=weight * values, minlength=n_groups)

    return s(np.ones_like(x)), s(x), s(z), s(x * x), s(x * z)


def _ols(n, sx, sz, sxx, sxz):
    with np.errstate(divide="ignore", invalid="ignore"):
        sxx_c = sxx - sx * sx / n
        slope = (sxz - sx * sz / n) / sxx_c
        intercept = (sz - slope * sx) / n
    return intercept, slope, sxx_c


def fit_trends(
    group,
    part,
    time_h,
    capacitance_uf,
    rated_uf,
    temperature_c,
    voltage_v,
    rated_voltage_v,
    settings: TrendSettings | None = None,
    excluded=None,
    priors: PartPriors | None = None,
    tempco_ppm_per_k=None,
    tempco_fixed=None,
    model_per_capacitor=None,
    straight_per_capacitor=None,
    dielectric=None,
) -> TrendFit:
    """Fit every capacitor's path at once.

    group, time_h, capacitance_uf, temperature_c, voltage_v, excluded: per reading
    (time_h = calendar hours since the capacitor was fitted). part, rated_uf,
    rated_voltage_v, tempco_ppm_per_k (its dielectric's default, or the part's
    own), tempco_fixed (the part's coefficient is set, not to be estimated): per
    capacitor. `excluded` marks readings a person already set aside
    (superseded); they are neither fitted nor flagged. Readings whose value is
    not finite or not within 5 %..300 % of rated are never fitted. With `priors`
    (from an earlier fleet-wide fit) the parts' populations and temperature
    coefficients are taken as given, so a handful of capacitors can be refitted alone.
    `model_per_capacitor` ("linear", "log-linear", or "" to choose by noise) sets
    the form of each capacitor's part, as a back-test chose it; `straight_per_capacitor`
    (bool) marks capacitors whose part is fitted without a bend (`PATH_STRAIGHT`, likewise).
    `dielectric` per capacitor: parts of `settings.bend_given_slope_dielectrics` get each
    capacitor's prior bend conditioned on its own slope (None: no part does).
    """
    settings = settings or TrendSettings()
    group = np.asarray(group, np.int64)
    part = np.asarray(part, np.int64)
    n_groups = len(part)
    if priors is not None:
        n_parts = len(priors.model)
    else:
        n_parts = int(part.max()) + 1 if n_groups else 0
    order = np.lexsort((np.asarray(time_h, float), group))
    inverse = np.empty_like(order)
    inverse[order] = np.arange(len(order))
    g = group[order]
    t = np.asarray(time_h, float)[order]
    rated_uf = np.asarray(rated_uf, float)
    temperature = np.asarray(temperature_c, float)[order]
    temperature = np.where(np.isfinite(temperature), temperature, np.nan)
    raw_fraction = np.asarray(capacitance_uf, float)[order] / rated_uf[g]
    rated_v = np.asarray(rated_voltage_v, float)[g]
    voltage = np.asarray(voltage_v, float)[order]
    voltage_ratio = _fill_per_group(g, np.where(voltage > 0, voltage, np.nan) / rated_v, n_groups)
    if priors is not None:
        part_voltage_ratio = _stored(priors.voltage_ratio, n_parts, fill=np.nan)
    else:
        part_voltage_ratio = _part_median(part[g], voltage_ratio, n_parts)
    # A capacitor never read in circuit runs at its part's typical voltage, not at the rated one.
    voltage_ratio = np.where(np.isfinite(voltage_ratio), voltage_ratio, part_voltage_ratio[part][g])
    case_temperature = _fill_per_group(g, temperature, n_groups)
    tau, rate = stress_hours(g, t, case_temperature, voltage_ratio * rated_v, rated_v, n_groups, settings)
    keep = np.ones(len(g), bool) if excluded is None else ~np.asarray(excluded, bool)[order]
    keep &= np.isfinite(raw_fraction) & (raw_fraction > 0.05) & (raw_fraction < 3.0) & np.isfinite(t)
    if priors is not None:
        part_tempco = np.asarray(priors.tempco_ppm_per_k, float)
    else:
        default = np.full(n_parts, settings.tempco_film_ppm_per_k)
        fixed = np.zeros(n_parts, bool)
        if tempco_ppm_per_k is not None:
            default[part] = np.asarray(tempco_ppm_per_k, float)
        if tempco_fixed is not None:
            fixed[part] = np.asarray(tempco_fixed, bool)
        part_tempco = _estimate_tempco(
            g, part, tau, raw_fraction, temperature, keep, n_groups, n_parts, default, fixed, settings
        )
    capacitor_tempco = part_tempco[part] if n_groups else np.zeros(0)
    fraction = normalise_to_25c(raw_fraction, case_temperature, capacitor_tempco[g])
    last_time = np.zeros(n_groups)
    if len(g):
        last_time[g] = t  # sorted by time within each group: the last write is the newest
    recency = np.exp2(-np.maximum(last_time[g] - t, 0.0) / settings.recency_half_life_h)
    visit = _visits(g, t, settings.visit_window_h)
    every_visit_share = _visit_shares(visit, np.ones(len(g), bool))

    straight_part = np.zeros(n_parts, bool)
    if straight_per_capacitor is not None and n_groups:
        straight_part[part[np.asarray(straight_per_capacitor, bool)]] = True
    conditional_part = np.zeros(n_parts, bool)
    part_family = np.zeros(n_parts, np.int64)
    if dielectric is not None and n_groups:
        conditional_part[part[np.isin(np.asarray(dielectric), settings.bend_given_slope_dielectrics)]] = True
        part_family[part] = np.unique(np.asarray(dielectric).astype(str), return_inverse=True)[1]
    rate, rate_log_var, part_rate, part_rate_log_var, part_reading_log_var = _borrowed_stress_rate(
        g,
        t,
        rate,
        np.log(reading_factors(case_temperature, voltage_ratio * rated_v, rated_v, settings)),
        part,
        n_groups,
        n_parts,
        part_family,
        settings,
        None if priors is None else (priors.stress_rate, priors.stress_rate_log_var, priors.reading_log_var),
        every_visit_share,
    )
    fits = {}
    wanted = set(priors.model) if priors is not None else {MODEL_LINEAR, MODEL_LOG}
    for model in (MODEL_LINEAR, MODEL_LOG):
        if settings.model not in ("auto", model) or model not in wanted:
            continue
        z = np.log(np.where(fraction > 0, fraction, np.nan)) if model == MODEL_LOG else fraction
        fits[model] = _fit_model(
            g,
            part,
            tau,
            z,
            fraction,
            keep,
            recency,
            visit,
            n_groups,
            n_parts,
            settings,
            model == MODEL_LOG,
            priors,
            straight_part,
            conditional_part,
            part_family,
        )
    if priors is not None:
        chosen = np.asarray(priors.model)
    elif len(fits) == 1:
        chosen = np.full(n_parts, next(iter(fits)))
    else:
        # Compare the noise in fraction units (log residuals scale by ~1/fraction).
        linear_noise = fits[MODEL_LINEAR]["part_noise_sd"]
        log_noise = fits[MODEL_LOG]["part_noise_sd"] * fits[MODEL_LOG]["part_mean_fraction"]
        chosen = np.where(log_noise < 0.9 * linear_noise, MODEL_LOG, MODEL_LINEAR)
        if model_per_capacitor is not None and n_groups:
            # A form chosen by back-tested (out-of-sample) error overrides the in-sample noise.
            forced = np.full(n_parts, "", dtype=object)
            forced[part] = np.asarray(model_per_capacitor, dtype=object)
            chosen = np.where(np.isin(forced, [MODEL_LINEAR, MODEL_LOG]), forced, chosen)
    model_per_group = chosen[part] if n_groups else np.array([], dtype=object)
    use_log = model_per_group == MODEL_LOG

    def pick(name, per="group"):
        if len(fits) == 1:
            return next(iter(fits.values()))[name]
        a, b = fits[MODEL_LINEAR][name], fits[MODEL_LOG][name]
        mask = {"group": use_log, "reading": use_log[g], "part": chosen == MODEL_LOG}[per]
        mask = mask.reshape(mask.shape + (1,) * (a.ndim - 1))
        return np.where(mask, b, a)

    intercept, slope, cov = pick("intercept"), pick("slope"), pick("covariance")
    noise_sd, used, flagged = pick("noise_sd"), pick("used", "reading"), pick("flagged", "reading")
    last = np.r_[np.flatnonzero(g[1:] != g[:-1]), len(g) - 1] if len(g) else np.array([], int)
    tau_now = np.zeros(n_groups)
    tau_now[g[last]] = tau[last]
    curvature = pick("bend")
    cov = _with_rate_spread(cov, slope + 2.0 * curvature * tau_now, tau_now, rate_log_var)
    z_now = intercept + slope * tau_now + curvature * tau_now**2
    fraction_now = np.where(use_log, np.exp(z_now), z_now)
    readings_used = np.bincount(g, weights=used.astype(float), minlength=n_groups).astype(int)
    visits_used = np.rint(np.bincount(g, weights=_visit_shares(visit, used), minlength=n_groups)).astype(int)
    return TrendFit(
        model=model_per_group,
        intercept=intercept,
        slope_per_hour=slope,
        intercept_sd=np.sqrt(cov[:, 0, 0]),
        slope_sd=np.sqrt(cov[:, 1, 1]),
        covariance=cov,
        noise_sd=noise_sd,
        readings_used=readings_used,
        readings_flagged=np.bincount(g, weights=flagged.astype(float), minlength=n_groups).astype(int),
        low_confidence=visits_used < settings.min_visits_for_confidence,  # repeats of one visit are not more
        stress_hours_now=tau_now,
        hours_now=last_time,
        stress_rate=rate,
        fraction_now=fraction_now,
        tempco_ppm_per_k=capacitor_tempco,
        flagged=flagged[inverse],
        stress_hours=tau[inverse],
        fraction_25c=fraction[inverse],
        typical_temperature_c=_group_median(g, temperature, n_groups),
        visits_used=visits_used,
        priors=PartPriors(
            model=chosen,
            **{
                name: pick(name, "part")
                for name in ("intercept_mean", "intercept_var", "slope_mean", "slope_var", "noise_var", "capacitors")
            },
            tempco_ppm_per_k=part_tempco,
            curvature=pick("curvature_part", "part"),
            curvature_var=pick("curvature_var_part", "part"),
            slope_per_age=pick("slope_per_age", "part"),
            voltage_ratio=part_voltage_ratio,
            stress_rate=part_rate,
            stress_rate_log_var=part_rate_log_var,
            reading_log_var=part_reading_log_var,
            bend_slope_mean=pick("bend_slope_mean", "part"),
            bend_slope_var=pick("bend_slope_var", "part"),
            bend_slope_cov=pick("bend_slope_cov", "part"),
        ),
        curvature=curvature,
    )


def _fit_model(
    g,
    part,
    tau,
    z,
    fraction,
    keep,
    recency,
    visit,
    n_groups,
    n_parts,
    settings,
    is_log,
    priors=None,
    straight_part=None,
    conditional_part=None,
    part_family=None,
):
    """One model (linear or log-linear) for the fleet: prior, posterior, flags.

    Parts marked in `straight_part` get no bend: neither the part's nor their capacitors' own.
    Parts marked in `conditional_part` condition each capacitor's prior bend on its own slope.
    `part_family` (per part): the family a part with few capacitors borrows its population from.

    A reading of recency weight w counts as one of variance sigma^2 / w
    (weighted least squares), in the population estimates and the posterior alike;
    the k readings used of one visit (`visit`, per reading) share one reading's weight.
    """
    flagged = np.zeros(len(g), bool)
    floor_z = settings.outlier_floor_fraction
    for _ in range(3):  # fit, flag, refit, flag, final fit
        used = keep & ~flagged & np.isfinite(z)
        share = _visit_shares(visit, used)
        w = recency * share
        count = np.bincount(g, weights=share, minlength=n_groups)  # visits with a reading used
        z_safe = np.where(used, z, 0.0)
        if priors is not None:
            curvature, curvature_var = _stored(priors.curvature, n_parts), _stored(priors.curvature_var, n_parts)
            stored_joint = (priors.bend_slope_mean, priors.bend_slope_var, priors.bend_slope_cov)
            joint = tuple(_stored(v, n_parts) for v in stored_joint)
            noise_of = np.asarray(priors.noise_var, float)[part]
            own, sampling, quadratic = _own_curvature(g, tau, z_safe, w, used, count, n_groups, noise_of)
            own_slope, own_slope_var = _own_slope(g, tau, z_safe, w, count, n_groups, noise_of)
        else:
            curvature, curvature_var, own, sampling, quadratic, own_slope, own_slope_var, joint = _part_curvature(
                g, part, tau, z_safe, w, used, count, n_groups, n_parts, settings
            )
        if straight_part is not None:
            curvature = np.where(straight_part, 0.0, curvature)
            curvature_var = np.where(straight_part, 0.0, curvature_var)
            joint = tuple(np.where(straight_part, 0.0, v) for v in joint)
        if conditional_part is not None:
            joint = tuple(np.where(conditional_part, v, 0.0) for v in joint)
        part_bend, part_bend_var = _conditional_bend(part, curvature, curvature_var, *joint, own_slope, own_slope_var)
        bend = _capacitor_bend(part_bend, part_bend_var, own, sampling, quadratic)
        if straight_part is not None:
            bend = np.where(straight_part[part], 0.0, bend)
        # Each capacitor fits its path less its bend: z - c_i tau^2 = b0 + b1 tau.
        z_safe = np.where(used, z_safe - bend[g] * tau * tau, 0.0)
        n, sx, sz, sxx, sxz = _group_sums(g, tau, z_safe, w, n_groups)
        b0_ols, b1_ols, sxx_c = _ols(n, sx, sz, sxx, sxz)
        rich = (count >= 3) & (sxx_c > 1e-9 * np.maximum(sxx, 1.0))
        noise_var, raw_noise_var = _part_noise(g, part, tau, z_safe, w, used, count, rich, n_groups, n_parts, settings)
        if priors is not None:
            noise_var = np.asarray(priors.noise_var, float)
        # Population of paths per part (method of moments, clipped).
        se_b0 = noise_var[part] * np.where(rich, sxx / np.where(rich, n * sxx_c, 1.0), np.nan)
        se_b1 = noise_var[part] * np.where(rich, 1.0 / np.where(rich, sxx_c, 1.0), np.nan)
        prior_mean0, prior_var0 = _part_moments(
            part,
            n_parts,
            b0_ols,
            se_b0,
            rich,
            floor=1e-6,
            default_mean=0.0 if is_log else 1.0,
            default_var=0.05**2,
            family=part_family,
        )
        with np.errstate(invalid="ignore", divide="ignore"):
            age = np.where(n > 0, sx / np.where(n > 0, n, 1.0), 0.0)
        if priors is not None:
            prior_mean0, prior_var0 = np.asarray(priors.intercept_mean), np.asarray(priors.intercept_var)
            prior_mean1, prior_var1 = np.asarray(priors.slope_mean), np.asarray(priors.slope_var)
            slope_per_age = _stored(priors.slope_per_age, n_parts)
        else:
            prior_mean1, prior_var1, slope_per_age = _slope_prior(
                part, n_parts, b1_ols, se_b1, rich, age, settings, part_family
            )
        # Posterior per capacitor: precision = prior precision + X'X / sigma^2.
        s2 = noise_var[part]
        slope_prior_mean = prior_mean1[part] + slope_per_age[part] * age
        p00 = 1.0 / prior_var0[part] + n / s2
        p01 = sx / s2
        p11 = 1.0 / prior_var1[part] + sxx / s2
        r0 = prior_mean0[part] / prior_var0[part] + sz / s2
        r1 = slope_prior_mean / prior_var1[part] + sxz / s2
        det = p00 * p11 - p01 * p01
        cov = np.empty((n_groups, 2, 2))
        cov[:, 0, 0], cov[:, 1, 1] = p11 / det, p00 / det
        cov[:, 0, 1] = cov[:, 1, 0] = -p01 / det
        b0 = (p11 * r0 - p01 * r1) / det
        b1 = (p00 * r1 - p01 * r0) / det
        # Flag the worst reading of each capacitor if it is far off its path.
        miss = np.where(used, np.abs(z_safe - (b0[g] + b1[g] * tau)), 0.0)
        miss_fraction = np.exp(np.abs(miss)) - 1.0 if is_log else miss
        limit = np.maximum(settings.outlier_sigma * np.sqrt(s2[g] / np.maximum(recency, 1e-6)), floor_z)
        candidate = (miss > limit) & (miss_fraction > floor_z)
        worst = np.full(n_groups, -1.0)
        np.maximum.at(worst, g, np.where(candidate, miss, -1.0))
        new_flags = candidate & (miss == worst[g])
        if not new_flags.any():
            break
        flagged |= new_flags
    mean_fraction = np.bincount(part[g], weights=np.where(used, fraction, 0.0), minlength=n_parts)
    count = np.bincount(part[g], weights=used.astype(float), minlength=n_parts)
    return {
        "intercept": b0,
        "slope": b1,
        "covariance": cov,
        "noise_sd": np.sqrt(s2),
        "used": used,
        "flagged": flagged,
        "part_noise_sd": np.sqrt(raw_noise_var),  # before the floor: for choosing a model
        "part_mean_fraction": np.where(count > 0, mean_fraction / np.maximum(count, 1), 1.0),
        "intercept_mean": prior_mean0,
        "intercept_var": prior_var0,
        "slope_mean": prior_mean1,
        "slope_var": prior_var1,
        "noise_var": noise_var,
        "curvature_part": curvature,
        "curvature_var_part": curvature_var,
        "bend_slope_mean": joint[0],
        "bend_slope_var": joint[1],
        "bend_slope_cov": joint[2],
        "bend": bend,
        "slope_per_age": slope_per_age,
        "capacitors": np.bincount(part, weights=rich.astype(float), minlength=n_parts).astype(int)
        if priors is None
        else np.asarray(priors.capacitors),
    }


def _visits(g, t, window_h: float) -> np.ndarray:
    """Per reading (sorted by capacitor, then time), its visit: readings of one capacitor in one window of
    `window_h` calendar hours since fitting. Fixed windows, not chains of near readings: a capacitor read every
    day by a monitoring system keeps one visit a day."""
    if not len(g):
        return np.zeros(0, np.int64)
    window = np.floor(np.asarray(t, float) / window_h)
    new = np.r_[True, (g[1:] != g[:-1]) | (window[1:] != window[:-1])]
    return np.cumsum(new) - 1


def _visit_shares(visit, used) -> np.ndarray:
    """Per reading, its share of its visit's one reading: 1/k for each of the k readings used there, 0 unused.
    Repeat readings of one moment are not independent evidence of a path (pseudoreplication: Hurlbert,
    Ecological Monographs 54, 1984 [mem]); weighted 1/k, they give the fit of their mean read once."""
    per_visit = np.bincount(visit, weights=used.astype(float))[visit]
    return np.where(used, 1.0 / np.maximum(per_visit, 1.0), 0.0)


def _part_noise(g, part, tau, z_safe, w, used, count, rich, n_groups, n_parts, settings):
    """Reading noise variance per part from the within-capacitor WLS residuals of
    the rich capacitors (floored at the meter's resolution), and before the floor."""
    n, sx, sz, sxx, sxz = _group_sums(g, tau, z_safe, w, n_groups)
    b0_ols, b1_ols, _ = _ols(n, sx, sz, sxx, sxz)
    with np.errstate(invalid="ignore"):
        resid = np.where(used & rich[g], z_safe - (b0_ols[g] + b1_ols[g] * tau), 0.0)
    ss = np.bincount(part[g], weights=w * resid**2, minlength=n_parts)
    dof = np.bincount(part, weights=np.where(rich, count - 2, 0.0), minlength=n_parts)
    fleet_var = ss.sum() / dof.sum() if dof.sum() > 0 else settings.noise_floor_fraction**2 * 4
    with np.errstate(invalid="ignore", divide="ignore"):
        raw_noise_var = np.where(dof >= 10, ss / np.maximum(dof, 1), fleet_var)
    return np.maximum(raw_noise_var, settings.noise_floor_fraction**2), raw_noise_var


def _own_curvature(g, tau, z_safe, w, used, count, n_groups, noise_var):
    """Each capacitor's own least-squares curvature, its sampling variance, and whether
    it has one (four readings or more, well spread). `noise_var` per capacitor."""
    with np.errstate(invalid="ignore", divide="ignore"):
        weight_sum = np.bincount(g, weights=w, minlength=n_groups)
        centre = np.bincount(g, weights=w * tau, minlength=n_groups) / np.where(weight_sum > 0, weight_sum, 1.0)
    u = np.where(used, tau - centre[g], 0.0)
    scale = np.maximum(
        np.sqrt(np.bincount(g, weights=w * u * u, minlength=n_groups) / np.maximum(weight_sum, 1e-300)), 1.0
    )
    v = u / scale[g]  # unitless, order one
    moments = [np.bincount(g, weights=w * v**k, minlength=n_groups) for k in range(5)]
    rhs = np.stack([np.bincount(g, weights=w * v**k * z_safe, minlength=n_groups) for k in range(3)], axis=1)
    normal = np.stack([np.stack([moments[i + j] for j in range(3)], axis=1) for i in range(3)], axis=1)
    quadratic = (count >= 4) & (moments[4] > 0)
    normal = np.where(quadratic[:, None, None], normal, np.eye(3))
    det = np.linalg.det(normal)
    quadratic &= np.abs(det) > 1e-6 * np.maximum(moments[0], 1.0) ** 3
    normal = np.where(quadratic[:, None, None], normal, np.eye(3))
    inverse = np.linalg.inv(normal)
    coefficient = np.einsum("gij,gj->gi", inverse, np.where(quadratic[:, None], rhs, 0.0))
    return coefficient[:, 2] / scale**2, noise_var * inverse[:, 2, 2] / scale**4, quadratic


def _capacitor_bend(part_bend, part_bend_var, own, sampling, quadratic):
    """Each capacitor's curvature: its own, shrunk to its part's (precision-weighted, the
    normal-normal posterior mean); the part's alone without a spread or its own estimate."""
    with np.errstate(invalid="ignore", divide="ignore"):
        shrunk = (part_bend / part_bend_var + own / sampling) / (1.0 / part_bend_var + 1.0 / sampling)
    usable = quadratic & (part_bend_var > 0) & np.isfinite(shrunk)
    return np.minimum(np.where(usable, shrunk, part_bend), 0.0)


def _part_curvature(g, part, tau, z_safe, w, used, count, n_groups, n_parts, settings):
    """Each part's common curvature c of z against stress hours (never bending up).

    Every capacitor with at least four readings gets its own weighted
    least-squares quadratic (stress hours centred on its own mean, so the 3x3
    normal equations stay well conditioned); its curvature and that estimate's
    sampling variance (noise variance times the inverse's corner) are pooled per
    part by DerSimonian-Laird, as the slopes are. The pooled mean is then shrunk
    towards a straight path by its own standard error (positive-part James-Stein
    factor 1 - (2 se / c)^2, James and Stein 1961): a clear bend is kept nearly
    whole, one within two standard errors of none is dropped. Within-capacitor
    bends are used, not how slopes differ between young and old capacitors: the
    old capacitors still in service are the slow survivors of their cohort.
    Returns per part the bend and its variance between capacitors, and per
    capacitor its own estimate, that estimate's sampling variance and whether it has one.
    """
    n, sx, sz, sxx, sxz = _group_sums(g, tau, z_safe, w, n_groups)
    _, _, sxx_c = _ols(n, sx, sz, sxx, sxz)
    rich = (count >= 3) & (sxx_c > 1e-9 * np.maximum(sxx, 1.0))
    noise_var, _ = _part_noise(g, part, tau, z_safe, w, used, count, rich, n_groups, n_parts, settings)
    own, sampling, quadratic = _own_curvature(g, tau, z_safe, w, used, count, n_groups, noise_var[part])
    mean, between = _part_moments(part, n_parts, own, sampling, quadratic, floor=0.0, default_mean=0.0, default_var=0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        weight = np.where(quadratic, 1.0 / (sampling + between[part]), 0.0)
        mean_var = 1.0 / np.bincount(part, weights=weight, minlength=n_parts)
        bend = mean * np.maximum(1.0 - 4.0 * mean_var / (mean * mean), 0.0)
    capacitors = np.bincount(part, weights=quadratic.astype(float), minlength=n_parts)
    usable = (capacitors >= settings.min_capacitors_for_curvature) & np.isfinite(bend)
    bend = np.minimum(np.where(usable, bend, 0.0), 0.0)
    spread = np.where((bend < 0) & np.isfinite(between), between, 0.0)  # no bend established: none to spread
    own_slope, own_slope_var = _own_slope(g, tau, z_safe, w, count, n_groups, noise_var[part])
    joint = _bend_slope_moments(part, n_parts, own, sampling, quadratic, own_slope, own_slope_var, between, settings)
    joint = tuple(np.where(bend < 0, v, 0.0) for v in joint)  # no bend established: none to condition
    return bend, spread, own, sampling, quadratic, own_slope, own_slope_var, joint


def _own_slope(g, tau, z_safe, w, count, n_groups, noise_var):
    """Each capacitor's own weighted least-squares slope at its readings' centre and its
    sampling variance (inf with fewer than three readings or no spread in stress time)."""
    n, sx, sz, sxx, sxz = _group_sums(g, tau, z_safe, w, n_groups)
    _, slope, sxx_c = _ols(n, sx, sz, sxx, sxz)
    rich = (count >= 3) & (sxx_c > 1e-9 * np.maximum(sxx, 1.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(rich, slope, 0.0), np.where(rich, noise_var / sxx_c, np.inf)


def _bend_slope_moments(part, n_parts, own, sampling, quadratic, slope, slope_var, bend_between, settings):
    """Per part, the joint population of the capacitors' bends and slopes (random coefficients,
    Lu and Meeker, Technometrics 35, 1993; from memory): the slopes' mean and variance between
    capacitors (DerSimonian-Laird, as `_part_moments`), and the covariance of bend and slope
    by the method of moments over the capacitors with their own quadratic, weighted
    1 / (sampling + between) on the bend. Returns (slope mean, slope variance, covariance)."""
    rich = np.isfinite(slope_var)
    mean, variance = _part_moments(
        part, n_parts, slope, np.where(rich, slope_var, 1.0), rich, floor=0.0, default_mean=0.0, default_var=0.0
    )
    both = quadratic & rich
    with np.errstate(invalid="ignore", divide="ignore"):
        weight = np.where(both, 1.0 / (sampling + bend_between[part]), 0.0)
        sw = np.bincount(part, weights=weight, minlength=n_parts)
        bend_mean = np.bincount(part, weights=weight * np.where(both, own, 0.0), minlength=n_parts) / sw
        cross = np.where(both, (own - bend_mean[part]) * (slope - mean[part]), 0.0)
        covariance = np.bincount(part, weights=weight * cross, minlength=n_parts) / sw
        # A covariance cannot exceed the product of the two spreads.
        bound = 0.95 * np.sqrt(np.maximum(variance, 0.0) * np.maximum(bend_between, 0.0))
    count = np.bincount(part, weights=both.astype(float), minlength=n_parts)
    usable = (count >= settings.min_capacitors_for_curvature) & np.isfinite(covariance) & np.isfinite(bound)
    covariance = np.where(usable, np.clip(covariance, -bound, bound), 0.0)
    return np.where(usable, mean, 0.0), np.where(usable, variance, 0.0), covariance


def _conditional_bend(part, bend, bend_var, slope_mean, slope_var, covariance, own_slope, own_slope_var):
    """Each capacitor's prior bend: its part's, conditioned on its own observed slope under the
    joint normal population of bend and slope (the conditional mean and variance of a
    bivariate normal, the slope observed with its sampling error). A flat capacitor is
    thus not pulled towards its part's bend as far as a steep one. Per capacitor."""
    with np.errstate(invalid="ignore", divide="ignore"):
        total = slope_var[part] + own_slope_var
        gain = np.where((total > 0) & np.isfinite(total), covariance[part] / total, 0.0)
        mean = bend[part] + gain * (own_slope - slope_mean[part])
        variance = np.maximum(bend_var[part] - gain * covariance[part], 0.0)
    return np.minimum(np.where(np.isfinite(mean), mean, bend[part]), 0.0), np.where(
        np.isfinite(mean), variance, bend_var[part]
    )


def _stored(values, n_parts: int, fill: float = 0.0) -> np.ndarray:
    """A stored per-part term (`fill` where none was stored)."""
    if values is None:
        return np.full(n_parts, fill)
    values = np.asarray(values, float)
    return np.where(np.isfinite(values), values, fill)


def _slope_prior(part, n_parts, slope, sampling_var, rich, age, settings, family=None):
    """The part's population of slopes b1, with the readings' mean stress age as a covariate.

    b1 (the slope at tau = 0 once the part's bend is taken out) is extrapolated
    from where a capacitor's readings sit; any form error of the bend grows
    with that distance, so b1 drifts with age across the part's capacitors and
    its spread is inflated for the worn ones. The prior mean is therefore a
    line in age, a + beta m (parametric empirical Bayes with a covariate,
    Morris, JASA 78, 1983; from memory): beta by weighted least squares
    (weights 1 / (sampling + between-capacitor variance)), shrunk towards none by
    its standard error (positive-part James-Stein), then a and the variance
    about the line by DerSimonian-Laird. A young capacitor's slope is thus its
    part's young capacitors' slope. A part with fewer than five capacitors takes
    its family's line and moments (`family`, per part; `_part_moments`).
    Returns (a, variance, beta) per part.
    """
    _, between = _part_moments(
        part,
        n_parts,
        slope,
        sampling_var,
        rich,
        floor=settings.slope_prior_sd_floor**2,
        default_mean=0.0,
        default_var=1e-5**2,
        family=family,
    )
    weight = np.where(rich, 1.0 / (np.where(rich, sampling_var, 1.0) + between[part]), 0.0)
    y = np.where(rich, slope, 0.0)

    def line(index, n_bins):
        """The shrunk slope of b1 on age per bin, zero for a bin of fewer than five capacitors."""

        def s(values):
            return np.bincount(index, weights=weight * values, minlength=n_bins)

        sw, swx, swy, swxx, swxy = s(np.ones(len(index))), s(age), s(y), s(age * age), s(age * y)
        count = np.bincount(index, weights=rich.astype(float), minlength=n_bins)
        with np.errstate(invalid="ignore", divide="ignore"):
            spread = swxx - swx * swx / sw
            beta = (swxy - swx * swy / sw) / spread
            beta = beta * np.maximum(1.0 - 4.0 / (spread * beta * beta), 0.0)
        return np.where((count >= 5) & np.isfinite(beta), beta, 0.0), count

    beta, count = line(part, n_parts)
    if family is not None and n_parts:
        # A part with too few capacitors of its own borrows its family's line, as it borrows its moments.
        family = np.asarray(family, np.int64)
        family_beta, family_count = line(family[part], int(family.max()) + 1)
        beta = np.where((count < 5) & (family_count[family] >= 5), family_beta[family], beta)
    mean, variance = _part_moments(
        part,
        n_parts,
        slope - beta[part] * age,
        sampling_var,
        rich,
        floor=settings.slope_prior_sd_floor**2,
        default_mean=0.0,
        default_var=1e-5**2,
        family=family,
    )
    return mean, variance, beta


def _estimate_tempco(g, part, tau, raw_fraction, temperature, keep, n_groups, n_parts, default_ppm, fixed, settings):
    """Each part's temperature coefficient from its capacitors' own readings.

    Within each capacitor, the measured fraction and the temperature (minus
    25 C) are both detrended against stress time (Frisch-Waugh); the pooled
    regression of one residual on the other gives the part's coefficient and
    its standard error. It is then shrunk towards the dielectric's default
    (prior sd `tempco_prior_sd_ppm_per_k`), so a part whose readings were all
    taken at one temperature keeps its default. Parts marked fixed keep theirs.
    """
    delta_t = temperature - 25.0
    ok = keep & np.isfinite(delta_t) & (raw_fraction > 0.5) & (raw_fraction < 1.5)
    w = ok.astype(float)
    count = np.bincount(g, weights=w, minlength=n_groups)

    def detrended(values):
        safe = np.where(ok, values, 0.0)
        n, sx, sy, sxx, sxy = _group_sums(g, tau, safe, w, n_groups)
        b0, b1, sxx_c = _ols(n, sx, sy, sxx, sxy)
        good = ok & (count[g] >= 4) & (sxx_c[g] > 1e-9 * np.maximum(sxx[g], 1.0))
        return np.where(good, safe - b0[g] - b1[g] * tau, 0.0), good

    residual_c, good = detrended(raw_fraction)
    residual_t, _ = detrended(delta_t)
    part_of = part[g]
    sum_tt = np.bincount(part_of, weights=residual_t**2, minlength=n_parts)
    with np.errstate(invalid="ignore", divide="ignore"):
        k_hat = np.bincount(part_of, weights=residual_c * residual_t, minlength=n_parts) / sum_tt
        rich = np.bincount(g, weights=good.astype(float), minlength=n_groups) >= 4
        dof = np.bincount(part, weights=np.where(rich, count - 2.0, 0.0), minlength=n_parts) - 1.0
        scatter = residual_c - np.nan_to_num(k_hat)[part_of] * residual_t
        noise_var = np.bincount(part_of, weights=np.where(good, scatter**2, 0.0), minlength=n_parts) / dof
        se_var = noise_var / sum_tt
    prior_mean = default_ppm * 1e-6
    prior_var = (settings.tempco_prior_sd_ppm_per_k * 1e-6) ** 2
    usable = np.isfinite(k_hat) & np.isfinite(se_var) & (se_var > 0) & (dof >= 10)
    se_var = np.where(usable, se_var, 1.0)
    posterior = (np.where(usable, k_hat, 0.0) / se_var + prior_mean / prior_var) / (1.0 / se_var + 1.0 / prior_var)
    return np.where(fixed | ~usable, default_ppm, posterior * 1e6)


def _part_moments(part, n_parts, estimate, sampling_var, rich, floor, default_mean, default_var, family=None):
    """Population mean and between-capacitor variance of an estimate, per part.

    DerSimonian-Laird: with weights w = 1/se^2, Q = sum w (b - b_w)^2 and
    tau^2 = (Q - (k - 1)) / (sum w - sum w^2 / sum w), never below `floor`; the
    mean is then re-weighted by 1/(se^2 + tau^2). It copes with sampling errors
    that differ a hundredfold between capacitors with 3 and 12 readings. Parts
    with fewer than five rich capacitors borrow their family's figures (`family`,
    per part: the dielectric; an electrolytic start capacitor's ageing is not a
    film run capacitor's) where it has five, else the fleet's; a fleet with fewer
    than two falls back to the broad defaults.
    """

    def pooled(index, n_bins):
        w = np.where(rich, 1.0 / np.where(rich, sampling_var, 1.0), 0.0)
        est = np.where(rich, estimate, 0.0)
        k = np.bincount(index, weights=rich.astype(float), minlength=n_bins)
        sw = np.bincount(index, weights=w, minlength=n_bins)
        sw2 = np.bincount(index, weights=w * w, minlength=n_bins)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean_w = np.bincount(index, weights=w * est, minlength=n_bins) / sw
            q = np.bincount(index, weights=w * (est - mean_w[index]) ** 2, minlength=n_bins)
            tau2 = np.maximum((q - (k - 1)) / (sw - sw2 / sw), floor)
            w_star = np.where(rich, 1.0 / (np.where(rich, sampling_var, 1.0) + tau2[index]), 0.0)
            mean = np.bincount(index, weights=w_star * est, minlength=n_bins) / np.bincount(
                index, weights=w_star, minlength=n_bins
            )
        return mean, tau2, k

    mean, tau2, count = pooled(part, n_parts)
    if rich.sum() >= 2:
        fleet_mean, fleet_tau2, _ = pooled(np.zeros_like(part), 1)
        fleet_mean, fleet_var = fleet_mean[0], fleet_tau2[0]
    else:
        fleet_mean, fleet_var = default_mean, default_var
    borrowed_mean, borrowed_var = np.full(n_parts, fleet_mean), np.full(n_parts, fleet_var)
    if family is not None and n_parts:
        family = np.asarray(family, np.int64)
        family_mean, family_tau2, family_count = pooled(family[part], int(family.max()) + 1)
        own_family = family_count[family] >= 5
        borrowed_mean = np.where(own_family, family_mean[family], borrowed_mean)
        borrowed_var = np.where(own_family, family_tau2[family], borrowed_var)
    enough = count >= 5
    return np.where(enough, mean, borrowed_mean), np.maximum(np.where(enough, tau2, borrowed_var), floor)


def crossing_quantiles(fit: TrendFit, limit_fraction, probabilities=(0.1, 0.5, 0.9)):
    """Stress hours (from tau = 0) at which each path reaches its limit, per quantile.

    P(crossed by t) = Phi((L - m0 - m1 t) / s(t)), s(t)^2 = v00 + 2 t v01 + t^2 v11.
    The p-quantile solves (L - m0 - m1 t) = z_p s(t); squaring gives a quadratic
    whose admissible root is the smallest one at which that probability is
    rising. No such root (a slope not surely falling): inf. A root before tau = 0
    (limit already behind): 0. Shape (len(probabilities), G). A bent path (curvature
    c) is taken along its tangent at the newest reading, b0 - c tau_now^2 +
    (b1 + 2 c tau_now) t: exact there, and the calibrated grid handles the bend ahead.
    """
    bend = getattr(fit, "curvature", None)
    bend = 0.0 if bend is None else np.asarray(bend, float)
    t_now = getattr(fit, "stress_hours_now", 0.0)
    d = fit.to_z(limit_fraction) - (fit.intercept - bend * t_now * t_now)
    m1 = fit.slope_per_hour + 2.0 * bend * t_now
    v00, v01, v11 = fit.covariance[:, 0, 0], fit.covariance[:, 0, 1], fit.covariance[:, 1, 1]
    rows = []
    for p in probabilities:
        zp = float(ndtri(p))
        qa = m1 * m1 - zp * zp * v11
        qb = -2.0 * (d * m1 + zp * zp * v01)
        qc = d * d - zp * zp * v00
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            disc = qb * qb - 4.0 * qa * qc
            root_disc = np.sqrt(np.maximum(disc, 0.0))
            roots = np.stack([(-qb - root_disc) / (2.0 * qa), (-qb + root_disc) / (2.0 * qa)])
            var_t = np.maximum(v00 + 2.0 * roots * v01 + roots * roots * v11, 1e-300)
            g = (d - m1 * roots) / np.sqrt(var_t)
            rising = -m1 * var_t - (d - m1 * roots) * (v01 + roots * v11) > 0
            # At P50 the discriminant is zero in exact arithmetic: allow rounding either
            # side of it. The squared equation's false branch has g = -z_p, far from
            # z_p except at P50, where the two roots coincide anyway.
            real_roots = disc >= -1e-9 * qb * qb
            admissible = real_roots & np.isfinite(roots) & rising & (np.abs(g - zp) <= 1e-3 * (1 + abs(zp)))
        rows.append(np.min(np.where(admissible, roots, np.inf), axis=0))
    return np.maximum(np.stack(rows), 0.0)


def dissipation_trend(group, time_h, dissipation, n_groups, maximum, now_h, probabilities=(0.1, 0.5, 0.9)):
    """Hours from now at which each capacitor's dissipation-factor trend reaches its maximum.

    A second sign of wear beside capacitance, for electrolytics above all: as
    the electrolyte dries out the ESR, and so DF = ESR x 2 pi f C, rises
    (common practice of the trade, no single source). Per capacitor, ordinary
    least squares of DF on calendar hours (bincount sums, no loop); the quantile
    p of the crossing time comes from the slope's own quantile (the level now
    taken as fitted): earlier for a steeper slope. Capacitors with fewer than
    three readings carrying ESR, or whose slope is not surely rising at that
    quantile, get inf; one already at its maximum gets 0. Shape (Q, G).
    """
    g = np.asarray(group, np.int64)
    t = np.asarray(time_h, float)
    y = np.asarray(dissipation, float)
    ok = np.isfinite(t) & np.isfinite(y)
    w = ok.astype(float)
    n, sx, sy, sxx, sxy = _group_sums(g, np.where(ok, t, 0.0), np.where(ok, y, 0.0), w, n_groups)
    intercept, slope, sxx_c = _ols(n, sx, sy, sxx, sxy)
    fitted = np.where(ok, intercept[g] + slope[g] * t, 0.0)
    scatter = np.bincount(g, weights=np.where(ok, (y - fitted) ** 2, 0.0), minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope_se = np.sqrt(scatter / np.maximum(n - 2, 1) / sxx_c)
        level_now = intercept + slope * np.asarray(now_h, float)
        enough = (n >= 3) & (sxx_c > 0)
        rows = []
        for p in probabilities:
            steep = slope - float(ndtri(p)) * slope_se  # P10: the slope's 90 % quantile, so the earliest date
            hours = (np.asarray(maximum, float) - level_now) / steep
            rows.append(np.where(enough & (level_now >= maximum), 0.0, np.where(enough & (steep > 0), hours, np.inf)))
    rows = np.stack(rows)
    return np.where(np.isnan(rows), np.inf, rows)


def reading_stress_hours(
    group, time_h, temperature_c, voltage_v, rated_voltage_v, n_groups, settings=None, part_voltage_ratio=None
):
    """Stress hours at each reading as `fit_trends` computes them (input sorted by group, time):
    missing temperatures and voltages taken from the same capacitor's other readings (a
    capacitor never read in circuit at its part's stored `part_voltage_ratio`, per group), then
    `stress_hours`. Lets a page redraw one capacitor's stored path against its readings
    without a number per reading being stored."""
    settings = settings or TrendSettings()
    group = np.asarray(group, np.int64)
    temperature = np.asarray(temperature_c, float)
    rated_v = np.asarray(rated_voltage_v, float)[group]
    voltage = np.asarray(voltage_v, float)
    with np.errstate(invalid="ignore"):
        voltage_ratio = _fill_per_group(group, np.where(voltage > 0, voltage, np.nan) / rated_v, n_groups)
    if part_voltage_ratio is not None:
        fallback = np.broadcast_to(np.asarray(part_voltage_ratio, float), (n_groups,))[group]
        voltage_ratio = np.where(np.isfinite(voltage_ratio), voltage_ratio, fallback)
    tau, _ = stress_hours(
        group,
        np.asarray(time_h, float),
        case_temperatures(group, temperature, n_groups),
        voltage_ratio * rated_v,
        rated_v,
        n_groups,
        settings,
    )
    return tau
