"""Work orders from the replacement plan, bundled into site visits."""

from __future__ import annotations

import datetime as dt
from itertools import groupby

import numpy as np
from django.db import transaction
from django.utils import timezone

from fleet.audit import audited_bulk_create, audited_bulk_update, audited_update
from fleet.engineering.planning import bundle_visits
from fleet.models import Assessment, WorkOrder
from fleet.roles import scope_to_user

KIND_FOR_ROLE = {"run": WorkOrder.Kind.REPLACE_RUN, "start": WorkOrder.Kind.REPLACE_START}
OPEN = [WorkOrder.State.PLANNED, WorkOrder.State.ISSUED]


def plan_work_orders(*, horizon_days: int = 90, window_days: int = 14, user=None, today: dt.date | None = None) -> dict:
    """Create planned orders for capacitors to replace within the horizon.

    New orders and the still-planned ones are bundled into site visits (one
    trip per site per window) and dated on their visit's day; overdue ones on
    today. Issued orders are left as they are. Only the sites `user` works at are
    planned (None: every site). Returns counts: `replanned` counts only the open
    orders whose date or window really moved, and only those are written.
    """
    today = today or timezone.localdate()
    due = list(
        scope_to_user(Assessment.objects.all(), user)
        .filter(
            is_current=True,
            installation__removed_on__isnull=True,
            replace_by__lte=today + dt.timedelta(days=horizon_days),
        )
        .values_list(
            "installation_id",
            "installation__motor_id",
            "installation__motor__site_id",
            "installation__role",
            "replace_by",
            "risk",
            "limit_source",
            "p10_on",
        )
    )
    open_orders = {
        (o.installation_id, o.kind): o
        for o in WorkOrder.objects.filter(installation_id__in=[d[0] for d in due], state__in=OPEN)
    }
    was = {o.pk: (o.due_on, o.window_days) for o in open_orders.values()}
    items, new_orders, replanned = [], [], []
    for installation_id, motor_id, site_id, role, replace_by, risk, limit, p10 in due:
        kind = KIND_FOR_ROLE[role]
        existing = open_orders.get((installation_id, kind))
        if existing is not None and existing.state == WorkOrder.State.ISSUED:
            continue
        when = max(replace_by, today)
        order = existing or WorkOrder(
            motor_id=motor_id,
            installation_id=installation_id,
            kind=kind,
            created_by=user,
            reason=f"{risk}: {limit} limit" + (f", early crossing {p10:%Y-%m-%d}" if p10 else ""),
        )
        items.append((site_id, (when - today).days, order))
        (replanned if existing else new_orders).append(order)
    if not items:
        return {"created": 0, "replanned": 0, "visits": 0}
    visit, visit_day = bundle_visits(np.array([i[0] for i in items]), np.array([i[1] for i in items]), window_days)
    for (_, _, order), day in zip(items, visit_day, strict=True):
        order.due_on = today + dt.timedelta(days=int(day))
        order.window_days = window_days
    replanned = [o for o in replanned if (o.due_on, o.window_days) != was[o.pk]]
    with transaction.atomic():
        audited_bulk_create(new_orders)
        audited_bulk_update(replanned, ["due_on", "window_days"])
    return {"created": len(new_orders), "replanned": len(replanned), "visits": len(set(visit.tolist()))}


def issue_visit(*, site_id: int, due_on: dt.date, user=None) -> int:
    """Hand a visit's planned orders to the technicians: only at a site `user` works at (None: any)."""
    planned = scope_to_user(WorkOrder.objects.all(), user).filter(
        motor__site_id=site_id, due_on=due_on, state=WorkOrder.State.PLANNED
    )
    return audited_update(planned, state=WorkOrder.State.ISSUED)


def open_visits(site_id: int | None = None, day: dt.date | None = None, user=None):
    """Open orders at the user's sites grouped into visits (site, day), soonest first, with each visit's spares."""
    orders = (
        scope_to_user(WorkOrder.objects.all(), user)
        .filter(state__in=OPEN)
        .select_related("motor__site", "installation__part")
        .order_by("due_on", "motor__site__code", "motor__route_order", "motor__asset_tag")
    )
    if site_id is not None:
        orders = orders.filter(motor__site_id=site_id)
    if day is not None:
        orders = orders.filter(due_on=day)
    visits = []
    for (day, site), group in groupby(orders, key=lambda o: (o.due_on, o.motor.site)):
        group = list(group)
        spares: dict[str, int] = {}
        for order in group:
            if order.installation_id:
                spares[order.installation.part.code] = spares.get(order.installation.part.code, 0) + 1
        visits.append({"day": day, "site": site, "orders": group, "spares": sorted(spares.items())})
    return visits
