"""An invented scenario for the demo: a growers' cooperative with three sites.

Everything here is made up for the demo: the cooperative, its sites, its motors,
its part codes and prices. The capacitors age the way the primer describes: film
run capacitors lose capacitance slowly, faster when hot and near their voltage
rating, and faster still past a knee; electrolytic start capacitors dry out and
now and then fail suddenly. Readings carry a meter's noise and the case
temperature of the day.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
from django.contrib.auth.models import Group, User
from django.db import models, transaction
from django.utils import timezone

from fleet.audit import audited_bulk_create
from fleet.engineering.capacitor import acceleration_factor
from fleet.engineering.drift import operating_figures
from fleet.engineering.motor import load_kind_from_type, load_matching_rated_slip, synchronous_speed_rad_s
from fleet.engineering.nameplate import Nameplate, estimate_parameters
from fleet.engineering.planning import PLAN_HORIZON_DAYS
from fleet.engineering.rules import RULES, in_circuit_capacitance_uf
from fleet.engineering.trends import TrendSettings, default_tempco_ppm_per_k
from fleet.models import (
    Assessment,
    CapacitorPart,
    FittedCapacitor,
    Motor,
    Reading,
    Site,
    SiteDayOff,
    SiteStock,
    WorkOrder,
)
from fleet.roles import ADMINISTRATOR, PLANNER, RELIABILITY_ENGINEER, TECHNICIAN
from fleet.services.assessments import refit_fitted_capacitors, refresh_part_priors
from fleet.services.circuits import circuit_fields
from fleet.services.readings import record_reading, replace_capacitor
from fleet.services.workorders import (
    KIND_FOR_ROLE,
    issue_visit,
    open_visits_page,
    plan_work_orders,
)

FILM, ELECTROLYTIC = CapacitorPart.Dielectric.FILM, CapacitorPart.Dielectric.ELECTROLYTIC
FAN_LAW, CONSTANT_TORQUE = Motor.LoadType.FAN_LAW, Motor.LoadType.CONSTANT

DEMO_SITES = [
    ("PKH", "Packhouse, Riverside Road", "Europe/Dublin"),
    ("CST", "Cool store, Orchard Lane", "Europe/Dublin"),
    ("GLH", "Glasshouses, Hill Farm", "Europe/Dublin"),
]

DEMO_USERS = [
    ("tech", "Tess", "Cahill", TECHNICIAN, "reading-route-7"),
    ("planner", "Pat", "Byrne", PLANNER, "weekly-plan-7"),
    ("engineer", "Rosa", "Lynch", RELIABILITY_ENGINEER, "life-data-7"),
    ("admin", "Alan", "Quinn", ADMINISTRATOR, "register-keeper-7"),
]

# code, rated uF, tol -, tol +, rated V, dielectric, class, safety, max case C, cost
DEMO_PARTS = [
    ("RUN-4U0-450", 4.0, 5, 5, 450, FILM, "B", "S2", 70, 6.40),
    ("RUN-8U0-450", 8.0, 5, 5, 450, FILM, "B", "S2", 70, 7.90),
    ("RUN-20U-450", 20.0, 5, 5, 450, FILM, "B", "S2", 70, 12.60),
    ("RUN-30U-450", 30.0, 5, 5, 450, FILM, "B", "S2", 85, 16.20),
    ("START-98U-330", 98.0, 10.2, 10.2, 330, ELECTROLYTIC, "", "", 65, 9.10),
    ("START-143U-330", 143.0, 9.1, 9.1, 330, ELECTROLYTIC, "", "", 65, 10.60),
    ("START-208U-330", 208.0, 9.1, 9.1, 330, ELECTROLYTIC, "", "", 65, 12.30),
]


@dataclass(frozen=True)
class Design:
    """One motor design of the scenario, with where and how it works."""

    name: str
    application: str
    motor_type: str
    load_type: str
    poles: int
    output_w: float
    full_load_current_a: float
    rated_speed_rpm: float
    run_part: str | None
    start_part: str | None
    case_temp_c: float  # typical capacitor case temperature in service
    sites: tuple[str, ...]
    count: int
    location: str


DESIGNS = [
    Design(
        "evaporator fan",
        "fan",
        "permanent_split",
        FAN_LAW,
        6,
        120,
        0.95,
        910,
        "RUN-4U0-450",
        None,
        18,
        ("CST",),
        90,
        "Cold room {n}, evaporator",
    ),
    Design(
        "circulation fan",
        "fan",
        "permanent_split",
        FAN_LAW,
        4,
        250,
        1.9,
        1370,
        "RUN-8U0-450",
        None,
        42,
        ("GLH",),
        80,
        "House {n}, roof fan",
    ),
    Design(
        "irrigation pump",
        "pump",
        "two_value",
        FAN_LAW,
        2,
        750,
        5.2,
        2830,
        "RUN-20U-450",
        "START-98U-330",
        35,
        ("GLH", "PKH"),
        30,
        "Pump bay {n}",
    ),
    Design(
        "cooler compressor",
        "compressor",
        "two_value",
        CONSTANT_TORQUE,
        2,
        1100,
        7.6,
        2850,
        "RUN-30U-450",
        "START-143U-330",
        55,
        ("CST", "PKH"),
        40,
        "Condensing unit {n}",
    ),
    Design(
        "packing conveyor",
        "conveyor",
        "capacitor_start",
        CONSTANT_TORQUE,
        4,
        370,
        3.3,
        1420,
        None,
        "START-208U-330",
        30,
        ("PKH",),
        50,
        "Line {n}, drive",
    ),
]

VOLTAGE_V, FREQUENCY_HZ = 230.0, 50

# The evaporator fan's circuit as the nameplate estimator gives it (230 V, 50 Hz,
# 6 poles, 120 W, 0.95 A, 910 rpm, 4 uF): a plausible small PSC fan motor for
# benchmarks and tests, not a published machine.
EXAMPLE_FAN_NAMEPLATE = dict(
    application="fan",
    motor_type="permanent_split",
    load_type=FAN_LAW,
    rated_voltage_v=230,
    frequency_hz=50,
    poles=6,
    output_w=120,
    full_load_current_a=0.95,
    rated_speed_rpm=910,
)
EXAMPLE_FAN_CIRCUIT = dict(
    r1m_ohm=35.12,
    x1m_ohm=8.47,
    r1a_ohm=75.87,
    x1a_ohm=15.23,
    r2_ohm=56.09,
    x2_ohm=8.47,
    xm_ohm=296.66,
    turns_ratio=1.34,
    rotational_loss_w=6.0,
    circuit_source="estimated",
)


def ensure_users() -> list[tuple[str, str, str]]:
    """One user per role; returns (username, password, role) to print."""
    logins = []
    for username, first, last, role, password in DEMO_USERS:
        user, created = User.objects.get_or_create(
            username=username, defaults={"first_name": first, "last_name": last, "email": f"{username}@example.org"}
        )
        if created:
            user.set_password(password)
            user.is_staff = role == ADMINISTRATOR
            user.save()
        user.groups.add(Group.objects.get(name=role))
        logins.append((username, password, role))
    return logins


def _parts() -> dict[str, CapacitorPart]:
    parts = {}
    for code, uf, minus, plus, volts, dielectric, klass, safety, tmax, cost in DEMO_PARTS:
        parts[code], _ = CapacitorPart.objects.get_or_create(
            code=code,
            defaults=dict(
                description=f"{uf:g} µF {volts} V {'film run' if dielectric == 'film' else 'electrolytic start'}",
                rated_uf=uf,
                tolerance_minus_pct=minus,
                tolerance_plus_pct=plus,
                rated_voltage_v=volts,
                frequency_hz=FREQUENCY_HZ,
                dielectric=dielectric,
                class_of_operation=klass,
                safety_class=safety,
                max_case_temperature_c=tmax,
                unit_cost=cost,
                duty="continuous" if dielectric == FILM else "20 starts/h of up to 3 s",
                max_dissipation_factor=None if dielectric == FILM else 0.10,
            ),
        )
    return parts


def _circuit_for(design: Design, parts) -> dict:
    """Equivalent circuit estimated from the design's nameplate (once per design)."""
    plate = Nameplate(
        voltage_v=VOLTAGE_V,
        frequency_hz=FREQUENCY_HZ,
        poles=design.poles,
        output_w=design.output_w,
        full_load_current_a=design.full_load_current_a,
        rated_speed_rpm=design.rated_speed_rpm,
        motor_kind=design.motor_type,
        run_capacitance_uf=parts[design.run_part].rated_uf if design.run_part else 0.0,
        start_capacitance_uf=parts[design.start_part].rated_uf if design.start_part else 0.0,
    )
    estimate = estimate_parameters(plate)
    return {**circuit_fields(estimate), "_circuit": estimate.circuit(plate), "_plate": plate}


def _run_capacitor_voltage(design: Design, circuit_info, parts) -> float:
    """Running voltage across the run capacitor of the as-new motor (the model's)."""
    if not design.run_part:
        return float("nan")
    circuit = circuit_info["_circuit"]
    sync_rpm = synchronous_speed_rad_s(FREQUENCY_HZ, design.poles) * 60 / (2 * np.pi)
    slip = 1 - design.rated_speed_rpm / sync_rpm
    run_uf = parts[design.run_part].rated_uf
    kind = load_kind_from_type(design.load_type)
    load = load_matching_rated_slip(circuit, run_uf, slip, kind)
    figures = operating_figures(
        circuit, load, run_uf, parts[design.start_part].rated_uf if design.start_part else 0.0, design.motor_type
    )
    return float(np.atleast_1d(figures.v_capacitor_v)[0])


def build_demo(*, seed: int = 7, today: dt.date | None = None, scale: float = 1.0) -> dict:
    """Create the scenario unless it exists. Returns counts of what was created."""
    if Site.objects.filter(code=DEMO_SITES[0][0]).exists():
        return {"created": False}
    rng = np.random.default_rng(seed)
    today = today or timezone.localdate()
    technician = User.objects.filter(username="tech").first()
    with transaction.atomic():
        sites = {code: Site.objects.create(code=code, name=name, time_zone=tz) for code, name, tz in DEMO_SITES}
        parts = _parts()
        counters = {code: 0 for code in sites}
        reading_rows: list[Reading] = []
        motors = 0
        first_reading_day = today - dt.timedelta(days=4 * 365)  # four years of quarterly readings
        for design in DESIGNS:
            info = _circuit_for(design, parts)
            v_cap = _run_capacitor_voltage(design, info, parts)
            circuit_fields = {k: v for k, v in info.items() if not k.startswith("_")}
            for n in range(max(1, int(round(design.count * scale)))):
                site_code = design.sites[n % len(design.sites)]
                counters[site_code] += 1
                commissioned = today - dt.timedelta(days=int(rng.integers(4 * 365, 7 * 365)))
                motor = Motor.objects.create(
                    asset_tag=f"{site_code}-{counters[site_code]:04d}",
                    site=sites[site_code],
                    location=design.location.format(n=n // len(design.sites) + 1),
                    route_order=counters[site_code],
                    application=design.application,
                    motor_type=design.motor_type,
                    load_type=design.load_type,
                    rated_voltage_v=VOLTAGE_V,
                    frequency_hz=FREQUENCY_HZ,
                    poles=design.poles,
                    output_w=design.output_w,
                    full_load_current_a=design.full_load_current_a,
                    rated_speed_rpm=design.rated_speed_rpm,
                    insulation_class="B",
                    commissioned_on=commissioned,
                    **circuit_fields,
                )
                motors += 1
                visits = _visit_days(commissioned, today, rng)
                for role, code in (
                    (FittedCapacitor.Role.RUN, design.run_part),
                    (FittedCapacitor.Role.START, design.start_part),
                ):
                    if code:
                        reading_rows += _age_capacitor_line(
                            motor,
                            role,
                            parts[code],
                            commissioned,
                            visits,
                            first_reading_day,
                            design.case_temp_c,
                            v_cap,
                            rng,
                            technician,
                        )
        reading_rows = _skip_closed_house(reading_rows, today)
        Reading.objects.bulk_create(reading_rows, batch_size=2000)
    return {"created": True, "motors": motors, "readings": len(reading_rows)}


# The scenario: a glasshouse block closed for re-roofing, its roof fans not read since.
CLOSED_LOCATIONS = tuple(f"House {n}, roof fan" for n in range(4, 10))
CLOSED_SINCE_DAYS = 130


def _skip_closed_house(readings: list[Reading], today: dt.date) -> list[Reading]:
    """The closed glasshouses' recent readings never happened: their capacitors' readings are overdue."""
    since = today - dt.timedelta(days=CLOSED_SINCE_DAYS)
    return [
        r for r in readings if not (r.fitted_capacitor.motor.location in CLOSED_LOCATIONS and r.taken_at.date() > since)
    ]


def _visit_days(commissioned: dt.date, today: dt.date, rng) -> list[dt.date]:
    """The days a motor is visited, from commissioning to before today, every 12 to 14 weeks, on a weekday
    (a visit that would fall on a weekend is made on the Friday before, as the plan's visits are): a visit
    reads every capacitor fitted to it (a reading later today would be in the future)."""
    days, day = [], commissioned
    while (day := day + dt.timedelta(days=int(rng.integers(84, 98)))) < today:
        days.append(day)
    return np.busday_offset(np.array(days, "datetime64[D]"), 0, roll="backward").astype(dt.date).tolist()


def _age_capacitor_line(
    motor, role, part, commissioned, visits, first_reading_day, case_temp_c, v_cap, rng, technician
):
    """Simulate one motor position from commissioning to today: each capacitor
    ages until it is read below its limit at a visit (replaced on plan) or fails
    (replaced as failed); the successor starts fresh. Returns the readings to insert."""
    settings = TrendSettings()
    film = part.dielectric == FILM
    readings: list[Reading] = []
    fitted_on = commissioned
    while True:
        fitted_capacitor = FittedCapacitor.objects.create(
            motor=motor,
            role=role,
            part=part,
            fitted_on=fitted_on,
            serial=f"{fitted_on:%y%m}-{rng.integers(10000, 99999)}",
        )
        initial = rng.normal(1.0 + (0.01 if film else 0.0), 0.015)
        temperature = case_temp_c + rng.normal(0.0, 4.0)
        voltage = v_cap * rng.normal(1.0, 0.03) if film else VOLTAGE_V * 1.2
        rate = float(
            acceleration_factor(
                temperature,
                voltage,
                settings.reference_temperature_c,
                part.rated_voltage_v,
                settings.doubling_k,
                settings.voltage_exponent if film else 0.0,
            )
        )
        # Slope per stress hour, with a spread between units of one part.
        slope = -abs(rng.normal(3e-6 if film else 2.5e-6, 1e-6 if film else 0.8e-6))
        knee = 0.93 if film else 0.95
        sudden_hours = rng.exponential(12 * 8760) if not film else np.inf
        removed = None
        reason = ""
        for day in (visit for visit in visits if visit > fitted_on):
            hours = (day - fitted_on).days * 24.0
            stress = hours * rate
            fraction = initial + slope * stress
            if fraction < knee:
                fraction = knee - 3.0 * (knee - fraction)  # faster after the knee
            if hours > sudden_hours or fraction < 0.6:
                removed, reason = day - dt.timedelta(days=int(rng.integers(1, 60))), "failed"
                break
            if day < first_reading_day:
                continue
            seasonal = 6.0 * np.sin(2 * np.pi * (day.timetuple().tm_yday - 100) / 365.0)
            case_c = round(temperature + seasonal + rng.normal(0, 1.5), 1)
            tempco = 1.0 + float(default_tempco_ppm_per_k(part.dielectric, settings)) * 1e-6 * (case_c - 25.0)
            measured = part.rated_uf * fraction * tempco * (1 + rng.normal(0, 0.006))
            taken_at = timezone.make_aware(
                dt.datetime.combine(day, dt.time(9 + int(rng.integers(0, 7)), int(rng.integers(0, 60))))
            )
            in_circuit = film and rng.random() < 0.3
            cap_v = round(voltage * rng.normal(1, 0.01), 1) if film else None
            current = round(measured * 1e-6 * 2 * np.pi * FREQUENCY_HZ * cap_v, 4) if in_circuit else None
            if in_circuit:  # stored as the rulebook works it out from the current and voltage recorded (`rules`)
                measured = float(in_circuit_capacitance_uf(current, cap_v, FREQUENCY_HZ)[0])
            readings.append(
                Reading(
                    fitted_capacitor=fitted_capacitor,
                    taken_at=taken_at,
                    taken_by=technician,
                    method=Reading.Method.IN_CIRCUIT if in_circuit else Reading.Method.METER,
                    capacitance_uf=round(measured, 3),
                    capacitor_current_a=current,
                    capacitor_voltage_v=cap_v if film else None,
                    case_temperature_c=case_c,
                    ambient_temperature_c=round(case_c - rng.uniform(3, 12), 1),
                    source="demo",
                    # A voltage the rulebook asks about, confirmed as the technician would have had to: stored
                    # unconfirmed, the demo's export came back refused from an import into another installation.
                    outlier_confirmed=bool(film and cap_v > RULES.voltage_confirm_factor * motor.rated_voltage_v),
                )
            )
            if fraction < 1.0 - part.tolerance_minus_pct / 100.0 - 0.01 and rng.random() < 0.6:
                removed, reason = day, "planned"
                break
        if removed is None:
            return readings
        if removed < fitted_capacitor.fitted_on:
            removed = fitted_capacitor.fitted_on
        readings = [r for r in readings if r.fitted_capacitor_id != fitted_capacitor.id or r.taken_at.date() <= removed]
        fitted_capacitor.removed_on, fitted_capacitor.removal_reason = removed, reason
        fitted_capacitor.save(update_fields=["removed_on", "removal_reason"])
        fitted_on = removed


HISTORY_WEEKS = 4
DEMO_STOCK_SHARE = 0.15  # spares held per site: about this share of the part's capacitors there, at least one


def build_assessment_history(*, weeks: int = HISTORY_WEEKS, now: dt.datetime | None = None) -> int:
    """Weekly assessments for the past few weeks, each from the readings taken by then and dated
    then, so "what changed this week" compares with something. Returns assessments written."""
    now = now or timezone.now()
    refresh_part_priors()
    ids = list(
        FittedCapacitor.objects.filter(removed_on__isnull=True, readings__isnull=False)
        .distinct()
        .values_list("id", flat=True)
    )
    written = 0
    for week in range(weeks, 0, -1):
        then = now - dt.timedelta(days=7 * week + 1)
        started = timezone.now()
        written += refit_fitted_capacitors(ids, now=then, as_of=True).written
        Assessment.objects.filter(created_at__gte=started).update(created_at=then)
    return written


def build_work_orders(*, today: dt.date | None = None) -> None:
    """Work orders as a running plant has them: done ones for the recent planned replacements, the
    plan's orders bundled into visits, the first visit at each site issued, and one visit under
    way (one replacement on it already recorded). Also the spares each site holds."""
    today = today or timezone.localdate()
    planner = User.objects.filter(username="planner").first()
    technician = User.objects.filter(username="tech").first()
    recent = FittedCapacitor.objects.filter(
        removal_reason=FittedCapacitor.RemovalReason.PLANNED, removed_on__gte=today - dt.timedelta(days=90)
    ).select_related("motor")
    audited_bulk_create(
        [
            WorkOrder(
                motor=c.motor,
                fitted_capacitor=c,
                kind=KIND_FOR_ROLE[c.role],
                due_on=c.removed_on,
                state=WorkOrder.State.DONE,
                reason="replaced on plan",
                created_by=planner,
                closed_by=technician,
                closed_at=timezone.make_aware(dt.datetime.combine(c.removed_on, dt.time(15))),
            )
            for c in recent
        ]
    )
    store_scenario_days_off(today=today)
    plan_work_orders(horizon_days=90, user=planner, today=today)
    first_visits = {}
    for visit in open_visits_page(1, per_page=1000).object_list:
        first_visits.setdefault(visit["site"].id, visit)
    for site_id, visit in first_visits.items():
        issue_visit(site_id=site_id, due_on=visit["day"], user=planner)
    under_way = next(iter(first_visits.values()), None)
    if under_way is not None:
        order = next(o for o in under_way["orders"] if o.fitted_capacitor_id)
        replace_capacitor(
            fitted_capacitor=order.fitted_capacitor,
            part=order.fitted_capacitor.part,
            removed_on=today,
            reason=FittedCapacitor.RemovalReason.PLANNED,
            user=technician,
            serial="on the visit",
        )
        _fit_a_stop_gap(under_way, technician, today)
    _demo_stock()


def _fit_a_stop_gap(visit: dict, technician, today: dt.date) -> None:
    """On the visit under way, a second replacement with no design part in the store: the technician fitted the
    nearest rating of the same kind against the advice, as a stop-gap, and said why (the stand-in parts page lists
    it; the planner can order its swap)."""
    order = next(
        (o for o in visit["orders"][1:] if o.fitted_capacitor_id and o.kind != WorkOrder.Kind.READ_AGAIN), None
    )
    if order is None:
        return
    design = order.fitted_capacitor.part
    others = CapacitorPart.objects.filter(dielectric=design.dielectric).exclude(pk=design.pk)
    nearest = min(others, key=lambda part: (abs(part.rated_uf - design.rated_uf), part.code), default=None)
    if nearest is None:
        return
    replace_capacitor(
        fitted_capacitor=order.fitted_capacitor,
        part=nearest,
        removed_on=today,
        reason=FittedCapacitor.RemovalReason.FAILED,
        user=technician,
        serial="on the visit",
        substitute_override=True,
        override_reason=f"no {design.code} in the van on the visit: a stop-gap until one comes from the store",
    )
    stop_gap = FittedCapacitor.objects.get(motor_id=order.motor_id, role=order.fitted_capacitor.role, removed_on=None)
    # Read once fitted, as the trade does: the refit then judges the stop-gap on the motor as designed.
    record_reading(
        fitted_capacitor=stop_gap,
        values={
            "method": Reading.Method.METER,
            "capacitance_uf": round(nearest.rated_uf * 0.99, 2),
            "case_temperature_c": 28.0,
            "condition": Reading.Condition.SOUND,
            "taken_at": timezone.now(),
        },
        user=technician,
        source=Reading.Source.FORM,
    )


def scenario_holidays(years) -> set[dt.date]:
    """The public holidays of the scenario's country (its sites keep Irish time) in `years`: 1 January, 17 March,
    Easter Monday, the first Monday of February, May, June and August, the last Monday of October, 25 and 26
    December; one falling on a weekend is taken on the next weekday not already a holiday. From memory,
    unverified, and for the demo only: a plant stores its own as each site's days off."""
    days = set()
    for year in years:
        fixed = [dt.date(year, 1, 1), dt.date(year, 3, 17), dt.date(year, 12, 25), dt.date(year, 12, 26)]
        mondays = [_first_monday(year, month) for month in (2, 5, 6, 8)]
        last_october = _first_monday(year, 11) - dt.timedelta(days=7)
        for day in sorted([*fixed, *mondays, last_october, _easter_sunday(year) + dt.timedelta(days=1)]):
            while day.weekday() >= 5 or day in days:
                day += dt.timedelta(days=1)
            days.add(day)
    return days


def _first_monday(year: int, month: int) -> dt.date:
    first = dt.date(year, month, 1)
    return first + dt.timedelta(days=(7 - first.weekday()) % 7)


def _easter_sunday(year: int) -> dt.date:
    """Easter Sunday of the Gregorian calendar (the anonymous Gregorian algorithm, Meeus/Jones/Butcher)."""
    a, b, c = year % 19, year // 100, year % 100
    d, e = divmod(b, 4)
    g = (8 * b + 13) // 25
    h = (19 * a + b - d - g + 15) % 30
    i, k = divmod(c, 4)
    weekday_shift = (32 + 2 * e + 2 * i - h - k) % 7
    m = (a + 11 * h + 19 * weekday_shift) // 433
    month, day = divmod(h + weekday_shift - 7 * m + 114, 31)
    return dt.date(year, month, day + 1)


SCENARIO_HOLIDAY_NAME = "public holiday"


def store_scenario_days_off(*, today: dt.date) -> int:
    """Store the scenario's public holidays as each site's days off (`SiteDayOff`), from a month ago to the plan's
    reach, as a planner would on setting up: the plan then dates no visit on them. Run twice, adds nothing
    twice. Returns the number of rows added."""
    last = today + dt.timedelta(days=PLAN_HORIZON_DAYS[1])
    first = today - dt.timedelta(days=30)
    days = sorted(d for d in scenario_holidays(range(first.year, last.year + 1)) if first <= d <= last)
    held = set(SiteDayOff.objects.values_list("site_id", "day"))
    rows = [
        SiteDayOff(site_id=site_id, day=day, name=SCENARIO_HOLIDAY_NAME)
        for site_id in Site.objects.values_list("id", flat=True)
        for day in days
        if (site_id, day) not in held
    ]
    SiteDayOff.objects.bulk_create(rows)
    return len(rows)


def work_orders_by_state() -> dict[str, int]:
    """How many work orders the database holds in each state (every state, zero included)."""
    held = dict(WorkOrder.objects.order_by().values_list("state").annotate(n=models.Count("id")))
    return {state: held.get(state, 0) for state in WorkOrder.State.values}


def _demo_stock() -> None:
    """A few spares of each part at each site that uses it (some short of the year's need)."""
    held = (
        FittedCapacitor.objects.filter(removed_on__isnull=True)
        .values("motor__site_id", "part_id")
        .annotate(n=models.Count("id"))
    )
    SiteStock.objects.bulk_create(
        [
            SiteStock(
                site_id=row["motor__site_id"],
                part_id=row["part_id"],
                quantity=max(1, round(row["n"] * DEMO_STOCK_SHARE)),
            )
            for row in held
        ],
        ignore_conflicts=True,
    )
