"""The planner's dashboard: workload, spares, risk mix, overdue readings and the week's changes.

Every figure is read from stored results (current assessments, work orders, readings, site stock,
stored life fits) by SQL aggregation: a fixed number of queries whatever the fleet's size, and
result rows bounded by weeks, months, parts and sites, never by capacitors.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import re
from collections import Counter
from pathlib import Path

import numpy as np
from django.core.cache import cache
from django.core.serializers.json import DjangoJSONEncoder
from django.db.models import Case, Count, DateField, F, Q, Subquery, Sum, Value, When
from django.db.models.functions import Cast, TruncMonth, TruncWeek
from django.utils import timezone

from fleet import charts
from fleet.charts import risk_mix_figure, routes_figure, spares_figure, stock_figure, workload_figure
from fleet.engineering.lifedata import expected_failures, successor_failures
from fleet.engineering.planning import RISK_ORDER
from fleet.filters import utc_midnight
from fleet.models import (
    CapacitorPart,
    FittedCapacitor,
    PartLifeFit,
    Reading,
    RefitRun,
    Site,
    SiteStock,
    WorkOrder,
)
from fleet.roles import scope_to_user
from fleet.services.counts import InServiceCounts, in_service_counts
from fleet.services.pages import (
    NOT_ASSESSED,
    OVERDUE_GRACE_DAYS,
    READING_INTERVAL_DAYS,
    due_within,
    in_service_assessments,
    motors_by_reading_status,
    overdue_before,
    position_readings,
    quarter_start,
    reading_status,
    replace_by_until,
    risk_changes,
)
from fleet.services.selectors import not_superseded
from fleet.services.substitutes import count_design_parts
from fleet.services.workorders import replace_now_without_order

WEEKS = 26
MONTHS = 12
DAYS_PER_YEAR = 365.25


def _clamped(field: str, truncate, first: dt.date):
    """The field truncated to its week or month, anything earlier counted in the first one."""
    return Case(
        When(**{f"{field}__lt": first}, then=Value(first)),
        default=_day(truncate(field)),
        output_field=DateField(),
    )


def _day(expression):
    """A truncated date as a date (PostgreSQL's date_trunc answers a timestamp)."""
    return Cast(expression, DateField())


def _add_months(day: dt.date, months: int) -> dt.date:
    index = day.year * 12 + day.month - 1 + months
    return dt.date(index // 12, index % 12 + 1, 1)


def _site_codes(user) -> dict[int, str]:
    """The user's sites' codes by id, in the sites' order."""
    return dict(scope_to_user(Site.objects.all(), user).values_list("id", "code"))


def weekly_workload(user=None, today: dt.date | None = None, sites: dict[int, str] | None = None) -> dict:
    """Replacements per week for the next WEEKS weeks by risk level and by site (overdue ones in
    this week), and the site visits of the open work orders per week (four queries). The weeks end on
    the Sunday `until`, `horizon_days` from today: the plan's window (`pages.due_within`) that the
    dashboard links to."""
    today = today or timezone.localdate()
    first = today - dt.timedelta(days=today.weekday())
    weeks = [first + dt.timedelta(weeks=k) for k in range(WEEKS)]
    end = first + dt.timedelta(weeks=WEEKS)
    horizon_days = (end - today).days - 1
    rows = (
        due_within(horizon_days, user, today)
        .annotate(week=_clamped("replace_by", TruncWeek, first))
        .values("week", "risk", "site_id")
        .annotate(n=Count("*"))  # the in_service_totals index alone: no capacitor or motor joined
        .order_by()
    )
    sites = _site_codes(user) if sites is None else sites
    position = {week: k for k, week in enumerate(weeks)}
    by_risk = {risk: [0] * WEEKS for risk in RISK_ORDER}
    by_site = {code: [0] * WEEKS for code in sites.values()}
    for row in rows:
        k = position[row["week"]]
        by_risk.setdefault(row["risk"], [0] * WEEKS)[k] += row["n"]
        by_site.setdefault(sites.get(row["site_id"]), [0] * WEEKS)[k] += row["n"]
    visits = (
        scope_to_user(WorkOrder.objects.all(), user)
        .filter(state__in=[WorkOrder.State.PLANNED, WorkOrder.State.ISSUED], due_on__lt=end)
        .annotate(week=_clamped("due_on", TruncWeek, first))
        .values("week", "site_id", "due_on")  # the work order's stored site: the open_orders_by_visit_walk index
        .annotate(orders=Count("*"))
        .order_by()
    )
    visits_per_week = [0] * WEEKS
    for visit in visits:
        visits_per_week[position[visit["week"]]] += 1
    return {
        "weeks": weeks,
        "by_risk": {risk: counts for risk, counts in by_risk.items() if any(counts)},
        "by_site": {code: counts for code, counts in by_site.items() if any(counts)},
        "visits": visits_per_week,
        "total": sum(sum(counts) for counts in by_risk.values()),
        "horizon_days": horizon_days,
        "until": replace_by_until(horizon_days, today),
        "past_due": in_service_assessments(user).filter(replace_by__lt=today).count(),
    }


def _stop_gaps_bring_design_parts(user, first: dt.date, end: dt.date) -> list[dict]:
    """The plan's rows of spares moved for its stop-gaps to replace before `end`: each month's count off the
    stop-gap's own part and onto the design part its replacement brings (`count_design_parts`). Two queries for
    the few stop-gaps in the plan, a third where there are any."""
    planned = dict(
        in_service_assessments(user)
        .filter(
            replace_by__lt=end, fitted_capacitor__substitute_override=True, fitted_capacitor__removed_on__isnull=True
        )
        .values_list("fitted_capacitor_id", "replace_by")
    )
    stop_gaps = FittedCapacitor.objects.select_related("part").in_bulk(list(planned))
    moved = Counter()
    count_design_parts(moved, ((max(planned[pk].replace(day=1), first), fitted) for pk, fitted in stop_gaps.items()))
    return [{"part_id": part, "month": month, "n": n} for (month, part), n in moved.items() if n]


def spares_by_month(user=None, today: dt.date | None = None, ledger: InServiceCounts | None = None) -> dict:
    """Spares per part per month for MONTHS months: the plan's replacements (overdue ones in this
    month) plus the failures in service expected from each part's stored life fit among the
    capacitors in service until their planned replacement, and among the new ones fitted by the plan
    or in place of a failure (`successor_failures`), with the cost and the stock held at the user's
    sites (five queries, two more for the plan's stop-gaps, which bring their design parts).

    Ages and planned months are grouped by month in SQL; the expected failures of each group come
    from the core (`expected_failures`), weighted by the group's count.
    """
    today = today or timezone.localdate()
    first = today.replace(day=1)
    months = [_add_months(first, k) for k in range(MONTHS)]
    end = _add_months(first, MONTHS)
    position = {month: k for k, month in enumerate(months)}
    # The plan's replacements within the months by part, month fitted and month of replacement (each
    # assessment stores its capacitor's fitting date); every capacitor in service by part and month
    # fitted comes from the ledger of counts.
    window = (
        in_service_assessments(user)
        .filter(replace_by__lt=end)
        .values("part_id")
        .annotate(
            fitted_month=_day(TruncMonth("fitted_on")),  # stored: the in_service_totals index alone
            replace_month=_day(TruncMonth("replace_by")),
            n=Count("*"),
        )
        .order_by()
    )
    # Each capacitor in service counts once: at its planned replacement month if it falls within
    # the months, otherwise with none (it stays in service to the end of them).
    ledger = in_service_counts(user) if ledger is None else ledger
    counted = Counter({(part, month, None): n for (part, month), n in ledger.by_part_fitted_month().items()})
    planned_rows = []
    for row in window:
        part, fitted_month, replace_month, n = row["part_id"], row["fitted_month"], row["replace_month"], row["n"]
        planned_rows.append({"part_id": part, "month": max(replace_month, first), "n": n})
        counted[(part, fitted_month, None)] -= n
        counted[(part, fitted_month, replace_month)] += n
    planned_rows += _stop_gaps_bring_design_parts(user, first, end)
    groups = [
        {"part_id": part, "fitted_month": fitted, "replace_month": replace, "n": n}
        for (part, fitted, replace), n in counted.items()
        if n
    ]
    fits = {
        f["part_id"]: f for f in PartLifeFit.objects.filter(beta__isnull=False).values("part_id", "beta", "eta_years")
    }
    part_ids = sorted({row["part_id"] for row in planned_rows} | {g["part_id"] for g in groups})
    parts = {p.id: p for p in CapacitorPart.objects.filter(id__in=part_ids).order_by("dielectric", "rated_uf", "code")}
    stock = dict(
        scope_to_user(SiteStock.objects.filter(part_id__in=part_ids), user)
        .values("part_id")
        .annotate(held=Sum("quantity"))
        .values_list("part_id", "held")
    )
    order = list(parts)
    index = {part_id: i for i, part_id in enumerate(order)}
    planned = np.zeros((len(order), MONTHS))
    for row in planned_rows:
        planned[index[row["part_id"]], position[row["month"]]] += row["n"]
    failures = np.zeros((len(order), MONTHS))
    fitted = [g for g in groups if g["part_id"] in fits]
    if fitted:
        mid_month = dt.timedelta(days=15)
        age_years = np.array([(today - (g["fitted_month"] + mid_month)).days for g in fitted]) / DAYS_PER_YEAR
        until_years = np.array(
            [np.inf if g["replace_month"] is None else (g["replace_month"] + mid_month - today).days for g in fitted],
            float,
        )
        until_years = np.clip(until_years, 0.0, None) / DAYS_PER_YEAR
        edges_years = np.array([max((m - today).days, 0) for m in [*months, end]]) / DAYS_PER_YEAR
        expected = (
            expected_failures(
                [fits[g["part_id"]]["beta"] for g in fitted],
                [fits[g["part_id"]]["eta_years"] for g in fitted],
                np.clip(age_years, 0.0, None),
                until_years,
                edges_years,
            )
            * np.array([g["n"] for g in fitted])[:, None]
        )
        np.add.at(failures, [index[g["part_id"]] for g in fitted], expected)
        # The new capacitors fitted by the plan and in place of failures can fail within the months too.
        with_fit = np.array([part_id in fits for part_id in order])
        failures[with_fit] += successor_failures(
            [fits[p]["beta"] for p in np.array(order)[with_fit]],
            [fits[p]["eta_years"] for p in np.array(order)[with_fit]],
            (planned + failures)[with_fit],
            edges_years,
        )
    need = planned + failures
    unit_cost = np.array([float(parts[p].unit_cost) for p in order])
    rows = []
    for i, part_id in enumerate(order):
        held = int(stock.get(part_id) or 0)
        cumulative = np.cumsum(need[i])
        short = np.flatnonzero(np.ceil(cumulative - 1e-9) > held)
        rows.append(
            {
                "part": parts[part_id],
                "life_fit": part_id in fits,
                "planned": planned[i].tolist(),
                "failures": failures[i].tolist(),
                "need": need[i].tolist(),
                "cost": (need[i] * unit_cost[i]).tolist(),
                "stock": held,
                "need_3_months": float(need[i, :3].sum()),
                "need_12_months": float(need[i].sum()),
                "cost_12_months": float(need[i].sum() * unit_cost[i]),
                "short_from": months[short[0]] if short.size else None,
            }
        )
    return {
        "months": months,
        "parts": rows,
        "quantity_per_month": need.sum(axis=0).tolist(),
        "cost_per_month": (need * unit_cost[:, None]).sum(axis=0).tolist(),
        "cost_12_months": float((need * unit_cost[:, None]).sum()),
        "parts_without_fit": [parts[p].code for p in order if p not in fits],
    }


def risk_mix(user=None, sites: dict[int, str] | None = None, ledger: InServiceCounts | None = None) -> dict:
    """Capacitors in service per site by risk level, and those not assessed yet (two queries: the
    sites, and the ledger of counts kept on write; none where the caller read them)."""
    sites = _site_codes(user) if sites is None else sites
    levels = [*RISK_ORDER, NOT_ASSESSED]
    mix = {site: dict.fromkeys(levels, 0) for site in sites.values()}
    ledger = in_service_counts(user) if ledger is None else ledger
    for (site_id, risk), n in ledger.by_site_risk().items():
        mix.setdefault(sites.get(site_id), dict.fromkeys(levels, 0))[risk] = n
    for site_id, n in ledger.not_assessed_by_site().items():
        mix.setdefault(sites.get(site_id), dict.fromkeys(levels, 0))[NOT_ASSESSED] = n
    return {"sites": list(mix), "levels": levels, "counts": mix}


def overdue_capacitors(user=None, today: dt.date | None = None):
    """Capacitors in service on the motors in service overdue a reading (`pages.reading_status` on the
    motor's stored last reading) that are themselves overdue: their position's newest reading
    (`pages.position_readings`), as `last_read`, is older than the rule's day or missing. A motor overdue
    for its start capacitor alone does not report its run capacitor read last week."""
    today = today or timezone.localdate()
    overdue = reading_status(today, "motor__last_read_at", "motor__commissioned_on")
    newest = position_readings().order_by("-taken_at").values("taken_at")[:1]
    return (
        scope_to_user(FittedCapacitor.objects.filter(removed_on__isnull=True, motor__status="in_service"), user)
        .filter(overdue["overdue"])
        .annotate(last_read=Subquery(newest))
        .filter(Q(last_read__isnull=True) | Q(last_read__lt=utc_midnight(overdue_before(today))))
    )


def readings_by_route(user=None, today: dt.date | None = None) -> dict:
    """Per site's reading route: motors in service overdue, due this quarter and read this quarter, as
    the route page counts them (`pages.motors_by_reading_status`, summed from the ledger)."""
    today = today or timezone.localdate()
    by_site = motors_by_reading_status(user, today=today)
    routes = [
        {"code": site.code, "name": site.name, **by_site[site.id]}
        for site in scope_to_user(Site.objects.filter(id__in=by_site), user).order_by("code")
    ]
    return {"quarter_start": quarter_start(today), "overdue_before": overdue_before(today), "routes": routes}


def changes_since(days: int = 7, user=None, limit: int = 10, ledger: InServiceCounts | None = None) -> dict:
    """What moved in the last `days`: readings taken (a reading and its corrections counted once), refits
    run, capacitors reassessed and how their risk level moved, replacements; the riskier ones with the
    reason and the governing limit they had before.

    Read as the plan's list of changes (`pages.risk_changes`): a capacitor whose level changed within the
    window is set against its level and governing limit at the window's start (`pages.with_level_then`);
    reassessed but not changed, or changed and back, it stayed at its level.
    """
    # From the start of a UTC day, as the ledger of counts dates assessments (reassessed: summed there).
    since_day = timezone.now().astimezone(dt.UTC).date() - dt.timedelta(days=days)
    since = dt.datetime.combine(since_day, dt.time(), tzinfo=dt.UTC)
    # A reading and its correction are one change: a reading a later one supersedes is left out.
    readings = scope_to_user(Reading.objects.filter(not_superseded(), taken_at__gte=since), user).count()
    refit_runs = RefitRun.objects.filter(started_at__gte=since).count()
    reassessed = (in_service_counts(user) if ledger is None else ledger).assessed_since(since_day)
    worse, _, counts = risk_changes(days=days, limit=limit, user=user, since=since)
    worse = list(worse.annotate(previous_limit=F("limit_then")))
    limit_changed = counts["limit_changed"]  # among the capacitors whose level changed only
    moves = {
        "riskier": counts["worse"],
        "less_risky": counts["better"],
        "same_level": reassessed - counts["worse"] - counts["better"] - counts["first_assessed"],
        "first_assessed": counts["first_assessed"],
        "limit_changed": limit_changed,
    }
    replaced = dict(
        scope_to_user(FittedCapacitor.objects.filter(removed_on__gte=since.date()), user)
        .values_list("removal_reason")
        .annotate(n=Count("id"))
        .order_by()
    )
    return {
        "days": days,
        "since": since,
        "readings": readings,
        "refit_runs": refit_runs,
        "reassessed": reassessed,
        "moves": moves,
        "replaced": sum(replaced.values()),
        "failed": replaced.get(FittedCapacitor.RemovalReason.FAILED, 0),
        "worse": worse,
    }


# The chart builders' own code is part of each cached figure's key: a new release builds them anew.
CHARTS_CODE = hashlib.sha256(Path(charts.__file__).read_bytes()).hexdigest()[:16]
FIGURE_CACHE_SECONDS = 24 * 3600


def cached_figure(builder, *numbers) -> dict:
    """The figure `builder(*numbers)` from Django's cache, keyed by a digest of the numbers it is
    built from (and the chart code): building one through Plotly's graph objects takes tens of
    milliseconds, the numbers change only with a reading, refit, order or stock change, and any
    change to them is a new key (in their order too), so a cached figure is never stale."""
    digest = hashlib.sha256(json.dumps(numbers, cls=DjangoJSONEncoder).encode()).hexdigest()
    key = f"figure:{builder.__name__}:{CHARTS_CODE}:{digest}"
    figure = cache.get(key)
    if figure is None:
        figure = builder(*numbers)
        cache.set(key, figure, FIGURE_CACHE_SECONDS)
    return figure


def dashboard(user=None, today: dt.date | None = None) -> dict:
    """Everything the dashboard shows, with its figures (a fixed number of queries, each table read once)."""
    today = today or timezone.localdate()
    sites, ledger = _site_codes(user), in_service_counts(user)
    workload = weekly_workload(user, today, sites=sites)
    spares = spares_by_month(user, today, ledger=ledger)
    mix = risk_mix(user, sites=sites, ledger=ledger)
    routes = readings_by_route(user, today)
    weeks = [w.isoformat() for w in workload["weeks"]]
    months = [m.isoformat() for m in spares["months"]]
    # The charts' numbers only (no model instance), so that they key the cached figures.
    chart_parts = [
        {**{key: value for key, value in row.items() if key != "part"}, "code": row["part"].code}
        for row in spares["parts"]
    ]
    return {
        "today": today,
        "workload": workload,
        "spares": spares,
        "mix": mix,
        "routes": routes,
        "changes": changes_since(7, user, ledger=ledger),
        "sites": mix["sites"],
        "visits_total": sum(workload["visits"]),
        "replace_now_unordered": replace_now_without_order(user),
        "overdue_total": sum(r["overdue"] for r in routes["routes"]),
        "overdue_days": READING_INTERVAL_DAYS + OVERDUE_GRACE_DAYS,
        "workload_chart": cached_figure(
            workload_figure, weeks, workload["by_risk"], workload["by_site"], workload["visits"]
        ),
        "spares_chart": cached_figure(spares_figure, months, chart_parts, spares["cost_per_month"]),
        "stock_chart": cached_figure(stock_figure, chart_parts),
        "mix_chart": cached_figure(risk_mix_figure, mix["sites"], mix["levels"], mix["counts"]),
        "routes_chart": cached_figure(routes_figure, routes["routes"]),
    }


TABLES = ("workload", "spares", "risk-mix", "readings")


def column_heading(words: str) -> str:
    """A download's column heading in snake_case, as every dashboard CSV writes them ("replace now" is
    replace_now, site CST's column site_CST): no spaces, so a script reads it as a name."""
    return re.sub(r"\s+", "_", words.strip())


def dashboard_table(name: str, user=None, today: dt.date | None = None) -> tuple[list[str], list[list]]:
    """One chart's numbers as a table (header, rows) for download; headings in snake_case."""
    today = today or timezone.localdate()
    if name == "workload":
        data = weekly_workload(user, today)
        levels, sites = list(data["by_risk"]), list(data["by_site"])
        header = ["week_starting", *map(column_heading, levels), *(f"site_{s}" for s in sites), "site_visits"]
        rows = [
            [week, *(data["by_risk"][r][k] for r in levels), *(data["by_site"][s][k] for s in sites), data["visits"][k]]
            for k, week in enumerate(data["weeks"])
        ]
        return header, rows
    if name == "spares":
        data = spares_by_month(user, today)
        header = ["month", "part", "planned", "expected_failures", "need", "cost", "stock_held", "short_from"]
        rows = [
            [
                month.strftime("%Y-%m"),
                row["part"].code,
                int(row["planned"][k]),
                round(row["failures"][k], 3),
                round(row["need"][k], 3),
                round(row["cost"][k], 2),
                row["stock"],
                row["short_from"].strftime("%Y-%m") if row["short_from"] else "",
            ]
            for row in data["parts"]
            for k, month in enumerate(data["months"])
        ]
        return header, rows
    if name == "risk-mix":
        data = risk_mix(user)
        # Counts of capacitors (a two-value motor has two), not of motors: the last column says so.
        header = ["site", *map(column_heading, data["levels"]), "capacitors_in_service"]
        return header, [
            [site, *(data["counts"][site][level] for level in data["levels"]), sum(data["counts"][site].values())]
            for site in data["sites"]
        ]
    if name == "readings":
        data = readings_by_route(user, today)
        header = ["site", "site_name", "overdue", "due_this_quarter", "read_this_quarter"]
        return header, [[r["code"], r["name"], r["overdue"], r["due"], r["read"]] for r in data["routes"]]
    raise KeyError(name)
