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
2. The error e of a later reading is modelled as a bias proportional to the
   projected change x = slope x (projected stress hours since the newest
   reading), plus noise whose variance is the fit's own (path and meter)
   plus (spread x x)^2. The bias grows with the loss the capacitor has already
   suffered (loss = fitted fraction at fitting minus now): paths accelerate as
   they age, so e = (bias + bias_per_loss x loss) x + eps. Per family of parts
   (dielectric), the two bias terms by weighted least squares and spread^2 by
   the method of moments.
3. The calibrated forecast scales the slope by (1 + bias + bias_per_loss x loss)
   and widens the path's variance by (spread x slope x (tau - tau_now))^2. This is split conformal
   prediction in spirit (Vovk, Gammerman and Shafer 2005; Angelopoulos and
   Bates 2021; from memory): held-out errors set the width, here through a
   two-number parametric family so that it carries to every horizon and limit.

Families with too little history keep conservative defaults (no bias, 35 %
spread of the future slope: our choice, to be replaced by the fleet's own figure).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from .trends import MODEL_LOG, TrendFit


@dataclass(frozen=True)
class CalibrationSettings:
    default_bias: float = 0.0
    default_spread: float = 0.35
    min_spread: float = 0.10  # never claim to know a future slope better than +/-10 %
    bias_range: tuple[float, float] = (-0.5, 3.0)  # of the whole bias, per capacitor
    bias_per_loss_range: tuple[float, float] = (0.0, 60.0)  # per unit fraction lost (60: +3 at 5 % lost)
    max_spread: float = 3.0
    min_capacitors: int = 20  # with later readings, per family, before its own figures are used
    jump_fraction: float = 0.25  # a later reading this far off is a slip or a failure, not ageing


@dataclass(frozen=True)
class ForecastCalibration:
    """Per family (length F): slope bias, relative spread, and what stood behind them."""

    slope_bias: np.ndarray
    slope_bias_per_loss: np.ndarray
    slope_spread: np.ndarray
    capacitors: np.ndarray
    residuals: np.ndarray

    def bias_for(self, family, loss, settings: CalibrationSettings | None = None) -> np.ndarray:
        """Each capacitor's slope bias from its family and the loss it has suffered."""
        settings = settings or CalibrationSettings()
        family = np.asarray(family, np.int64)
        bias = self.slope_bias[family] + self.slope_bias_per_loss[family] * np.clip(loss, 0.0, 0.5)
        return np.clip(np.nan_to_num(bias), *settings.bias_range)


def default_calibration(n_families: int, settings: CalibrationSettings | None = None) -> ForecastCalibration:
    settings = settings or CalibrationSettings()
    return ForecastCalibration(
        slope_bias=np.full(n_families, settings.default_bias),
        slope_bias_per_loss=np.zeros(n_families),
        slope_spread=np.full(n_families, settings.default_spread),
        capacitors=np.zeros(n_families, int),
        residuals=np.zeros(n_families, int),
    )


def estimate_calibration(
    family,
    capacitor,
    projected_change,
    error,
    known_variance,
    n_families: int,
    loss=None,
    settings: CalibrationSettings | None = None,
) -> ForecastCalibration:
    """Bias terms and spread per family from the errors of later readings.

    All arrays are per later reading: `family` (0..F-1), `capacitor` (any id),
    `projected_change` x (z units, from the newest fitted reading to this one),
    `error` e = observed z minus projected z, `known_variance` the fit's own
    variance of that reading (path plus noise), `loss` the capacitor's loss so
    far (fraction of rated; none: no loss term). Families with fewer than
    `min_capacitors` distinct capacitors keep the defaults.
    """
    settings = settings or CalibrationSettings()
    family = np.asarray(family, np.int64)
    x = np.asarray(projected_change, float)
    e = np.asarray(error, float)
    v = np.asarray(known_variance, float)
    lost = np.zeros_like(x) if loss is None else np.clip(np.nan_to_num(np.asarray(loss, float)), 0.0, 0.5)
    ok = np.isfinite(x) & np.isfinite(e) & np.isfinite(v) & (v > 0) & (np.abs(e) < settings.jump_fraction)
    ok &= np.abs(x) > 0
    family, x, e, v, lost = family[ok], x[ok], e[ok], v[ok], lost[ok]
    result = default_calibration(n_families, settings)
    if family.size == 0:
        return result
    pairs = np.unique(np.stack([family, np.asarray(capacitor, np.int64)[ok]]), axis=1)
    capacitors = np.bincount(pairs[0], minlength=n_families)
    residuals = np.bincount(family, minlength=n_families)

    def sums(values):
        return np.bincount(family, weights=values, minlength=n_families)

    spread2 = np.full(n_families, settings.default_spread**2)
    bias = np.zeros(n_families)
    per_loss = np.zeros(n_families)
    xl = x * lost
    with np.errstate(invalid="ignore", divide="ignore"):
        for _ in range(4):  # bias terms with the current spread, then the spread about them
            w = 1.0 / (v + spread2[family] * x * x)
            a11, a12, a22 = sums(w * x * x), sums(w * x * xl), sums(w * xl * xl)
            r1, r2 = sums(w * x * e), sums(w * xl * e)
            det = a11 * a22 - a12 * a12
            two_terms = (det > 1e-12 * a11 * a22) & (a22 > 0)
            per_loss = np.where(two_terms, (a11 * r2 - a12 * r1) / np.where(two_terms, det, 1.0), 0.0)
            per_loss = np.clip(np.nan_to_num(per_loss), *settings.bias_per_loss_range)
            bias = np.clip(np.nan_to_num((r1 - per_loss * a12) / a11), *settings.bias_range)
            excess = (e - (bias[family] + per_loss[family] * lost) * x) ** 2 - v
            spread2 = np.clip(sums(excess) / sums(x * x), settings.min_spread**2, settings.max_spread**2)
            spread2 = np.nan_to_num(spread2, nan=settings.default_spread**2)
    enough = capacitors >= settings.min_capacitors
    return ForecastCalibration(
        slope_bias=np.where(enough, bias, result.slope_bias),
        slope_bias_per_loss=np.where(enough, per_loss, result.slope_bias_per_loss),
        slope_spread=np.where(enough, np.sqrt(spread2), result.slope_spread),
        capacitors=capacitors,
        residuals=residuals,
    )


def loss_so_far(fit: TrendFit) -> np.ndarray:
    """Each capacitor's fitted loss from fitting to now, as a fraction of rated."""
    start = np.where(fit.model == MODEL_LOG, np.exp(fit.intercept), fit.intercept)
    return np.clip(np.nan_to_num(start - fit.fraction_now), 0.0, 0.5)


def calibrated(fit: TrendFit, slope_bias, slope_spread) -> TrendFit:
    """The fit with its projection beyond the newest reading calibrated.

    Per capacitor: path m(t) = b0 + b1 t + bias b1 (t - t0), t0 the stress hours
    now; its variance that of b0 + b1 u with u = (1 + bias) t - bias t0, plus
    (spread x b1')^2 (t - t0)^2. Both stay quadratic in t, so the closed-form
    crossing quantiles apply unchanged. Only its future (t >= t0) is meant:
    figures of the present come from the uncalibrated fit.
    """
    a = np.asarray(slope_bias, float)
    r = np.asarray(slope_spread, float)
    t0 = fit.stress_hours_now
    m1 = fit.slope_per_hour
    v00, v01, v11 = fit.covariance[:, 0, 0], fit.covariance[:, 0, 1], fit.covariance[:, 1, 1]
    new_slope = (1.0 + a) * m1
    extra = (r * new_slope) ** 2
    covariance = np.empty_like(fit.covariance)
    covariance[:, 0, 0] = v00 - 2.0 * a * t0 * v01 + (a * t0) ** 2 * v11 + extra * t0 * t0
    covariance[:, 0, 1] = covariance[:, 1, 0] = (1.0 + a) * (v01 - a * t0 * v11) - extra * t0
    covariance[:, 1, 1] = (1.0 + a) ** 2 * v11 + extra
    return dataclasses.replace(
        fit,
        intercept=fit.intercept - a * m1 * t0,
        slope_per_hour=new_slope,
        covariance=covariance,
        slope_sd=np.sqrt(covariance[:, 1, 1]),
    )
