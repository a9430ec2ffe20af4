"""The engineer's and the planner's exports: readings, current assessments, life data and the plan,
each as a `Table` (columns with units, rows read in chunks by one query), filtered like the page
or API list it comes from and limited to the user's sites."""

from __future__ import annotations

import datetime as dt

from django.db.models import FilteredRelation, Q
from django.utils import timezone

from fleet.exports import BOOL, DATE, DATETIME, FLOAT, INT, TEXT, Column, Table
from fleet.filters import (
    AssessmentFilter,
    BadFilter,
    LifeDataFilter,
    PlanParameters,
    ReadingFilter,
    RegisterFilter,
    filtered,
    parameter_problems,
    plan_parameters,
)
from fleet.imports import columns as import_columns
from fleet.models import Assessment, CapacitorPart, FittedCapacitor, Motor, Reading, Site
from fleet.roles import scope_to_user

from . import pages
from .assessments import ALL_LIMITS, DISSIPATION_LIMIT, MODEL_VERSION

CHUNK = 2000  # rows fetched per database round trip


def _about(query, **extra) -> dict:
    filters = {key: value for key, value in query.items() if key != "page"}
    return {"model_version": MODEL_VERSION, "generated_at": timezone.now().isoformat(), "filters": filters, **extra}


def _capacitor_place(path: str) -> dict[str, Column]:
    """Columns naming a fitted capacitor and its motor, read through `path` (a fitted capacitor)."""
    return {
        column.name: column
        for column in (
            Column("fitted_capacitor_id", INT, description="Fitted capacitor id", source=f"{path}id"),
            Column("site", description="Site code", source=f"{path}motor__site__code"),
            Column("asset_tag", description="Motor asset tag", source=f"{path}motor__asset_tag"),
            Column("location", description="Where the motor is", source=f"{path}motor__location"),
            Column("role", description="run or start", source=f"{path}role"),
            Column("part_code", description="Capacitor part code", source=f"{path}part__code"),
            Column("rated_uf", FLOAT, "uF", "Rated capacitance", source=f"{path}part__rated_uf"),
        )
    }


PLACE = _capacitor_place("fitted_capacitor__")
MEASURED = {  # Reading.MEASURED_FIELDS: unit and meaning
    "capacitance_uf": (FLOAT, "uF", "Capacitance as measured (not referred to 25 C)"),
    "capacitor_current_a": (FLOAT, "A", "Capacitor current (in circuit)"),
    "capacitor_voltage_v": (FLOAT, "V", "Voltage across the capacitor (in circuit)"),
    "line_voltage_v": (FLOAT, "V", "Supply voltage"),
    "main_current_a": (FLOAT, "A", "Main-winding current"),
    "aux_current_a": (FLOAT, "A", "Auxiliary-winding current"),
    "line_current_a": (FLOAT, "A", "Line current"),
    "case_temperature_c": (FLOAT, "degC", "Capacitor case temperature"),
    "ambient_temperature_c": (FLOAT, "degC", "Ambient temperature"),
    "esr_ohm": (FLOAT, "ohm", "Equivalent series resistance"),
}
READING_COLUMNS = [  # named as the API's readings and the readings import name them
    Column("id", INT, description="Reading id", source="id"),
    *(PLACE[name] for name in ("site", "asset_tag", "fitted_capacitor_id", "role", "part_code")),
    Column(
        "capacitor_fitted_on",
        DATE,
        description="The day the capacitor read was fitted: which capacitor, for an import into another "
        "installation, whose ids are its own",
        source="fitted_capacitor__fitted_on",
    ),
    Column("taken_at", DATETIME, "UTC", "When the reading was taken", source="taken_at"),
    Column("method", description="meter (isolated) or in_circuit (current and voltage)", source="method"),
    *(Column(name, *MEASURED[name], source=name) for name in Reading.MEASURED_FIELDS),
    Column("condition", description="sound, bulged, leaking or vented", source="condition"),
    Column(
        "confirmed",
        BOOL,
        description="A value the checks asked to confirm (far off the trend, a voltage far above the motor's, ...), "
        "re-checked and confirmed: the import's confirmed column, so the export imports again",
        source="outlier_confirmed",
    ),
    Column("supersedes", INT, description="Id of the reading this one corrects", source="supersedes_id"),
    Column("source", description="form, api, import or demo", source="source"),
    Column(
        "taken_by",
        description="User name of who took it (on the form or by the API); empty for an imported reading",
        source="taken_by__username",
    ),
    Column("notes", description="Technician's notes", source="notes"),
]


def _rows(queryset, columns):
    """The columns' values, one list per row, fetched CHUNK rows at a time by one query; a column with
    `decimals` rounded to them."""
    rounded = [(k, c.decimals) for k, c in enumerate(columns) if c.decimals is not None]
    for values in queryset.values_list(*(c.source for c in columns)).iterator(chunk_size=CHUNK):
        row = list(values)
        for k, decimals in rounded:
            if row[k] is not None:
                row[k] = round(row[k], decimals)
        yield row


def readings_table(query, user, request=None) -> Table:
    """Readings at the user's sites, filtered by site, part, motor and dates, oldest first."""
    readings = filtered(ReadingFilter, query, scope_to_user(Reading.objects.all(), user), request)
    return Table(
        "readings", READING_COLUMNS, _rows(readings.order_by("taken_at", "id"), READING_COLUMNS), _about(query)
    )


def _slug(name: str) -> str:
    return name.replace(" ", "_").replace("-", "_")


EVERY_LIMIT = (*ALL_LIMITS, DISSIPATION_LIMIT)
JUDGED = {  # an assessment's judgement, by the names the API's assessments give it (the plan's columns too)
    column.name: column
    for column in (
        Column("risk", description="Risk level", source="risk"),
        Column("replace_by", DATE, description="Replace by this date", source="replace_by"),
        Column("reason", description="Why this risk and date, in words", source="reason"),
        Column(
            "capacitance_now_uf",
            FLOAT,
            "uF",
            "Trend value at the newest reading (the reading itself where the trend is set aside), at 25 C; "
            "latest_verdict judges the newest reading itself, so a reading below the limit can stand beside a "
            "trend value just above it",
            source="capacitance_now_uf",
            decimals=3,
        ),
        Column("latest_verdict", description="Latest reading against the marked tolerance", source="latest_verdict"),
        Column("limit_source", description="The governing limit: the one met first", source="limit_source"),
        Column(
            "limit_fraction",
            FLOAT,
            "fraction of rated",
            "Capacitance at which the governing limit is met",
            source="limit_fraction",
        ),
        Column("p10_on", DATE, description="Governing limit: early date (P10)", source="p10_on"),
        Column("p50_on", DATE, description="Governing limit: likely date (P50)", source="p50_on"),
        Column("p90_on", DATE, description="Governing limit: late date (P90); empty past 30 years", source="p90_on"),
        Column(
            "low_confidence",
            BOOL,
            description="Few readings: slope leans on similar capacitors",
            source="low_confidence",
        ),
    )
}
ASSESSMENT_COLUMNS = [
    *(
        PLACE[name]
        for name in ("fitted_capacitor_id", "site", "asset_tag", "location", "role", "part_code", "rated_uf")
    ),
    *(JUDGED[name] for name in ("risk", "replace_by", "reason")),
    Column("set_aside", description="Why no forecast could be made, if none", source="set_aside"),
    *(JUDGED[name] for name in list(JUDGED)[3:]),
    Column("trend_model", description="Trend form", source="trend_model"),
    Column(
        "slope_pct_per_1000h", FLOAT, "% of rated per 1000 stress-hours", "Fitted slope", source="slope_pct_per_1000h"
    ),
    Column(
        "slope_sd_pct_per_1000h",
        FLOAT,
        "% of rated per 1000 stress-hours",
        "Standard error of the slope",
        source="slope_sd_pct_per_1000h",
    ),
    Column("readings_used", INT, description="Readings in the fit", source="readings_used"),
    Column(
        "visits_used",
        INT,
        description="Visits those readings came from (the readings of one day count as one in the fit)",
        source="visits_used",
    ),
    Column("fitted_through", DATETIME, "UTC", "Time of the newest reading used", source="fitted_through"),
    Column("model_version", description="Version of the fitting model", source="model_version"),
]


def _limit_level_column(name: str) -> Column:
    """A limit's level: a capacitance as a fraction of rated, or for the dissipation factor the part's maximum
    (the API's `maximum`; an audit found the export's column always empty beside the API's 0.1)."""
    if name == DISSIPATION_LIMIT:
        return Column(f"{_slug(name)}_maximum", FLOAT, "fraction", f"{name}: the part's maximum (tan delta)")
    return Column(f"{_slug(name)}_fraction", FLOAT, "fraction of rated", f"{name}: capacitance at which it is met")


LIMIT_COLUMNS = [  # six per limit, from the assessment's `limits`
    column
    for name in EVERY_LIMIT
    for column in (
        _limit_level_column(name),
        Column(f"{_slug(name)}_used", BOOL, description=f"{name}: used for the plan (see the note if not)"),
        Column(f"{_slug(name)}_p10_on", DATE, description=f"{name}: early date (P10)"),
        Column(f"{_slug(name)}_p50_on", DATE, description=f"{name}: likely date (P50)"),
        Column(f"{_slug(name)}_p90_on", DATE, description=f"{name}: late date (P90)"),
        Column(f"{_slug(name)}_note", description=f"{name}: why it was set aside, if it was"),
    )
]


def _limit_cells(limits: list[dict]) -> list:
    """The LIMIT_COLUMNS cells of one assessment, empty where a limit was not evaluated."""
    by_name = {limit["name"]: limit for limit in limits or []}
    cells = []
    for name in EVERY_LIMIT:
        limit = by_name.get(name, {})
        cells += [
            limit.get("maximum" if name == DISSIPATION_LIMIT else "fraction_of_rated"),
            limit.get("used") if limit else None,
            *(dt.date.fromisoformat(limit[key]) if limit.get(key) else None for key in ("p10_on", "p50_on", "p90_on")),
            limit.get("note") or None,
        ]
    return cells


def assessments_table(query, user, request=None) -> Table:
    """Current assessments of capacitors in service at the user's sites, filtered as the API's
    list (site, risk, replace_by_before), soonest replacement first, each limit's dates in columns."""
    current = Assessment.objects.filter(is_current=True, fitted_capacitor__removed_on__isnull=True)
    assessments = filtered(AssessmentFilter, query, scope_to_user(current, user), request)
    with_limits = [*ASSESSMENT_COLUMNS, Column("limits", source="limits")]
    rows = _rows(assessments.order_by("replace_by", "fitted_capacitor_id"), with_limits)
    return Table(
        "current assessments",
        ASSESSMENT_COLUMNS + LIMIT_COLUMNS,
        ([*row[:-1], *_limit_cells(row[-1])] for row in rows),
        _about(query),
    )


LIFE_PLACE = _capacitor_place("")
LIFE_COLUMNS = [
    *(LIFE_PLACE[name] for name in ("part_code", "fitted_capacitor_id", "site", "asset_tag", "role")),
    Column("fitted_on", DATE, description="Date fitted", source="fitted_on"),
    Column("removed_on", DATE, description="Date removed; empty while in service", source="removed_on"),
    Column("removal_reason", description="failed, planned or other; empty while in service", source="removal_reason"),
    Column("age_days", INT, "days", "Age at removal, or today while in service"),
    Column("failed", BOOL, description="A failure (true) or a suspension (false) in the Weibull fit"),
]


def life_data_table(query, user, request=None) -> Table:
    """The life table (a failure or a suspension per fitted capacitor) of a part, or of every part,
    as the life-data page fits it, at the user's sites."""
    today = timezone.localdate()
    capacitors = filtered(LifeDataFilter, query, scope_to_user(FittedCapacitor.objects.all(), user), request)
    rows = _rows(capacitors.order_by("part__code", "fitted_on", "id"), LIFE_COLUMNS[:-2])

    def life_rows():
        for *head, fitted_on, removed_on, reason in rows:
            age_days = ((removed_on or today) - fitted_on).days
            failed = reason == FittedCapacitor.RemovalReason.FAILED
            yield [*head, fitted_on, removed_on, reason or None, age_days, failed]

    return Table("life data", LIFE_COLUMNS, life_rows(), _about(query, as_of=today.isoformat()))


PLAN_COLUMNS = [  # the assessments export's columns, under the same names, in the planners' order
    *(PLACE[name] for name in ("asset_tag", "site", "location", "role", "part_code", "rated_uf")),
    *(JUDGED[name] for name in ("risk", "replace_by", "reason", "capacitance_now_uf", "latest_verdict")),
    *(JUDGED[name] for name in ("limit_source", "limit_fraction", "p10_on", "p50_on", "p90_on", "low_confidence")),
    PLACE["fitted_capacitor_id"],  # last: the planners' columns keep their places; the key to the other exports
]


def plan_table(query, user, request=None) -> Table:
    """The replacement plan as the plan page shows it (site and horizon from the query string)."""
    unknown_or_repeated = parameter_problems(query, set(PlanParameters.base_filters))
    if unknown_or_repeated:
        raise BadFilter(unknown_or_repeated)
    site, horizon, problems = plan_parameters(query, request=request)
    if problems:  # a file cannot carry the page's note: a horizon or site it cannot use is refused by name,
        raise BadFilter(problems)  # as the other exports refuse theirs, never taken as the default
    rows = _rows(pages.replacement_plan(horizon, site, user), PLAN_COLUMNS)
    about = _about(query, horizon_days=horizon, site=site.code if site else None)
    return Table("replacement plan", PLAN_COLUMNS, rows, about)


def _fitted(role: str, field: str) -> str:
    return f"in_service_{role}__{field}"


REGISTER_EXPORT_COLUMNS = [  # the register import's headings, so a register moves to another installation whole
    Column("asset_tag", description="Motor asset tag", source="asset_tag"),
    Column("site", description="Site code", source="site__code"),
    Column("location", description="Where the motor is", source="location"),
    Column("application", description="fan, pump, compressor, conveyor or other", source="application"),
    Column("motor_type", description="capacitor_start, permanent_split or two_value", source="motor_type"),
    Column("load_type", description="fan_law or constant", source="load_type"),
    Column("rated_voltage_v", FLOAT, "V", "Nameplate voltage", source="rated_voltage_v"),
    Column("frequency_hz", INT, "Hz", "Supply frequency", source="frequency_hz"),
    Column("poles", INT, description="Poles", source="poles"),
    Column("output_w", FLOAT, "W", "Rated output", source="output_w"),
    Column("full_load_current_a", FLOAT, "A", "Full-load current", source="full_load_current_a"),
    Column("rated_speed_rpm", FLOAT, "rpm", "Rated speed", source="rated_speed_rpm"),
    Column("commissioned_on", DATE, description="Date commissioned", source="commissioned_on"),
    Column("run_part_code", description="Run capacitor in service: its part", source=_fitted("run", "part__code")),
    Column(
        "start_part_code", description="Start capacitor in service: its part", source=_fitted("start", "part__code")
    ),
    Column("fitted_on", DATE, description="Day its capacitors were fitted (the run one's, where it has one)"),
    Column("run_fitted_on", DATE, description="Day the run capacitor was fitted", source=_fitted("run", "fitted_on")),
    Column(
        "start_fitted_on", DATE, description="Day the start capacitor was fitted", source=_fitted("start", "fitted_on")
    ),
    Column("route_order", INT, description="Place on the site's reading route", source="route_order"),
    Column("insulation_class", description="Insulation class of the windings", source="insulation_class"),
    Column("run_serial", description="Serial or date code of the run capacitor", source=_fitted("run", "serial")),
    Column("start_serial", description="Serial or date code of the start capacitor", source=_fitted("start", "serial")),
]


def register_table(query, user, request=None) -> Table:
    """The motor register in the register import's headings, each motor with its capacitors in service (one
    query, a join a role): with the readings export and the life-data export (the history), what another
    installation needs (a round-trip audit rebuilt the register from a backup file)."""
    in_service = {
        f"in_service_{role}": FilteredRelation(
            "capacitors", condition=Q(capacitors__role=role, capacitors__removed_on__isnull=True)
        )
        for role in FittedCapacitor.Role.values
    }
    motors = filtered(RegisterFilter, query, scope_to_user(Motor.objects.all(), user), request)
    columns = [c for c in REGISTER_EXPORT_COLUMNS if c.name != "fitted_on"]
    rows = _rows(motors.annotate(**in_service).order_by("site__code", "route_order", "asset_tag"), columns)
    at = [c.name for c in columns].index("run_fitted_on")

    def register_rows():
        for row in rows:
            run_day, start_day = row[at], row[at + 1]
            yield [*row[:at], run_day or start_day, *row[at:]]

    return Table("motor register", REGISTER_EXPORT_COLUMNS, register_rows(), _about(query))


SITE_EXPORT_COLUMNS = [  # the sites import's headings
    Column("code", description="Site code", source="code"),
    Column("name", description="Site name", source="name"),
    Column("time_zone", description="Time zone name (tz database)", source="time_zone"),
]
PART_TEXT = ("code", "dielectric", "description", "class_of_operation", "duty", "safety_class")
PART_EXPORT_COLUMNS = [  # the parts import's headings, in its order
    Column(
        name,
        TEXT if name in PART_TEXT else INT if name == "frequency_hz" else FLOAT,
        description=description.split(" (")[0],
        source=name,
    )
    for name, description in import_columns.PART_COLUMNS.items()
]


def sites_table(query, user, request=None) -> Table:
    """The user's sites in the sites import's headings."""
    rows = _rows(scope_to_user(Site.objects.all(), user).order_by("code"), SITE_EXPORT_COLUMNS)
    return Table("sites", SITE_EXPORT_COLUMNS, rows, _about(query))


def parts_table(query, user, request=None) -> Table:
    """The parts catalogue in the parts import's headings (a cost as a number of the plant's currency)."""
    cost = [c.name for c in PART_EXPORT_COLUMNS].index("unit_cost")
    rows = (
        [*row[:cost], float(row[cost]), *row[cost + 1 :]]
        for row in _rows(CapacitorPart.objects.order_by("code"), PART_EXPORT_COLUMNS)
    )
    return Table("capacitor parts", PART_EXPORT_COLUMNS, rows, _about(query))


TABLES = {  # kind in the address: (builder, permission to download it)
    "sites": (sites_table, "fleet.view_site"),
    "parts": (parts_table, "fleet.view_capacitorpart"),
    "register": (register_table, "fleet.view_motor"),
    "readings": (readings_table, "fleet.view_reading"),
    "assessments": (assessments_table, "fleet.view_assessment"),
    "life-data": (life_data_table, "fleet.view_fittedcapacitor"),
    "plan": (plan_table, "fleet.view_assessment"),
}
