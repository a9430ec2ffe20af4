"""Life data from the register: each fitted capacitor is a failure or a suspension."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
from django.db import transaction
from django.utils import timezone

from fleet.engineering.lifedata import WeibullFit, age_replacement, fit_weibull, probability_plot_points
from fleet.models import FittedCapacitor, PartLifeFit


def life_table(part_id: int | None = None, today: dt.date | None = None) -> pd.DataFrame:
    """Ages in days of every capacitor of a part (None: of every part, with `part_id`; one query):
    removed ones at removal, those in service today; `failed` only for failures in service."""
    today = today or timezone.localdate()
    capacitors = FittedCapacitor.objects.all() if part_id is None else FittedCapacitor.objects.filter(part_id=part_id)
    columns = ["part_id", "fitted_on", "removed_on", "removal_reason"]
    frame = pd.DataFrame.from_records(list(capacitors.values_list(*columns)), columns=columns)
    if frame.empty:
        return frame.assign(age_days=[], failed=[])
    end = frame["removed_on"].where(frame["removed_on"].notna(), today)
    frame["age_days"] = (pd.to_datetime(end) - pd.to_datetime(frame["fitted_on"])).dt.days.astype(float)
    frame["failed"] = frame["removal_reason"].eq(FittedCapacitor.RemovalReason.FAILED)
    return frame[frame["age_days"] > 0].reset_index(drop=True)


def refresh_life_fits(today: dt.date | None = None) -> int:
    """Fit and store every part's Weibull (parts with two failures or more; the others' stored fit
    is removed), for pages that forecast failures without fitting. One loop step per part."""
    table = life_table(today=today)
    kept = []
    with transaction.atomic():
        for part_id, rows in table.groupby("part_id"):
            failed = rows["failed"].to_numpy(bool)
            if failed.sum() < 2:
                continue
            fit = fit_weibull(rows["age_days"].to_numpy() / 365.25, failed)
            if not (np.isfinite(fit.beta) and np.isfinite(fit.eta)):
                continue
            PartLifeFit.objects.update_or_create(
                part_id=int(part_id),
                defaults=dict(beta=fit.beta, eta_years=fit.eta, failures=fit.failures, suspensions=fit.suspensions),
            )
            kept.append(int(part_id))
        PartLifeFit.objects.exclude(part_id__in=kept).delete()
    return len(kept)


def part_life(part_id: int, planned_cost: float, failure_cost: float) -> dict:
    """Weibull fit, plot points and the age-replacement curve for one part, in years."""
    table = life_table(part_id)
    years = table["age_days"].to_numpy() / 365.25
    failed = table["failed"].to_numpy(bool)
    result = {"failures": int(failed.sum()), "suspensions": int((~failed).sum()), "fit": None}
    if failed.sum() < 2:
        return result
    fit: WeibullFit = fit_weibull(years, failed)
    plot_t, plot_f = probability_plot_points(years, failed)
    ages = np.linspace(0.05, 3.0, 240) * fit.eta
    replacement = age_replacement(fit, planned_cost, failure_cost, ages=ages)
    (beta_low, beta_high), (eta_low, eta_high) = fit.parameter_bounds()
    b10_low, b10_high = fit.b_life_bounds()
    if beta_low > 1.0:
        pattern = "wear-out: failures come with age"
    elif beta_high < 1.0:
        pattern = "early failures: the youngest fail most"
    else:
        pattern = "cannot tell from random failures yet"
    result.update(
        fit=fit,
        pattern=pattern,
        beta_bounds=(beta_low, beta_high),
        eta_bounds=(eta_low, eta_high),
        b10=fit.b_life(),
        b10_bounds=(b10_low, b10_high),
        next_year_failure=float(np.mean(fit.conditional_failure(years[~failed], 1.0))) if (~failed).any() else None,
        plot_points=(plot_t, plot_f),
        replacement=replacement,
    )
    return result
