"""Reads for pages: stored results only, a bounded number of queries per page."""

from __future__ import annotations

import datetime as dt

import numpy as np
from django.db.models import Count, F, Max, OuterRef, Prefetch, Q, Subquery, Sum
from django.utils import timezone

from fleet.charts import trend_figure
from fleet.engineering.capacitor import normalise_to_25c
from fleet.engineering.planning import RISK_ORDER
from fleet.engineering.trends import default_tempco_ppm_per_k, path_band
from fleet.models import Assessment, FittedCapacitor, Motor, Reading, RefitRun, Site
from fleet.roles import scope_to_user

RECENT_READINGS = 6


def current_assessments(user=None):
    """Current assessments of the capacitors at the user's sites (None: every site)."""
    return scope_to_user(Assessment.objects.filter(is_current=True), user)


def motor_with_capacitors(asset_tag: str):
    """The motor, its capacitors (in service first) each with its current assessment."""
    capacitors = (
        FittedCapacitor.objects.select_related("part")
        .prefetch_related(Prefetch("assessments", queryset=current_assessments(), to_attr="current"))
        .order_by("removed_on", "role", "-fitted_on")
    )
    return (
        Motor.objects.select_related("site")
        .prefetch_related(Prefetch("capacitors", queryset=capacitors, to_attr="fitted"))
        .get(asset_tag__iexact=asset_tag.strip())
    )


def recent_readings(installation: FittedCapacitor, count: int = RECENT_READINGS):
    return list(
        Reading.objects.filter(installation=installation)
        .select_related("taken_by", "supersedes")
        .order_by("-taken_at", "-id")[:count]
    )


def trend_chart(installation: FittedCapacitor, assessment: Assessment | None, horizon_days: int = 730) -> dict | None:
    """Figure of readings, the stored fitted path and its band, drawn from stored numbers."""
    if assessment is None or not assessment.trend:
        return None
    trend = assessment.trend
    rated = trend["rated_uf"]
    tau_by_id = {reading_id: tau for reading_id, tau in trend["points"]}
    readings = list(
        Reading.objects.filter(id__in=tau_by_id)
        .order_by("taken_at")
        .values("id", "taken_at", "capacitance_uf", "case_temperature_c")
    )
    if not readings:
        return None
    corrected = normalise_to_25c(
        np.array([r["capacitance_uf"] for r in readings]),
        np.array([np.nan if r["case_temperature_c"] is None else r["case_temperature_c"] for r in readings]),
        trend.get("tempco_ppm_per_k", default_tempco_ppm_per_k(installation.part.dielectric)),
    )
    flagged = set(assessment.flagged_reading_ids)
    points = [
        {"date": r["taken_at"].date().isoformat(), "capacitance_uf": round(float(c), 3), "flagged": r["id"] in flagged}
        for r, c in zip(readings, corrected, strict=True)
    ]
    last = readings[-1]["taken_at"]
    future_days = np.linspace(0, horizon_days, 25)[1:]
    taus = [tau_by_id[r["id"]] for r in readings] + list(
        trend["stress_hours_now"] + trend["stress_rate"] * future_days * 24.0
    )
    dates = [r["taken_at"].date().isoformat() for r in readings] + [
        (last + dt.timedelta(days=float(d))).date().isoformat() for d in future_days
    ]
    mid, low, high = path_band(
        trend["model"],
        trend["intercept"],
        trend["slope_per_hour"],
        trend["covariance"],
        trend["noise_sd"],
        np.array(taus),
        curvature=trend.get("curvature", 0.0),
    )
    path = {
        "dates": dates,
        "mid_uf": [round(float(v) * rated, 3) for v in mid],
        "low_uf": [round(float(v) * rated, 3) for v in low],
        "high_uf": [round(float(v) * rated, 3) for v in high],
    }
    return trend_figure(points, path, assessment.limit_fraction * rated, assessment.limit_source, rated)


def quarter_start(day: dt.date) -> dt.date:
    return dt.date(day.year, 3 * ((day.month - 1) // 3) + 1, 1)


def route_for_site(site: Site, today: dt.date | None = None):
    """The site's motors in walking order, each marked due if not read this quarter."""
    today = today or timezone.localdate()
    start = quarter_start(today)
    motors = (
        Motor.objects.filter(site=site, status=Motor.Status.IN_SERVICE)
        .annotate(
            last_read=Max("capacitors__readings__taken_at", filter=Q(capacitors__removed_on__isnull=True)),
            capacitors_in_service=Count("capacitors", filter=Q(capacitors__removed_on__isnull=True), distinct=True),
        )
        .order_by("route_order", "asset_tag")
    )
    rows = []
    for motor in motors:
        due = motor.last_read is None or timezone.localdate(motor.last_read) < start
        rows.append({"motor": motor, "due": due})
    return rows, start


def risk_summary(user=None):
    counts = dict(
        current_assessments(user)
        .filter(installation__removed_on__isnull=True)
        .values_list("risk")
        .annotate(n=Count("id"))
    )
    return [(risk, counts.get(risk, 0)) for risk in RISK_ORDER]


def replacement_plan(horizon_days: int = 90, site: Site | None = None, user=None):
    """Capacitors in service at the user's sites to replace within the horizon, soonest first,
    with the newest assessment's figures; one query."""
    until = timezone.localdate() + dt.timedelta(days=horizon_days)
    queryset = (
        current_assessments(user)
        .filter(installation__removed_on__isnull=True, replace_by__lte=until)
        .select_related("installation__motor__site", "installation__part")
        .order_by("replace_by", "installation__motor__site__code", "installation__motor__route_order")
    )
    if site is not None:
        queryset = queryset.filter(installation__motor__site=site)
    return queryset


def spares_needed(horizon_days: int = 90, site: Site | None = None, user=None):
    """Parts to hold for the plan's replacements (same window, same sites), with their cost."""
    return (
        replacement_plan(horizon_days, site, user)
        .order_by()
        .values(
            "installation__part__code",
            "installation__part__rated_uf",
            "installation__part__rated_voltage_v",
            "installation__part__dielectric",
        )
        .annotate(quantity=Count("id"), cost=Sum("installation__part__unit_cost"))
        .order_by("installation__part__code")
    )


def latest_refit_run():
    return RefitRun.objects.order_by("-started_at").first()


def risk_changes(days: int = 7, limit: int = 50, user=None):
    """Capacitors whose risk level moved in the last `days`, against the assessment
    that was current then: (worse, better, first_assessed_count).

    Capacitors first assessed in the window have nothing to compare with; they are
    counted apart (SQL's NULL <> risk would silently drop them otherwise).
    """
    since = timezone.now() - dt.timedelta(days=days)
    before = Assessment.objects.filter(installation=OuterRef("installation"), created_at__lt=since).order_by(
        "-created_at"
    )
    recent = (
        current_assessments(user)
        .filter(installation__removed_on__isnull=True, created_at__gte=since)
        .annotate(previous_risk=Subquery(before.values("risk")[:1]))
    )
    first_assessed = recent.filter(previous_risk__isnull=True).count()
    changed = (
        recent.filter(previous_risk__isnull=False)
        .exclude(previous_risk=F("risk"))
        .select_related("installation__motor__site", "installation__part")
    )
    severity = {risk: rank for rank, risk in enumerate(RISK_ORDER)}
    worse, better = [], []
    for assessment in changed.order_by("replace_by")[: 4 * limit]:
        was = severity.get(assessment.previous_risk, len(RISK_ORDER))
        (worse if severity[assessment.risk] < was else better).append(assessment)
    return worse[:limit], better[:limit], first_assessed
