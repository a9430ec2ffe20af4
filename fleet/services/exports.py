"""The engineer's and the planner's exports: readings, current assessments, life data and the plan,
each as a `Table` (columns with units, rows read in chunks by one query), filtered like the page
or API list it comes from and limited to the user's sites."""

from __future__ import annotations

import datetime as dt

from django.utils import timezone

from fleet.exports import BOOL, DATE, DATETIME, FLOAT, INT, Column, Table
from fleet.filters import AssessmentFilter, LifeDataFilter, ReadingFilter, filtered, plan_parameters
from fleet.models import Assessment, FittedCapacitor, Reading
from fleet.roles import scope_to_user

from . import pages
from .assessments import ALL_LIMITS, DISSIPATION_LIMIT, MODEL_VERSION

CHUNK = 2000  # rows fetched per database round trip


def _about(query, **extra) -> dict:
    filters = {key: value for key, value in query.items() if key != "page"}
    return {"model_version": MODEL_VERSION, "generated_at": timezone.now().isoformat(), "filters": filters, **extra}


READING_COLUMNS = [
    Column("reading_id", INT, description="Reading id"),
    Column("site", description="Site code"),
    Column("asset_tag", description="Motor asset tag"),
    Column("installation_id", INT, description="Fitted capacitor id"),
    Column("role", description="run or start"),
    Column("part_code", description="Capacitor part code"),
    Column("taken_at", DATETIME, "UTC", "When the reading was taken"),
    Column("method", description="meter (isolated) or in_circuit (current and voltage)"),
    Column("capacitance_uf", FLOAT, "uF", "Capacitance as measured (not referred to 25 C)"),
    Column("capacitor_current_a", FLOAT, "A", "Capacitor current (in circuit)"),
    Column("capacitor_voltage_v", FLOAT, "V", "Voltage across the capacitor (in circuit)"),
    Column("line_voltage_v", FLOAT, "V", "Supply voltage"),
    Column("main_current_a", FLOAT, "A", "Main-winding current"),
    Column("aux_current_a", FLOAT, "A", "Auxiliary-winding current"),
    Column("line_current_a", FLOAT, "A", "Line current"),
    Column("case_temperature_c", FLOAT, "degC", "Capacitor case temperature"),
    Column("ambient_temperature_c", FLOAT, "degC", "Ambient temperature"),
    Column("esr_ohm", FLOAT, "ohm", "Equivalent series resistance"),
    Column("condition", description="sound, bulged, leaking or vented"),
    Column("outlier_confirmed", BOOL, description="Far off the trend, re-checked and confirmed"),
    Column("supersedes_id", INT, description="The reading this one corrects"),
    Column("source", description="form, api, import or demo"),
    Column("taken_by", description="User name of who logged it"),
    Column("notes", description="Technician's notes"),
]
READING_FIELDS = [
    "id",
    "installation__motor__site__code",
    "installation__motor__asset_tag",
    "installation_id",
    "installation__role",
    "installation__part__code",
    "taken_at",
    "method",
    *Reading.MEASURED_FIELDS,
    "condition",
    "outlier_confirmed",
    "supersedes_id",
    "source",
    "taken_by__username",
    "notes",
]


def readings_table(query, user, request=None) -> Table:
    """Readings at the user's sites, filtered by site, part, motor and dates, oldest first."""
    readings = filtered(ReadingFilter, query, scope_to_user(Reading.objects.all(), user), request)
    rows = readings.order_by("taken_at", "id").values_list(*READING_FIELDS).iterator(chunk_size=CHUNK)
    return Table("readings", READING_COLUMNS, (list(row) for row in rows), _about(query))


def _slug(name: str) -> str:
    return name.replace(" ", "_").replace("-", "_")


EVERY_LIMIT = (*ALL_LIMITS, DISSIPATION_LIMIT)
ASSESSMENT_COLUMNS = [
    Column("installation_id", INT, description="Fitted capacitor id"),
    Column("site", description="Site code"),
    Column("asset_tag", description="Motor asset tag"),
    Column("location", description="Where the motor is"),
    Column("role", description="run or start"),
    Column("part_code", description="Capacitor part code"),
    Column("rated_uf", FLOAT, "uF", "Rated capacitance"),
    Column("risk", description="Risk level"),
    Column("replace_by", DATE, description="Replace by this date"),
    Column("reason", description="Why this risk and date, in words"),
    Column("set_aside", description="Why no forecast could be made, if none"),
    Column("capacitance_now_uf", FLOAT, "uF", "Trend value now, referred to 25 C"),
    Column("latest_verdict", description="Latest reading against the marked tolerance"),
    Column("governing_limit", description="The limit met first"),
    Column("governing_fraction", FLOAT, "fraction of rated", "Capacitance at which the governing limit is met"),
    Column("p10_on", DATE, description="Governing limit: early date (P10)"),
    Column("p50_on", DATE, description="Governing limit: likely date (P50)"),
    Column("p90_on", DATE, description="Governing limit: late date (P90); empty past the 30-year horizon"),
    Column("low_confidence", BOOL, description="Few readings: slope leans on similar capacitors"),
    Column("trend_model", description="Trend form"),
    Column("slope_pct_per_1000h", FLOAT, "% of rated per 1000 stress-hours", "Fitted slope"),
    Column("slope_sd_pct_per_1000h", FLOAT, "% of rated per 1000 stress-hours", "Standard error of the slope"),
    Column("readings_used", INT, description="Readings in the fit"),
    Column("fitted_through", DATETIME, "UTC", "Time of the newest reading used"),
    Column("model_version", description="Version of the fitting model"),
    *(
        column
        for name in EVERY_LIMIT
        for column in (
            Column(f"{_slug(name)}_fraction", FLOAT, "fraction of rated", f"{name}: capacitance at which it is met"),
            Column(f"{_slug(name)}_used", BOOL, description=f"{name}: used for the plan (see the note if not)"),
            Column(f"{_slug(name)}_p10_on", DATE, description=f"{name}: early date (P10)"),
            Column(f"{_slug(name)}_p50_on", DATE, description=f"{name}: likely date (P50)"),
            Column(f"{_slug(name)}_p90_on", DATE, description=f"{name}: late date (P90)"),
            Column(f"{_slug(name)}_note", description=f"{name}: why it was set aside, if it was"),
        )
    ),
]
ASSESSMENT_FIELDS = [
    "installation_id",
    "installation__motor__site__code",
    "installation__motor__asset_tag",
    "installation__motor__location",
    "installation__role",
    "installation__part__code",
    "installation__part__rated_uf",
    "risk",
    "replace_by",
    "reason",
    "set_aside",
    "capacitance_now_uf",
    "latest_verdict",
    "limit_source",
    "limit_fraction",
    "p10_on",
    "p50_on",
    "p90_on",
    "low_confidence",
    "trend_model",
    "slope_pct_per_1000h",
    "slope_sd_pct_per_1000h",
    "readings_used",
    "fitted_through",
    "model_version",
]


def _limit_cells(limits: list[dict]) -> list:
    """Six cells per limit in EVERY_LIMIT order, empty where the limit was not evaluated."""
    by_name = {limit["name"]: limit for limit in limits or []}
    cells = []
    for name in EVERY_LIMIT:
        limit = by_name.get(name, {})
        cells += [
            limit.get("fraction_of_rated"),
            limit.get("used") if limit else None,
            *(dt.date.fromisoformat(limit[key]) if limit.get(key) else None for key in ("p10_on", "p50_on", "p90_on")),
            limit.get("note") or None,
        ]
    return cells


def assessments_table(query, user, request=None) -> Table:
    """Current assessments of capacitors in service at the user's sites, filtered as the API's
    list (site, risk, replace_by_before), soonest replacement first, each limit's dates in columns."""
    current = Assessment.objects.filter(is_current=True, installation__removed_on__isnull=True)
    assessments = filtered(AssessmentFilter, query, scope_to_user(current, user), request)
    rows = (
        assessments.order_by("replace_by", "installation_id")
        .values_list(*ASSESSMENT_FIELDS, "limits")
        .iterator(chunk_size=CHUNK)
    )
    return Table(
        "current assessments",
        ASSESSMENT_COLUMNS,
        ([*row[:-1], *_limit_cells(row[-1])] for row in rows),
        _about(query),
    )


LIFE_COLUMNS = [
    Column("part_code", description="Capacitor part code"),
    Column("installation_id", INT, description="Fitted capacitor id"),
    Column("site", description="Site code"),
    Column("asset_tag", description="Motor asset tag"),
    Column("role", description="run or start"),
    Column("fitted_on", DATE, description="Date fitted"),
    Column("removed_on", DATE, description="Date removed; empty while in service"),
    Column("removal_reason", description="failed, planned or other; empty while in service"),
    Column("age_days", INT, "days", "Age at removal, or today while in service"),
    Column("failed", BOOL, description="A failure (true) or a suspension (false) in the Weibull fit"),
]


def life_data_table(query, user, request=None) -> Table:
    """The life table (a failure or a suspension per fitted capacitor) of a part, or of every part,
    as the life-data page fits it, at the user's sites."""
    today = timezone.localdate()
    capacitors = filtered(LifeDataFilter, query, scope_to_user(FittedCapacitor.objects.all(), user), request)
    rows = (
        capacitors.order_by("part__code", "fitted_on", "id")
        .values_list(
            "part__code",
            "id",
            "motor__site__code",
            "motor__asset_tag",
            "role",
            "fitted_on",
            "removed_on",
            "removal_reason",
        )
        .iterator(chunk_size=CHUNK)
    )

    def life_rows():
        for *head, fitted_on, removed_on, reason in rows:
            age_days = ((removed_on or today) - fitted_on).days
            failed = reason == FittedCapacitor.RemovalReason.FAILED
            yield [*head, fitted_on, removed_on, reason or None, age_days, failed]

    return Table("life data", LIFE_COLUMNS, life_rows(), _about(query, as_of=today.isoformat()))


PLAN_COLUMNS = [
    Column("asset_tag", description="Motor asset tag"),
    Column("site", description="Site code"),
    Column("location", description="Where the motor is"),
    Column("role", description="run or start"),
    Column("part_code", description="Capacitor part code"),
    Column("rated_uf", FLOAT, "uF", "Rated capacitance"),
    Column("risk", description="Risk level"),
    Column("replace_by", DATE, description="Replace by this date"),
    Column("reason", description="Why, in words"),
    Column("capacitance_now_uf", FLOAT, "uF", "Trend value now, referred to 25 C"),
    Column("latest_verdict", description="Latest reading against the marked tolerance"),
    Column("limit", description="The limit met first"),
    Column("limit_fraction", FLOAT, "fraction of rated", "Capacitance at which that limit is met"),
    Column("early_crossing_p10", DATE, description="Limit reached: early date (P10)"),
    Column("likely_crossing_p50", DATE, description="Limit reached: likely date (P50)"),
    Column("late_crossing_p90", DATE, description="Limit reached: late date (P90)"),
    Column("low_confidence", BOOL, description="Few readings: slope leans on similar capacitors"),
]
PLAN_FIELDS = [
    "installation__motor__asset_tag",
    "installation__motor__site__code",
    "installation__motor__location",
    "installation__role",
    "installation__part__code",
    "installation__part__rated_uf",
    "risk",
    "replace_by",
    "reason",
    "capacitance_now_uf",
    "latest_verdict",
    "limit_source",
    "limit_fraction",
    "p10_on",
    "p50_on",
    "p90_on",
    "low_confidence",
]


def plan_table(query, user, request=None) -> Table:
    """The replacement plan as the plan page shows it (site and horizon from the query string)."""
    site, horizon, problems = plan_parameters(query, request=request)
    rows = pages.replacement_plan(horizon, site, user).values_list(*PLAN_FIELDS).iterator(chunk_size=CHUNK)
    about = _about(query, horizon_days=horizon, site=site.code if site else None, ignored=problems)
    return Table("replacement plan", PLAN_COLUMNS, (list(row) for row in rows), about)


TABLES = {  # kind in the address: (builder, permission to download it)
    "readings": (readings_table, "fleet.view_reading"),
    "assessments": (assessments_table, "fleet.view_assessment"),
    "life-data": (life_data_table, "fleet.view_fittedcapacitor"),
    "plan": (plan_table, "fleet.view_assessment"),
}
