"""Work orders from the replacement plan, bundled into site visits."""

from __future__ import annotations

import datetime as dt
from functools import reduce
from operator import or_

import numpy as np
from django.core.paginator import Paginator
from django.db import transaction
from django.db.models import Count, F, OuterRef, Q, Subquery, Window
from django.db.models.functions import RowNumber
from django.utils import timezone

from fleet.audit import audited_bulk_create, audited_bulk_update, audited_update
from fleet.engineering.planning import PlanningSettings, bundle_visits, plan_moved_words
from fleet.models import Assessment, FittedCapacitor, SiteStock, WorkOrder
from fleet.roles import scope_to_user

from .bulk import storable_ids
from .pages import due_within

KIND_FOR_ROLE = {
    FittedCapacitor.Role.RUN: WorkOrder.Kind.REPLACE_RUN,
    FittedCapacitor.Role.START: WorkOrder.Kind.REPLACE_START,
}
OPEN = [WorkOrder.State.PLANNED, WorkOrder.State.ISSUED]
# The kinds of order the plan gives a capacitor: replace it, or read it again first.
CAPACITOR_KINDS = [*KIND_FOR_ROLE.values(), WorkOrder.Kind.READ_AGAIN]


def plan_work_orders(*, horizon_days: int = 90, window_days: int = 14, user=None, today: dt.date | None = None) -> dict:
    """Create planned orders for capacitors to replace within the horizon.

    A capacitor whose plan says "read it again" (its trend's early crossing has passed, no reading
    since: `planning.read_again`, stored by the refit) gets a "read again" order, any other one a
    replacement; each order carries the plan's reason in words. New orders and the still-planned ones
    are bundled into site visits (one trip per site per window) and dated on their visit's day; overdue
    ones on today. Issued orders are left as they are. Only the sites `user` works at are planned
    (None: every site). Returns counts: `replanned` counts only the open orders whose date, window or
    kind really moved; those and the ones whose reason changed are written.
    """
    today = today or timezone.localdate()
    due = list(
        due_within(horizon_days, user, today).values_list(
            "fitted_capacitor_id",
            "fitted_capacitor__motor_id",
            "fitted_capacitor__motor__site_id",
            "fitted_capacitor__role",
            "replace_by",
            "risk",
            "reason",
            "read_again",
        )
    )
    due_ids = [d[0] for d in due]
    with transaction.atomic():
        # Two plans at once take turns per capacitor (its row locked) and read the open orders
        # after: the second re-dates the orders the first created instead of creating them
        # again (one open order per capacitor and kind).
        locked = FittedCapacitor.objects.select_for_update().filter(pk__any_of=np.asarray(due_ids, np.int64))
        list(locked.order_by("pk").values_list("pk", flat=True))
        # A capacitor's open order: an issued one is left as it is; a planned one follows the plan
        # (its kind too: "read again" becomes "replace" once a reading shows the capacitor past its limit).
        open_orders = {}
        for o in WorkOrder.objects.filter(
            fitted_capacitor_id__any_of=np.asarray(due_ids, np.int64), state__in=OPEN, kind__in=CAPACITOR_KINDS
        ).order_by("state"):  # "issued" before "planned": an issued order wins
            open_orders.setdefault(o.fitted_capacitor_id, o)
        was = {o.pk: (o.due_on, o.window_days, o.kind, o.reason) for o in open_orders.values()}
        items, new_orders, replanned = [], [], []
        for fitted_capacitor_id, motor_id, site_id, role, replace_by, risk, reason, reread in due:
            existing = open_orders.get(fitted_capacitor_id)
            if existing is not None and existing.state == WorkOrder.State.ISSUED:
                continue
            order = existing or WorkOrder(motor_id=motor_id, fitted_capacitor_id=fitted_capacitor_id, created_by=user)
            order.kind = WorkOrder.Kind.READ_AGAIN if reread else KIND_FOR_ROLE[role]
            order.reason = f"{risk}: {reason}"[: WorkOrder._meta.get_field("reason").max_length]
            items.append((site_id, (max(replace_by, today) - today).days, order))
            (replanned if existing else new_orders).append(order)
        if not items:
            return {"created": 0, "replanned": 0, "visits": 0}
        visit, visit_day = bundle_visits(
            np.array([i[0] for i in items]),
            np.array([i[1] for i in items]),
            window_days,
            today=today,
            weekmask=PlanningSettings().working_days,
        )
        for (_, _, order), day in zip(items, visit_day, strict=True):
            order.due_on = today + dt.timedelta(days=int(day))
            order.window_days = window_days
        changed = [o for o in replanned if (o.due_on, o.window_days, o.kind, o.reason) != was[o.pk]]
        replanned = [o for o in changed if (o.due_on, o.window_days, o.kind) != was[o.pk][:3]]
        audited_bulk_create(new_orders)
        audited_bulk_update(changed, ["due_on", "window_days", "kind", "reason"])
    return {"created": len(new_orders), "replanned": len(replanned), "visits": len(set(visit.tolist()))}


def close_read_again_orders(*, fitted_capacitor_ids, user=None) -> int:
    """A reading is what a "read again" order asks for: close the open ones of the capacitors just read
    (by the form, the API or an import; the refit that follows judges the readings, and the next plan
    orders a replacement where they show the limit passed). In the caller's transaction."""
    return audited_update(
        WorkOrder.objects.filter(
            fitted_capacitor_id__any_of=np.asarray(fitted_capacitor_ids, np.int64),
            kind=WorkOrder.Kind.READ_AGAIN,
            state__in=OPEN,
        ),
        state=WorkOrder.State.DONE,
        closed_at=timezone.now(),
        closed_by=user if user is not None and user.is_authenticated else None,
    )


def issue_visit(*, site_id: int, due_on: dt.date, user=None) -> int:
    """Hand a visit's planned orders to the technicians: only at a site `user` works at (None: any)."""
    planned = scope_to_user(WorkOrder.objects.all(), user).filter(
        site_id__in=storable_ids([site_id]), due_on=due_on, state=WorkOrder.State.PLANNED
    )
    return audited_update(planned, state=WorkOrder.State.ISSUED)


def _open_orders(user=None):
    return scope_to_user(WorkOrder.objects.all(), user).filter(state__in=OPEN)


def _with_current_plan(orders):
    """`orders` with their capacitor's current assessment's risk, replace-by date and "read again" word
    (one subquery each, in the same query)."""
    current = Assessment.objects.filter(fitted_capacitor_id=OuterRef("fitted_capacitor_id"), is_current=True)
    return orders.annotate(
        plan_risk=Subquery(current.values("risk")[:1]),
        plan_replace_by=Subquery(current.values("replace_by")[:1]),
        plan_read_again=Subquery(current.values("read_again")[:1]),
    )


def with_plan_now(orders, today: dt.date | None = None) -> list[WorkOrder]:
    """The orders (read by `_with_current_plan`) as a list, each with `plan_now`: in words, what the
    capacitor's current plan asks where it no longer asks for the order's work in its visit (empty
    where it still does, or where there is no current plan); `planning.plan_moved_words` holds the rule."""
    orders = list(orders)
    if not orders:
        return orders
    today = today or timezone.localdate()

    def days(day):
        return np.inf if day is None else (day - today).days

    words = plan_moved_words(
        order_reads_again=[o.kind == WorkOrder.Kind.READ_AGAIN for o in orders],
        order_due_days=[days(o.due_on) for o in orders],
        window_days=[o.window_days for o in orders],
        plan_risk=[o.plan_risk or "" for o in orders],
        plan_read_again=[bool(o.plan_read_again) for o in orders],
        plan_due_days=[days(o.plan_replace_by) for o in orders],
        today=today,
    )
    for order, text in zip(orders, words, strict=True):
        order.plan_now = "" if order.plan_risk is None or order.kind not in CAPACITOR_KINDS else text
    return orders


def _spares(orders) -> dict[tuple, list[dict]]:
    """Parts each visit (day, site id) takes, counted in SQL from each order's stored part (the open
    orders' index alone), then named from the few parts, with what the site holds (`SiteStock`, one
    query) and the shortfall: each `{"code", "quantity", "held", "short"}`."""
    spares: dict[tuple, list[dict]] = {}
    rows = list(
        orders.filter(fitted_capacitor__isnull=False)
        .values_list("due_on", "site_id", "part_id", "part__code")
        .annotate(quantity=Count("id"))
        .order_by("due_on", "site_id", "part__code")
    )
    held = dict.fromkeys({(site_id, part_id) for _, site_id, part_id, _, _ in rows}, 0)
    if held:
        stock = SiteStock.objects.filter(
            site_id__in={site_id for site_id, _ in held}, part_id__in={part_id for _, part_id in held}
        ).values_list("site_id", "part_id", "quantity")
        held.update({(site_id, part_id): quantity for site_id, part_id, quantity in stock})
    for day, site_id, part_id, code, quantity in rows:
        on_site = held[(site_id, part_id)]
        spares.setdefault((day, site_id), []).append(
            {"code": code, "quantity": quantity, "held": on_site, "short": max(quantity - on_site, 0)}
        )
    return spares


def open_visit(site_id: int, day: dt.date, user=None) -> dict:
    """One visit's open orders at a site the user works at: the visit sheet. `orders` is a queryset in
    walking order, to read a page at a time (empty: no such visit); `spares` covers the whole visit."""
    orders = (
        _open_orders(user)
        .filter(site_id=site_id, due_on=day)
        .select_related("motor", "site", "fitted_capacitor__part")
        .order_by(*WALKING_ORDER)
    )
    spares = _spares(orders).get((day, site_id), [])
    return {"day": day, "orders": _with_current_plan(orders), "spares": spares}


# A visit's orders as the technician walks them: the motors' route order, then tag (stored on each order).
WALKING_ORDER = ("route_order", "asset_tag", "id")

# What the work-orders page shows of an order, its motor, site and part: a few of their columns.
LISTED_ORDER_FIELDS = (
    "due_on",
    "window_days",
    "fitted_capacitor_id",
    "site_id",
    "kind",
    "state",
    "reason",
    "motor__asset_tag",
    "motor__location",
    "motor__route_order",
    "site__code",
    "site__name",
    "fitted_capacitor__part__code",
)


def open_visits_page(page_number, user=None, per_page: int = 10, orders_shown: int = 25):
    """A page of open visits (site, day) at the user's sites, soonest first: each with its order
    count, how many are still planned (to issue), its first `orders_shown` orders in walking order (each
    with `plan_now`) and its spares with the site's stock. Seven queries, whatever the number of orders:
    the visits are grouped and counted in SQL, the orders cut per visit by a window function over the
    orders alone (by their stored walking order, from the open orders' index), then the orders shown are
    read with their motors and current plans."""
    orders = _open_orders(user)
    visits = (
        orders.values("due_on", "site_id", "site__code")
        .annotate(count=Count("id"), planned=Count("id", filter=Q(state=WorkOrder.State.PLANNED)))
        .order_by("due_on", "site__code")
    )
    page = Paginator(visits, per_page).get_page(page_number)
    keys = [(v["due_on"], v["site_id"]) for v in page.object_list]
    if not keys:
        return page
    in_page = reduce(or_, (Q(due_on=day, site_id=site_id) for day, site_id in keys))
    position = Window(
        RowNumber(), partition_by=[F("due_on"), F("site_id")], order_by=[F(name).asc() for name in WALKING_ORDER]
    )
    shown = list(
        orders.filter(in_page)
        .annotate(position=position)
        .filter(position__lte=orders_shown)
        .order_by()
        .values_list("id", flat=True)
    )
    listed = with_plan_now(
        _with_current_plan(
            WorkOrder.objects.filter(id__in=shown)
            .select_related("motor", "site", "fitted_capacitor__part")
            .only(*LISTED_ORDER_FIELDS)
            .order_by("due_on", "site__code", *WALKING_ORDER)
        )
    )
    by_visit: dict[tuple, list[WorkOrder]] = {}
    for order in listed:
        by_visit.setdefault((order.due_on, order.site_id), []).append(order)
    spares = _spares(orders.filter(in_page))
    page.object_list = [
        {
            "day": day,
            "site": by_visit[(day, site_id)][0].site,
            "orders": by_visit[(day, site_id)],
            "count": visit["count"],
            "planned": visit["planned"],
            "more": visit["count"] - len(by_visit[(day, site_id)]),
            "spares": spares.get((day, site_id), []),
        }
        for visit, (day, site_id) in zip(page.object_list, keys, strict=True)
    ]
    return page
