"""Work orders from the replacement plan, bundled into site visits."""

from __future__ import annotations

import datetime as dt
import re
from collections import Counter
from dataclasses import dataclass
from functools import reduce
from operator import or_

import numpy as np
import pandas as pd
from django.core.exceptions import ValidationError
from django.core.paginator import Paginator
from django.db import transaction
from django.db.models import BooleanField, Count, Exists, ExpressionWrapper, F, OuterRef, Q, Subquery, Window
from django.db.models.functions import RowNumber
from django.template.defaultfilters import pluralize
from django.utils import timezone

from fleet.audit import audited_bulk_create, audited_bulk_update, audited_update
from fleet.engineering.planning import (
    PLAN_DEFAULT_DAYS,
    PLAN_HORIZON_DAYS,
    WORK_ORDER_MAX_WINDOW_DAYS,
    PlanningSettings,
    bundle_visits,
    day_off_problems,
    plan_moved_words,
    visit_day_problem,
    with_its_motor,
    working_days_near,
    working_visit_days,
)
from fleet.models import Assessment, AuditEntry, FittedCapacitor, Site, SiteDayOff, SiteStock, WorkOrder
from fleet.roles import scope_to_user

from .bulk import storable_ids
from .pages import due_within, in_service_assessments
from .substitutes import count_design_parts, design_parts

KIND_FOR_ROLE = {
    FittedCapacitor.Role.RUN: WorkOrder.Kind.REPLACE_RUN,
    FittedCapacitor.Role.START: WorkOrder.Kind.REPLACE_START,
}
OPEN = list(WorkOrder.OPEN_STATES)
# The kinds of order the plan gives a capacitor: replace it, or read it again first.
CAPACITOR_KINDS = [*KIND_FOR_ROLE.values(), WorkOrder.Kind.READ_AGAIN]


def plan_work_orders(
    *,
    horizon_days: int = PLAN_DEFAULT_DAYS,
    window_days: int = 14,
    user=None,
    site: Site | None = None,
    today: dt.date | None = None,
) -> dict:
    """Create planned orders for capacitors to replace within the horizon.

    A capacitor whose plan says "read it again" (its trend's early crossing has passed, no reading
    since: `planning.read_again`, stored by the refit) gets a "read again" order, any other one a
    replacement; each order carries the plan's reason in words. New orders and the still-planned ones
    are bundled into site visits (one trip per site per window; a motor's two capacitors on one visit where the
    second falls due within `PlanningSettings.same_motor_days` of the first) and dated on their visit's day;
    overdue ones on today. Issued orders are left as they are. Only the sites `user` works at are planned
    (None: every site), and of those only `site` where one is given (the work-orders list kept to one site).

    The planner's decisions hold: a visit the planner moved (`move_visit`) stays moved, every order the
    plan dates on the day it was moved from (new ones too) goes on the day it was moved to, unless that day
    has since become one of the site's days off (the later decision: the plan dates them by its rule); an order the
    planner cancelled is not created again while the plan asks for the same work in the cancelled order's
    visit (`planning.plan_moved_words` says nothing) and that visit's window has not passed.

    Returns counts: `created`; `replanned`, the open orders whose date, window or kind really moved
    (those and the ones whose reason changed are written); `visits`, the visits those orders are in
    (`visit_names`, each as "CST Tue 2027-03-02", soonest first); `open_visits`, every open visit at the
    user's sites after the plan (the work-orders page's count); `kept_cancelled`, capacitors not ordered again;
    `kept_moved`, orders put on a moved visit's day.
    """
    today = today or timezone.localdate()
    due_now = due_within(horizon_days, user, today)
    due = list(
        (due_now if site is None else due_now.filter(site=site)).values_list(
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
    due_ids = np.asarray([d[0] for d in due], np.int64)
    counts = {"created": 0, "replanned": 0, "visits": 0, "visit_names": [], "kept_cancelled": 0, "kept_moved": 0}
    with transaction.atomic():
        # Two plans at once take turns per capacitor (its row locked) and read the open orders
        # after: the second re-dates the orders the first created instead of creating them
        # again (one open order per capacitor and kind).
        locked = FittedCapacitor.objects.select_for_update().filter(pk__any_of=due_ids)
        list(locked.order_by("pk").values_list("pk", flat=True))
        # A capacitor's open order: an issued one is left as it is; a planned one follows the plan
        # (its kind too: "read again" becomes "replace" once a reading shows the capacitor past its limit).
        open_by_capacitor = {}
        for o in WorkOrder.objects.filter(
            fitted_capacitor_id__any_of=due_ids, state__in=OPEN, kind__in=CAPACITOR_KINDS
        ).order_by("state"):  # "issued" before "planned": an issued order wins
            open_by_capacitor.setdefault(o.fitted_capacitor_id, o)
        cancelled = _cancelled_orders(due_ids, today)
        replace_by = pd.Series([d[4] for d in due], dtype=object)
        motor_first_by = replace_by.groupby(pd.Series([d[1] for d in due], dtype="int64")).transform("min")
        visit_as_due = dict(
            zip(due_ids.tolist(), _visit_as_due_days(zip(replace_by, motor_first_by, strict=True), today), strict=True)
        )
        was = {o.pk: (o.due_on, o.window_days, o.kind, o.moved_from, o.reason) for o in open_by_capacitor.values()}
        items, new_orders, replanned, not_again = [], [], [], []
        for fitted_capacitor_id, motor_id, site_id, role, replace_by, risk, reason, reread in due:
            existing = open_by_capacitor.get(fitted_capacitor_id)
            if existing is not None and existing.state == WorkOrder.State.ISSUED:
                continue
            order = existing or WorkOrder(motor_id=motor_id, fitted_capacitor_id=fitted_capacitor_id, created_by=user)
            order.kind = _plan_kind(role, reread)
            order.reason = f"{risk}: {reason}"[: WorkOrder._meta.get_field("reason").max_length]
            if existing is None and fitted_capacitor_id in cancelled:
                not_again.append(
                    (
                        cancelled[fitted_capacitor_id],
                        order.kind,
                        risk,
                        reread,
                        replace_by,
                        visit_as_due[fitted_capacitor_id],
                    )
                )
            items.append((site_id, (max(replace_by, today) - today).days, order))
            (replanned if existing else new_orders).append(order)
        kept = _still_cancelled(not_again, today)
        if kept:
            items = [item for item in items if item[2].fitted_capacitor_id not in kept]
            new_orders = [o for o in new_orders if o.fitted_capacitor_id not in kept]
        counts["kept_cancelled"] = len(kept)
        if items:
            days_off = days_off_by_site({i[0] for i in items}, today)
            _, visit_day = bundle_visits(
                np.array([i[0] for i in items]),
                np.array([i[1] for i in items]),
                window_days,
                today=today,
                weekmask=PlanningSettings().working_days,
                days_off_by_site=days_off,
                motor=np.array([i[2].motor_id for i in items]),
                same_motor_days=PlanningSettings().same_motor_days,
            )
            # A move onto a day made a day off since is let go: the plan dates those orders by its rule.
            moves = {
                (site_id, was_on): day
                for (site_id, was_on), day in _moved_visits({i[0] for i in items}, today).items()
                if day not in days_off.get(site_id, {})
            }
            for (site_id, _, order), day in zip(items, visit_day, strict=True):
                planned_on = today + dt.timedelta(days=int(day))
                moved_to = moves.get((site_id, planned_on))
                if moved_to is not None:
                    order.due_on, order.moved_from = moved_to, planned_on
                elif order.moved_from is not None and order.pk and was[order.pk][0] == planned_on:
                    # The plan now dates it where the planner moved it (a day off added on the day it was
                    # moved from): the record of the move stays, for when that day is a working day again.
                    moved_to = planned_on
                else:
                    order.due_on, order.moved_from = planned_on, None
                order.window_days = window_days
                counts["kept_moved"] += moved_to is not None
            changed = [o for o in replanned if (o.due_on, o.window_days, o.kind, o.moved_from, o.reason) != was[o.pk]]
            replanned = [o for o in changed if (o.due_on, o.window_days, o.kind) != was[o.pk][:3]]
            audited_bulk_create(new_orders)
            audited_bulk_update(changed, ["due_on", "window_days", "kind", "moved_from", "reason"])
            counts["created"], counts["replanned"] = len(new_orders), len(replanned)
            touched = _visits_of(items, new_orders + replanned)
            counts["visits"] = len(touched)
            codes = dict(Site.objects.filter(id__in={site_id for site_id, _ in touched}).values_list("id", "code"))
            counts["visit_names"] = [
                f"{codes[site]} {day:%a %Y-%m-%d}" for day, site in sorted((d, s) for s, d in touched)
            ]
    listed = open_orders(user) if site is None else open_orders(user).filter(site=site)
    counts["open_visits"] = listed.values("due_on", "site_id").distinct().count()
    counts["site_code"] = None if site is None else site.code
    return counts


def _plan_kind(role: str, read_again: bool) -> str:
    """The order the plan gives a capacitor: read it again first, or replace it (its role's kind)."""
    return WorkOrder.Kind.READ_AGAIN if read_again else KIND_FOR_ROLE[role]


def _visits_of(items, orders) -> set[tuple]:
    """The visits (site id, day) that `orders` (some of the plan's `items`) are in."""
    written = {id(o) for o in orders}
    return {(site_id, order.due_on) for site_id, _, order in items if id(order) in written}


def _cancelled_orders(fitted_capacitor_ids, today: dt.date) -> dict[int, WorkOrder]:
    """Each capacitor's latest order the planner cancelled whose visit's window has not passed."""
    latest = {}
    for order in WorkOrder.objects.filter(
        fitted_capacitor_id__any_of=fitted_capacitor_ids,
        state=WorkOrder.State.CANCELLED,
        kind__in=CAPACITOR_KINDS,
        due_on__gte=today - dt.timedelta(days=WORK_ORDER_MAX_WINDOW_DAYS),
    ).order_by("closed_at", "id"):
        if order.due_on + dt.timedelta(days=order.window_days) >= today:
            latest[order.fitted_capacitor_id] = order
    return latest


def _still_cancelled(candidates, today: dt.date) -> set[int]:
    """The capacitors whose cancelled order the plan asks for again, same work in the same visit: the planner's
    cancellation holds for them (`planning.plan_moved_words`, the rule that says where an open order is no longer
    what the plan asks, its window judged as for an open order: `window_start_days`). Each candidate is (cancelled
    order, the plan's kind, risk, read again, replace-by date, days to the day the plan's visits take it as due,
    `with_its_motor`: a walk found a cancelled order made again where the plan put the capacitor in its motor's
    other capacitor's visit)."""
    if not candidates:
        return set()
    words = plan_moved_words(
        order_reads_again=[o.kind == WorkOrder.Kind.READ_AGAIN for o, *_ in candidates],
        order_due_days=window_start_days([o for o, *_ in candidates], today),
        window_days=[o.window_days for o, *_ in candidates],
        plan_risk=[risk for _, _, risk, *_ in candidates],
        plan_read_again=[bool(reread) for *_, reread, _, _ in candidates],
        plan_due_days=[(replace_by - today).days for *_, replace_by, _ in candidates],
        plan_visit_days=[visit_day for *_, visit_day in candidates],
        today=today,
        # A cancellation holds however soon the plan now asks for the same work: the planner cancelled it on
        # what the plan asked then, and a new plan must not undo that by bringing it forward.
        order_visit_days=np.full(len(candidates), -np.inf),
    )
    return {
        o.fitted_capacitor_id
        for (o, kind, *_), text in zip(candidates, words, strict=True)
        if not text and o.kind == kind
    }


def _moved_visits(site_ids, today: dt.date) -> dict[tuple, dt.date]:
    """(site id, day the plan had put a visit on) -> the day the planner moved it to, from the open orders
    of moved visits at these sites (a move to a day now past is left to the plan)."""
    moved = WorkOrder.objects.filter(site_id__in=site_ids, state__in=OPEN, moved_from__isnull=False, due_on__gte=today)
    return {(site_id, was): day for site_id, was, day in moved.values_list("site_id", "moved_from", "due_on")}


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


def cancel_order(*, order_id: int, reason: str, user=None) -> WorkOrder:
    """Cancel one open order at a site `user` works at (None: any), keeping it as cancelled with the
    planner's reason, who and when (never deleted: the audit trail and the re-plan read it). Bad input is a
    ValidationError by field: `reason` (required, at most the field's length), `order` (none such open)."""
    reason = (reason or "").strip()
    limit = WorkOrder._meta.get_field("cancel_reason").max_length
    if not reason:
        raise ValidationError({"reason": "Say why it is cancelled (kept with the order, for whoever plans next)."})
    if len(reason) > limit:
        raise ValidationError({"reason": f"The reason takes at most {limit} characters ({len(reason)} given)."})
    with transaction.atomic():
        order = open_orders(user).select_for_update(of=("self",)).filter(pk__in=storable_ids([order_id])).first()
        if order is None:
            closed = (
                scope_to_user(WorkOrder.objects.select_related("closed_by"), user)
                .filter(pk__in=storable_ids([order_id]))
                .first()
            )
            if closed is None:
                raise ValidationError({"order": "That work order is not open at your sites: reload the page."})
            raise ValidationError({"order": f"That work order is not open: it was {closed_words(closed)}."})
        audited_update(
            WorkOrder.objects.filter(pk=order.pk),
            state=WorkOrder.State.CANCELLED,
            closed_at=timezone.now(),
            closed_by=user if user is not None and user.is_authenticated else None,
            cancel_reason=reason,
        )
    order.refresh_from_db()
    return order


SWAP_REASON = "stop-gap {part} fitted against the advice on {day}: fit the design part {design}"


@dataclass(frozen=True)
class SwapOrder:
    """A stop-gap's swap: its open replacement order, whether this call planned it, and the part it brings."""

    order: WorkOrder
    planned_now: bool
    stop_gap: FittedCapacitor
    design: object


def order_swap(*, fitted_capacitor_id: int, user=None, today: dt.date | None = None) -> SwapOrder:
    """Plan the replacement of a stop-gap in service (a capacitor fitted against the advice) with its design part:
    a replacement order on its site's next open visit from today not on one of its days off, or, with none, on the
    first working day `notice_days` ahead that is not one of the site's days off (spares and a trip need the
    notice). Its open replacement order, where it has one already, is the swap (sent twice: one order). Only at a
    site `user` works at. Bad input is a ValidationError on `capacitor`. [trade] a substitute fitted against the
    advice is a temporary repair, replaced with the specified part at the next opportunity."""
    today = today or timezone.localdate()
    with transaction.atomic():
        stop_gap = (
            scope_to_user(FittedCapacitor.objects.all(), user)
            .select_for_update(of=("self",))
            .select_related("part", "motor")
            .filter(pk__in=storable_ids([fitted_capacitor_id]))
            .first()
        )
        if stop_gap is None:
            raise ValidationError({"capacitor": "No such capacitor at your sites: reload the page."})
        if stop_gap.removed_on is not None:
            raise ValidationError({"capacitor": f"It was removed on {stop_gap.removed_on:%Y-%m-%d}: nothing to swap."})
        if not stop_gap.substitute_override:
            raise ValidationError({"capacitor": "It was fitted as the advice allowed: it is no stop-gap to swap."})
        design = design_parts([stop_gap])[stop_gap.id]
        kind = KIND_FOR_ROLE[stop_gap.role]
        existing = WorkOrder.objects.filter(fitted_capacitor=stop_gap, kind=kind, state__in=OPEN).first()
        if existing is not None:
            return SwapOrder(existing, False, stop_gap, design)
        site_id = stop_gap.motor.site_id
        held = days_off_by_site([site_id], today).get(site_id, {})
        # The next open visit on a working day: one on a day made a day off since waits for the planner's move
        # (a walk saw a swap ordered onto a shutdown day the visit's own sheet flagged).
        visit_days = (
            WorkOrder.objects.filter(site_id=site_id, state__in=OPEN, due_on__gte=today)
            .exclude(due_on__in=list(held))
            .order_by("due_on")
            .values_list("due_on", flat=True)
            .distinct()
        )
        day = next(iter(visit_days[:1]), None)
        if day is None:
            ahead = working_visit_days([PlanningSettings().notice_days], today, days_off=sorted(held))
            day = today + dt.timedelta(days=int(ahead[0]))
        reason = SWAP_REASON.format(part=stop_gap.part.code, day=f"{stop_gap.fitted_on:%Y-%m-%d}", design=design.code)
        order = WorkOrder.objects.create(
            motor=stop_gap.motor,
            fitted_capacitor=stop_gap,
            kind=kind,
            due_on=day,
            reason=reason[: WorkOrder._meta.get_field("reason").max_length],
            created_by=user if user is not None and user.is_authenticated else None,
        )
        order.refresh_from_db()  # its site, walking order and part, kept by database triggers
    return SwapOrder(order, True, stop_gap, design)


def closed_words(order: WorkOrder) -> str:
    """How a closed order was closed, by whom and when, in words: "cancelled by alice on 2026-12-03 14:05
    (parts not in yet)", "done, closed by bob on 2026-12-03 14:05" (with `closed_by` read)."""
    who = order.closed_by.get_username() if order.closed_by is not None else "the system"
    when = timezone.localtime(order.closed_at).strftime("%Y-%m-%d %H:%M") if order.closed_at else "an unknown time"
    if order.state == WorkOrder.State.CANCELLED:
        return f"cancelled by {who} on {when}" + (f" ({order.cancel_reason})" if order.cancel_reason else "")
    return f"{order.get_state_display().lower()}, closed by {who} on {when}"


@dataclass(frozen=True)
class VisitMove:
    """What `move_visit` did: `moved` orders put on `to_day`; `already`, the visit was on that day before
    this request (a move sent twice: a double tap, a form sent again; none moved now), moved by `by` on `at`."""

    moved: int
    to_day: dt.date
    already: bool = False
    by: str = ""
    at: str = ""
    joined: int = 0  # open orders the site had on `to_day` already: the two visits became one
    late: tuple = ()  # the moved orders `to_day` puts past their replace-by date (`LateOrder`), soonest date first


@dataclass(frozen=True)
class LateOrder:
    """An order whose visit day is after its capacitor's replace-by date: which motor, which capacitor, the date."""

    asset_tag: str
    capacitor: str  # "run capacitor RUN-10U-450"
    replace_by: dt.date
    late_after: dt.date  # a visit after this day is late for it: the later of `replace_by` and today (`is_late`)


def move_visit(
    *, site_id: int, due_on: dt.date, to_day: dt.date | None, user=None, today: dt.date | None = None
) -> VisitMove:
    """Move a whole visit, every open order of a site on `due_on`, to `to_day` (a working day, not in the
    past, within the plan's reach: `planning.visit_day_problem`), at a site `user` works at (None: any); its
    orders done or cancelled already go with it.
    Each order keeps all else and remembers the day the plan had put it on (`moved_from`, kept through a
    second move), so the next plan keeps the move. Onto a day the site already has a visit, the two become
    one. The orders are locked before they move: two moves at once take turns, and the second finds the
    visit gone. A move of a visit already moved to `to_day` is answered as done (`already`, nothing
    written); one moved elsewhere meanwhile is refused, saying where, by whom and when (`visit_moved_to`).
    Bad input is a ValidationError by field (`to_day`, `visit`)."""
    today = today or timezone.localdate()
    if to_day is None:
        raise ValidationError({"to_day": "Enter the day to move the visit to, e.g. 2026-12-24."})
    problem = visit_day_problem(
        to_day, today, PlanningSettings().working_days, days_off_by_site([site_id], today).get(site_id)
    )
    if not problem and to_day == due_on:
        problem = f"The visit is on {to_day.isoformat()} already: choose another day."
    if problem:
        raise ValidationError({"to_day": problem})
    with transaction.atomic():
        orders = list(
            open_orders(user)
            .select_for_update(of=("self",))
            .filter(site_id__in=storable_ids([site_id]), due_on=due_on)
            .order_by("pk")
        )
        if not orders:
            moved = visit_moved_to(site_id, due_on, user)
            if moved is None:
                raise ValidationError({"visit": "That visit has no open work orders at your sites: reload the page."})
            if moved.to_day == to_day:
                return moved
            raise ValidationError(
                {
                    "visit": f"That visit was moved from {due_on:%a %Y-%m-%d} to {moved.to_day:%a %Y-%m-%d} by "
                    f"{moved.by} on {moved.at} while your page was open: nothing moved. Move it from its "
                    "new day if it should go elsewhere."
                }
            )
        joined = open_orders(user).filter(site_id__in=storable_ids([site_id]), due_on=to_day).count()
        # Its orders done or cancelled already go with it: the visit's sheet and the list still say what was done
        # in it (a walk saw them vanish from both once the visit moved, the old day's address leading to the new).
        closed = list(
            scope_to_user(WorkOrder.objects.all(), user)
            .select_for_update(of=("self",))
            .filter(site_id__in=storable_ids([site_id]), due_on=due_on)
            .exclude(state__in=OPEN)
            .order_by("pk")
        )
        for order in orders + closed:
            order.moved_from = order.moved_from or order.due_on
            order.due_on = to_day
        audited_bulk_update(orders + closed, ["due_on", "moved_from"])
        late = past_replace_by([o.fitted_capacitor_id for o in orders if o.fitted_capacitor_id], to_day, today)
    return VisitMove(moved=len(orders), to_day=to_day, joined=joined, late=tuple(late))


def past_replace_by(fitted_capacitor_ids, day: dt.date, today: dt.date) -> list[LateOrder]:
    """Of these capacitors, those a visit on `day` is late for (`is_late`), soonest replace-by date first, each with
    its motor's tag and its role and part in words. One query; none on or before today."""
    if day <= today:
        return []
    rows = (
        Assessment.objects.filter(
            fitted_capacitor_id__in=storable_ids(fitted_capacitor_ids), is_current=True, replace_by__lt=day
        )
        .select_related("fitted_capacitor__motor", "fitted_capacitor__part")
        .order_by("replace_by", "fitted_capacitor__motor__asset_tag", "fitted_capacitor_id")
    )
    return [
        LateOrder(
            asset_tag=a.fitted_capacitor.motor.asset_tag,
            capacitor=f"{a.fitted_capacitor.get_role_display().lower()} capacitor {a.fitted_capacitor.part.code}",
            replace_by=a.replace_by,
            late_after=max(a.replace_by, today),
        )
        for a in rows
    ]


def tightest_replace_by(site_id: int, day: dt.date, user=None, today: dt.date | None = None) -> LateOrder | None:
    """The open order of a visit whose capacitor's current plan has the soonest replace-by date (a move past
    that date, or past today where it has passed, leaves it late), as a `LateOrder`; None where no order of the
    visit has one. One query."""
    today = today or timezone.localdate()
    # The order found first, its motor and part joined to that one row after: joined to the visit's every order,
    # PostgreSQL scanned all 160,000 fitted capacitors (50 ms on a visit of 750 orders at 100,000 motors).
    soonest = (
        with_current_plan(open_orders(user).filter(site_id__in=storable_ids([site_id]), due_on=day))
        .filter(plan_replace_by__isnull=False)
        .order_by("plan_replace_by", *WALKING_ORDER)
        .values("pk")[:1]
    )
    row = (
        with_current_plan(WorkOrder.objects.filter(pk=Subquery(soonest)))
        .select_related("motor", "fitted_capacitor__part")
        .first()
    )
    if row is None:
        return None
    capacitor = row.fitted_capacitor
    return LateOrder(
        asset_tag=row.motor.asset_tag,
        capacitor=f"{capacitor.get_role_display().lower()} capacitor {capacitor.part.code}",
        replace_by=row.plan_replace_by,
        late_after=max(row.plan_replace_by, today),
    )


CLOSED_VISIT_SHOWN = 100  # a closed visit's orders listed at most (a visit holds tens)


def closed_visit(site_id: int, day: dt.date, user=None) -> dict:
    """A visit with no open order left (each done or cancelled): its closed orders in walking order, each with
    how it was closed in words (`closed_words`), at most CLOSED_VISIT_SHOWN, and how many there are. A printed
    sheet or a bookmark of it then says what became of the visit, not that it never was."""
    orders = (
        scope_to_user(WorkOrder.objects.all(), user)
        .filter(site_id=site_id, due_on=day)
        .exclude(state__in=OPEN)
        .select_related("motor", "fitted_capacitor__part", "closed_by")
        .order_by(*WALKING_ORDER)
    )
    listed = list(orders[: CLOSED_VISIT_SHOWN + 1])
    fitted = _fitted_by_replacements(listed)
    for order in listed:
        order.closed_words = closed_words(order)
        successor = fitted.get(order.id)
        if successor is not None:  # the part that went in, which may not be the one the order named
            stop_gap = ", a stop-gap against the advice" if successor.substitute_override else ""
            order.closed_words = f"{successor.part.code} fitted{stop_gap}; {order.closed_words}"
    count = len(listed) if len(listed) <= CLOSED_VISIT_SHOWN else orders.count()
    return {"day": day, "orders": listed[:CLOSED_VISIT_SHOWN], "count": count}


def _fitted_by_replacements(orders) -> dict[int, FittedCapacitor]:
    """For each order closed by a replacement, the capacitor fitted in its place when the one it named was removed
    (its motor and role, fitted on the removal day): a replacement order done, or a "read again" one closed on the
    day its capacitor was removed ("past its limit: record the replacement"). One query for the lot."""
    done = [
        order
        for order in orders
        if order.state == WorkOrder.State.DONE
        and order.fitted_capacitor is not None
        and order.fitted_capacitor.removed_on is not None
        and (
            order.kind in KIND_FOR_ROLE.values()
            or order.closed_at is not None
            and timezone.localdate(order.closed_at) == order.fitted_capacitor.removed_on
        )
    ]
    if not done:
        return {}
    fitted = FittedCapacitor.objects.filter(
        motor_id__in={order.fitted_capacitor.motor_id for order in done},
        fitted_on__in={order.fitted_capacitor.removed_on for order in done},
    ).select_related("part")
    by_position = {(f.motor_id, f.role, f.fitted_on): f for f in fitted}
    found = {}
    for order in done:
        removed = order.fitted_capacitor
        successor = by_position.get((removed.motor_id, removed.role, removed.removed_on))
        if successor is not None and successor.pk != removed.pk:
            found[order.id] = successor
    return found


def visit_moved_to(site_id: int, due_on: dt.date, user=None, *, closed_too: bool = False) -> VisitMove | None:
    """Where a visit a planner moved off `due_on` is now, from the newest move of its open orders in the
    audit trail (who, when; the orders' `moved_from` keeps the plan's day, not the day of a second move),
    else from an open order the plan had put on that day (`moved_from`, no trail: who and when unknown);
    None where no open order at the site was moved off that day. `closed_too`: its orders done or cancelled
    since count as well (an old address of a visit moved, then closed, leads to what became of it). Reads
    the site's moved orders within a move's reach of `due_on` (a visit moves at most the plan's horizon,
    `PLAN_HORIZON_DAYS`, ahead: years of closed moved orders are not read) and their entries: a few rows."""
    reach = dt.timedelta(days=PLAN_HORIZON_DAYS[1])
    rows = (
        (scope_to_user(WorkOrder.objects.all(), user) if closed_too else open_orders(user))
        .filter(
            site_id__in=storable_ids([site_id]),
            moved_from__isnull=False,
            due_on__range=(due_on - reach, due_on + reach),
        )
        .exclude(due_on=due_on)
        .order_by("due_on")
        .values_list("pk", "due_on", "moved_from")
    )
    moved, plan_day = {}, []
    for pk, day, moved_from in rows:
        moved[pk] = day
        if moved_from == due_on:
            plan_day.append(day)
    if not moved:
        return _redated_to(site_id, due_on, user, closed_too=closed_too)
    entries = AuditEntry.objects.filter(
        model=WorkOrder._meta.label_lower,
        object_id__in=[str(pk) for pk in moved],
        action=AuditEntry.Action.UPDATE,
        changes__has_key="due_on",
    ).order_by("-at", "-id")
    for entry in entries:
        if entry.changes["due_on"][0] == due_on.isoformat():
            return VisitMove(
                moved=0,
                to_day=moved[int(entry.object_id)],
                already=True,
                by=entry.username or "the system",
                at=timezone.localtime(entry.at).strftime("%Y-%m-%d %H:%M"),
            )
    if plan_day:
        return VisitMove(moved=0, to_day=plan_day[0], already=True, by="a planner", at="an earlier day")
    return _redated_to(site_id, due_on, user, closed_too=closed_too)


def orders_taken_off(due_on: dt.date):
    """The audit trail's updates that took a work order off `due_on`, newest first (index
    `order_taken_off_day`)."""
    return AuditEntry.objects.filter(
        model=WorkOrder._meta.label_lower,
        action=AuditEntry.Action.UPDATE,
        changes__due_on__0=due_on.isoformat(),
    ).order_by("-at", "-id")


def _redated_to(site_id: int, due_on: dt.date, user=None, *, closed_too: bool = False) -> VisitMove | None:
    """Where a new plan re-dated the orders of a visit on `due_on` (no planner moved them: the plan's own
    re-dating, which keeps no `moved_from`), from the audit trail's newest entries that took an order off that
    day (a bookmarked or printed visit address answered "nothing here"); None where none did. Two queries: the
    entries (a few dozen newest), then the open orders of the site among them."""
    entries = list(orders_taken_off(due_on).values_list("object_id", "username", "at")[:50])
    if not entries:
        return None
    orders = (scope_to_user(WorkOrder.objects.all(), user) if closed_too else open_orders(user)).filter(
        site_id__in=storable_ids([site_id]), pk__in=[int(object_id) for object_id, _, _ in entries]
    )
    now_on = dict(orders.exclude(due_on=due_on).values_list("pk", "due_on"))
    for object_id, username, at in entries:
        if int(object_id) in now_on:
            return VisitMove(
                moved=0,
                to_day=now_on[int(object_id)],
                already=True,
                by=f"a new plan run by {username}" if username else "a new plan",
                at=timezone.localtime(at).strftime("%Y-%m-%d %H:%M"),
            )
    return None


def move_choices(
    site_id: int, due_on: dt.date, today: dt.date | None = None, days_off: dict | None = None
) -> list[dt.date]:
    """The working days next to a visit on `due_on` that `move_visit` takes (`planning.working_days_near`),
    the site's days off skipped (`days_off_by_site`, read here unless given from a day no later than today)."""
    today = today or timezone.localdate()
    days_off = days_off_by_site([site_id], today) if days_off is None else days_off
    return working_days_near(due_on, today, weekmask=PlanningSettings().working_days, days_off=days_off.get(site_id))


def days_off_by_site(site_ids, today: dt.date) -> dict[int, dict[dt.date, str]]:
    """The days off (`SiteDayOff`) of the sites `site_ids` from `today` to the plan's reach: site id to
    {day: name}. One query; a site without any is left out."""
    found: dict[int, dict[dt.date, str]] = {}
    rows = SiteDayOff.objects.filter(
        site_id__in=storable_ids(site_ids),
        day__range=(today, today + dt.timedelta(days=PLAN_HORIZON_DAYS[1])),
    ).values_list("site_id", "day", "name")
    for site_id, day, name in rows:
        found.setdefault(site_id, {})[day] = name
    return found


def open_orders(user=None):
    """The open (planned or issued) orders at the sites `user` works at (None: every site)."""
    return scope_to_user(WorkOrder.objects.all(), user).filter(state__in=OPEN)


# A listed order's capacitor's current plan's replace-by date, in the same query.
CURRENT_REPLACE_BY = Assessment.objects.filter(
    fitted_capacitor_id=OuterRef("fitted_capacitor_id"), is_current=True
).values("replace_by")[:1]


def visit_state_words(planned: int, issued: int, done: int = 0) -> str:
    """A visit's state in words, from its open orders still planned and issued and its orders done already: the
    one rule of the work-orders list and the visit sheet ("planned, not issued yet" tells a technician the
    planner may still move or cancel it)."""
    if planned and issued:
        words = f"{issued} issued, {planned} planned, not issued yet"
    elif planned:
        words = "planned, not issued yet"
    else:
        words = "issued"
    return f"{words}; {done} more done already" if done else words  # the count before them is of open orders


@dataclass(frozen=True)
class ReplaceNowUnordered:
    """Capacitors to replace now with no open work order (`replace_now_without_order`)."""

    count: int  # the plan orders these at the next "create work orders from the plan"
    kept_cancelled: int  # and these it does not: the planner cancelled their order (`_still_cancelled`)
    horizon_days: int = PLAN_DEFAULT_DAYS  # the reach the page's button plans with


def replace_now_without_order(user=None, today: dt.date | None = None, site: Site | None = None) -> ReplaceNowUnordered:
    """Capacitors in service at the user's sites (at `site` alone where one is given) whose current plan says
    "replace now" and that have no open work order: the work-orders page and the dashboard say how many, beside
    the button that orders them. Those whose
    order the planner cancelled, which the plan does not order again (`plan_work_orders`), are counted apart, so
    the note goes once the button has done what it can. Counted in SQL over the current assessments (an EXISTS on
    the open orders' unique index a row); only those with an order cancelled within a visit window's reach are read
    (a few rows, whatever the fleet), with one query for their cancelled orders and one for those orders' sites'
    days off where any are."""
    today = today or timezone.localdate()
    open_order = WorkOrder.objects.filter(fitted_capacitor_id=OuterRef("fitted_capacitor_id"), state__in=OPEN)
    recently_cancelled = WorkOrder.objects.filter(
        fitted_capacitor_id=OuterRef("fitted_capacitor_id"),
        state=WorkOrder.State.CANCELLED,
        kind__in=CAPACITOR_KINDS,
        due_on__gte=today - dt.timedelta(days=WORK_ORDER_MAX_WINDOW_DAYS),  # as `_cancelled_orders` reads them
    )
    in_service = in_service_assessments(user) if site is None else in_service_assessments(user).filter(site=site)
    unordered = in_service.filter(risk=Assessment.Risk.REPLACE_NOW).exclude(Exists(open_order)).order_by()
    with_cancelled = list(
        unordered.filter(Exists(recently_cancelled))
        .annotate(motor_first_by=motor_first_replace_by("fitted_capacitor__motor_id"))
        .values_list(
            "fitted_capacitor_id", "fitted_capacitor__role", "risk", "read_again", "replace_by", "motor_first_by"
        )
    )
    cancelled = _cancelled_orders([row[0] for row in with_cancelled], today) if with_cancelled else {}
    candidates = [
        (cancelled[capacitor_id], _plan_kind(role, reread), risk, reread, replace_by, visit_day)
        for (capacitor_id, role, risk, reread, replace_by, _), visit_day in zip(
            with_cancelled, _visit_as_due_days([(row[4], row[5]) for row in with_cancelled], today), strict=True
        )
        if capacitor_id in cancelled
    ]
    kept = len(_still_cancelled(candidates, today))
    return ReplaceNowUnordered(count=unordered.count() - kept, kept_cancelled=kept)


def motor_first_replace_by(motor_ref: str) -> Subquery:
    """The earliest replace-by date of the current assessments of a motor's capacitors in service (`motor_ref`,
    the outer query's motor id), for `with_its_motor`."""
    return Subquery(
        Assessment.objects.filter(
            fitted_capacitor__motor_id=OuterRef(motor_ref),
            fitted_capacitor__removed_on__isnull=True,
            is_current=True,
            replace_by__isnull=False,
        )
        .order_by("replace_by")
        .values("replace_by")[:1]
    )


def _visit_as_due_days(replace_by_and_motor_first, today: dt.date) -> np.ndarray:
    """Days from `today` to the day the plan's visits take each capacitor as due (`with_its_motor`), from
    (its replace-by date, its motor's earliest); inf where it has none."""

    def days(day):
        return np.inf if day is None else float((max(day, today) - today).days)

    pairs = list(replace_by_and_motor_first)
    own = np.array([days(by) for by, _ in pairs], float)
    first = np.array([days(first) for _, first in pairs], float)
    return with_its_motor(own, first, PlanningSettings().same_motor_days)


def with_current_plan(orders, today: dt.date | None = None):
    """`orders` with their capacitor's current assessment's risk, replace-by date and "read again" word
    (one subquery each, in the same query), the earliest replace-by date of its motor's capacitors
    (`plan_motor_first_by`), and `plan_late`, the visit late for it (`late_order`)."""
    current = Assessment.objects.filter(fitted_capacitor_id=OuterRef("fitted_capacitor_id"), is_current=True)
    today = today or timezone.localdate()
    return orders.annotate(
        plan_risk=Subquery(current.values("risk")[:1]),
        plan_replace_by=Subquery(CURRENT_REPLACE_BY),
        plan_read_again=Subquery(current.values("read_again")[:1]),
        plan_motor_first_by=motor_first_replace_by("motor_id"),
    ).annotate(plan_late=ExpressionWrapper(late_order(today, F("plan_replace_by")), output_field=BooleanField()))


def late_order(today: dt.date, replace_by=None) -> Q:
    """The one rule of a late work order, in SQL: its visit day is after its capacitor's current replace-by date
    (`replace_by`, an expression; the current assessment's by default) and after today. A date that passed since
    the plan was made (a "replace now" planned last week) leaves a visit today on time: none can come sooner.
    `is_late` is the same rule for one order in Python."""
    replace_by = Subquery(CURRENT_REPLACE_BY) if replace_by is None else replace_by
    return Q(due_on__gt=today) & Q(due_on__gt=replace_by)


def is_late(due_on: dt.date, replace_by: dt.date | None, today: dt.date) -> bool:
    """`late_order` for one visit day: after the replace-by date and after today."""
    return replace_by is not None and due_on > max(replace_by, today)


READ_FOR_WORDS = "read for work order {}"  # in a reason: the "read again" order whose reading asked for this one
READ_FOR_ORDER = re.compile(re.escape(f"({READ_FOR_WORDS})").replace(r"\{\}", r"(\d+)"))  # whole: not cut short


def with_read_for(orders, user=None) -> list[WorkOrder]:
    """The orders as a list, each with `read_for`: the "read again" order its reason names ("read for work
    order N", `replace_after_reading_again`) as {"id", "site_code", "day"} of its visit, for the page to link;
    None where the reason names none, or one outside the user's sites. One query where any reason names one."""
    orders = list(orders)
    named = {order.pk: int(m.group(1)) for order in orders if (m := READ_FOR_ORDER.search(order.reason or ""))}
    visits = {}
    if named:
        visits = {
            pk: {"id": pk, "site_code": code, "day": day}
            for pk, code, day in scope_to_user(WorkOrder.objects.all(), user)
            .filter(pk__in=storable_ids(set(named.values())))
            .values_list("pk", "site__code", "due_on")
        }
    for order in orders:
        order.read_for = visits.get(named.get(order.pk))
    return orders


def with_parts_to_bring(orders) -> list[WorkOrder]:
    """The orders as a list, each with `bring_part`: for an order on a stop-gap (a capacitor fitted against the
    advice), the design part its replacement brings (`design_parts`), as the capacitor's label names it; None for
    the rest, whose own part is the one to bring. One query where any order is on a stop-gap."""
    orders = list(orders)
    stop_gaps = [
        o.fitted_capacitor_id for o in orders if o.fitted_capacitor_id and o.fitted_capacitor.substitute_override
    ]
    designs = {}
    if stop_gaps:
        fitted = FittedCapacitor.objects.select_related("part").in_bulk(stop_gaps)
        designs = {
            pk: part for pk, part in design_parts(list(fitted.values())).items() if part.id != fitted[pk].part_id
        }
    for order in orders:
        order.bring_part = designs.get(order.fitted_capacitor_id)
    return orders


def window_start_days(orders, today: dt.date, days_off: dict | None = None) -> np.ndarray:
    """Days from `today` to where each order's visit window starts, as the plan judges whether it still asks
    for the order's work in that visit (`plan_moved_words`): from the day the plan gave the visit (`moved_from`,
    where a planner moved it earlier: replacing before its date is no reason to cancel it), carried over the
    days off work right after it (a weekend, the site's days off: a visit the plan opened on one of them went
    back to the working day before with what fell due within the window of the day it opened). One query for
    the sites' days off (none where the caller read them already, `days_off_by_site` from a day no later than
    any order's); numpy's business days per site, not per order."""
    planned_on = [max(o.due_on, o.moved_from or o.due_on) for o in orders]
    planned_day = np.array(planned_on, "datetime64[D]")
    site = np.array([o.site_id for o in orders])
    off = days_off if days_off is not None else days_off_by_site(set(site.tolist()), min(planned_on))
    weekmask = PlanningSettings().working_days
    next_working = np.busday_offset(planned_day, 1, roll="forward", weekmask=weekmask)
    for site_id, held in off.items():  # a loop over the few sites with days off, not over orders
        here = site == site_id
        next_working[here] = np.busday_offset(
            planned_day[here], 1, roll="forward", weekmask=weekmask, holidays=sorted(held)
        )
    days_off_after = (next_working - planned_day).astype(int) - 1
    return (planned_day - np.datetime64(today, "D")).astype(int) + days_off_after


def with_plan_now(orders, today: dt.date | None = None, days_off: dict | None = None) -> list[WorkOrder]:
    """The orders (read by `with_current_plan`) as a list, each with `plan_now`: in words, what the
    capacitor's current plan asks where it no longer asks for the order's work in its visit (empty
    where it still does, or where there is no current plan); `planning.plan_moved_words` holds the rule, the
    order's window starting where `window_start_days` says (a walk found an order marked "plan now" by the plan
    run that made it). A replacement order on a stop-gap has none: the stop-gap itself is its reason, whatever its
    wear (`order_swap`). `days_off`: the orders' sites' days off, if read already (`window_start_days`)."""
    orders = list(orders)
    if not orders:
        return orders
    today = today or timezone.localdate()
    words = plan_moved_words(
        order_reads_again=[o.kind == WorkOrder.Kind.READ_AGAIN for o in orders],
        order_due_days=window_start_days(orders, today, days_off),
        window_days=[o.window_days for o in orders],
        plan_risk=[o.plan_risk or "" for o in orders],
        plan_read_again=[bool(o.plan_read_again) for o in orders],
        plan_due_days=[np.inf if o.plan_replace_by is None else (o.plan_replace_by - today).days for o in orders],
        today=today,
        order_visit_days=[(o.due_on - today).days for o in orders],
        plan_visit_days=_visit_as_due_days([(o.plan_replace_by, o.plan_motor_first_by) for o in orders], today),
    )
    for order, text in zip(orders, words, strict=True):
        swap = (
            order.kind in KIND_FOR_ROLE.values()
            and order.fitted_capacitor_id
            and order.fitted_capacitor.substitute_override
        )
        order.plan_now = "" if order.plan_risk is None or order.kind not in CAPACITOR_KINDS or swap else text
    return orders


def _spares(orders, visits) -> dict[tuple, list[dict]]:
    """Parts each visit (day, site id) of `visits` takes, counted in SQL from each order's stored part (the
    open orders' index alone), then named from the few parts, with what the site holds (`SiteStock`, one
    query) and the shortfall: each `{"code", "quantity", "read_again", "held", "earlier", "left", "short",
    "short_if_below"}`. The site's stock goes to its open visits in date order: `earlier` is what its earlier open
    visits take of the part, `left` what the stock leaves for this visit, `short` what the replacements lack
    ([trade] spares are drawn from one store visit after visit; our rule: the earliest visit first). A read-again
    order takes a part in case (`read_again` of `quantity`), needed only if the capacitor reads below its limit:
    `short_if_below` is the shortfall if every one does (a walk found five read-again orders counted in a visit's
    "9 short", a purchase the plan may not need)."""
    if not visits:
        return {}
    wanted = set(visits)
    counted = orders.filter(
        fitted_capacitor__isnull=False,
        site_id__in={site_id for _, site_id in wanted},
        due_on__lte=max(day for day, _ in wanted),
    )
    counts, again, codes = Counter(), Counter(), {}
    for day, site_id, part_id, code, quantity, read_again in (
        counted.values_list("due_on", "site_id", "part_id", "part__code")
        .annotate(quantity=Count("id"), read_again=Count("id", filter=Q(kind=WorkOrder.Kind.READ_AGAIN)))
        .order_by()
    ):
        counts[((day, site_id), part_id)] = quantity
        again[((day, site_id), part_id)] = read_again
        codes[part_id] = code
    # A stop-gap's replacement brings its design part (one query for the few stop-gaps, one more where any).
    stop_gaps = counted.filter(
        fitted_capacitor__substitute_override=True, fitted_capacitor__removed_on__isnull=True
    ).select_related("fitted_capacitor__part")
    brought = count_design_parts(counts, (((o.due_on, o.site_id), o.fitted_capacitor) for o in stop_gaps))
    codes.update({part_id: part.code for part_id, part in brought.items()})
    rows = sorted(
        (
            (day, site_id, part_id, codes[part_id], quantity)
            for ((day, site_id), part_id), quantity in counts.items()
            if quantity > 0
        ),
        key=lambda row: (row[0], row[1], row[3]),
    )
    held = dict.fromkeys({(site_id, part_id) for _, site_id, part_id, _, _ in rows}, 0)
    if held:
        stock = SiteStock.objects.filter(
            site_id__in={site_id for site_id, _ in held}, part_id__in={part_id for _, part_id in held}
        ).values_list("site_id", "part_id", "quantity")
        held.update({(site_id, part_id): quantity for site_id, part_id, quantity in stock})
    taken = dict.fromkeys(held, 0)
    spares: dict[tuple, list[dict]] = {}
    for day, site_id, part_id, code, quantity in rows:
        on_site, earlier = held[(site_id, part_id)], taken[(site_id, part_id)]
        taken[(site_id, part_id)] += quantity
        if (day, site_id) not in wanted:
            continue
        left = max(on_site - earlier, 0)
        read_again = min(again[((day, site_id), part_id)], quantity)  # a stop-gap's brings its design part
        spares.setdefault((day, site_id), []).append(
            {
                "code": code,
                "quantity": quantity,
                "read_again": read_again,
                "held": on_site,
                "earlier": earlier,
                "left": left,
                "short": max(quantity - read_again - left, 0),
                "short_if_below": max(quantity - left, 0),
            }
        )
    return spares


def open_visit(site_id: int, day: dt.date, user=None) -> dict:
    """One visit's open orders at a site the user works at: the visit sheet. `orders` is a queryset in
    walking order, to read a page at a time (empty: no such visit); `spares` covers the whole visit."""
    orders = (
        open_orders(user)
        .filter(site_id=site_id, due_on=day)
        .select_related("motor", "site", "fitted_capacitor__part")
        .order_by(*WALKING_ORDER)
    )
    spares = _spares(open_orders(user), [(day, site_id)]).get((day, site_id), [])
    return {"day": day, "orders": with_current_plan(orders), "spares": spares}


# A visit's orders as the technician walks them: the motors' route order, then tag (stored on each order).
WALKING_ORDER = ("route_order", "asset_tag", "id")

# What the work-orders page shows of an order, its motor, site and part: a few of their columns.
LISTED_ORDER_FIELDS = (
    "due_on",
    "window_days",
    "moved_from",  # the plan's own day of an order moved earlier (`with_plan_now`)
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
    "fitted_capacitor__removed_on",  # a read-again order in service links to the reading form
    "fitted_capacitor__part__code",
    "fitted_capacitor__substitute_override",  # a stop-gap's order names the design part to bring
)


CANCELLED_SHOWN_DAYS = 30  # the work-orders page lists the orders cancelled this long ago or later
CANCELLED_SHOWN = 20


def recently_cancelled(user=None, days: int = CANCELLED_SHOWN_DAYS, limit: int = CANCELLED_SHOWN, site=None) -> list:
    """The orders cancelled in the last `days` at the user's sites (at `site` alone, given one), newest first (at
    most `limit`; one query, and one more where a stop-gap's order is among them): what was cancelled, from which
    visit, why, by whom and when, for the planner to look back on; a stop-gap's with the design part it was to
    bring (`with_parts_to_bring`)."""
    since = timezone.now() - dt.timedelta(days=days)
    return with_parts_to_bring(
        scope_to_user(WorkOrder.objects.all(), user)
        .filter(state=WorkOrder.State.CANCELLED, closed_at__gte=since, **({} if site is None else {"site": site}))
        .select_related("motor", "site", "closed_by", "fitted_capacitor__part")
        .order_by("-closed_at", "-id")[:limit]
    )


def open_visits_page(page_number, user=None, per_page: int = 10, orders_shown: int = 25, site=None):
    """A page of open visits (site, day) at the user's sites (at `site` alone, given one), soonest first: each with
    its order count, how many are still planned (to issue), its first `orders_shown` orders in walking order (each
    with `plan_now`), its spares with the site's stock, and the name of the site's day off it falls on (a day
    made a day off after the visit was dated; empty where none), its state in words (`visit_state_words`, its
    orders done already counted too) and how many of its orders are past their replace-by date (`late`: the
    visit's day after the capacitor's current plan's date). Nine queries, whatever the number of orders:
    the visits are grouped and counted in SQL (the lateness by a subquery a row), the done orders of the page's
    visits counted in one more, the orders cut per visit by a window function over the
    orders alone (by their stored walking order, from the open orders' index), then the orders shown are
    read with their motors and current plans."""
    orders = open_orders(user)
    if site is not None:
        orders = orders.filter(site=site)
    visits = (
        orders.values("due_on", "site_id", "site__code")
        .annotate(
            count=Count("id"),
            planned=Count("id", filter=Q(state=WorkOrder.State.PLANNED)),
            late=Count("id", filter=late_order(timezone.localdate())),
        )
        .order_by("due_on", "site__code")
    )
    page = Paginator(visits, per_page).get_page(page_number)
    keys = [(v["due_on"], v["site_id"]) for v in page.object_list]
    if not keys:
        return page
    in_page = reduce(or_, (Q(due_on=day, site_id=site_id) for day, site_id in keys))
    done = {
        (row["due_on"], row["site_id"]): row["done"]
        for row in scope_to_user(WorkOrder.objects.all(), user)
        .filter(in_page, state=WorkOrder.State.DONE)
        .values("due_on", "site_id")
        .annotate(done=Count("id"))
        .order_by()
    }
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
    # Read once for the visits' names of days off and the orders' windows: every order is dated on its visit's day.
    days_off = days_off_by_site({site_id for _, site_id in keys}, min(day for day, _ in keys))
    listed = with_parts_to_bring(
        with_plan_now(
            with_current_plan(
                WorkOrder.objects.filter(id__in=shown)
                .select_related("motor", "site", "fitted_capacitor__part")
                .only(*LISTED_ORDER_FIELDS)
                .order_by("due_on", "site__code", *WALKING_ORDER)
            ),
            days_off=days_off,
        )
    )
    by_visit: dict[tuple, list[WorkOrder]] = {}
    for order in listed:
        by_visit.setdefault((order.due_on, order.site_id), []).append(order)
    spares = _spares(orders, keys)
    page.object_list = [
        {
            "day": day,
            "day_off": days_off.get(site_id, {}).get(day, ""),
            "site": by_visit[(day, site_id)][0].site,
            "orders": by_visit[(day, site_id)],
            "count": visit["count"],
            "planned": visit["planned"],
            "late": visit["late"],
            "state": visit_state_words(
                visit["planned"], visit["count"] - visit["planned"], done.get((day, site_id), 0)
            ),
            "more": visit["count"] - len(by_visit[(day, site_id)]),
            "spares": spares.get((day, site_id), []),
        }
        for visit, (day, site_id) in zip(page.object_list, keys, strict=True)
    ]
    return page


DAY_OFF_SHOWN_PAST_DAYS = 30  # the days-off page lists the last month's too, as the work-orders page its cancellations


def site_days_off(site_id: int, today: dt.date | None = None):
    """A site's days off from a month ago on, by date."""
    today = today or timezone.localdate()
    since = today - dt.timedelta(days=DAY_OFF_SHOWN_PAST_DAYS)
    return SiteDayOff.objects.filter(site_id=site_id, day__gte=since).order_by("day")


def add_day_off(*, site_id: int, day: dt.date | None, name: str, today: dt.date | None = None) -> dict:
    """Store a day off at a site, so that no plan dates a visit on it and no visit is moved onto it.
    Refused by field: no day, a day in the past or past the plan's reach, no name, a day already off.
    Returns the open visit already on that day ({"orders": n}; n 0 where there is none), for the planner
    to move."""
    today = today or timezone.localdate()
    name = (name or "").strip()
    errors = {}
    if day is None:
        errors["day"] = "Enter the day off, e.g. 2026-12-25."
    elif problem := day_off_problems([day], today, PlanningSettings().working_days)[0]:
        errors["day"] = f"{day:%A %Y-%m-%d}: {problem}."
    if not name:
        errors["name"] = "Say what the day is, e.g. 'public holiday' or 'shutdown'."
    elif len(name) > SiteDayOff._meta.get_field("name").max_length:
        errors["name"] = f"At most {SiteDayOff._meta.get_field('name').max_length} characters."
    if "day" not in errors:
        held = SiteDayOff.objects.filter(site_id=site_id, day=day).first()
        if held is not None:
            errors["day"] = f"{day:%a %Y-%m-%d} is a day off at this site already ({held.name})."
    if errors:
        raise ValidationError(errors)
    with transaction.atomic():
        if SiteDayOff.objects.select_for_update().filter(site_id=site_id, day=day).exists():  # added meanwhile
            raise ValidationError({"day": f"{day:%a %Y-%m-%d} is a day off at this site already."})
        SiteDayOff.objects.create(site_id=site_id, day=day, name=name)
    visits = open_visits_on([(site_id, day)])
    return {"orders": visits[0]["orders"] if visits else 0}


def open_visits_on(site_days, user=None) -> list[dict]:
    """The open visits (planned or issued orders) on the given (site id, day) pairs, at the sites `user`
    works at (None: every site): each its site's id and code, its day and its open orders, by day and site.
    The rule of "a visit is on that day" for a day made a day off, on the days-off page or by an import, which
    the planner then moves. One query (the open orders of the pairs' sites and span of days, by visit)."""
    wanted = {(int(site_id), day) for site_id, day in site_days}
    if not wanted:
        return []
    days = [day for _, day in wanted]
    visits = (
        open_orders(user)
        .filter(site_id__in=storable_ids({site_id for site_id, _ in wanted}), due_on__range=(min(days), max(days)))
        .values("site_id", "site__code", "due_on")
        .annotate(orders=Count("id"))
        .order_by("due_on", "site__code")
    )
    return [
        {"site_id": v["site_id"], "site_code": v["site__code"], "day": v["due_on"], "orders": v["orders"]}
        for v in visits
        if (v["site_id"], v["due_on"]) in wanted
    ]


def remove_day_off(*, site_id: int, day_off_id: int) -> SiteDayOff | None:
    """Remove one day off of a site (None where it is not one of the site's: `removed_before` says whether it was)."""
    day_off = SiteDayOff.objects.filter(site_id=site_id, pk__in=storable_ids([day_off_id])).first()
    if day_off is not None:
        day_off.delete()
    return day_off


def removed_before(*, site_code: str, day_off_id: int) -> bool:
    """Whether `day_off_id` was a day off of the site `site_code` that is removed (a removal sent twice), by the
    audit trail: its deletion, the entry naming the site's code first (`SiteDayOff.__str__`)."""
    return (
        bool(storable_ids([day_off_id]))
        and AuditEntry.objects.filter(
            model="fleet.sitedayoff",
            object_id=str(day_off_id),
            action=AuditEntry.Action.DELETE,
            object_repr__startswith=f"{site_code} ",
        ).exists()
    )


def open_read_again_order(fitted_capacitor_id: int) -> WorkOrder | None:
    """The capacitor's open "read again" order (the soonest), which a reading answers: the reading form names it."""
    return (
        WorkOrder.objects.filter(
            fitted_capacitor_id=fitted_capacitor_id, kind=WorkOrder.Kind.READ_AGAIN, state__in=OPEN
        )
        .order_by("due_on", "id")
        .first()
    )


def open_replacement_order(fitted_capacitor_id: int) -> WorkOrder | None:
    """The capacitor's open replacement order (the soonest), which recording its replacement closes: the
    replacement form, reached from that order, starts at the planned-replacement reason."""
    return (
        WorkOrder.objects.filter(
            fitted_capacitor_id=fitted_capacitor_id, kind__in=list(KIND_FOR_ROLE.values()), state__in=OPEN
        )
        .order_by("due_on", "id")
        .first()
    )


def open_orders_by_capacitor(fitted_capacitor_ids) -> dict[int, list[WorkOrder]]:
    """The open orders of these capacitors, by capacitor id, soonest visit first, each with `bring_part`
    (`with_parts_to_bring`): the motor page lists them beside each capacitor, so whoever scanned its label sees
    what the visit asks of it and which part to bring."""
    orders = with_parts_to_bring(
        WorkOrder.objects.filter(fitted_capacitor_id__in=list(fitted_capacitor_ids), state__in=OPEN)
        .select_related("fitted_capacitor")
        .order_by("due_on", "id")
    )
    found: dict[int, list[WorkOrder]] = {}
    for order in orders:
        found.setdefault(order.fitted_capacitor_id, []).append(order)
    return found


def after_reading_again_words(reading) -> str:
    """What became of a capacitor's visit once the reading for its "read again" order is saved, for the form's
    message: the replacement order the refit added to the visit (`replace_after_reading_again`) with the plan's
    reason (a reading below the limit, or one above it whose trend crosses it soon), none needed, or the refit
    still to judge it (on separate workers it may not have run yet)."""
    replacement = (
        WorkOrder.objects.filter(
            fitted_capacitor_id=reading.fitted_capacitor_id, kind__in=list(KIND_FOR_ROLE.values()), state__in=OPEN
        )
        .order_by("due_on")
        .first()
    )
    if replacement is not None:  # the reading below its limit, or the trend through it crossing soon
        return (
            f" With it the plan asks for a replacement: work order {replacement.id}, visit of "
            f"{replacement.due_on:%Y-%m-%d}. Why: {replacement.reason}."
        )
    judged = (
        Assessment.objects.filter(
            fitted_capacitor_id=reading.fitted_capacitor_id, is_current=True, newest_reading_id__gte=reading.id
        )
        .values_list("id", "replace_by")
        .first()
    )
    if judged is not None:
        _, replace_by = judged
        return " The refit judged the reading: no replacement is due within the visit." + _replace_while_isolated(
            replace_by
        )
    return " The refit is judging the reading: a replacement it calls for joins the visit (reload the visit sheet)."


def _replace_while_isolated(replace_by: dt.date | None) -> str:
    """Words for a capacitor just read whose replacement falls due soon after its visit: within the days that
    bundle a motor's second capacitor into one isolation (`PlanningSettings.same_motor_days`), replacing it now
    saves isolating and discharging it again for a second visit (a walk: read on a read-again order, then
    ordered for a new visit 34 days later). [trade] a motor isolated for one job has the next due one done
    while it is (common practice of the trade, no single source)."""
    if replace_by is None:
        return ""
    days = (replace_by - timezone.localdate()).days
    if days > PlanningSettings().same_motor_days:
        return ""
    return (
        f" Its replacement falls due by {replace_by:%Y-%m-%d}, in {days} day{pluralize(days)}: while it is isolated, "
        "replacing it now saves isolating it again for another visit (record the replacement)."
    )


def replace_after_reading_again(assessments, now: dt.datetime) -> int:
    """A capacitor read for its "read again" order whose new assessment still asks for a replacement within
    that order's visit (above its limit, but its trend crosses it now; or read below it) gets a replacement order
    in the same visit, with the plan's reason: the reading closed the order, and the visit sheet the technician
    stands at would otherwise lose the capacitor until the planner plans again. Planned, or issued where the visit
    is issued (a walk: a later plan re-dated a planned follow-up to another visit, off the issued visit's sheet).
    `assessments`: the refit's new rows (fitted_capacitor_id, risk, replace_by, read_again, reason). Only
    read-again orders closed within the visit's window before `now`, in a visit not past its window, with no
    order given the capacitor since (a planner's cancel of the follow-up stands), for a capacitor in service.
    One query where no new assessment asks for a replacement soon; four where some do. Returns the orders
    created. The new order is dated on the visit's day, or on the plan's replace-by day where that comes sooner
    (a defect seen on the reading is to be replaced today, not a week on at its visit), never before today."""
    today = timezone.localdate(now)
    replace_by = pd.to_datetime(assessments["replace_by"]).to_numpy("datetime64[D]")
    furthest = np.datetime64(today + dt.timedelta(days=WORK_ORDER_MAX_WINDOW_DAYS), "D")
    soon = ~assessments["read_again"].to_numpy(bool) & ~np.isnat(replace_by) & (replace_by <= furthest)
    if not soon.any():
        return 0
    plan = zip(assessments["risk"][soon], replace_by[soon].astype(object), assessments["reason"][soon], strict=True)
    asks = dict(zip(assessments["fitted_capacitor_id"][soon], plan, strict=True))
    read_for = (
        WorkOrder.objects.filter(
            fitted_capacitor_id__any_of=np.asarray(list(asks), np.int64),
            kind=WorkOrder.Kind.READ_AGAIN,
            state=WorkOrder.State.DONE,
            closed_at__gte=now - dt.timedelta(days=WORK_ORDER_MAX_WINDOW_DAYS),
            due_on__gte=today - dt.timedelta(days=WORK_ORDER_MAX_WINDOW_DAYS),
            fitted_capacitor__removed_on__isnull=True,
        )
        .select_related("fitted_capacitor")
        .order_by("fitted_capacitor_id", "-closed_at")
    )
    latest = {}
    for order in read_for:
        latest.setdefault(order.fitted_capacitor_id, order)
    wanted = {
        capacitor_id: order
        for capacitor_id, order in latest.items()
        if asks[capacitor_id][1] <= order.due_on + dt.timedelta(days=order.window_days)
        and order.due_on + dt.timedelta(days=order.window_days) >= today
    }
    if not wanted:
        return 0
    given_since = set(
        WorkOrder.objects.filter(fitted_capacitor_id__any_of=np.asarray(list(wanted), np.int64))
        .filter(reduce(or_, (Q(fitted_capacitor_id=c, created_at__gt=o.closed_at) for c, o in wanted.items())))
        .values_list("fitted_capacitor_id", flat=True)
    )
    # Visits issued to the technicians: a follow-up on its visit's day is issued with it, so a new plan, which
    # re-dates planned orders, does not take it off the sheet the technician there works from.
    issued_visits = set(
        WorkOrder.objects.filter(state=WorkOrder.State.ISSUED)
        .filter(reduce(or_, (Q(site_id=o.site_id, due_on=o.due_on) for o in wanted.values())))
        .values_list("site_id", "due_on")
    )
    limit = WorkOrder._meta.get_field("reason").max_length
    due_on = {  # on the visit's day, or sooner where the plan asks for it sooner (a defect seen: today)
        capacitor_id: max(today, min(order.due_on, asks[capacitor_id][1])) for capacitor_id, order in wanted.items()
    }
    new_orders = [
        WorkOrder(
            motor_id=order.motor_id,
            site_id=order.site_id,
            fitted_capacitor_id=capacitor_id,
            kind=KIND_FOR_ROLE[order.fitted_capacitor.role],
            due_on=due_on[capacitor_id],
            state=(
                WorkOrder.State.ISSUED
                if due_on[capacitor_id] == order.due_on and (order.site_id, order.due_on) in issued_visits
                else WorkOrder.State.PLANNED
            ),
            window_days=order.window_days,
            reason=f"{asks[capacitor_id][0]}: {asks[capacitor_id][2]} ({READ_FOR_WORDS.format(order.id)})"[:limit],
        )
        for capacitor_id, order in wanted.items()
        if capacitor_id not in given_since
    ]
    audited_bulk_create(new_orders)
    return len(new_orders)
