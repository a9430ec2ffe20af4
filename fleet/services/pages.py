"""Reads for pages: stored results only, a bounded number of queries per page."""

from __future__ import annotations

import datetime as dt
import re
import unicodedata
from collections import Counter, defaultdict

import numpy as np
import pandas as pd
from django.conf import settings
from django.db.models import (
    BooleanField,
    Count,
    Exists,
    ExpressionWrapper,
    F,
    OuterRef,
    Prefetch,
    Q,
    Subquery,
    Sum,
    Value,
)
from django.db.models.functions import Coalesce, Replace, Upper
from django.utils import timezone

from fleet.charts import trend_figure
from fleet.engineering.calibration import path_quantiles, stress_hours_ahead
from fleet.engineering.capacitor import normalise_to_25c, over_rated_voltage
from fleet.engineering.planning import PLAN_DEFAULT_DAYS, RISK_ORDER, RISK_REPLACE_NOW, PlanningSettings
from fleet.engineering.trends import case_temperatures, default_tempco_ppm_per_k, reading_stress_hours
from fleet.filters import utc_midnight
from fleet.models import (
    Assessment,
    BandCalibration,
    CapacitorPart,
    FittedCapacitor,
    Motor,
    MotorReadCount,
    PartPrior,
    Reading,
    RefitRun,
    Site,
    WorkOrder,
)
from fleet.roles import scope_to_user, visible_site_ids

from .assessments import _hours_since_fitting, assessment_terms, stored_alert_levels
from .counts import in_service_counts
from .selectors import not_superseded
from .substitutes import count_design_parts

RECENT_READINGS = 6


def current_assessments(user=None):
    """Current assessments of the capacitors at the user's sites (None: every site)."""
    return scope_to_user(Assessment.objects.filter(is_current=True), user)


def in_service_assessments(user=None):
    """Current assessments of the capacitors in service at the user's sites: what plans and lists show.
    One table, no join (the in-service flag is kept on the assessment by database triggers)."""
    return current_assessments(user).filter(capacitor_in_service=True)


def motor_with_capacitors(asset_tag: str):
    """The motor, its capacitors (in service first) each with its current assessment."""
    capacitors = (
        FittedCapacitor.objects.select_related("part")
        .prefetch_related(Prefetch("assessments", queryset=current_assessments(), to_attr="current"))
        .order_by("removed_on", "role", "-fitted_on")
    )
    tag = asset_tag.strip()
    # Tags are unique in any case (motor_tag_unique_any_case); should two ever differ only in case,
    # the one typed exactly is shown, never a server error.
    matches = list(
        Motor.objects.select_related("site")
        .prefetch_related(Prefetch("capacitors", queryset=capacitors, to_attr="fitted"))
        .filter(asset_tag__iexact=tag)
        .order_by("id")[:2]
    )
    if not matches:
        raise Motor.DoesNotExist(f"No motor {tag}")
    return next((motor for motor in matches if motor.asset_tag == tag), matches[0])


def label_motors(site, tag: str | None = None):
    """The site's motors in walking order (or the one with `tag`), each with its capacitors in service
    and their parts (`in_service`), as the labels print them: one query more, whatever the page's size."""
    capacitors = FittedCapacitor.objects.filter(removed_on__isnull=True).select_related("part").order_by("role", "id")
    motors = (
        Motor.objects.filter(site=site)
        .prefetch_related(Prefetch("capacitors", queryset=capacitors, to_attr="in_service"))
        .order_by("route_order", "asset_tag")
    )
    return motors.filter(asset_tag=tag) if tag else motors


FIND_LIMIT = 50
# What a technician may type between the parts of a tag: a space, or any separator a tag may hold
# ('-', '_', '.': CODE_PATTERN) or a label's print might suggest ('/'), and the dashes a phone's keyboard puts for
# '-' (hyphen, non-breaking hyphen, figure, en and em dashes, minus sign: U+2010-2015, U+2212). All read alike, as '-'.
TAG_SEPARATORS = re.compile(r"[\s._/\u2010-\u2015\u2212-]+")
# Where letters meet digits a technician leaves the separator out ("cst0093" for CST-0093): there it is optional.
LETTERS_THEN_DIGITS = re.compile(r"(?<=[A-Z])(?=[0-9])")


def tag_key(text: str) -> str:
    """A tag as typed, in capitals with each run of separators as one '-': "cst 0093" -> "CST-0093"."""
    return TAG_SEPARATORS.sub("-", text.strip()).upper()


def _stored_bare_tag():
    """The stored tag in capitals without its separators, in SQL ("CST-0093" -> "CST0093"): a tag holds no space
    or '/', so '-', '_' and '.' are all it may hold between its parts."""
    upper = Upper("asset_tag")
    return Replace(Replace(Replace(upper, Value("-"), Value("")), Value("_"), Value("")), Value("."), Value(""))


TAG_NUMBER = re.compile(r"^(.*-)([0-9]{1,5})$")


def _zero_padded(key: str) -> list[str]:
    """A tag key whose last part is a short number, with that number padded to 3-6 digits as plants number
    motors ("CST-93" -> "CST-093", "CST-0093", ...): a technician reading "93" off a label types no zeros."""
    found = TAG_NUMBER.match(key)
    if found is None or not found.group(1).strip("-"):
        return []
    prefix, number = found.groups()
    return [prefix + number.zfill(width) for width in range(max(len(number) + 1, 3), 7)]


def find_motors(text: str, user=None) -> tuple[Motor | None, list[Motor], int]:
    """Motors a technician's words point to: (the motor whose tag is `text` or the only match, the
    matches shown (at most FIND_LIMIT), how many matched).

    Tags match ignoring case, with a space, '-', '_', '.' and '/' read alike ("CST 0093", "cst_0093"
    and "CST-0093" find CST-0093), and with the separator where letters meet digits left out ("cst0093"),
    whole or in part ("0093", "cst 009"); otherwise every word must appear in the motor's location or its
    site's name ("cool store condensing"). At most three queries, whatever the fleet's size. The whole tag is looked
    up by the index on its capitals (`motor_tag_unique_any_case`): the text as typed, and its key with each
    separator a tag may hold ("CST-0093", "CST_0093", "CST.0093"), a separator put where letters meet
    digits too, and a short number padded with zeros ("cst93" -> "CST-0093"), so the usual look-up stays an
    index probe at 100,000 motors. Only when that finds nothing are the tags compared, in part, without
    their separators (`_stored_bare_tag`), and the words with the locations: on PostgreSQL trigram indexes
    on both serve those LIKE '%...%' comparisons (`motor_bare_tag_trigram`, `motor_location_trigram`,
    migration 0053), which no b-tree can; the sites a word names are found first among the user's few
    sites, so each word is one indexed test on the motors' own columns.
    """
    # A keyboard in full-width mode types "ＣＳＴ－００９３": compatibility forms read as their plain ones (NFKC).
    text = " ".join(unicodedata.normalize("NFKC", text).split())
    if not text:
        return None, [], 0
    motors = scope_to_user(Motor.objects.select_related("site"), user)
    key = tag_key(text)
    whole = {text.upper()}
    spelled = {key, LETTERS_THEN_DIGITS.sub("-", key)}
    spelled |= {padded for keyed in spelled for padded in _zero_padded(keyed)}
    for keyed in spelled:
        whole |= {keyed, keyed.replace("-", "_"), keyed.replace("-", ".")}
    exact = list(
        motors.annotate(tag_upper=Upper("asset_tag"))
        .filter(tag_upper__in=whole)
        .order_by("asset_tag")[: len(whole) + 1]
    )
    as_typed = [motor for motor in exact if motor.tag_upper == text.upper()]
    if len(exact) == 1 or len(as_typed) == 1:
        return (as_typed or exact)[0], [], 1
    sites = list(scope_to_user(Site.objects.all(), user).values_list("id", "name", "code"))
    words = Q()
    for word in text.split(" "):
        named = [
            site_id for site_id, name, code in sites if word.upper() in name.upper() or word.upper() == code.upper()
        ]
        words &= Q(location__icontains=word) | Q(site_id__in=named)
    bare = key.replace("-", "")
    matches = list(
        motors.annotate(bare_tag=_stored_bare_tag())
        .filter((Q(bare_tag__contains=bare) if bare else Q(pk__in=[])) | words)
        .order_by("asset_tag")[: FIND_LIMIT + 1]
    )
    if len(matches) == 1:
        return matches[0], matches, 1
    return None, matches[:FIND_LIMIT], len(matches)


def reading_not_assessed(assessment, readings) -> Reading | None:
    """The newest of `readings` (newest first, as `recent_readings` lists them) saved after `assessment` was made
    from its readings (an id past its `max_reading_id`; corrected ones left out), or None: its refit waits for a
    worker (seconds, or until a worker or the sweep runs), and until then the page's risk and dates are from the
    readings before it. An operator's walk read "watch, latest: within tolerance" beside the message that had just
    saved a reading below tolerance."""
    if assessment is None or assessment.max_reading_id is None:
        return None
    newer = [r for r in readings if r.id > assessment.max_reading_id and not hasattr(r, "superseded_by")]
    return newer[0] if newer else None


def recent_readings(fitted_capacitor: FittedCapacitor, count: int = RECENT_READINGS):
    return list(
        Reading.objects.filter(fitted_capacitor=fitted_capacitor)
        .select_related("taken_by", "supersedes", "superseded_by")
        .order_by("-taken_at", "-id")[:count]
    )


def highest_voltage_over_rating(fitted_capacitor: FittedCapacitor, readings) -> dict | None:
    """The highest voltage measured across the capacitor among `readings` (corrected ones left out) that is over its
    part's rating (`capacitor.over_rated_voltage`): {voltage_v, taken_at, share of the rating}; None where none is.
    Its ageing rises steeply with voltage, which the trend counts, but the engineer should see it."""
    rated_v = fitted_capacitor.part.rated_voltage_v
    kept = [r for r in readings if r.capacitor_voltage_v is not None and not hasattr(r, "superseded_by")]
    over = [
        r
        for r, high in zip(kept, over_rated_voltage([r.capacitor_voltage_v for r in kept], rated_v), strict=True)
        if high
    ]
    if not over:
        return None
    highest = max(over, key=lambda r: (r.capacitor_voltage_v, r.taken_at))
    return {
        "voltage_v": highest.capacitor_voltage_v,
        "taken_at": highest.taken_at,
        "share": highest.capacitor_voltage_v / rated_v,
    }


def stress_hours_of_readings(fitted_capacitor: FittedCapacitor, readings) -> np.ndarray:
    """Stress hours at each of one capacitor's readings (a frame of its readings in time order
    with taken_at, case_temperature_c, capacitor_voltage_v), as its fit computed them."""
    frame = pd.DataFrame(readings).astype({"case_temperature_c": float, "capacitor_voltage_v": float})
    frame["taken_at"] = pd.to_datetime(frame["taken_at"], utc=True)
    return reading_stress_hours(
        np.zeros(len(frame), np.int64),
        _hours_since_fitting(frame, np.full(len(frame), np.datetime64(fitted_capacitor.fitted_on))),
        frame["case_temperature_c"].to_numpy(float),
        frame["capacitor_voltage_v"].to_numpy(float),
        [fitted_capacitor.part.rated_voltage_v],
        1,
        part_voltage_ratio=_stored_voltage_ratio(fitted_capacitor.part_id),
    )


def _stored_voltage_ratio(part_id: int) -> float:
    """The part's typical capacitor voltage over rated, as its stored prior holds it (nan: none)."""
    ratio = PartPrior.objects.filter(part_id=part_id).values_list("voltage_ratio", flat=True).first()
    return np.nan if ratio is None else float(ratio)


CHART_STEP_DAYS = 30  # the drawn path's points ahead: a crossing read off it is within a day or two
CHART_PAST_STEP_DAYS = 7  # and between readings: a week, as quarterly readings' bends need
CHART_HORIZON_MAX_DAYS = 10 * 365  # the farthest ahead the page draws, to reach a late P90


def trend_chart(
    fitted_capacitor: FittedCapacitor, assessment: Assessment | None, horizon_days: int = 730
) -> dict | None:
    """Figure of readings, the stored path and its P10-P90 band, drawn from stored numbers.

    Ahead of the newest reading the path is the calibrated one the assessment's dates come from
    (`calibration.path_quantiles`, with the terms it was made with, at `stress_hours_ahead` of the
    newest reading the fit used, the inverse of `crossing_days_ahead` that counts the dates): the
    band's edges and the P50 line meet the limit on the page's early, likely and late dates. It is drawn at least
    `horizon_days` ahead and on to a quarter past the latest stated date (up to `CHART_HORIZON_MAX_DAYS`). The
    stress hours at each reading are recomputed from the readings the fit saw (one capacitor's, a few
    dozen at most), exactly as the fit computed them.
    """
    if assessment is None or not assessment.has_trend:
        return None
    rated = fitted_capacitor.part.rated_uf
    readings = list(
        Reading.objects.filter(fitted_capacitor=fitted_capacitor, id__lte=assessment.max_reading_id)
        .annotate(superseded=Exists(Reading.objects.filter(supersedes=OuterRef("pk"))))
        .order_by("taken_at", "id")
        .values("id", "taken_at", "capacitance_uf", "case_temperature_c", "capacitor_voltage_v", "superseded")
    )
    if not readings:
        return None
    frame = pd.DataFrame.from_records(readings)
    reading_taus = stress_hours_of_readings(fitted_capacitor, frame)
    # Referred as the fit referred them: a reading without a case temperature at the capacitor's typical one.
    temperature = np.array(frame["case_temperature_c"], float)  # a copy: filled in place below
    fitted = ~frame["superseded"].to_numpy(bool)
    temperature[fitted] = case_temperatures(np.zeros(int(fitted.sum()), np.int64), temperature[fitted], 1)
    corrected = normalise_to_25c(
        frame["capacitance_uf"].to_numpy(float),
        temperature,
        default_tempco_ppm_per_k(fitted_capacitor.part.dielectric)
        if assessment.tempco_ppm_per_k is None
        else assessment.tempco_ppm_per_k,
    )
    flagged = set(assessment.flagged_reading_ids)
    # A reading a correction superseded is not drawn (the fit left it out too; its correction is drawn).
    standing = np.flatnonzero(~frame["superseded"].to_numpy(bool))
    shown = standing[_chart_rows(frame["id"].to_numpy(np.int64)[standing], flagged)]
    readings = [readings[i] for i in shown]
    corrected, reading_taus = np.asarray(corrected)[shown], np.asarray(reading_taus)[shown]
    points = [
        {"date": r["taken_at"].date().isoformat(), "capacitance_uf": round(float(c), 3), "flagged": r["id"] in flagged}
        for r, c in zip(readings, corrected, strict=True)
    ]
    newest = assessment.fitted_through
    stated = [day for day in (assessment.p10_on, assessment.p50_on, assessment.p90_on) if day is not None]
    if stated:
        latest_days = (max(stated) - newest.date()).days + 91
        horizon_days = min(max(horizon_days, latest_days), CHART_HORIZON_MAX_DAYS)
    future_days = np.linspace(0, horizon_days, int(np.ceil(horizon_days / CHART_STEP_DAYS)) + 1)[1:]
    stored = (
        assessment.trend_intercept,
        assessment.trend_slope_per_hour,
        assessment.trend_curvature or 0.0,
        (assessment.trend_var_intercept, assessment.trend_cov_intercept_slope, assessment.trend_var_slope),
        assessment.stress_hours_now,
        assessment.stress_rate,
        assessment_terms(assessment, fitted_capacitor.part.dielectric),
    )
    ahead_taus = stress_hours_ahead(future_days, assessment.stress_hours_now, assessment.stress_rate)
    # Between readings the path is drawn every CHART_PAST_STEP_DAYS at the stress hours its readings put there
    # (straight between two readings' stress hours, as the refit dates a crossing already made:
    # `calibration.crossing_days_through_readings`), so a curve read off between quarterly readings meets the
    # limit on the stated dates; straight lines from reading to reading cut a bend's corner by two weeks.
    reading_days = np.array([r["taken_at"].date().toordinal() for r in readings], float)
    between = np.arange(reading_days[0], reading_days[-1], CHART_PAST_STEP_DAYS)[1:] if len(readings) > 1 else []
    between = np.setdiff1d(between, reading_days)
    past_days = np.concatenate([reading_days, between])
    past_order = np.argsort(past_days, kind="stable")
    past_taus = np.concatenate([reading_taus, np.interp(between, reading_days, reading_taus)])[past_order]
    low, mid, high = path_quantiles(assessment.trend_model, *stored, np.concatenate([past_taus, ahead_taus]))
    dates = [dt.date.fromordinal(int(d)).isoformat() for d in past_days[past_order]] + [
        (newest + dt.timedelta(days=float(d))).date().isoformat() for d in future_days
    ]
    path = {
        "dates": dates,
        "mid_uf": [round(float(v) * rated, 3) for v in mid],
        "low_uf": [round(float(v) * rated, 3) for v in low],
        "high_uf": [round(float(v) * rated, 3) for v in high],
    }
    return trend_figure(points, path, assessment.limit_fraction * rated, assessment.limit_source, rated)


CHART_READINGS_MAX = 400  # a phone draws this many readings quickly; quarterly readings take a century to reach it


def _chart_rows(reading_ids: np.ndarray, flagged: set) -> np.ndarray:
    """Which of a capacitor's readings (in time order) the trend chart draws: all of them up to
    `CHART_READINGS_MAX`; beyond, that many spread evenly, the first and the newest, and every flagged
    one, so a capacitor logged by a data logger does not send megabytes to a phone."""
    n = len(reading_ids)
    if n <= CHART_READINGS_MAX:
        return np.arange(n)
    spread = np.linspace(0, n - 1, CHART_READINGS_MAX).round().astype(int)
    marked = np.flatnonzero(np.isin(reading_ids, list(flagged))) if flagged else np.array([], int)
    return np.union1d(spread, marked)


# Readings are quarterly [trade]; a motor not read for a quarter and two weeks more is overdue.
READING_INTERVAL_DAYS = 91
OVERDUE_GRACE_DAYS = 14


def quarter_start(day: dt.date) -> dt.date:
    return dt.date(day.year, 3 * ((day.month - 1) // 3) + 1, 1)


def overdue_before(today: dt.date) -> dt.date:
    """A motor whose newest reading (never read: its commissioning) is older than this day is overdue."""
    return today - dt.timedelta(days=READING_INTERVAL_DAYS + OVERDUE_GRACE_DAYS)


def reading_status(today: dt.date, newest: str = "last_read_at", commissioned: str = "commissioned_on") -> dict:
    """The one rule for whether a motor was read, as conditions on `newest`, when it was last read, and
    `commissioned`, its commissioning day: "overdue" (that reading or, never read, the commissioning
    before `overdue_before`), "due" (not read since the quarter began, not overdue), "to_read" (either),
    "read" (read since the quarter began). A motor was last read when every capacitor in service on it
    had been: the oldest of its positions' newest readings, a position's predecessors included, corrected
    readings left out (`Motor.last_read_at`, kept by triggers, migration 0041; by UTC day in
    `MotorReadCount`): `newest` names a time (`..._at`, compared from UTC midnight) or a UTC day (`..._on`)."""
    commissioned_before = overdue_before(today)
    cutoff, quarter = commissioned_before, quarter_start(today)
    if newest.endswith("_at"):
        cutoff, quarter = utc_midnight(cutoff), utc_midnight(quarter)
    never_read = Q((f"{newest}__isnull", True))
    overdue = Q((f"{newest}__lt", cutoff)) | never_read & Q((f"{commissioned}__lt", commissioned_before))
    due = Q((f"{newest}__gte", cutoff), (f"{newest}__lt", quarter)) | never_read & (
        Q((f"{commissioned}__isnull", True)) | Q((f"{commissioned}__gte", commissioned_before))
    )
    return {
        "overdue": overdue,
        "due": due,
        "to_read": never_read | Q((f"{newest}__lt", quarter)),
        "read": Q((f"{newest}__gte", quarter)),
    }


READING_STATES = ("overdue", "due", "read")  # `reading_status`'s parts: every motor in service is in one
ROUTE_COLUMNS = ("asset_tag", "location", "route_order", "application", "last_read_at")  # what a route row shows


def read_again_orders():
    """The open "read again" orders of capacitors in service: each asks for a new reading of its capacitor
    (the plan raises one where the trend's early crossing passed with no reading since, `planning.read_again`;
    the next reading closes it, `workorders.close_read_again_orders`), so its motor is still to read."""
    return WorkOrder.objects.filter(
        kind=WorkOrder.Kind.READ_AGAIN, state__in=WorkOrder.OPEN_STATES, fitted_capacitor__removed_on__isnull=True
    )


def motors_by_reading_status(user=None, site: Site | None = None, today: dt.date | None = None) -> dict:
    """Motors in service per site at the user's sites (`site` alone when given), {site_id: {state: n}} for
    each of `READING_STATES` by `reading_status`, sites with none left out: summed from the ledger of
    motors by site and UTC day of their stored last reading (`MotorReadCount`, kept by triggers on
    motors), a few hundred rows whatever the fleet's size. A motor read this quarter with an open "read
    again" order (`read_again_orders`) counts as due, as its route row shows it: one more query, over
    those orders alone."""
    today = today or timezone.localdate()
    status = reading_status(today, "last_read_on")
    rows = scope_to_user(MotorReadCount.objects.all(), user)
    orders = scope_to_user(read_again_orders(), user).filter(
        reading_status(today, "motor__last_read_at", "motor__commissioned_on")["read"],
        motor__status=Motor.Status.IN_SERVICE,
    )
    if site is not None:
        rows, orders = rows.filter(site=site), orders.filter(site=site)
    sums = {name: Coalesce(Sum("n", filter=status[name]), 0) for name in READING_STATES}
    counts = {row.pop("site_id"): row for row in rows.values("site_id").annotate(**sums).order_by()}
    read_again = orders.values("motor__site_id").annotate(n=Count("motor_id", distinct=True)).order_by()
    for row in read_again:
        by_state = counts.get(row["motor__site_id"])
        if by_state is not None:
            moved = min(row["n"], by_state["read"])
            by_state["read"], by_state["due"] = by_state["read"] - moved, by_state["due"] + moved
    return {site_id: row for site_id, row in counts.items() if any(row.values())}


def route_for_site(site: Site, *, only_due: bool = False, today: dt.date | None = None):
    """The site's motors in service in walking order (`RouteRows`, to read a page at a time), each with
    `due` when it was not read this quarter and `overdue` when its reading is overdue (`reading_status`,
    on the stored `last_read_at`, or an open "read again" order of one of its capacitors: `read_again_orders`);
    with the counts of all, the due and the overdue motors (from the ledger, `motors_by_reading_status`,
    by the same rule) and the days the rule counts from (`quarter_start`, `overdue_before`)."""
    today = today or timezone.localdate()
    status = reading_status(today)
    to_read = _still_to_read(site, status)
    by_state = motors_by_reading_status(site=site, today=today).get(site.id, dict.fromkeys(READING_STATES, 0))
    counts = {
        "total": sum(by_state.values()),
        "due": by_state["overdue"] + by_state["due"],
        "overdue": by_state["overdue"],
    }
    motors = Motor.objects.filter(site=site, status=Motor.Status.IN_SERVICE)
    listed = (motors.filter(to_read) if only_due else motors).annotate(
        due=ExpressionWrapper(to_read, BooleanField()),
        overdue=ExpressionWrapper(status["overdue"], BooleanField()),
    )
    days = {"quarter_start": quarter_start(today), "overdue_before": overdue_before(today)}
    rows = RouteRows(
        listed.order_by("route_order", "asset_tag").only(*ROUTE_COLUMNS),
        counts["due"] if only_due else counts["total"],
        since=utc_midnight(days["quarter_start"]),
    )
    return rows, counts, days


def _still_to_read(site: Site, status: dict) -> Q:
    """A motor of `site` still to read, as its route row says it: not read this quarter (`reading_status`), or
    asked to read again. The site's few motors asked to read again, as one set the database reads once (not a
    probe per motor)."""
    return status["to_read"] | Q(pk__in=read_again_orders().filter(site=site).values("motor_id"))


def next_to_read(motor: Motor, today: dt.date | None = None) -> Motor | None:
    """The motor in service to read after `motor` on its site's route: the first still to read (as the route's
    "Show only the ... to read" lists them, `route_for_site`) after it in walking order, else the first before it
    (one skipped on the way); None when no other is left to read. One query, whatever the route's length."""
    status = reading_status(today or timezone.localdate())
    after = Q(route_order__gt=motor.route_order) | Q(route_order=motor.route_order, asset_tag__gt=motor.asset_tag)
    return (
        Motor.objects.filter(_still_to_read(motor.site, status), site_id=motor.site_id, status=Motor.Status.IN_SERVICE)
        .exclude(pk=motor.pk)
        .annotate(later=ExpressionWrapper(after, BooleanField()))
        .order_by("-later", "route_order", "asset_tag")
        .only("asset_tag", "route_order")
        .first()
    )


def still_to_read_here(motor: Motor, today: dt.date | None = None) -> FittedCapacitor | None:
    """The first capacitor in service on `motor` still to read this quarter when the motor is half read (its run
    capacitor read, its start capacitor not: `positions_still_to_read`, as its route row says), else None; two
    queries. A reading saved from the route offers it before the next motor: the motor is isolated already."""
    since = utc_midnight(quarter_start(today or timezone.localdate()))
    left = positions_still_to_read([motor.id], since).get(motor.id, [])
    if not left:
        return None
    roles = {name: role for role, name in ROLE_NAMES.items()}
    return FittedCapacitor.objects.filter(motor=motor, removed_on__isnull=True, role=roles[left[0]]).first()


class RouteRows:
    """A route's motors as a Paginator pages them: their number as the ledger counts it (no count of the
    site's motors), a page's motors read in one query, each with `still_to_read`
    (`positions_still_to_read` since the quarter began, one more query of values), `read_again`
    (`read_again_by_motor`, one more) and `replace_now` (`replace_now_by_motor`, one more)."""

    def __init__(self, motors, count: int, since: dt.datetime):
        self.motors, self.length, self.since = motors, count, since

    def count(self) -> int:
        return self.length

    def __len__(self) -> int:
        return self.length

    def __getitem__(self, window: slice) -> list:
        motors = list(self.motors[window])
        motor_ids = [motor.id for motor in motors]
        unread = positions_still_to_read(motor_ids, self.since) if motors else {}
        reread = read_again_by_motor(motor_ids) if motors else {}
        urgent = replace_now_by_motor(motor_ids) if motors else {}
        for motor in motors:
            motor.still_to_read, motor.read_again = unread.get(motor.id, []), reread.get(motor.id, [])
            motor.replace_now = urgent.get(motor.id, [])
        return motors


ROLE_NAMES = {role: f"{label.lower()} capacitor" for role, label in FittedCapacitor.Role.choices}


def positions_still_to_read(motor_ids: list[int], since: dt.datetime) -> dict[int, list[str]]:
    """The capacitors still to read on each half-read motor of `motor_ids` ("start capacitor"): those in
    service whose position (its motor and role, predecessors included) has no reading since `since` that
    no correction superseded; none for a motor all or none of whose capacitors were read. One query of
    values, in role order: a route page's rows name the capacitor still to read on a motor half read."""
    read = position_readings().filter(taken_at__gte=since)
    rows = (
        FittedCapacitor.objects.filter(removed_on__isnull=True, motor_id__in=motor_ids)
        .annotate(read=Exists(read))
        .order_by("motor_id", "role")
        .values_list("motor_id", "role", "read")
    )
    positions = defaultdict(list)
    for motor_id, role, was_read in rows:
        positions[motor_id].append((role, was_read))
    unread = {
        motor_id: [ROLE_NAMES[role] for role, was_read in roles if not was_read]
        for motor_id, roles in positions.items()
    }
    return {motor_id: roles for motor_id, roles in unread.items() if 0 < len(roles) < len(positions[motor_id])}


def read_again_by_motor(motor_ids: list[int]) -> dict[int, list[dict]]:
    """The open "read again" orders (`read_again_orders`) of each of `motor_ids`, in role order: each
    {"order_id", "fitted_capacitor_id", "capacitor" (its role in words), "due_on"}; one query of values,
    for a route row's "read again: work order ..." and its link to the reading form."""
    rows = (
        read_again_orders()
        .filter(motor_id__in=motor_ids)
        .order_by("motor_id", "fitted_capacitor__role", "id")
        .values_list("motor_id", "id", "fitted_capacitor_id", "fitted_capacitor__role", "due_on")
    )
    orders = defaultdict(list)
    for motor_id, order_id, fitted_capacitor_id, role, due_on in rows:
        orders[motor_id].append(
            {
                "order_id": order_id,
                "fitted_capacitor_id": fitted_capacitor_id,
                "capacitor": ROLE_NAMES[role],
                "due_on": due_on,
            }
        )
    return dict(orders)


def replace_now_by_motor(motor_ids: list[int]) -> dict[int, list[str]]:
    """The capacitors in service at "replace now" on each of `motor_ids` (their roles in words, in role order);
    one query of values, for a route row: a motor read this quarter and found bulged is "done" as a reading, not
    as a job."""
    rows = (
        Assessment.objects.filter(
            is_current=True,
            capacitor_in_service=True,
            risk=RISK_REPLACE_NOW,
            fitted_capacitor__motor_id__in=motor_ids,
        )
        .order_by("fitted_capacitor__motor_id", "fitted_capacitor__role")
        .values_list("fitted_capacitor__motor_id", "fitted_capacitor__role")
    )
    roles = defaultdict(list)
    for motor_id, role in rows:
        roles[motor_id].append(ROLE_NAMES[role])
    return dict(roles)


def position_readings():
    """The readings that count for the position of the outer query's capacitor: its motor and role, the
    capacitors it replaced included, a reading a correction superseded left out (the rule of migration
    0041's triggers, for one position)."""
    return Reading.objects.filter(
        not_superseded(), fitted_capacitor__motor=OuterRef("motor"), fitted_capacitor__role=OuterRef("role")
    )


# Capacitors in service without a current assessment, beside the risk levels of the counts.
NOT_ASSESSED = "not assessed yet"


def risk_summary(user=None, site: Site | None = None):
    """Capacitors in service at the user's sites (at `site` alone when given) per risk level, most urgent
    first, then those not assessed yet (never read, or waiting for their first refit) where there are any,
    so the counts add up to the capacitors in service (the ledger kept on write: a few rows summed,
    whatever the fleet's size)."""
    ledger = in_service_counts(user, site)
    counts = ledger.by_risk()
    summary = [(risk, counts.get(risk, 0)) for risk in RISK_ORDER]
    not_assessed = sum(ledger.not_assessed_by_site().values())
    return summary + [(NOT_ASSESSED, not_assessed)] if not_assessed else summary


def counted_where(site: Site | None, sites, user) -> str:
    """Which sites a page's counts are of, in words: "at CST (Cool store)", "at your sites GLH, PKH" (the
    user's `sites`, already listed for the page) or "at every site"."""
    if site is not None:
        return f"at {site.code} ({site.name})"
    if visible_site_ids(user) is None:
        return "at every site"
    return f"at your site{'s' if len(sites) > 1 else ''} {', '.join(s.code for s in sites)}"


# An assessment's per-limit details and operating figures: the capacitor page shows them, lists do not.
LIST_DEFERRED = ("limits", "flagged_reading_ids")
# A list's capacitors with their motors, sites and parts, read for the rows of a page only (one query):
# joined into the list's own query, they were joined for every row the sort had to see.
LISTED_CAPACITORS = Prefetch(
    "fitted_capacitor", queryset=FittedCapacitor.objects.select_related("motor__site", "part").order_by()
)


def replace_by_until(horizon_days: int, today: dt.date | None = None) -> dt.date:
    """The last replace-by day within `horizon_days` of today (that day included): the one window of the
    plan, its downloads, the work orders planned from it and the dashboard's count of replacements."""
    return (today or timezone.localdate()) + dt.timedelta(days=horizon_days)


def due_within(horizon_days: int, user=None, today: dt.date | None = None):
    """Current assessments of the capacitors in service at the user's sites to replace within the
    horizon (`replace_by_until`), those already past their date included."""
    return in_service_assessments(user).filter(replace_by__lte=replace_by_until(horizon_days, today))


def replacement_plan(horizon_days: int = PLAN_DEFAULT_DAYS, site: Site | None = None, user=None):
    """Capacitors in service at the user's sites to replace within the horizon, soonest first, then by
    site and walking order, with the newest assessment's figures (not the per-limit details); one
    query, ordered by the assessment's stored site and route order (the in_service_walking_order index)."""
    queryset = (
        due_within(horizon_days, user)
        .defer(*LIST_DEFERRED)
        .prefetch_related(LISTED_CAPACITORS)
        .order_by("replace_by", "site__code", "route_order", "fitted_capacitor_id")
    )
    if site is not None:
        queryset = queryset.filter(site=site)
    return queryset


def spares_needed(horizon_days: int = PLAN_DEFAULT_DAYS, site: Site | None = None, user=None) -> list[dict]:
    """Parts to hold for the plan's replacements (same window, same sites), with their cost: each
    `{"part", "quantity", "cost"}`, by part code. Counted on each assessment's stored part (the
    in_service_totals index alone, whatever the fleet's size), then the few parts are read."""
    plan = replacement_plan(horizon_days, site, user)
    counts = Counter(
        {(None, part_id): n for part_id, n in plan.order_by().values_list("part_id").annotate(n=Count("*"))}
    )
    # A stop-gap's replacement brings its design part (the few stop-gaps in the plan, in one query and one more).
    stop_gaps = FittedCapacitor.objects.filter(
        substitute_override=True, removed_on__isnull=True, id__in=plan.order_by().values("fitted_capacitor_id")
    ).select_related("part")
    count_design_parts(counts, ((None, fitted) for fitted in stop_gaps))
    quantities = {part_id: n for (_, part_id), n in counts.items() if part_id is not None and n > 0}
    parts = CapacitorPart.objects.filter(id__in=list(quantities)).order_by("code")
    return [{"part": p, "quantity": quantities[p.id], "cost": quantities[p.id] * p.unit_cost} for p in parts]


def latest_refit_run():
    return RefitRun.objects.order_by("-started_at").first()


def _before(since: dt.datetime, field: str):
    """A capacitor's `field` in its newest assessment made before `since` (NULL: none was)."""
    return Subquery(
        Assessment.objects.filter(fitted_capacitor_id=OuterRef("fitted_capacitor_id"), created_at__lt=since)
        .order_by("-created_at")
        .values(field)[:1]
    )


def _history_reaches(since: dt.datetime) -> bool:
    """Whether the superseded assessments kept (FLEET_ASSESSMENT_HISTORY_DAYS) reach back to `since`."""
    days = settings.FLEET_ASSESSMENT_HISTORY_DAYS
    return days <= 0 or timezone.now() - dt.timedelta(days=days) <= since


def with_level_then(assessments, since: dt.datetime):
    """Each assessment with `risk_then` and `limit_then`: its capacitor's risk level and governing limit as they
    stood at `since` (its newest assessment made before then; "" where it had none: first assessed since). Where
    the history kept does not reach back that far, the level before the latest change (`risk_was`) stands in."""
    if _history_reaches(since):
        return assessments.annotate(
            risk_then=Coalesce(_before(since, "risk"), Value("")),
            limit_then=Coalesce(_before(since, "limit_source"), Value("")),
        )
    return assessments.annotate(risk_then=F("risk_was"), limit_then=Coalesce(F("limit_was"), Value("")))


def risk_changes(days: int = 7, limit: int = 50, user=None, since: dt.datetime | None = None, site: Site | None = None):
    """Capacitors in service (at the user's sites; at `site` alone when given) whose risk level is not what it was
    `days` ago (`since`): (worse, better, counts) with at most `limit` of each, soonest replacement first, and
    counts {"worse", "better", "first_assessed"} of all of them.

    Only a capacitor whose level changed in the window (`risk_changed_at`, indexed) can differ; it is set against
    its level at the window's start (`with_level_then`), so one that went from sound to watch and back within the
    week has not changed (an audit found it listed as "less risky: watch to sound"). worse and better are
    querysets, read when used (the plan shows the riskier ones only): each picks its `limit` rows from the
    assessments alone, then joins motors and parts for those. A capacitor first assessed in the window has no level
    to compare with: it is counted apart. `counts["limit_changed"]`: those whose governing limit is not the one
    that governed at the window's start.
    """
    since = since or timezone.now() - dt.timedelta(days=days)
    recent = in_service_assessments(user).filter(risk_changed_at__gte=since)
    if site is not None:
        recent = recent.filter(site=site)
    # The few capacitors whose level moved in the window, each with its level then read once (a subquery in a
    # filter or a CASE is worked out again at every mention: 70 ms of the plan page at 100,000 motors).
    fields = ("id", "risk", "risk_then", "limit_source", "limit_then", "replace_by", "fitted_capacitor_id")
    moved = list(with_level_then(recent, since).values_list(*fields))
    rank = {risk: position for position, risk in enumerate(RISK_ORDER)}
    worse, better = [], []
    counts = {"worse": 0, "better": 0, "first_assessed": 0, "limit_changed": 0}
    for pk, risk, risk_then, limit_source, limit_then, replace_by, fitted_capacitor_id in moved:
        if not risk_then:
            counts["first_assessed"] += 1
            continue
        counts["limit_changed"] += limit_then != limit_source
        now_rank, then_rank = rank.get(risk, len(rank)), rank.get(risk_then, len(rank))
        if now_rank != then_rank:
            key = (replace_by is None, replace_by or dt.date.min, fitted_capacitor_id, pk)
            (worse if now_rank < then_rank else better).append(key)
    counts["worse"], counts["better"] = len(worse), len(better)

    def listed(keys):
        ids = [key[-1] for key in sorted(keys)[:limit]]
        return with_level_then(
            Assessment.objects.filter(id__in=ids)
            .defer(*LIST_DEFERRED)
            .select_related("fitted_capacitor__motor__site", "fitted_capacitor__part")
            .order_by(F("replace_by").asc(nulls_last=True), "fitted_capacitor_id"),
            since,
        )

    return listed(worse), listed(better), counts


def first_assessed_due(days: int = 7, limit: int = 50, user=None, site: Site | None = None):
    """Capacitors in service first assessed in the last `days` whose level already asks for work (replace
    now or due soon: a new capacitor's first reading far below its rating), soonest replacement first: (rows, how
    many). `risk_changes` only counts first assessments (there is no level to compare with): a walk found two
    new "replace now" capacitors on the plan inside that count, not listed. Two queries."""
    since = timezone.now() - dt.timedelta(days=days)
    changed = in_service_assessments(user).filter(risk_changed_at__gte=since, risk__in=RISK_ORDER[:2])
    fresh = with_level_then(changed, since).filter(risk_then="")
    if site is not None:
        fresh = fresh.filter(site=site)
    rows = (
        fresh.defer(*LIST_DEFERRED)
        .select_related("fitted_capacitor__motor__site", "fitted_capacitor__part")
        .order_by("replace_by", "fitted_capacitor_id")[:limit]
    )
    return list(rows), fresh.count()


def alert_level_basis(dielectric: str) -> dict:
    """The crossing quantile, in percent, that a capacitor of this dielectric's risk level and replace-by date
    follow (`alert_level_words`, for one family), and whether the back-test that chose it found it caught the
    share of the year's crossings the rule asks (`met`: True; False where no level did, so the most cautious;
    None before any back-test scored it). One query."""
    row = BandCalibration.objects.filter(family=dielectric).values_list("alert_quantile", "alert_met_recall").first()
    quantile, met = row if row is not None else (PlanningSettings().alert_level, None)
    return {"percent": round(100 * quantile), "met": met}


def alert_level_words() -> str:
    """The crossing quantile the risk level and the replace-by date follow, per dielectric, in words a planner reads
    without statistics: "P50, the date half such capacitors would have crossed by, for metallised film (run);
    P30, 3 in 10, for aluminium electrolytic (start)"; P10 before any back-test."""
    levels = stored_alert_levels() or {"": PlanningSettings().alert_level}
    names = dict(CapacitorPart.Dielectric.choices)
    said = []
    for number, (family, level) in enumerate(sorted(levels.items())):
        percent = round(100 * level)
        share = "half" if percent == 50 else f"{percent // 10} in 10" if percent % 10 == 0 else f"{percent} %"
        words = (
            f"P{percent}, the date {share} of such capacitors would have crossed by"
            if number == 0
            else (f"P{percent}, {share}")
        )
        said.append(words + (f", for {names.get(family, family).lower()}" if family else ""))
    return "; ".join(said)
