"""Life data from the register: each fitted capacitor is a failure or a suspension."""

from __future__ import annotations

import datetime as dt
import logging

import numpy as np
import pandas as pd
from django.db import transaction
from django.db.models import Count, ExpressionWrapper, F, FloatField, Max, Min, Q
from django.utils import timezone

from fleet.engineering.lifedata import (
    NoWeibullEstimate,
    WeibullFit,
    age_replacement,
    fit_weibull,
    probability_plot_points,
    tolerance_life_times,
)
from fleet.models import FittedCapacitor, PartLifeFit, PartToleranceLife, Reading

log = logging.getLogger(__name__)

DAYS_PER_YEAR = 365.25


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
    frame["in_service"] = frame["removed_on"].isna()
    return frame[frame["age_days"] > 0].reset_index(drop=True)


def tolerance_life_table() -> pd.DataFrame:
    """Per part and capacitor (one query): its age in days when it left tolerance in service, or when it was last
    read within tolerance, and whether it left (`tolerance_life_times`). A reading counts out of tolerance as the
    technician's verdict judges it, as measured: below the part's lower tolerance limit, or a defect seen
    (bulged, leaking, vented); a corrected reading counts by its correction only."""
    limit = ExpressionWrapper(F("part__rated_uf") * (1.0 - F("part__tolerance_minus_pct") / 100.0), FloatField())
    current = Q(readings__superseded_by__isnull=True)
    defects = [value for value in Reading.Condition.values if value != Reading.Condition.SOUND]
    out = current & (Q(readings__capacitance_uf__lt=limit) | Q(readings__condition__in=defects))
    columns = ["id", "part_id", "fitted_on", "removed_on", "removal_reason"]
    rows = (
        FittedCapacitor.objects.order_by()
        .values_list(*columns)
        .annotate(first_out=Min("readings__taken_at", filter=out), last_read=Max("readings__taken_at", filter=current))
    )
    frame = pd.DataFrame.from_records(list(rows), columns=[*columns, "first_out", "last_read"])

    def days(column, utc=False):
        values = pd.to_datetime(frame[column], utc=utc)
        return ((values.dt.tz_localize(None) if utc else values) - pd.Timestamp("1970-01-01")) / pd.Timedelta(days=1)

    failed = frame["removal_reason"].eq(FittedCapacitor.RemovalReason.FAILED)
    age, left = tolerance_life_times(
        days("fitted_on").to_numpy(float),
        np.floor(days("first_out", utc=True).to_numpy(float)),
        np.floor(days("last_read", utc=True).to_numpy(float)),
        np.where(failed, days("removed_on").to_numpy(float), np.nan),
    )
    frame = frame.assign(age_days=age, left=left)
    return frame.loc[frame["age_days"] > 0, ["part_id", "age_days", "left"]].reset_index(drop=True)


def _tolerance_life_values(years: np.ndarray, left: np.ndarray) -> dict:
    """A part's PartToleranceLife fields: its Weibull of leaving tolerance, or no estimate and why."""
    counts = dict(left_tolerance=int(left.sum()), still_within=int((~left).sum()))
    if left.sum() < 2:
        return dict(
            beta=None, eta_years=None, no_fit_reason="fewer than two capacitors have left tolerance yet", **counts
        )
    try:
        fit = fit_weibull(years, left)
    except NoWeibullEstimate as reason:
        return dict(beta=None, eta_years=None, no_fit_reason=str(reason), **counts)
    return dict(beta=fit.beta, eta_years=fit.eta, no_fit_reason="", **counts)


def refresh_tolerance_lives() -> int:
    """Fit and store every part's age at leaving tolerance (`tolerance_life_table`), for the pages that set a
    forecast beside it, each part in a savepoint of its own (one that fails keeps what it had, logged); parts
    none of whose capacitors has an age are removed. Returns the parts fitted."""
    table = tolerance_life_table()
    kept, fitted = [], 0
    with transaction.atomic():
        for part_id, rows in table.groupby("part_id"):
            try:
                with transaction.atomic():
                    values = _tolerance_life_values(
                        rows["age_days"].to_numpy(float) / DAYS_PER_YEAR, rows["left"].to_numpy(bool)
                    )
                    PartToleranceLife.objects.update_or_create(part_id=int(part_id), defaults=values)
            except Exception:  # noqa: BLE001 - as in refresh_life_fits: the other parts are refreshed all the same
                log.exception("tolerance life of part %s failed; its stored one is kept as it was", part_id)
            else:
                fitted += values["beta"] is not None
            kept.append(int(part_id))
        PartToleranceLife.objects.exclude(part_id__in=kept).delete()
    return fitted


def tolerance_life(part_id: int) -> dict | None:
    """A part's stored age at leaving tolerance, in years: counts, and the Weibull's median and B10 where
    there is an estimate (one query); None before the first refresh."""
    stored = PartToleranceLife.objects.filter(part_id=part_id).first()
    if stored is None:
        return None
    life = {
        "left": stored.left_tolerance,
        "within": stored.still_within,
        "no_fit_reason": stored.no_fit_reason,
        "fitted_at": stored.fitted_at,
    }
    if stored.beta is None:
        return life | {"fit": None}
    fit = WeibullFit(stored.beta, stored.eta_years, stored.left_tolerance, stored.still_within, np.full((2, 2), np.nan))
    return life | {"fit": fit, "median": fit.b_life(0.5), "b10": fit.b_life(0.1)}


PLOT_POINTS = 400  # the Weibull plot's points kept per part: every failure up to this many, evenly spread beyond


def refresh_life_fits(today: dt.date | None = None) -> int:
    """Fit and store every part's Weibull (parts with two failures or more; the others' stored fit
    is removed) with what the life-data page shows besides it, for pages that must not fit on a
    page load; a part whose data hold no estimate gets the reason instead. One loop step per part,
    each in its own savepoint: a part that fails unexpectedly keeps the fit it had (logged) and the
    others are refreshed all the same. Then each part's age at leaving tolerance (`refresh_tolerance_lives`).
    Returns the parts fitted."""
    table = life_table(today=today)
    kept, fitted = [], 0
    with transaction.atomic():
        for part_id, rows in table.groupby("part_id"):
            years = rows["age_days"].to_numpy() / DAYS_PER_YEAR
            failed = rows["failed"].to_numpy(bool)
            if failed.sum() < 2:
                continue
            try:
                with transaction.atomic():
                    values = _life_fit_values(years, failed, years[rows["in_service"].to_numpy(bool)])
                    PartLifeFit.objects.update_or_create(part_id=int(part_id), defaults=values)
            except Exception:  # noqa: BLE001 - one part's failure must not leave every other part's fit stale
                log.exception("life fit of part %s failed; its stored fit is kept as it was", part_id)
            else:
                fitted += values["beta"] is not None
            kept.append(int(part_id))
        PartLifeFit.objects.exclude(part_id__in=kept).delete()
    refresh_tolerance_lives()
    return fitted


# PartLifeFit's covariance fields: their place in the core's covariance of (ln beta, ln eta).
COVARIANCE_FIELDS = {"var_log_beta": (0, 0), "cov_log_beta_eta": (0, 1), "var_log_eta": (1, 1)}


def _life_fit_values(years: np.ndarray, failed: np.ndarray, in_service_years: np.ndarray) -> dict:
    """A part's PartLifeFit fields from its life table: the fit, its covariance (empty without bounds),
    plot points and next-year chance; or no estimate and why."""
    counts = dict(failures=int(failed.sum()), suspensions=int((~failed).sum()))
    try:
        fit = fit_weibull(years, failed)
    except NoWeibullEstimate as reason:
        return dict(
            beta=None, eta_years=None, no_fit_reason=str(reason), **counts, **dict.fromkeys(COVARIANCE_FIELDS),
            plot_points=[], next_year_failure=None,
        )  # fmt: skip
    plot_t, plot_f = probability_plot_points(years, failed)
    shown = np.unique(np.linspace(0, len(plot_t) - 1, min(len(plot_t), PLOT_POINTS)).round().astype(int))
    return dict(
        beta=fit.beta,
        eta_years=fit.eta,
        no_fit_reason="",
        **counts,
        **{
            name: float(fit.covariance_log[place]) if fit.bounds_available else None
            for name, place in COVARIANCE_FIELDS.items()
        },
        plot_points=[[float(t), float(f)] for t, f in zip(plot_t[shown], plot_f[shown], strict=True)],
        next_year_failure=float(np.mean(fit.conditional_failure(in_service_years, 1.0)))
        if in_service_years.size
        else None,
    )


def stored_fit(stored: PartLifeFit) -> WeibullFit:
    """A part's stored fit as the core's WeibullFit (bounds, B-lives, age replacement)."""
    covariance = np.array(
        [[stored.var_log_beta, stored.cov_log_beta_eta], [stored.cov_log_beta_eta, stored.var_log_eta]], float
    )  # None (no bounds) becomes NaN
    return WeibullFit(
        beta=stored.beta,
        eta=stored.eta_years,
        failures=stored.failures,
        suspensions=stored.suspensions,
        covariance_log=covariance,
    )


def part_life(part_id: int, planned_cost: float, failure_cost: float) -> dict:
    """A part's stored Weibull fit (refreshed nightly by `refresh_life_fits`, never fitted here), its
    plot points and the age-replacement curve for these costs, in years; without a stored fit, the
    part's failures and suspensions counted from the register, and why its data hold no estimate if
    the refresh found none (one query either way, or two)."""
    stored = PartLifeFit.objects.filter(part_id=part_id).first()
    # The life table's units: those with an age (removed after fitting, or in service since before today).
    # Those fitted today or removed on the day they were fitted have none: counted apart, not fitted.
    aged = Q(removed_on__gt=F("fitted_on")) | Q(removed_on__isnull=True, fitted_on__lt=timezone.localdate())
    failed = Q(removal_reason=FittedCapacitor.RemovalReason.FAILED)
    counts = FittedCapacitor.objects.filter(part_id=part_id).aggregate(
        failures=Count("id", filter=aged & failed),
        units=Count("id", filter=aged),
        no_age=Count("id", filter=~aged),
        no_age_failures=Count("id", filter=~aged & failed),
    )
    unaged = {"no_age": counts["no_age"], "no_age_failures": counts["no_age_failures"]}
    # The register as it stands, beside the stored fit's counts: a capacitor replaced since the night's estimate
    # is in the life table download already, and the page says so rather than disagree with it in silence.
    now = {"failures_now": counts["failures"], "suspensions_now": counts["units"] - counts["failures"]}
    if stored is None or stored.beta is None:
        return {
            "failures": counts["failures"],
            "suspensions": counts["units"] - counts["failures"],
            "fit": None,
            "fitted_at": None,
            "no_fit_reason": "" if stored is None else stored.no_fit_reason,
            **unaged,
        }
    fit = stored_fit(stored)
    replacement = age_replacement(fit, planned_cost, failure_cost)
    (beta_low, beta_high), (eta_low, eta_high) = fit.parameter_bounds()
    b10_low, b10_high = fit.b_life_bounds()
    if not fit.bounds_available:
        pattern = "no bounds: the information matrix could not be inverted (failures bunched at one age)"
    elif beta_low > 1.0:
        pattern = "wear-out: failures come with age"
    elif beta_high < 1.0:
        pattern = "early failures: the youngest fail most"
    else:
        pattern = "cannot tell from random failures yet"
    points = np.array(stored.plot_points, float).reshape(-1, 2)
    return {
        "failures": fit.failures,
        "suspensions": fit.suspensions,
        "fit": fit,
        "fitted_at": stored.fitted_at,
        "pattern": pattern,
        "beta_bounds": (beta_low, beta_high),
        "eta_bounds": (eta_low, eta_high),
        "b10": fit.b_life(),
        "b10_bounds": (b10_low, b10_high),
        "next_year_failure": stored.next_year_failure,
        **unaged,
        **now,
        "plot_points": (points[:, 0], points[:, 1]),
        "replacement": replacement,
    }
