"""List pages and the API list read a page at a time: their query count does not grow with the fleet.

Each list page is counted at two fleet sizes (5 and 40 motors, with readings, refits through the real
writer, risk changes, removed capacitors, work orders, refit runs and import jobs) and must issue the
same number of queries [derived: a list that reads a bounded page of stored rows issues a fixed number
of queries]. The stored facts the lists read (each assessment's in-service flag, each motor's last
reading, each assessment's risk history) are checked against the rows they summarise.
"""

from __future__ import annotations

import datetime as dt
import itertools
from collections import Counter

import pytest
from django.contrib.auth.models import Group
from django.db import connection
from django.db.models import Count
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, ImportJob, Motor, RefitRun, WorkOrder
from fleet.roles import TECHNICIAN
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.lifedata import refresh_life_fits
from fleet.services.pages import LISTED_CAPACITORS, replacement_plan
from fleet.services.readings import replace_capacitor
from fleet.services.register import set_route_order
from fleet.services.workorders import plan_work_orders
from fleet.views.field import LABELS_PAGE_SIZE
from tests.factories import (
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_reading,
    make_site,
    make_user,
    quarterly_readings,
)

pytestmark = pytest.mark.django_db

WORN = [4.0, 3.8, 3.7, 3.6]  # 4 uF +/-5 %: 10 % low, replace now
SOUND = [4.0, 4.0, 3.99, 3.99]
START = timezone.make_aware(dt.datetime(2025, 1, 5, 9))


class Fleet:
    """Our own small fleet on two sites, grown in steps; every motor has what a list page shows."""

    def __init__(self):
        self.sites = [make_site("NORTH"), make_site("SOUTH")]
        self.part = make_part(code="RUN-4U")
        self.serial = itertools.count()
        self.motors = 0

    def grow_to(self, motors: int, user) -> None:
        new, reread = [], []
        for _ in range(motors - self.motors):
            n = next(self.serial)
            motor = make_motor(site=self.sites[n % 2], route_order=n, with_circuit=False)
            if n % 5 in (0, 3):  # a capacitor in its history, removed before the present one was fitted
                make_fitted_capacitor(
                    motor=motor,
                    part=self.part,
                    fitted_on=dt.date(2019, 1, 1),
                    removed_on=dt.date(2021, 12, 31),
                    removal_reason="failed",
                )
            fitted_capacitor = make_fitted_capacitor(motor=motor, part=self.part, fitted_on=dt.date(2022, 1, 1))
            quarterly_readings(fitted_capacitor, START, WORN if n % 3 == 0 else SOUND)
            if n % 2 == 0:  # read this quarter
                make_reading(fitted_capacitor, capacitance_uf=3.99 if n % 3 else 3.6)
            new.append(fitted_capacitor)
            if n % 4 == 2:  # read this quarter at NORTH, and asked to read again
                reread.append(fitted_capacitor)
        refit_fitted_capacitors([i.id for i in new])
        # Some were judged sound before this refit: their risk level changed this week.
        changed = [i.id for i in new[::4]]
        Assessment.objects.filter(fitted_capacitor_id__in=changed, is_current=True).update(risk="sound")
        refit_fitted_capacitors(changed, force=True)
        plan_work_orders(horizon_days=365)
        for fitted_capacitor in reread:  # asked to read again (issued: a new plan leaves it as it is)
            WorkOrder.objects.update_or_create(
                fitted_capacitor=fitted_capacitor,
                kind=WorkOrder.Kind.READ_AGAIN,
                state__in=WorkOrder.OPEN_STATES,
                defaults={"state": WorkOrder.State.ISSUED},
                create_defaults={
                    "motor_id": fitted_capacitor.motor_id,
                    "state": WorkOrder.State.ISSUED,
                    "due_on": timezone.localdate(),
                },
            )
        RefitRun.objects.create(state=RefitRun.State.DONE, total=len(new), done=len(new))
        ImportJob.objects.create(kind="readings", filename=f"readings-{motors}.csv", content=b"", created_by=user)
        refresh_life_fits()  # as the nightly task does
        self.motors = motors


LIST_PAGES = {
    "home": lambda: reverse("home"),
    "dashboard": lambda: reverse("dashboard"),
    "plan": lambda: reverse("plan") + "?days=365",
    "plan, one site": lambda: reverse("plan") + "?days=365&site=NORTH",
    "refits": lambda: reverse("refits"),
    "work orders": lambda: reverse("work_orders"),
    "route": lambda: reverse("route", args=["NORTH"]),
    "route, due only": lambda: reverse("route", args=["NORTH"]) + "?show=due",
    "labels": lambda: reverse("labels", args=["NORTH"]),
    "imports": lambda: reverse("imports"),
    "visit sheet": lambda: reverse("visit_sheet", args=["NORTH", _first_visit_day("NORTH")]),
    "life data": lambda: reverse("life_data") + "?part=RUN-4U",
    "stand-in parts": lambda: reverse("stand_in_parts"),
    "API assessments": lambda: reverse("api_assessments"),
    "API assessments, due soon": lambda: reverse("api_assessments") + "?risk=replace+now",
}


# Pages that summarise the fleet by design rather than list it: what the 40-motor fleet's page shows
# (its motors share one design, which its part suits).
SUMMARIES = {"stand-in parts": b'<td class="num">1 of 1</td>'}


def _first_visit_day(site_code: str) -> str:
    from fleet.models import WorkOrder

    return (
        WorkOrder.objects.filter(site__code=site_code)
        .order_by("due_on")
        .values_list("due_on", flat=True)[0]
        .isoformat()
    )


@pytest.fixture
def planner_who_reads(db):
    """A planner who also logs readings (the imports page needs that)."""
    user = make_user("planner")
    user.groups.add(Group.objects.get(name=TECHNICIAN))
    return user


@pytest.mark.parametrize("page", LIST_PAGES)
def test_a_list_pages_query_count_does_not_grow_with_the_fleet(client, planner_who_reads, page):
    client.force_login(planner_who_reads)
    fleet = Fleet()
    counts, bodies = [], []
    for motors in (5, 40):
        fleet.grow_to(motors, planner_who_reads)
        url = LIST_PAGES[page]()
        client.get(url)  # the first request fills per-process caches (content types, permissions)
        with CaptureQueriesContext(connection) as queries:
            response = client.get(url)
        assert response.status_code == 200, response.content[:500]
        counts.append(len(queries))
        bodies.append(response.content)
        # [ours] no query twice in one page (the work-orders page read the user's roles and the sites' days off twice)
        asked = Counter(query["sql"] for query in queries.captured_queries)
        assert [sql for sql, times in asked.items() if times > 1] == [], page
    assert counts[0] == counts[1], f"{page}: {counts[0]} queries at 5 motors, {counts[1]} at 40"
    if page in ("work orders", "visit sheet"):  # each order's replace-by date (and on the list each visit's
        # state and lateness, counted in SQL) is on both fleets' pages: the counts above include them
        assert all(b"<th>Replace by</th>" in body for body in bodies)
        if page == "work orders":
            assert all(b'class="visit-state' in body for body in bodies)
    if page.startswith("route"):  # motors asked to read again are on the page, with their order
        assert b"read again: work order" in bodies[0] and b"read again: work order" in bodies[1]
    if page in SUMMARIES:  # a summary of the fleet's designs: the count is of a real summary
        assert SUMMARIES[page] in bodies[1]
    else:  # the larger fleet is on the page: the count is of a real list
        assert len(bodies[1]) > len(bodies[0])


def test_the_in_service_flag_follows_the_capacitors_removal(planner_who_reads):
    """The flag the plan, the risk counts and the API read is kept by the database on every write path."""
    fleet = Fleet()
    fleet.grow_to(3, planner_who_reads)
    fitted_capacitor = Assessment.objects.filter(is_current=True, risk="replace now").first().fitted_capacitor
    assert Assessment.objects.get(fitted_capacitor=fitted_capacitor, is_current=True).capacitor_in_service
    successor = replace_capacitor(
        fitted_capacitor=fitted_capacitor, part=fleet.part, removed_on=timezone.localdate(), reason="failed"
    )
    assert not Assessment.objects.filter(fitted_capacitor=fitted_capacitor, capacitor_in_service=True).exists()
    plan = set(replacement_plan(horizon_days=3650).values_list("fitted_capacitor_id", flat=True))
    assert fitted_capacitor.id not in plan and successor.id not in plan
    fitted_capacitor.removed_on, fitted_capacitor.removal_reason = None, ""  # an administrator undoes a removal
    successor.delete()
    fitted_capacitor.save()
    assert Assessment.objects.get(fitted_capacitor=fitted_capacitor, is_current=True).capacitor_in_service
    # An assessment written for a capacitor already removed is flagged out of service as it is inserted.
    removed = make_fitted_capacitor(part=fleet.part, fitted_on=dt.date(2022, 1, 1))
    quarterly_readings(removed, START, WORN)
    removed.removed_on, removed.removal_reason = timezone.localdate(), "failed"
    removed.save()
    refit_fitted_capacitors([removed.id])
    assert (
        Assessment.objects.filter(fitted_capacitor=removed).values_list("capacitor_in_service", flat=True).get()
        is False
    )


def test_a_motors_last_reading_is_kept_by_the_database():
    fitted_capacitor = make_fitted_capacitor()
    motor = fitted_capacitor.motor
    assert Motor.objects.get(pk=motor.pk).last_read_at is None
    newest = timezone.now() - dt.timedelta(days=3)
    make_reading(fitted_capacitor, taken_at=newest)
    make_reading(fitted_capacitor, taken_at=newest - dt.timedelta(days=90))  # an older reading, entered late
    assert Motor.objects.get(pk=motor.pk).last_read_at == newest
    later = newest + dt.timedelta(days=1)
    make_reading(fitted_capacitor, taken_at=later)
    assert Motor.objects.get(pk=motor.pk).last_read_at == later
    # Removed that day, then a reading of that day entered: still the motor's newest reading.
    fitted_capacitor.removed_on, fitted_capacitor.removal_reason = later.date(), "failed"
    fitted_capacitor.save()
    removal_day = later + dt.timedelta(minutes=5)
    make_reading(fitted_capacitor, taken_at=removal_day)
    assert Motor.objects.get(pk=motor.pk).last_read_at == removal_day
    # A capacitor moved to another motor (a register correction) takes its readings along.
    other = make_fitted_capacitor(motor=motor, role="start", fitted_on=dt.date(2022, 1, 1))
    make_reading(other, taken_at=removal_day - dt.timedelta(days=30))
    elsewhere = make_motor(site=motor.site)
    FittedCapacitor.objects.filter(pk=fitted_capacitor.pk).update(motor=elsewhere)
    assert Motor.objects.get(pk=motor.pk).last_read_at == removal_day - dt.timedelta(days=30)
    assert Motor.objects.get(pk=elsewhere.pk).last_read_at == removal_day
    FittedCapacitor.objects.filter(pk=other.pk).update(motor=elsewhere)
    assert Motor.objects.get(pk=motor.pk).last_read_at is None


def test_a_work_orders_site_is_its_motors_kept_by_the_database():
    """The stored site the work-orders page groups by: set on insert, on save, and moved with the motor."""
    from fleet.models import WorkOrder

    north, south = make_site("N1"), make_site("S1")
    motor = make_motor(site=north)
    order = WorkOrder.objects.create(motor=motor, kind="inspect", due_on=dt.date(2026, 1, 5))
    assert WorkOrder.objects.get(pk=order.pk).site_id == north.id
    Motor.objects.filter(pk=motor.pk).update(site=south)
    assert WorkOrder.objects.get(pk=order.pk).site_id == south.id
    other = make_motor(site=north)
    order.motor = other
    order.save()  # the instance still holds the old site: the database corrects it
    assert WorkOrder.objects.get(pk=order.pk).site_id == north.id


def test_the_route_pages_keep_the_filter_and_count_every_motor(client, planner_who_reads, monkeypatch):
    monkeypatch.setattr("fleet.views.field.ROUTE_PAGE_SIZE", 2)
    site = make_site("EAST")
    motors = [make_motor(site=site, route_order=n) for n in range(5)]
    read = make_fitted_capacitor(motor=motors[1])
    make_reading(read, taken_at=timezone.now() - dt.timedelta(hours=1))
    client.force_login(planner_who_reads)
    url = reverse("route", args=["EAST"])
    first = client.get(url, {"show": "due"}).content.decode()
    assert "4 of 5 motors still to read" in first
    assert motors[0].asset_tag in first and motors[2].asset_tag in first and motors[1].asset_tag not in first
    assert "?show=due&amp;page=2" in first and "Page 1 of 2" in first
    second = client.get(url, {"show": "due", "page": 2}).content.decode()
    assert motors[3].asset_tag in second and motors[4].asset_tag in second and motors[0].asset_tag not in second


def test_labels_print_a_sheet_at_a_time(client, planner_who_reads):
    site = make_site("WEST")
    motors = [make_motor(site=site, route_order=n) for n in range(LABELS_PAGE_SIZE + 1)]
    client.force_login(planner_who_reads)
    first = client.get(reverse("labels", args=["WEST"])).content.decode()
    assert first.count("<svg") == LABELS_PAGE_SIZE and motors[-1].asset_tag not in first
    second = client.get(reverse("labels", args=["WEST"]), {"page": 2}).content.decode()
    assert second.count("<svg") == 1 and motors[-1].asset_tag in second
    # Print prints one sheet: the page says which labels it holds and that the others are on other pages, and the
    # printed sheet says which sheet of how many it is (a walk printed "the site's labels" and got 24 of 110).
    total = LABELS_PAGE_SIZE + 1
    assert f"This page holds labels 1 to {LABELS_PAGE_SIZE} of {total}</b>: Print prints these only" in first
    assert f"WEST labels, sheet 1 of 2: labels 1 to {LABELS_PAGE_SIZE} of {total}" in first
    assert f"WEST labels, sheet 2 of 2: labels {total} to {total} of {total}" in second
    # Each page points the way the other labels are: the first forward, the last back (a review found the last
    # page sending the planner to pages after it).
    assert "on the pages after it (Next, at the foot)" in first
    assert "on the pages before it (Previous, at the foot)" in second


def test_labels_on_one_sheet_say_nothing_of_other_sheets(client, planner_who_reads):
    site = make_site("NORTH")
    make_motor(site=site)
    client.force_login(planner_who_reads)
    page = client.get(reverse("labels", args=["NORTH"])).content.decode()
    assert page.count("<svg") == 1 and "This page holds labels" not in page and "labels, sheet" not in page


def test_the_work_orders_page_lists_a_visits_first_orders_and_counts_them_all(planner_who_reads):
    from fleet.services import workorders

    fleet = Fleet()
    fleet.grow_to(12, planner_who_reads)
    page = workorders.open_visits_page(1, orders_shown=1)
    for visit in page.object_list:
        orders = workorders.open_visit(visit["site"].id, visit["day"])
        assert visit["count"] == orders["orders"].count() == len(orders["orders"])
        assert [o.id for o in visit["orders"]] == [orders["orders"][0].id]
        assert visit["more"] == visit["count"] - 1
        assert visit["spares"] == orders["spares"]
        assert [(s["code"], s["quantity"]) for s in visit["spares"]] == [("RUN-4U", visit["count"])]


def test_the_refits_page_counts_capacitors_read_since_their_assessment():
    """[derived] A finished fleet refit covered every reading saved before it began; a reading saved
    since makes its capacitor stale until its own refit."""
    from fleet.services.refits import stale_count

    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, START, SOUND)
    assert stale_count() == 1  # read, never assessed, and no fleet refit has finished
    refit_fitted_capacitors([fitted_capacitor.id])
    assert stale_count() == 0
    RefitRun.objects.create(kind="fleet", state=RefitRun.State.DONE, total=1, done=1)
    make_reading(fitted_capacitor, capacitance_uf=3.98)
    assert stale_count() == 1
    refit_fitted_capacitors([fitted_capacitor.id])
    assert stale_count() == 0


def _fresh_totals():
    """The figures the stored site and part give, counted afresh through the capacitors and motors."""
    in_service = Assessment.objects.filter(is_current=True, fitted_capacitor__removed_on__isnull=True)
    return {
        "facts": sorted(
            Assessment.objects.values_list("id", "fitted_capacitor__motor__site_id", "fitted_capacitor__part_id")
        ),
        "by_site_and_risk": sorted(
            in_service.values_list("fitted_capacitor__motor__site__code", "risk").annotate(n=Count("id")).order_by()
        ),
        "spares": sorted(
            in_service.filter(replace_by__lte=timezone.localdate() + dt.timedelta(days=365))
            .values_list("fitted_capacitor__part__code")
            .annotate(n=Count("id"))
            .order_by()
        ),
    }


def _stored_totals():
    from fleet.services.dashboard import risk_mix
    from fleet.services.pages import spares_needed

    mix = risk_mix(None)
    return {
        "facts": sorted(Assessment.objects.values_list("id", "site_id", "part_id")),
        "by_site_and_risk": sorted(
            (site, risk, n)
            for site, counts in mix["counts"].items()
            for risk, n in counts.items()
            if n and risk in RISKS
        ),
        "spares": sorted((row["part"].code, row["quantity"]) for row in spares_needed(horizon_days=365)),
    }


RISKS = [choice.value for choice in Assessment.Risk]


def test_each_assessments_stored_site_and_part_stay_true_through_readings_refits_and_replacements(planner_who_reads):
    """[derived] The site and part stored on each assessment (kept by triggers) give the same risk
    counts and spares as a fresh count through the capacitors and motors, after every kind of write."""
    fleet = Fleet()
    fleet.grow_to(8, planner_who_reads)
    assert _stored_totals() == _fresh_totals()
    assert Assessment.objects.filter(site__isnull=True).count() == 0  # the comparison is of real values
    # A reading and its refit: a new current assessment, inserted by the refit's writer.
    worn = Assessment.objects.filter(is_current=True, risk="replace now").first().fitted_capacitor
    make_reading(worn, capacitance_uf=3.5)
    refit_fitted_capacitors([worn.id])
    # A replacement: the old capacitor leaves service, its successor is read and assessed.
    other_part = make_part(code="RUN-4U-B")
    successor = replace_capacitor(
        fitted_capacitor=worn, part=other_part, removed_on=timezone.localdate(), reason="failed"
    )
    quarterly_readings(successor, timezone.now() - dt.timedelta(days=400), SOUND)
    refit_fitted_capacitors([successor.id])
    assert Assessment.objects.get(fitted_capacitor=successor, is_current=True).part_id == other_part.id
    # A motor moves to the other site; a capacitor's part is corrected in the register.
    moved = Motor.objects.filter(site=fleet.sites[0]).exclude(capacitors=worn).first()
    moved.site = fleet.sites[1]
    moved.save()
    corrected = Assessment.objects.filter(is_current=True).exclude(fitted_capacitor=successor).first().fitted_capacitor
    corrected.part = other_part
    corrected.save()
    stored, fresh = _stored_totals(), _fresh_totals()
    assert stored == fresh
    assert {a.fitted_capacitor_id for a in Assessment.objects.filter(part=other_part)} == {successor.id, corrected.id}


def test_a_visit_sheet_lists_a_page_of_orders_and_the_spares_of_the_whole_visit(client, planner_who_reads, monkeypatch):
    from fleet.models import WorkOrder

    monkeypatch.setattr("fleet.views.planning.VISIT_SHEET_PAGE_SIZE", 2)
    fleet = Fleet()
    fleet.grow_to(40, planner_who_reads)
    day = _first_visit_day("NORTH")
    orders = WorkOrder.objects.filter(site__code="NORTH", due_on=day).count()
    assert orders > 2  # the visit has more than a page
    client.force_login(planner_who_reads)
    url = reverse("visit_sheet", args=["NORTH", day])
    first = client.get(url).content.decode()
    assert first.count("&#9744;") == 2 and f"Orders 1 to 2 of {orders}" in first and "page=2" in first
    spares = f'<span class="nowrap">RUN-4U</span></td><td class="num" data-label="To take">{orders}<'
    assert spares in first  # spares for every order
    last = client.get(url, {"page": (orders + 1) // 2}).content.decode()
    assert last.count("&#9744;") == orders - 2 * ((orders - 1) // 2)


def _route_orders() -> tuple[dict, dict]:
    """Each current assessment's stored route order, and its capacitor's motor's route order now."""
    current = Assessment.objects.filter(is_current=True)
    stored = dict(current.values_list("id", "route_order"))
    return stored, dict(current.values_list("id", "fitted_capacitor__motor__route_order"))


def _plan_ordered_through_the_motors() -> list[int]:
    """The plan's order as each request used to compute it: every assessment due joined to its motor
    and site to sort (the capacitor's id breaks the ties the old order left open)."""
    return list(
        Assessment.objects.filter(is_current=True, capacitor_in_service=True, replace_by__isnull=False)
        .order_by(
            "replace_by",
            "fitted_capacitor__motor__site__code",
            "fitted_capacitor__motor__route_order",
            "fitted_capacitor",
        )
        .values_list("id", flat=True)
    )


def test_each_current_assessments_stored_route_order_follows_its_motor_and_orders_the_plan(planner_who_reads):
    """[derived] The route order stored on each current assessment (kept by triggers and sent by the
    refit) equals its capacitor's motor's after every write that moves it, and the plan ordered by it
    lists the capacitors in the order the join through the motors gives."""
    fleet = Fleet()
    fleet.grow_to(12, planner_who_reads)
    stored, fresh = _route_orders()
    assert stored == fresh and None not in stored.values()
    # The planner walks the north site the other way round (the route page's service).
    north = list(Motor.objects.filter(site=fleet.sites[0]).order_by("route_order"))
    set_route_order(site=fleet.sites[0], positions={m.id: str(100 - m.route_order) for m in north})
    stored, fresh = _route_orders()
    assert stored == fresh
    # A reading and its refit: a new current assessment from the refit's writer, which sends the order.
    worn = Assessment.objects.filter(is_current=True, risk="replace now").first().fitted_capacitor
    make_reading(worn, capacitance_uf=3.5)
    refit_fitted_capacitors([worn.id])
    # A capacitor recorded on the wrong motor is corrected in the register.
    moved = Assessment.objects.filter(is_current=True).exclude(fitted_capacitor=worn).last().fitted_capacitor
    moved.motor = make_motor(site=fleet.sites[1], route_order=77, with_circuit=False)
    moved.save()
    # An assessment written without the order (the database looks it up).
    another = Assessment.objects.filter(is_current=True).exclude(fitted_capacitor__in=[worn, moved.pk]).first()
    Assessment.objects.filter(pk=another.pk).update(is_current=False)
    another.pk, another.route_order, another.is_current = None, None, True
    another.save()
    stored, fresh = _route_orders()
    assert stored == fresh and None not in stored.values()
    assert Assessment.objects.get(pk=another.pk).route_order == another.fitted_capacitor.motor.route_order
    plan = list(replacement_plan(horizon_days=3650).values_list("id", flat=True))
    assert plan == _plan_ordered_through_the_motors()
    assert len({day for day in Assessment.objects.filter(pk__in=plan).values_list("replace_by", flat=True)}) < len(plan)


def _work_order_facts() -> tuple[list, list]:
    """Each work order's stored walking order and part, and its motor's and capacitor's now."""
    from fleet.models import WorkOrder

    orders = WorkOrder.objects.order_by("id")
    stored = list(orders.values_list("id", "route_order", "asset_tag", "part_id"))
    fresh = list(orders.values_list("id", "motor__route_order", "motor__asset_tag", "fitted_capacitor__part_id"))
    return stored, fresh


def test_each_work_orders_stored_walking_order_and_part_follow_its_motor_and_capacitor(planner_who_reads):
    """[derived] The route order, tag and part stored on each work order (kept by triggers) equal its
    motor's and capacitor's after every write that moves them, and a visit lists its orders in the
    order the join through the motors gives, with the spares counted through the capacitors."""
    from fleet.models import WorkOrder
    from fleet.services import workorders

    fleet = Fleet()
    fleet.grow_to(12, planner_who_reads)
    stored, fresh = _work_order_facts()
    assert stored == fresh and len(stored) > 2 and all(row[1] is not None and row[2] for row in stored)
    order = WorkOrder.objects.select_related("motor").first()  # read before the route changes below
    north = list(Motor.objects.filter(site=fleet.sites[0]).order_by("route_order"))
    set_route_order(site=fleet.sites[0], positions={m.id: str(7) for m in north})  # ties: the tag decides
    renamed = WorkOrder.objects.filter(site=fleet.sites[0]).exclude(motor=order.motor).order_by("-id")[0].motor
    renamed.asset_tag = "A-" + renamed.asset_tag  # walked first of its visit now, though its order is the newest
    renamed.save()
    corrected = WorkOrder.objects.exclude(fitted_capacitor=None).last().fitted_capacitor
    corrected.part = make_part(code="RUN-4U-B")
    corrected.save()
    order.reason = "edited in the admin"
    order.save()  # writes back every column it read, the old route order too
    assert _work_order_facts()[0] == _work_order_facts()[1]
    visits = workorders.open_visits_page(1, per_page=100, orders_shown=100).object_list
    assert any(visit["orders"][0].motor == renamed and len(visit["orders"]) > 1 for visit in visits)
    for visit in visits:
        by_join = WorkOrder.objects.filter(
            site_id=visit["site"].id, due_on=visit["day"], state__in=workorders.OPEN
        ).order_by("motor__route_order", "motor__asset_tag", "id")
        assert [o.id for o in visit["orders"]] == [o.id for o in by_join]
        parts = by_join.exclude(fitted_capacitor=None).values_list("fitted_capacitor__part__code")
        assert [(s["code"], s["quantity"]) for s in visit["spares"]] == sorted(parts.annotate(n=Count("id")).order_by())
        sheet = workorders.open_visit(visit["site"].id, visit["day"])
        assert [o.id for o in sheet["orders"]] == [o.id for o in by_join] and sheet["spares"] == visit["spares"]


PLAN_ROW_TEMPLATE = """{% for a in rows %}
<tr>
  <td data-label="Motor, capacitor"><a class="nowrap" href="{% url 'motor' a.fitted_capacitor.motor.asset_tag %}">{{ a.fitted_capacitor.motor.asset_tag }}</a><br><span class="muted">{{ a.fitted_capacitor.motor.location }}</span><br><a href="{% url 'fitted_capacitor' a.fitted_capacitor.id %}">{{ a.fitted_capacitor.get_role_display }} <span class="nowrap">{{ a.fitted_capacitor.part.code }}</span></a></td>
  <td data-label="Risk, replace by"><span class="risk risk-{{ a.risk|slugify }}">{{ a.risk }}</span><br><span class="nowrap replace-by">{{ a.replace_by|date:"Y-m-d"|default:"-" }}</span>{% if a.read_again %}<br><span class="muted read-again-first">read again first: its trend date passed</span>{% endif %}{% if a.low_confidence and a.risk != "replace now" %}<br><span class="muted">few readings</span>{% endif %}</td>
  <td class="num" data-label="Trend at last reading (&micro;F)">{{ a.capacitance_now_uf|floatformat:2 }}</td>
  <td data-label="Limit">{{ a.limit_source }}</td>
  <td data-label="Why">{{ a.reason|default:"-"|nowrap_dates }}</td>
  <td data-label="Trend crosses: early / likely"><span class="nowrap">{% if a.p10_on %}{{ a.p10_on|date:"Y-m-d" }}{% if a.p10_on < today %}, past{% endif %}{% elif a.set_aside %}no trend{% else %}beyond{% endif %}</span> / <span class="nowrap">{% if a.p50_on %}{{ a.p50_on|date:"Y-m-d" }}{% if a.p50_on < today %}, past{% endif %}{% elif a.set_aside %}no trend{% else %}beyond{% endif %}</span></td>
  <td data-label="Site">{{ a.fitted_capacitor.motor.site.code }}</td>
</tr>
{% empty %}<tr><td colspan="7">Nothing due in this window.</td></tr>{% endfor %}"""  # noqa: E501


def test_the_plan_rows_written_in_python_are_the_markup_the_template_wrote(planner_who_reads):
    """[derived] The plan table's rows, now written by a template tag, equal what the template loop
    they replaced renders for the same assessments: dates and their dashes, few readings, a reason
    with a date in it and none, markup in a part code and a location escaped, and no rows at all."""
    from django.template import engines

    from fleet.templatetags.fleet_rows import plan_rows

    fleet = Fleet()
    fleet.grow_to(6, planner_who_reads)
    first, second, third = Assessment.objects.filter(is_current=True).order_by("id")[:3]
    Assessment.objects.filter(pk=first.pk).update(low_confidence=True, p50_on=None, reason="")
    Assessment.objects.filter(pk=second.pk).update(p10_on=None, replace_by=None, reason="replace by 2027-03-01 <b>")
    Motor.objects.filter(pk=third.fitted_capacitor.motor_id).update(location="Bay <3 & pumps")
    rows = list(replacement_plan(horizon_days=3650)) + list(
        Assessment.objects.filter(pk=second.pk).prefetch_related(LISTED_CAPACITORS)
    )
    assert len(rows) > 3
    reference = engines["django"].from_string(PLAN_ROW_TEMPLATE)
    today = timezone.localdate()
    assert plan_rows(rows) == reference.render({"rows": rows, "today": today})
    assert plan_rows([]) == reference.render({"rows": [], "today": today})


WORK_ORDER_ROW_TEMPLATE = """{% for order in orders %}<tr>
    <td data-label="Motor"><a href="{% url 'motor' order.motor.asset_tag %}">{{ order.motor.asset_tag }}</a><br><span class="muted">{{ order.motor.location }}</span></td>
    <td data-label="Work">{{ order.get_kind_display }}</td><td data-label="Part">{% if order.fitted_capacitor %}<span class="nowrap">{{ order.fitted_capacitor.part.code }}</span>{% endif %}</td><td data-label="Replace by">{% if order.plan_replace_by %}<span class="replace-by">{{ order.plan_replace_by|day }}</span>{% if order.plan_late %}<br><b class="error-text past-replace-by">the visit is after it</b>{% endif %}{% else %}-{% endif %}</td><td data-label="State">{% if order.state == "planned" %}Planned, not issued yet{% else %}{{ order.get_state_display }}{% endif %}</td><td data-label="Why">{{ order.reason|nowrap_dates }}{% if order.plan_now %}<br><b class="plan-now">{{ order.plan_now|nowrap_dates }}</b>{% endif %}</td></tr>
  {% endfor %}"""  # noqa: E501


def test_the_work_order_rows_written_in_python_are_the_markup_the_template_wrote(planner_who_reads):
    """[derived] A visit's rows, now written by a template tag, equal what the template loop they
    replaced renders: an inspection without a capacitor, a reason with a date and none, markup escaped."""
    from django.template import engines

    from fleet.models import WorkOrder
    from fleet.services import workorders
    from fleet.templatetags.fleet_rows import work_order_rows

    fleet = Fleet()
    fleet.grow_to(6, planner_who_reads)
    WorkOrder.objects.filter(kind=WorkOrder.Kind.READ_AGAIN).delete()
    first = WorkOrder.objects.order_by("id").first()
    WorkOrder.objects.filter(pk=first.pk).update(reason="")
    Motor.objects.filter(pk=first.motor_id).update(location="Bay <3 & pumps")
    WorkOrder.objects.create(
        motor=first.motor, kind=WorkOrder.Kind.INSPECT, due_on=first.due_on, reason="seen 2026-01-05 <b>"
    )
    # One visit late for its capacitor's date: the mark was escaped as text by the tag and no test saw it.
    late = WorkOrder.objects.filter(fitted_capacitor__isnull=False).exclude(pk=first.pk).order_by("id").first()
    WorkOrder.objects.filter(pk=late.pk).update(due_on=late.due_on + dt.timedelta(days=3000))
    visits = workorders.open_visits_page(1, per_page=100).object_list
    orders = [order for visit in visits for order in visit["orders"]]
    assert any(order.fitted_capacitor is None for order in orders) and len(orders) > 2
    assert any(order.plan_late for order in orders)
    reference = engines["django"].from_string(WORK_ORDER_ROW_TEMPLATE)
    assert work_order_rows(orders) == reference.render({"orders": orders})
