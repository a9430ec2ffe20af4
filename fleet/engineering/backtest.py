"""Scoring forecasts made at a past cut-off against what happened after it.

Rolling-origin evaluation (Tashman, Int. J. Forecasting 16, 2000; from memory):
the fleet is refitted with only what was known at each cut-off, and every
forecast is compared with the later readings and removals. Censoring is
respected: a capacitor counts for a question ("crossed within 365 days?") only
if it crossed, or was followed at least that long.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .capacitor import normalise_to_25c
from .planning import (
    ALERT_LEVELS,
    RISK_DUE_SOON,
    RISK_REPLACE_NOW,
    RISK_WATCH,
    PlanningSettings,
    reads_below,
    risk_levels,
)
from .rules import ReadingRules
from .trends import MODEL_LOG, TrendFit

QUANTILES = (0.1, 0.5, 0.9)
FLAGGED_WITHIN = {90: (RISK_REPLACE_NOW, RISK_DUE_SOON), 365: (RISK_REPLACE_NOW, RISK_DUE_SOON, RISK_WATCH)}


def projection_errors(fit: TrendFit, group, time_h, capacitance_uf, temperature_c, rated_uf):
    """Errors of the fitted paths projected to later readings, in the fit's z units.

    group: the capacitor (index into the fit) of each later reading; time_h its
    calendar hours since fitting. The projection runs at the long-run stress
    rate from the newest fitted reading, as the forecast does. Returns
    (projected_change, projected_stress_hours, error, known_variance,
    fraction_25c) per reading; the
    known variance is the path's own plus the reading noise. Also returns the
    projected stress hours since the newest fitted reading.
    """
    g = np.asarray(group, np.int64)
    t = np.asarray(time_h, float)
    tau = fit.stress_hours_now[g] + fit.stress_rate[g] * np.maximum(t - fit.hours_now[g], 0.0)
    fraction = normalise_to_25c(
        np.asarray(capacitance_uf, float) / np.asarray(rated_uf, float)[g],
        fit.case_temperatures_of(temperature_c, g),
        fit.tempco_ppm_per_k[g],
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(fit.model[g] == MODEL_LOG, np.log(fraction), fraction)
    predicted = fit.mean_at(tau, g)
    v00, v01, v11 = fit.covariance[g, 0, 0], fit.covariance[g, 0, 1], fit.covariance[g, 1, 1]
    variance = v00 + 2.0 * tau * v01 + tau * tau * v11 + fit.noise_sd[g] ** 2
    span = tau - fit.stress_hours_now[g]
    return fit.slope_now()[g] * span, span, z - predicted, variance, fraction


def isolated_off_trend(group, day, fraction, projected_fraction, off_trend_fraction=ReadingRules.off_trend_fraction):
    """Later readings that are strays: off their capacitor's projected trend by more than
    `off_trend_fraction` of the rating, with neither neighbouring reading off it the same way.

    Such a reading is the one the technician is asked to confirm or re-measure
    (`rules.off_trend`, the rulebook's `off_trend_fraction` by default): the wrong capacitor, a poor
    contact, a slip. Scored as a crossing it would count as ageing that no
    forecast could catch; a sudden real fall shows again in the capacitor's next
    (or previous) reading and stays.
    Arrays per later reading (fractions of rated); the order does not matter.
    """
    group = np.asarray(group, np.int64)
    with np.errstate(invalid="ignore"):
        off = np.asarray(fraction, float) - np.asarray(projected_fraction, float)
    side = np.where(off > off_trend_fraction, 1, np.where(off < -off_trend_fraction, -1, 0))
    order = np.lexsort((np.asarray(day, float), group))
    g, s = group[order], side[order]
    same = g[1:] == g[:-1]
    confirmed = np.zeros(len(group), bool)
    confirmed[order] = np.r_[same & (s[1:] == s[:-1]), False] | np.r_[False, same & (s[:-1] == s[1:])]
    return (side != 0) & ~confirmed


def first_crossing_day(group, day, below, n_groups):
    """Day each capacitor was first seen below its limit (nan: not seen).

    Dated midway between its first reading below and the reading before it (or
    day 0, the cut-off): the path crossed somewhere in that interval, and the
    first reading below alone would date every crossing up to an interval late.
    """
    group = np.asarray(group, np.int64)
    day = np.asarray(day, float)
    first = np.full(n_groups, np.inf)
    np.minimum.at(first, group, np.where(np.asarray(below, bool), day, np.inf))
    previous = np.zeros(n_groups)
    np.maximum.at(previous, group, np.where(day < first[group], day, 0.0))
    return np.where(np.isfinite(first), 0.5 * (previous + first), np.nan)


def observed_crossings(
    group, day, fraction_25c, projected_fraction, limit_fraction, failed_day, n_groups, margin=0.0, **stray
):
    """Day each capacitor was seen to cross its limit after the cut-off (nan: not seen), judged as the
    application judges a reading: the first later reading referred to 25 C below the capacitance limit
    that governs the capacitor (`planning.reads_below`, by any margin: that reading asks for its
    replacement), dated by `first_crossing_day`, or its removal as failed in service (`failed_day`, nan
    if not), whichever came first. A stray reading (`isolated_off_trend`, with `stray` its keyword
    arguments) is not a crossing. `margin` (per capacitor, fraction of rated) asks for a reading that
    far below instead: the risk rule's level is chosen on crossings clear of the meter noise.

    Arrays per later reading: group, day (from the cut-off), fraction_25c, projected_fraction; per
    capacitor: limit_fraction, failed_day, margin.
    """
    group = np.asarray(group, np.int64)
    limit = np.asarray(limit_fraction, float) - np.broadcast_to(np.asarray(margin, float), np.shape(limit_fraction))
    below = reads_below(fraction_25c, limit[group])
    below &= ~isolated_off_trend(group, day, fraction_25c, projected_fraction, **stray)
    return np.fmin(first_crossing_day(group, day, below, n_groups), np.asarray(failed_day, float))


@dataclass(frozen=True)
class PathModelChoice:
    """What `choose_path_model` chose, and the figures it chose on."""

    form: int | None  # index of the trend form; None: too few readings to choose
    straight: bool  # straight paths rather than bent ones
    mean_squared_error: np.ndarray  # per candidate (nan: no reading counts)
    straight_z: float  # mean (straight - bent) squared error in standard errors (nan: not compared)


def choose_path_model(
    squared_error, cluster, z: float = 2.0, min_readings: int = 100, slip_fraction: float = 0.25
) -> PathModelChoice:
    """The trend form and path shape whose projections came closest to the readings that came later.

    squared_error (N, 2K): for each of N later readings, the squared error (in
    fractions of rated) of its projection under K trend forms on bent paths, then
    the same K forms on straight paths, each fitted only to the readings before
    the reading's cut-off; cluster (N): the capacitor each reading belongs to.
    Readings off by `slip_fraction` of the rating or more under any candidate are
    a slip or the wrong capacitor rather than ageing, and are left out, as are
    readings some candidate did not project. Model choice by rolling-origin error
    of every later reading, not of crossings (Tashman, Int. J. Forecasting 16, 2000;
    from memory):

    - the form is the one of smallest mean squared error on bent paths;
    - straight paths replace bent ones only where their mean squared error is
      lower by more than `z` standard errors of the mean difference: a test of
      equal predictive accuracy on the loss differential (Diebold and Mariano,
      J. Business & Economic Statistics 13, 1995; from memory), its standard error
      from sums per capacitor, whose readings share one path's error (cluster-robust
      variance, Liang and Zeger, Biometrika 73, 1986; from memory). A difference
      within chance keeps the bend, the product's default.

    Under `min_readings` usable readings nothing is chosen (form None).
    """
    squared = np.asarray(squared_error, float)
    cluster = np.asarray(cluster)
    forms = squared.shape[1] // 2
    usable = np.isfinite(squared).all(axis=1) & (squared < slip_fraction**2).all(axis=1)
    squared, cluster = squared[usable], cluster[usable]
    if not len(squared):
        return PathModelChoice(None, False, np.full(2 * forms, np.nan), np.nan)
    mean = squared.mean(axis=0)
    if len(squared) < min_readings:
        return PathModelChoice(None, False, mean, np.nan)
    form = int(np.argmin(mean[:forms]))
    difference = squared[:, forms + form] - squared[:, form]
    _, which = np.unique(cluster, return_inverse=True)
    residual_sums = np.bincount(which, weights=difference - difference.mean())
    standard_error = np.sqrt((residual_sums**2).sum()) / len(difference)
    with np.errstate(divide="ignore", invalid="ignore"):
        straight_z = float(difference.mean() / standard_error)
    return PathModelChoice(form, bool(straight_z < -z), mean, straight_z)


def catches_enough(recall, settings: PlanningSettings | None = None) -> bool:
    """Whether a level's back-tested 365-day recall (None: not scored) reaches the risk rule's floor
    (`PlanningSettings.alert_min_recall`)."""
    return recall is not None and recall >= (settings or PlanningSettings()).alert_min_recall


def choose_alert_level(
    level_days, replace_now, crossed_day, followed_days, settings: PlanningSettings | None = None, window_days=None
):
    """The crossing quantile the risk rule should flag on, from back-tested forecasts.

    level_days (K, G): days from the cut-off to each capacitor's crossing at each
    of `ALERT_LEVELS`; replace_now (G): flagged on evidence whatever the level.
    Each level's rule is scored as `score` does (365-day recall and precision,
    censoring respected). The level chosen is the most precise of those that
    catch at least `alert_min_recall` of the crossings; if none does, the one
    that catches most (the lowest). A threshold chosen on held-out outcomes, as
    a decision threshold is read off a precision-recall curve (Davis and
    Goadrich, ICML 2006). Returns (level, [(level, precision, recall), ...]).
    """
    settings = settings or PlanningSettings()
    level_days = np.asarray(level_days, float)
    table = []
    for k, level in enumerate(ALERT_LEVELS):
        risk = risk_levels(replace_now, level_days[k], settings)
        result = score(
            level_days[[0, 0, 0]], risk, crossed_day, followed_days, horizons=(365,), window_days=window_days
        )
        table.append((level, result["precision_365d"], result["recall_365d"]))
    good = [row for row in table if row[1] is not None and catches_enough(row[2], settings)]
    if not good:
        return ALERT_LEVELS[0], table
    return max(good, key=lambda row: (row[1], -row[0]))[0], table


def probability_crossed_by(levels, level_days, day):
    """Each forecast's probability of a crossing by `day` (days from the cut-off), read off its quantiles.

    levels (K,): increasing probabilities; level_days (K, G): each forecast's day at each level
    (inf: beyond its horizon); day (G,) or a scalar. Between two quantiles the normal score of the
    probability is taken as linear in log time (exact for a log-normal crossing time, the usual
    life distribution of a wear-out degradation path, Meeker and Escobar, Statistical Methods for
    Reliability Data, 1998, ch. 13; from memory); before the first and after the last finite one
    the nearest segment is carried on, and past a quantile beyond the horizon no more than its
    level is counted. Days are taken as at least half a day.
    """
    from scipy.special import ndtr, ndtri

    levels = np.asarray(levels, float)
    x = np.log(np.maximum(np.asarray(level_days, float), 0.5))  # inf stays inf
    z = ndtri(levels)[:, None] * np.ones_like(x)
    k, g = x.shape
    t = np.log(np.maximum(np.broadcast_to(np.asarray(day, float), (g,)), 0.5))
    finite = np.isfinite(x)
    last = finite.sum(axis=0) - 1  # quantiles are increasing in level, so the finite ones come first
    columns = np.arange(g)
    segment = np.clip((x <= t).sum(axis=0), 1, np.maximum(last, 1))  # interpolate between segment-1 and segment
    x0, x1 = x[segment - 1, columns], x[np.minimum(segment, k - 1), columns]
    z0, z1 = z[segment - 1, columns], z[np.minimum(segment, k - 1), columns]
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = (z1 - z0) / np.maximum(x1 - x0, 1e-9)
        score = np.where(np.isfinite(x1), z0 + slope * (t - x0), z0)
    cap = np.where(last + 1 < k, z[np.minimum(last + 1, k - 1), columns], np.inf)
    score = np.minimum(np.where(last >= 1, score, np.where(t >= x[0], z[0], -np.inf)), cap)
    probability = ndtr(score)
    return np.where(last >= 0, probability, 0.0)


def expected_band_shares(levels, level_days, followed_days) -> dict:
    """What the band scores of `score` would be if every forecast distribution were exactly right.

    A crossing is seen only within its capacitor's follow-up, so the crossings scored are the early
    part of each distribution: where the follow-up ends before P90, more than one in ten of them lies
    before P10 even when every forecast is right (a truncated distribution, Klein and Moeschberger,
    Survival Analysis, 2003, section 3.4; from memory). Per forecast, P(crossed by the end of its
    follow-up) and P(crossed before P10 and by then), after P90 likewise; the expected shares are
    their sums over the expected crossings. levels must hold 0.1 and 0.9.
    """
    levels = np.asarray(levels, float)
    level_days = np.asarray(level_days, float)
    followed = np.asarray(followed_days, float)
    p10, p90 = (
        level_days[np.flatnonzero(np.isclose(levels, 0.1))[0]],
        level_days[np.flatnonzero(np.isclose(levels, 0.9))[0]],
    )
    seen = probability_crossed_by(levels, level_days, followed)
    before = np.where(p10 <= followed, 0.1, seen)
    after = np.where(p90 <= followed, np.maximum(seen - 0.9, 0.0), 0.0)
    expected = float(seen.sum())
    if expected <= 0:
        return {
            "expected_crossed": 0.0,
            "expected_inside_p10_p90": None,
            "expected_before_p10": None,
            "expected_after_p90": None,
        }
    return {
        "expected_crossed": expected,
        "expected_inside_p10_p90": float(1.0 - (before.sum() + after.sum()) / expected),
        "expected_before_p10": float(before.sum() / expected),
        "expected_after_p90": float(after.sum() / expected),
    }


def score(days, risk, crossed_day, followed_days, horizons=(90, 365), quantiles=None, window_days=None) -> dict:
    """Scores of one set of forecasts, for capacitors not yet past their limit.

    days (3, G): forecast days from the cut-off to P10/P50/P90 (inf: beyond the
    horizon); risk (G): the risk level given; crossed_day (G): days to the
    observed crossing (nan: not seen); followed_days (G): how long each was
    followed; quantiles, optional: (levels, level_days) of each forecast's fuller distribution,
    for the band scores expected if every forecast were right (`expected_band_shares`);
    window_days (G), optional: days from each forecast's cut-off to the newest reading of the data.
    Returns plain numbers (shares in 0..1, None where nothing counts).

    Precision and recall within a horizon count only forecasts whose cut-off lies that far before the data's
    end: within a year not yet over, a flag that came true is known as soon as its capacitor crosses, one that
    did not only a year on, so the flags counted would be the hits alone (a review found 100 % precision at
    the three newest cut-offs of the demo, and the pooled figure 82 % where the years over gave 77 %).
    """
    days = np.asarray(days, float)
    crossed_day = np.asarray(crossed_day, float)
    followed = np.asarray(followed_days, float)
    crossed = np.isfinite(crossed_day)
    cd = np.where(crossed, crossed_day, np.inf)

    def share(mask, among):
        count = int(among.sum())
        return (float((mask & among).sum()) / count if count else None), count

    inside, n_crossed = share((days[0] <= cd) & (cd <= days[2]), crossed)
    below, _ = share(cd < days[0], crossed)
    above, _ = share(cd > days[2], crossed)
    calibration = []
    for k, q in enumerate(QUANTILES):
        quantile = days[k]
        known = np.isfinite(quantile) & (crossed | (followed >= quantile))
        observed, count = share(cd <= quantile, known)
        calibration.append({"nominal": q, "observed": observed, "capacitors": count})
    with np.errstate(divide="ignore", invalid="ignore"):
        p50_error = (days[1] - cd) / np.maximum(cd, 1.0)
    p50_error = p50_error[crossed & np.isfinite(p50_error)]
    result = {
        "capacitors": int(len(cd)),
        "crossed": n_crossed,
        "inside_p10_p90": inside,
        "before_p10": below,
        "after_p90": above,
        "calibration": calibration,
        "p50_error_median": float(np.median(p50_error)) if p50_error.size else None,
        "p50_abs_error_median": float(np.median(np.abs(p50_error))) if p50_error.size else None,
    }
    if quantiles is not None:
        result.update(expected_band_shares(*quantiles, followed))
    window = np.full(len(cd), np.inf) if window_days is None else np.asarray(window_days, float)
    for horizon in horizons:
        flagged = np.isin(np.asarray(risk), FLAGGED_WITHIN[horizon])
        truth = cd <= horizon
        known = (window >= horizon) & (truth | (followed >= horizon))
        tp = int((flagged & truth & known).sum())
        result[f"precision_{horizon}d"] = tp / int((flagged & known).sum()) if (flagged & known).any() else None
        result[f"recall_{horizon}d"] = tp / int((truth & known).sum()) if (truth & known).any() else None
        result[f"flagged_{horizon}d"] = int((flagged & known).sum())
        result[f"crossed_{horizon}d"] = int((truth & known).sum())
    return result
