"""Work orders as the planner handles them: the spares a site's visits take in turn, cancelling an order,
moving a whole visit, what a plan says it did, a "read again" order's link, the visit page's title."""

import datetime as dt
import html
import re

import pytest
from django.core.exceptions import ValidationError
from django.db import connection
from django.template.loader import render_to_string
from django.test import Client
from django.urls import reverse
from django.utils import timezone

from fleet.models import Assessment, AuditEntry, FittedCapacitor, Reading, Site, SiteStock, WorkOrder
from fleet.services.workorders import (
    after_reading_again_words,
    cancel_order,
    move_visit,
    open_visit,
    open_visits_page,
    orders_taken_off,
    plan_work_orders,
    with_plan_now,
)
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_site, stored_assessment

pytestmark = pytest.mark.django_db

# A Monday three weeks before a Friday that is a public holiday in many countries (our scenario).
MONDAY = dt.date(2026, 12, 7)
HOLIDAY = dt.date(2026, 12, 25)


def _orders(site, part, day, count, state="planned"):
    for _ in range(count):
        capacitor = make_fitted_capacitor(motor=make_motor(site=site), part=part)
        WorkOrder.objects.create(
            motor=capacitor.motor, fitted_capacitor=capacitor, kind="replace_run", due_on=day, state=state
        )


def _due(site, replace_by, count, read_again=False):
    """Capacitors at `site` whose current plan says replace (or read again) by `replace_by`."""
    capacitors = [make_fitted_capacitor(motor=make_motor(site=site)) for _ in range(count)]
    for capacitor in capacitors:
        stored_assessment(capacitor, "due soon", replace_by)
        Assessment.objects.filter(fitted_capacitor=capacitor, is_current=True).update(read_again=read_again)
    return capacitors


def test_a_visits_read_again_orders_take_a_part_in_case_and_are_not_counted_short():
    """A walk: a visit listed 12 START-143U-330 "to take, 9 short", five of the 12 for read-again orders, whose
    capacitor is replaced only if it reads below its limit: the planner would buy parts the plan may not need.
    [ours] they are still taken (in case), said apart, and the shortfall counts the replacements; what it would be
    if every read-again one reads below is said beside it."""
    site = make_site(code="RAG")
    part = make_part(code="START-143U-330")
    day = MONDAY + dt.timedelta(days=3)
    _orders(site, part, day, 7)
    for _ in range(5):
        capacitor = make_fitted_capacitor(motor=make_motor(site=site), part=part)
        WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind="read_again", due_on=day)
    SiteStock.objects.create(site=site, part=part, quantity=3)
    (spare,) = open_visit(site.id, day)["spares"]
    assert (spare["quantity"], spare["read_again"], spare["left"]) == (12, 5, 3)
    assert (spare["short"], spare["short_if_below"]) == (4, 9)


def test_a_sites_stock_goes_to_its_open_visits_in_date_order():
    """The cool store held 2 run capacitors; its 12-10 visit took 6 ("4 short") and its 12-25 visit 2,
    shown as "holds 2, not short": the first visit uses the stock up. [trade] spares come from one site
    store, visit after visit; our rule: the earliest open visit draws first. Another site's visits and
    another part do not count."""
    site, elsewhere = make_site(code="CST"), make_site(code="GH1")
    run, start = make_part(code="RUN-30U-450"), make_part(code="START-143U-330")
    first, second = MONDAY + dt.timedelta(days=3), HOLIDAY
    _orders(site, run, first, 6)
    _orders(site, start, first, 1)
    _orders(site, run, second, 2, state="issued")
    _orders(elsewhere, run, first, 5)
    SiteStock.objects.create(site=site, part=run, quantity=2)
    SiteStock.objects.create(site=site, part=start, quantity=3)
    SiteStock.objects.create(site=elsewhere, part=run, quantity=9)
    visits = {(v["site"].code, v["day"]): v["spares"] for v in open_visits_page(1).object_list}
    assert visits[("CST", first)] == [
        {
            "code": "RUN-30U-450",
            "quantity": 6,
            "read_again": 0,
            "held": 2,
            "earlier": 0,
            "left": 2,
            "short": 4,
            "short_if_below": 4,
        },
        {
            "code": "START-143U-330",
            "quantity": 1,
            "read_again": 0,
            "held": 3,
            "earlier": 0,
            "left": 3,
            "short": 0,
            "short_if_below": 0,
        },
    ]
    later = [
        {
            "code": "RUN-30U-450",
            "quantity": 2,
            "read_again": 0,
            "held": 2,
            "earlier": 6,
            "left": 0,
            "short": 2,
            "short_if_below": 2,
        }
    ]
    assert visits[("CST", second)] == later
    assert visits[("GH1", first)][0]["short"] == 0
    # The later visit alone, on its own page of visits and on its visit sheet, still counts the earlier one.
    one_a_page = [open_visits_page(n, per_page=1).object_list[0] for n in (1, 2, 3)]
    assert [v["spares"] for v in one_a_page if v["day"] == second] == [later]
    assert open_visit(site.id, second)["spares"] == later
    # On the visit sheet: the 2 held all go to the earlier visit, which takes 6 (not "2 held, 6 to earlier
    # visits", which read as if 6 had been handed out of 2).
    sheet = render_to_string("fleet/_visit_spares.html", {"spares": later})
    assert "2 held, all to earlier visits (they take 6)" in sheet and "6 to earlier" not in sheet


def test_the_planner_cancels_an_order_with_a_reason_and_the_plan_does_not_order_it_again(planner):
    """The README promised an open order the plan no longer asks for is "for the planner to cancel or
    keep", with no way to cancel. [trade] a cancelled work order is kept, with why, who and when (never
    deleted). Our rule: the next plan does not order the same work for the same visit again, and says so;
    it orders again when the plan asks for other work or a later visit."""
    today = timezone.localdate()
    site = make_site(code="CAN")
    (capacitor,) = _due(site, today + dt.timedelta(days=10), 1)
    plan_work_orders(horizon_days=90, user=planner, today=today)
    order = WorkOrder.objects.get(fitted_capacitor=capacitor)
    for reason, says in (("  ", "Say why"), ("x" * 201, "at most 200 characters")):
        with pytest.raises(ValidationError) as refused:
            cancel_order(order_id=order.id, reason=reason, user=planner)
        assert says in refused.value.message_dict["reason"][0]
    assert WorkOrder.objects.get(pk=order.pk).state == "planned"
    cancelled = cancel_order(order_id=order.id, reason="motor to be scrapped in January", user=planner)
    assert (cancelled.state, cancelled.cancel_reason, cancelled.closed_by) == (
        "cancelled",
        "motor to be scrapped in January",
        planner,
    )
    assert cancelled.closed_at is not None and WorkOrder.objects.filter(pk=order.pk).exists()
    entry = AuditEntry.objects.get(model="fleet.workorder", object_id=str(order.pk), action="update")
    assert entry.changes["state"] == ["planned", "cancelled"]
    assert entry.changes["cancel_reason"] == [None, "motor to be scrapped in January"]
    with pytest.raises(ValidationError) as twice:
        cancel_order(order_id=order.id, reason="again", user=planner)
    assert "not open" in twice.value.message_dict["order"][0]
    # The planner sees it again on the work-orders page: what, from which visit, why, by whom (a fresh-eyes
    # walk found the reason kept but shown nowhere).
    client = Client()
    client.force_login(planner)
    listed = client.get(reverse("work_orders")).content.decode()
    cancelled_part = listed[listed.index('id="cancelled"') :]
    assert "motor to be scrapped in January" in cancelled_part and capacitor.motor.asset_tag in cancelled_part
    assert planner.username in cancelled_part

    again = plan_work_orders(horizon_days=90, user=planner, today=today)
    assert (again["created"], again["kept_cancelled"]) == (0, 1)
    assert not WorkOrder.objects.filter(fitted_capacitor=capacitor, state__in=["planned", "issued"]).exists()
    # The plan now asks for other work (read it again first): that is a new order.
    Assessment.objects.filter(fitted_capacitor=capacitor, is_current=True).update(read_again=True)
    assert plan_work_orders(horizon_days=90, user=planner, today=today)["created"] == 1
    assert WorkOrder.objects.get(fitted_capacitor=capacitor, state="planned").kind == "read_again"


def test_a_cancel_holds_for_a_capacitor_the_plan_puts_in_its_motors_other_capacitors_visit(planner):
    """A walk: a motor's start capacitor due in 10 days opened a visit, its run capacitor due 25 days later went
    with it (one isolation for both, `PlanningSettings.same_motor_days`); the planner cancelled the run
    capacitor's order, and the next plan made it again on the same visit, as the run capacitor's own date lies
    past the visit's 14-day window; the visit sheet said "plan now: ... replace by" its own date under it.
    [derived] the plan puts it in that visit, so it is the same work in the same visit: the cancel holds."""
    today = timezone.localdate()
    motor = make_motor(site=make_site(code="TWO"))
    electrolytic = make_part(code="START-100U", dielectric="electrolytic", rated_uf=100.0)
    start = make_fitted_capacitor(motor=motor, role="start", part=electrolytic)
    run = make_fitted_capacitor(motor=motor, role="run")
    stored_assessment(start, "due soon", today + dt.timedelta(days=10))
    stored_assessment(run, "watch", today + dt.timedelta(days=35))
    plan_work_orders(horizon_days=90, user=planner, today=today)
    run_order, start_order = (WorkOrder.objects.get(fitted_capacitor=c) for c in (run, start))
    assert run_order.due_on == start_order.due_on  # one visit for both
    sheet = open_visit(motor.site_id, run_order.due_on)
    assert [order.plan_now for order in with_plan_now(sheet["orders"], today)] == ["", ""]

    cancel_order(order_id=run_order.id, reason="run capacitor changed last week by the OEM's fitter", user=planner)
    again = plan_work_orders(horizon_days=90, user=planner, today=today)
    assert (again["created"], again["kept_cancelled"]) == (0, 1)
    assert not WorkOrder.objects.filter(fitted_capacitor=run, state__in=["planned", "issued"]).exists()


def test_a_cancelled_order_is_ordered_again_for_a_later_visit(planner):
    """[derived] The cancellation holds for its visit only: once the plan dates the capacitor past that
    visit's window, the plan orders it again."""
    today = timezone.localdate()
    (capacitor,) = _due(make_site(code="LATER"), today + dt.timedelta(days=10), 1)
    plan_work_orders(horizon_days=90, user=planner, today=today)
    cancel_order(order_id=WorkOrder.objects.get().id, reason="parts not in yet", user=planner)
    stored_assessment(capacitor, "due soon", today + dt.timedelta(days=60))
    counts = plan_work_orders(horizon_days=90, user=planner, today=today)
    assert (counts["created"], counts["kept_cancelled"]) == (1, 0)
    assert WorkOrder.objects.get(state="planned").due_on > today + dt.timedelta(days=24)


def test_a_cancel_on_a_moved_visit_before_days_off_holds_for_the_next_plan(planner):
    """A walk of the demo: a visit on Thu 2026-12-24 (Friday a holiday at its site, then the weekend) held a
    capacitor due Sun 2027-01-10, inside the visit's window carried over those three days off; the planner
    moved the visit to Wednesday and cancelled that capacitor's order, and the next plan ordered it again in
    the same visit. [README] a cancelled order's work is not ordered again while the plan asks the same work
    for the same visit: the cancelled order's window is judged as an open order's (from the day the plan gave
    the visit, over the days off after it), the rule the visit page uses to say "plan now"."""
    from fleet.models import SiteDayOff

    site = make_site(code="EVE")
    SiteDayOff.objects.create(site=site, day=HOLIDAY, name="public holiday")
    eve = HOLIDAY - dt.timedelta(days=1)
    (opening,) = _due(site, HOLIDAY + dt.timedelta(days=2), 1)  # a Sunday: the visit goes back to Thursday
    (late,) = _due(site, dt.date(2027, 1, 10), 1)
    plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {eve}
    move_visit(site_id=site.id, due_on=eve, to_day=eve - dt.timedelta(days=1), user=planner, today=MONDAY)
    cancel_order(order_id=WorkOrder.objects.get(fitted_capacitor=late).id, reason="motor scrapped", user=planner)
    counts = plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert (counts["created"], counts["kept_cancelled"]) == (0, 1)
    assert not WorkOrder.objects.filter(fitted_capacitor=late, state__in=["planned", "issued"]).exists()
    assert WorkOrder.objects.get(fitted_capacitor=opening).state == "planned"


def test_a_visit_moved_onto_a_day_made_a_day_off_later_is_dated_again_by_the_next_plan(planner):
    """A walk of the demo: the planner moved a visit to Wednesday, then made that Wednesday a site shutdown;
    the next plan said "4 orders kept on the day their visit was moved to" and left the visit on the shutdown.
    [trade] no visit on a day the site is shut; ours: the day off, decided later, wins over the move, and the
    plan dates the orders by its rule (here back on the plan's own day), counted as re-dated, not as kept;
    until a plan runs, the work-orders page flags the visit."""
    from fleet.models import SiteDayOff

    site = make_site(code="SHUT")
    thursday = HOLIDAY - dt.timedelta(days=1)
    _due(site, thursday, 2)
    plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    wednesday = thursday - dt.timedelta(days=1)
    move_visit(site_id=site.id, due_on=thursday, to_day=wednesday, user=planner, today=MONDAY)
    assert plan_work_orders(horizon_days=90, user=planner, today=MONDAY)["kept_moved"] == 2
    SiteDayOff.objects.create(site=site, day=wednesday, name="site shutdown")
    # Until then the list of visits says so, not only the visit's own page (the walk found it silent).
    client = Client()
    client.force_login(planner)
    listed = client.get(reverse("work_orders")).content.decode()
    assert "a day off at the site (site shutdown): move it" in listed
    counts = plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert (counts["kept_moved"], counts["replanned"]) == (0, 2)
    assert set(WorkOrder.objects.values_list("due_on", "moved_from")) == {(thursday, None)}


def test_the_planner_moves_a_visit_off_a_holiday_and_the_plan_keeps_the_move(planner):
    """The demo put all three sites' visits on Fri 2026-12-25 (visits skip weekends only) and nothing
    moved them. [trade] a visit is not sent on a public holiday; the planner moves it. Our rules: the whole
    visit moves (every open order, nothing else changes), to a working day not in the past; the next plan
    keeps the move and puts orders it adds to that visit on the new day too."""
    site = make_site(code="XMAS")
    capacitors = _due(site, HOLIDAY, 2)
    plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {HOLIDAY}
    WorkOrder.objects.filter(fitted_capacitor=capacitors[1]).update(state="issued")
    before = {o.pk: (o.kind, o.reason, o.state, o.window_days) for o in WorkOrder.objects.all()}
    saturday, past = dt.date(2026, 12, 19), MONDAY - dt.timedelta(days=1)
    problems = {
        saturday: "is a Saturday: visits are on working days",
        past: "is in the past",
        HOLIDAY: "on 2026-12-25 already",
        MONDAY + dt.timedelta(days=800): "past the plan's reach",
    }
    for day, says in problems.items():
        with pytest.raises(ValidationError) as refused:
            move_visit(site_id=site.id, due_on=HOLIDAY, to_day=day, user=planner, today=MONDAY)
        assert says in refused.value.message_dict["to_day"][0], day
    with pytest.raises(ValidationError) as unknown:
        move_visit(site_id=site.id, due_on=HOLIDAY - dt.timedelta(days=1), to_day=HOLIDAY, user=planner, today=MONDAY)
    assert "no open work orders" in unknown.value.message_dict["visit"][0]
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {HOLIDAY}  # nothing moved half-way

    eve = HOLIDAY - dt.timedelta(days=1)
    assert move_visit(site_id=site.id, due_on=HOLIDAY, to_day=eve, user=planner, today=MONDAY).moved == 2
    orders = list(WorkOrder.objects.all())
    assert {(o.due_on, o.moved_from) for o in orders} == {(eve, HOLIDAY)}
    assert {o.pk: (o.kind, o.reason, o.state, o.window_days) for o in orders} == before
    assert AuditEntry.objects.filter(model="fleet.workorder", action="update", changes__has_key="due_on").count() == 2

    # The plan run again: nothing re-dated, and a capacitor it adds to that visit goes on the new day.
    (added,) = _due(site, HOLIDAY + dt.timedelta(days=3), 1)
    counts = plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert (counts["created"], counts["replanned"], counts["kept_moved"]) == (1, 0, 2)
    assert WorkOrder.objects.get(fitted_capacitor=added).due_on == eve
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {eve}
    # Moved again, it still remembers the plan's day; the plan still keeps it.
    move_visit(site_id=site.id, due_on=eve, to_day=eve - dt.timedelta(days=1), user=planner, today=MONDAY)
    assert set(WorkOrder.objects.values_list("moved_from", flat=True)) == {HOLIDAY}
    assert plan_work_orders(horizon_days=90, user=planner, today=MONDAY)["replanned"] == 0
    # The plan changes (a later replace-by for all): the orders follow the plan, and the move is let go.
    for capacitor in [*capacitors, added]:
        stored_assessment(capacitor, "due soon", HOLIDAY + dt.timedelta(days=30))
    counts = plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert counts["replanned"] == 2 and counts["kept_moved"] == 0
    assert WorkOrder.objects.filter(state="planned", moved_from__isnull=True).count() == 2


def test_the_plans_message_counts_what_the_page_lists(client, planner):
    """ "0 work orders created, 2 re-dated, in 9 site visits" stood over a page of 10 visits: the 9 were
    the visits of the orders the plan looked at. [derived] the message names the visits its new and
    re-dated orders are in, then every open visit the page lists."""
    today = timezone.localdate()
    _due(make_site(code="NEW"), today + dt.timedelta(days=10), 2)
    issued = make_fitted_capacitor(motor=make_motor(site=make_site(code="OLD")))
    WorkOrder.objects.create(
        motor=issued.motor, fitted_capacitor=issued, kind="replace_run", due_on=today, state="issued"
    )
    client.force_login(planner)
    response = client.post(reverse("work_orders"), {"action": "plan", "days": "90"}, follow=True)
    body = response.content.decode()
    listed = len(re.findall(r'<details class="card visit"', body))
    assert listed == 2
    visit = WorkOrder.objects.filter(site__code="NEW").values_list("due_on", flat=True).distinct().get()
    # and names it (a walk: "in 1 site visit" left the planner to search the list for which one).
    assert f"2 work orders created and 0 re-dated, in 1 site visit (NEW {visit:%a %Y-%m-%d}); 2 open site" in body
    body = client.post(reverse("work_orders"), {"action": "plan", "days": "90"}, follow=True).content.decode()
    assert "No work orders created or re-dated; 2 open site visits in all." in body


def test_a_read_again_order_opens_the_reading_form(client, planner, technician):
    """A "Read again; replace if past its limit" order linked its part to "Record a replacement". [trade]
    a suspect reading is confirmed before the capacitor is replaced: the part opens the reading form, and
    the replacement stays one tap away for after the reading. A replacement order still opens the
    replacement."""
    day = timezone.localdate() + dt.timedelta(days=3)
    site = make_site(code="READ")
    suspect, worn = (make_fitted_capacitor(motor=make_motor(site=site, route_order=n)) for n in (1, 2))
    for capacitor, kind in ((suspect, "read_again"), (worn, "replace_run")):
        WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind=kind, due_on=day)
    client.force_login(technician)
    visit = reverse("visit_sheet", args=[site.code, day.isoformat()])
    sheet = client.get(visit).content.decode()
    rows = sheet[sheet.index("<tbody>", sheet.index("visit-orders")) :].split("</tr>")
    back = f"?next={visit}"  # the work recorded, the technician is back on this sheet
    assert f'href="{reverse("reading_new", args=[suspect.id])}{back}">{suspect.part.code}</a>' in rows[0]
    assert f'href="{reverse("replace", args=[suspect.id])}{back}"' in rows[0]  # reachable, after the reading
    assert f'href="{reverse("replace", args=[worn.id])}{back}">{worn.part.code}</a>' in rows[1]
    # On paper the read-again row has lines to write the reading on (the walk found no room for it); a
    # replacement's row needs none.
    assert "write-ins" in rows[0] and "&micro;F" in rows[0].split("write-ins")[1] and "write-ins" not in rows[1]
    assert "Cancel this order" not in sheet and 'id="move-visit"' not in sheet  # the planner's, not the technician's
    # The work-orders page lists the same orders: there too the read-again part opens the reading form.
    listed = client.get(reverse("work_orders")).content.decode()
    back = f"?next={reverse('work_orders')}"
    assert f'href="{reverse("reading_new", args=[suspect.id])}{back}">{suspect.part.code}</a>' in listed
    # and a replacement order's part opens the replacement form, as on the sheet (it was plain text here).
    assert f'href="{reverse("replace", args=[worn.id])}{back}">{worn.part.code}</a>' in listed
    # The form names the order it answers (a walk found no word of it there).
    read_order = WorkOrder.objects.get(fitted_capacitor=suspect)
    form = client.get(reverse("reading_new", args=[suspect.id])).content.decode()
    assert f"Asked by work order {read_order.id} (read again, visit of {day:%Y-%m-%d})." in re.sub(r"<[^>]+>", "", form)
    assert 'id="read-again-order"' not in client.get(reverse("reading_new", args=[worn.id])).content.decode()
    # The reading closes the order, and its message says so (it said only "Reading saved").
    data = {"method": "meter", "capacitance_uf": "3.95", "case_temperature_c": "25", "condition": "sound"}
    saved = client.post(reverse("reading_new", args=[suspect.id]), data, follow=True).content.decode()
    assert "; its read-again work order is done." in saved, saved[:2000]
    # Not judged yet (the refit runs once the reading is committed, on workers maybe later): said so.
    assert "The refit is judging the reading: a replacement it calls for joins the visit" in saved
    assert WorkOrder.objects.get(fitted_capacitor=suspect).state == WorkOrder.State.DONE


def test_the_message_after_a_read_again_reading_names_the_replacement_it_calls_for(
    client, technician, django_capture_on_commit_callbacks
):
    """A fresh-eyes walk: 128.5 µF read for a read-again order, below the limit, said only "its read-again work
    order is done"; the replacement order the refit had just added to the visit showed as one more row. The
    message names it; a reading above the limit says no replacement is due. A 4 µF +/-5 % run capacitor's limit
    is 3.80 µF [IEC 60252-1 tolerance class; common practice of the trade]."""
    day = timezone.localdate() + dt.timedelta(days=3)
    site = make_site(code="RDA")
    low, fine = (make_fitted_capacitor(motor=make_motor(site=site, route_order=n)) for n in (1, 2))
    for capacitor in (low, fine):
        WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind="read_again", due_on=day)
    client.force_login(technician)
    visit = reverse("visit_sheet", args=[site.code, day.isoformat()])
    said = {}
    for capacitor, value in ((low, "3.60"), (fine, "3.99")):
        data = {"method": "meter", "capacitance_uf": value, "case_temperature_c": "25", "condition": "sound"}
        # The test's transaction holds the refit back until the view has answered; outside a test the reading's
        # own transaction commits first, and an in-process refit has run when the message is written.
        with django_capture_on_commit_callbacks(execute=True):
            client.post(f"{reverse('reading_new', args=[capacitor.id])}?next={visit}", data)
        said[capacitor.id] = after_reading_again_words(Reading.objects.filter(fitted_capacitor=capacitor).get())
    replacement = WorkOrder.objects.get(fitted_capacitor=low, kind="replace_run", state="planned")
    assert replacement.due_on == day  # in the same visit
    assert said[low.id] == (
        f" With it the plan asks for a replacement: work order {replacement.id}, visit of "
        f"{day:%Y-%m-%d}. Why: {replacement.reason}."
    )
    assert "below the tolerance limit" in replacement.reason  # why, in the plan's words
    assert said[fine.id] == " The refit judged the reading: no replacement is due within the visit."
    assert not WorkOrder.objects.filter(fitted_capacitor=fine, state="planned").exists()
    # A walk: read for its read-again order, a capacitor was ordered for a new visit 34 days later, isolated
    # twice. Due within the days that bundle a motor's work into one isolation (35), the message says to replace
    # it now; due later, nothing more.
    current = Assessment.objects.filter(fitted_capacitor=fine, is_current=True)
    reading = Reading.objects.filter(fitted_capacitor=fine).get()
    current.update(replace_by=timezone.localdate() + dt.timedelta(days=34))
    assert after_reading_again_words(reading).endswith(
        f"Its replacement falls due by {timezone.localdate() + dt.timedelta(days=34):%Y-%m-%d}, in 34 days: while it "
        "is isolated, replacing it now saves isolating it again for another visit (record the replacement)."
    )
    current.update(replace_by=timezone.localdate() + dt.timedelta(days=36))
    assert after_reading_again_words(reading) == said[fine.id]


def test_page_titles_are_plain_text(client, planner):
    """The visit page's tab read `Visit CST <span class="nowrap">2026-12-10</span>`: a title shows no
    markup. [derived] every template's title block is checked for the filters that write HTML."""
    from pathlib import Path

    day = timezone.localdate() + dt.timedelta(days=3)
    capacitor = make_fitted_capacitor()
    WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind="replace_run", due_on=day)
    client.force_login(planner)
    site = capacitor.motor.site
    for url in (
        reverse("visit_sheet", args=[site.code, day.isoformat()]),
        reverse("work_order_cancel", args=[WorkOrder.objects.get().id]),
    ):
        title = re.search(r"<title>(.*?)</title>", client.get(url).content.decode(), flags=re.S).group(1)
        assert "<" not in title and "&lt;" not in title and "nowrap" not in title, title
    html_filters = re.compile(r"\|(day|nowrap_dates|safe|linebreaks|urlize)\b")
    for template in Path("templates").rglob("*.html"):
        for block in re.findall(r"{% block title %}(.*?){% endblock", template.read_text(), flags=re.S):
            assert not html_filters.search(block) and "<" not in block, (template, block)


def test_the_visit_page_offers_the_working_days_next_to_the_visit_by_weekday_and_date(client, planner, technician):
    """Ours: the date box shows a day in the browser's own order of day, month and year while the page writes
    days as weekday and year-month-day. The box names the element that says its day in words (page.js), and
    the working days next to the visit are offered as buttons written as the page writes days, each a day
    the move takes. A technician, who cannot move visits, is offered none."""
    today = timezone.localdate()
    site = make_site(code="DAYS")
    WorkOrder.objects.create(
        motor=make_motor(site=site), kind="read_again", due_on=today + dt.timedelta(days=20), reason="read it again"
    )
    day = WorkOrder.objects.get().due_on
    url = reverse("visit_sheet", args=[site.code, day.isoformat()])
    client.force_login(planner)
    body = client.get(url).content.decode()
    box = re.search(r'<input type="date" name="to_day"[^>]*>', body).group(0)
    assert 'data-day-words="to-day-words"' in box and 'id="to-day-words"' in body
    offered = re.findall(
        r'<button type="button" class="button secondary" data-fills="id_to_day" value="([0-9-]+)">'
        r'<span class="nowrap">(\w{3}) ([0-9-]+)</span></button>',
        body,
    )
    assert len(offered) == 5
    for value, weekday, written in offered:
        offered_day = dt.date.fromisoformat(value)
        assert written == value and weekday == offered_day.strftime("%a") and offered_day.weekday() < 5
        assert offered_day != day and offered_day >= today
    first = dt.date.fromisoformat(offered[0][0])
    moved = client.post(url, {"to_day": first.isoformat()}, follow=True)
    assert moved.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, first.isoformat()])
    client.force_login(technician)
    sheet = client.get(reverse("visit_sheet", args=[site.code, first.isoformat()]))
    assert sheet.status_code == 200 and "data-fills" not in sheet.content.decode()


def test_the_planner_moves_a_visit_and_cancels_an_order_from_the_visit_page(client, planner, technician):
    """Bad input is named at its field, never a server error; only the planner moves and cancels."""
    today = timezone.localdate()
    site = make_site(code="PAGE")
    capacitors = _due(site, today + dt.timedelta(days=10), 2)
    plan_work_orders(horizon_days=90, user=planner, today=today)
    day = WorkOrder.objects.first().due_on
    url = reverse("visit_sheet", args=[site.code, day.isoformat()])
    client.force_login(planner)
    saturday = today + dt.timedelta(days=(5 - today.weekday()) % 7 or 7)
    for typed, says in (
        ("", "Enter the day to move the visit to"),
        ("soon", "Enter the day as year-month-day"),
        ((today - dt.timedelta(days=3)).isoformat(), "is in the past"),
        (saturday.isoformat(), "is a Saturday"),
    ):
        response = client.post(url, {"to_day": typed})
        body = response.content.decode()
        assert response.status_code == 400, typed
        field = body[body.index('id="wrap_to_day"') :]
        assert says in field[: field.index("</ul>")], typed
        # Named at the top of the page, which scrolls to it (on a phone the form sits below the first screen),
        # with a link to the field: the message itself is said once, at the field.
        summary = body[body.index('id="error-summary"') : body.index('id="wrap_to_day"')]
        assert 'href="#wrap_to_day"' in summary and says not in summary, typed
    gone = reverse("visit_sheet", args=[site.code, (day + dt.timedelta(days=1)).isoformat()])
    response = client.post(gone, {"to_day": day.isoformat()}, follow=True)
    assert response.status_code == 200 and "That visit has no open work orders" in response.content.decode()
    assert client.post(reverse("visit_sheet", args=[site.code, "2026-02-30"]), {"to_day": "x"}).status_code == 404
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {day}

    working = day + dt.timedelta(days=1)
    while working.weekday() >= 5:
        working += dt.timedelta(days=1)
    response = client.post(url, {"to_day": working.isoformat()}, follow=True)
    assert response.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, working.isoformat()])
    assert "Visit moved from" in response.content.decode()
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {working}
    # The sheet printed or bookmarked before the move still leads to the visit, on its new day.
    old_sheet = client.get(url, follow=True)
    assert old_sheet.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, working.isoformat()])
    assert f"was moved to {working:%a %Y-%m-%d}" in old_sheet.content.decode()

    order = WorkOrder.objects.get(fitted_capacitor=capacitors[0])
    cancel = reverse("work_order_cancel", args=[order.id])
    assert cancel in response.content.decode()
    response = client.post(cancel, {"reason": ""})
    assert response.status_code == 400 and "Say why it is cancelled" in response.content.decode()
    response = client.post(cancel, {"reason": "motor replaced whole last week"}, follow=True)
    assert "Work order cancelled" in response.content.decode()
    assert WorkOrder.objects.get(pk=order.pk).state == "cancelled"
    entry = AuditEntry.objects.get(
        model="fleet.workorder", object_id=str(order.pk), action="update", changes__has_key="state"
    )
    assert entry.user_id == planner.id  # who cancelled it, from the request as for every change
    response = client.post(cancel, {"reason": "sent twice"}, follow=True)  # a double tap: said, not refused
    assert f"it was cancelled by {planner.username} on " in response.content.decode()
    assert WorkOrder.objects.get(pk=order.pk).cancel_reason == "motor replaced whole last week"
    assert client.get(reverse("work_order_cancel", args=[10**30])).status_code == 404
    client.force_login(technician)
    other = WorkOrder.objects.get(fitted_capacitor=capacitors[1])
    assert client.post(reverse("work_order_cancel", args=[other.id]), {"reason": "no"}).status_code == 403
    assert client.post(url, {"to_day": working.isoformat()}).status_code == 403
    assert WorkOrder.objects.get(pk=other.pk).state == "planned"


@pytest.mark.parametrize("far", ["9999-12-31", "0001-01-01", "2200-01-01"])
def test_a_visit_address_on_a_day_outside_the_accepted_span_is_not_found_not_a_server_error(client, planner, far):
    """Before: /work-orders/CST/9999-12-31/ answered 500 (OverflowError: the moves within reach of that day ran past
    the last date Python holds). A day outside the rulebook's span is no visit's, as "2026-02-30" is none."""
    site = make_site(code="FAR")
    _due(site, timezone.localdate() + dt.timedelta(days=10), 1)
    plan_work_orders(horizon_days=90, user=planner)
    client.force_login(planner)
    url = reverse("visit_sheet", args=[site.code, far])
    assert client.get(url).status_code == 404
    assert client.post(url, {"to_day": far}).status_code == 404
    day = WorkOrder.objects.get().due_on
    response = client.post(reverse("visit_sheet", args=[site.code, day.isoformat()]), {"to_day": far})
    assert response.status_code == 400 and WorkOrder.objects.get().due_on == day


def test_a_move_or_a_cancel_sent_twice_says_it_was_done_already_by_whom_and_when(client, planner):
    """A double tap (or a form sent again) on "Move the whole visit" answered "That visit has no open work
    orders": the first copy had moved it. [derived] the second copy finds the visit on the day it asks
    for and says so, by whom and when, on that day's sheet; nothing is written twice. A planner whose page
    was open while another moved the visit elsewhere is told where it went, and nothing moves. A cancel
    sent again names who cancelled it, when and why."""
    from fleet.roles import PLANNER
    from tests.factories import make_user

    today = timezone.localdate()
    site = make_site(code="TWICE")
    _due(site, today + dt.timedelta(days=10), 2)
    plan_work_orders(horizon_days=90, user=planner, today=today)
    day = WorkOrder.objects.first().due_on
    working = [day + dt.timedelta(days=n) for n in range(1, 9) if (day + dt.timedelta(days=n)).weekday() < 5]
    url = reverse("visit_sheet", args=[site.code, day.isoformat()])
    client.force_login(planner)
    assert client.post(url, {"to_day": working[0].isoformat()}).status_code == 302
    entries = AuditEntry.objects.filter(model="fleet.workorder", changes__has_key="due_on").count()
    again = client.post(url, {"to_day": working[0].isoformat()}, follow=True)
    assert again.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, working[0].isoformat()])
    text = again.content.decode()
    assert f"moved from {day:%a %Y-%m-%d} to {working[0]:%a %Y-%m-%d} already, by {planner.username} on " in text
    assert "no open work orders" not in text
    assert AuditEntry.objects.filter(model="fleet.workorder", changes__has_key="due_on").count() == entries
    # Another planner, with the first day's sheet still open, moves it elsewhere: told where it went.
    other = Client()
    other.force_login(make_user(PLANNER))
    late_answer = other.post(url, {"to_day": working[1].isoformat()}, follow=True)
    late = late_answer.content.decode()
    assert f"moved from {day:%a %Y-%m-%d} to {working[0]:%a %Y-%m-%d} by {planner.username} on " in late
    # ... on the page of the day it went to (a walk landed on the work-orders list, to look for it there).
    assert late_answer.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, working[0].isoformat()])
    assert "nothing moved" in late
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {working[0]}
    # Moved again from its new day, the second move's double tap is recognised too.
    second = reverse("visit_sheet", args=[site.code, working[0].isoformat()])
    assert other.post(second, {"to_day": working[2].isoformat()}).status_code == 302
    text = other.post(second, {"to_day": working[2].isoformat()}, follow=True).content.decode()
    assert f"to {working[2]:%a %Y-%m-%d} already" in text
    for sheet in (url, second):  # a sheet of either earlier day, printed or kept open, leads to the visit
        arrived = client.get(sheet, follow=True)
        assert arrived.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, working[2].isoformat()])
        assert f"was moved to {working[2]:%a %Y-%m-%d} by " in arrived.content.decode()

    order = WorkOrder.objects.first()
    cancel = reverse("work_order_cancel", args=[order.id])
    assert client.post(cancel, {"reason": "motor scrapped"}).status_code == 302
    closed_at = timezone.localtime(WorkOrder.objects.get(pk=order.pk).closed_at)
    again = other.post(cancel, {"reason": "sent again"}, follow=True)
    text = again.content.decode()
    assert f"it was cancelled by {planner.username} on {closed_at:%Y-%m-%d %H:%M} (motor scrapped)" in text
    # It lands on the order's visit (it landed on the list of every visit).
    assert again.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, order.due_on.isoformat()])
    assert WorkOrder.objects.get(pk=order.pk).cancel_reason == "motor scrapped"
    with pytest.raises(ValidationError) as refused:  # the service says the same
        cancel_order(order_id=order.id, reason="again", user=planner)
    assert f"cancelled by {planner.username} on {closed_at:%Y-%m-%d %H:%M}" in refused.value.message_dict["order"][0]


def test_a_visit_whose_orders_are_all_closed_says_what_became_of_each(client, planner):
    """A visit whose only order the planner cancelled answered a 404 listing the site's addresses, while its
    printed sheet and the "cancelled in the last 30 days" list still named it. [derived] the visit's address
    says there is nothing open, and what became of each order (cancelled, by whom, why; done); a day with no
    order at all is still a 404."""
    day = timezone.localdate() + dt.timedelta(days=3)
    site = make_site(code="SHUT")
    part = make_part(code="RUN-30U-450")
    _orders(site, part, day, 2)
    first, second = WorkOrder.objects.filter(site=site).order_by("id")
    cancel_order(order_id=first.id, reason="motor to be scrapped", user=planner)
    WorkOrder.objects.filter(pk=second.pk).update(state=WorkOrder.State.DONE, closed_at=timezone.now())
    client.force_login(planner)
    response = client.get(reverse("visit_sheet", args=[site.code, day.isoformat()]))
    assert response.status_code == 200
    text = response.content.decode()
    assert "No open work orders for this visit: all 2 are closed." in text
    assert f"Cancelled by {planner.username} on " in text and "(motor to be scrapped)" in text
    assert "Done, closed by the system on " in text
    assert "Move the whole visit" not in text  # nothing left to move
    empty = client.get(reverse("visit_sheet", args=[site.code, (day + dt.timedelta(days=1)).isoformat()]))
    assert empty.status_code == 404


def test_the_old_address_of_a_visit_moved_then_closed_leads_to_what_became_of_it(client, planner):
    """A visit moved to another day and then cancelled order by order: its old address answered a 404, where a
    visit moved and still open leads on to its new day. [derived] it leads on too, to the closed visit's page."""
    today = timezone.localdate()
    day = today + dt.timedelta(days=14)
    while day.weekday() != 2:  # a Wednesday: the Tuesday before is a working day too
        day += dt.timedelta(days=1)
    site = make_site(code="GONE")
    _orders(site, make_part(code="RUN-30U-450"), day, 2)
    client.force_login(planner)
    earlier = day - dt.timedelta(days=1)
    moved = client.post(reverse("visit_sheet", args=[site.code, day.isoformat()]), {"to_day": earlier.isoformat()})
    assert moved.status_code == 302
    for order in WorkOrder.objects.filter(site=site):
        cancel_order(order_id=order.id, reason="motor scrapped", user=planner)
    response = client.get(reverse("visit_sheet", args=[site.code, day.isoformat()]), follow=True)
    assert response.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, earlier.isoformat()])
    assert "No open work orders for this visit: all 2 are closed." in response.content.decode()


def test_a_sites_days_off_keep_the_plan_and_the_moves_off_them(client, planner, technician):
    """[trade] a visit is not sent on a public holiday, and holidays are local: the glasshouses keep a day the
    cool store works. Ours: the planner stores a site's days off on its page; the plan dates no visit there
    (a visit due on Fri 25 goes on Thu 24 at that site only), a move onto one is refused naming it, the days
    offered skip it, and a visit already on a day added later says so on its sheet. Bad input is refused at
    its field, saving nothing; a technician sees the days but cannot change them."""
    from fleet.models import SiteDayOff
    from fleet.services.workorders import add_day_off, move_choices

    site, other = make_site(code="GH1"), make_site(code="CST")
    _due(site, HOLIDAY, 1)
    _due(other, HOLIDAY, 1)
    client.force_login(planner)
    url = reverse("site_days_off", args=["gh1"])  # any case: led to GH1
    assert client.get(url).status_code == 302
    url = reverse("site_days_off", args=["GH1"])
    refused = {
        ("", "public holiday"): ("day", "Enter the day off"),
        ("25/12/2026", "public holiday"): ("day", "year-month-day"),
        (str(MONDAY - dt.timedelta(days=400)), "public holiday"): ("day", "in the past"),
        (str(timezone.localdate() + dt.timedelta(days=900)), "shutdown"): ("day", "past the plan's reach"),
        (str(timezone.localdate() + dt.timedelta(days=30)), "   "): ("name", "Say what the day is"),
    }
    for (day, name), (field, says) in refused.items():
        response = client.post(url, {"day": day, "name": name})
        assert response.status_code == 400, (day, name)
        assert says in " ".join(response.context["form"].errors[field]), (day, name)
    assert not SiteDayOff.objects.exists()

    found = add_day_off(site_id=site.id, day=HOLIDAY, name="Christmas Day", today=MONDAY)
    assert found == {"orders": 0}
    with pytest.raises(ValidationError) as twice:
        add_day_off(site_id=site.id, day=HOLIDAY, name="again", today=MONDAY)
    assert "a day off at this site already (Christmas Day)" in twice.value.message_dict["day"][0]

    plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    by_site = dict(WorkOrder.objects.values_list("site__code", "due_on"))
    assert by_site == {"GH1": HOLIDAY - dt.timedelta(days=1), "CST": HOLIDAY}
    with pytest.raises(ValidationError) as onto:
        move_visit(site_id=other.id, due_on=HOLIDAY, to_day=HOLIDAY, user=planner, today=MONDAY)
    assert "already" in onto.value.message_dict["to_day"][0]  # CST works that day: the visit is there
    with pytest.raises(ValidationError) as onto:
        move_visit(site_id=site.id, due_on=HOLIDAY - dt.timedelta(days=1), to_day=HOLIDAY, user=planner, today=MONDAY)
    assert "is a day off at this site (Christmas Day)" in onto.value.message_dict["to_day"][0]
    assert HOLIDAY not in move_choices(site.id, HOLIDAY - dt.timedelta(days=1), MONDAY)
    assert HOLIDAY in move_choices(other.id, HOLIDAY - dt.timedelta(days=1), MONDAY)

    # A day off added where a visit stands already: the planner is told, and the visit sheet says it.
    other_day_off = add_day_off(site_id=other.id, day=HOLIDAY, name="shutdown", today=MONDAY)
    assert other_day_off == {"orders": 1}
    sheet = client.get(reverse("visit_sheet", args=["CST", HOLIDAY.isoformat()]))
    assert "is a day off at this site (shutdown)" in sheet.content.decode()
    assert (
        "is a day off at this site"
        not in client.get(
            reverse("visit_sheet", args=["GH1", (HOLIDAY - dt.timedelta(days=1)).isoformat()])
        ).content.decode()
    )

    client.force_login(technician)
    page = client.get(url)
    assert page.status_code == 200 and "Christmas Day" in page.content.decode()
    assert client.post(url, {"day": str(timezone.localdate()), "name": "x"}).status_code == 403
    day_off = SiteDayOff.objects.create(site=site, day=timezone.localdate() + dt.timedelta(days=10), name="shutdown")
    assert client.post(url, {"remove": day_off.id}).status_code == 403
    client.force_login(planner)
    # Removing takes a second, named tap: "Remove" opens a fold whose button says which day goes.
    page = client.get(url).content.decode()
    fold = page[page.index('<details class="remove-day-off') :]
    fold = fold[: fold.index("</details>")]
    assert f'value="{day_off.id}"' in fold and f"Yes, remove {day_off.day:%a %Y-%m-%d}" in re.sub(r"<[^>]+>", "", fold)
    assert client.post(url, {"remove": day_off.id}).status_code == 302
    assert not SiteDayOff.objects.filter(pk=day_off.pk).exists()
    assert "removed already" in " ".join(
        str(m) for m in client.post(url, {"remove": day_off.id}, follow=True).context["messages"]
    )
    assert client.post(url, {"remove": "99999999999999999999"}).status_code == 302  # no such row: nothing changed
    assert AuditEntry.objects.filter(model="fleet.sitedayoff").exists()


@pytest.mark.parametrize("sent", ["abc", "", "-1", "\u0665", "99999999999999999999", "another site's"])
def test_removing_what_is_not_a_day_off_of_the_site_says_so(client, planner, sent):
    """`remove=abc` said "That day off was removed already", which it never was. A value that is no day off of
    the site, or a day off of another site, is named as not one of the site's, and nothing is removed; a day off
    removed, sent again, is still "removed already" (by the audit trail). [derived: the app's own messages]"""
    from fleet.models import SiteDayOff

    site, other = make_site(code="GH2"), make_site(code="CS2")
    day = timezone.localdate() + dt.timedelta(days=10)
    elsewhere = SiteDayOff.objects.create(site=other, day=day, name="shutdown")
    mine = SiteDayOff.objects.create(site=site, day=day, name="stocktake")
    client.force_login(planner)
    url = reverse("site_days_off", args=["GH2"])

    def said(value) -> str:
        return " ".join(str(m) for m in client.post(url, {"remove": value}, follow=True).context["messages"])

    words = said(elsewhere.id if sent == "another site's" else sent)
    assert "Not a day off of GH2: nothing changed" in words and "removed already" not in words, words
    assert SiteDayOff.objects.count() == 2
    assert "is no longer a day off at GH2" in said(mine.id)
    assert "That day off was removed already" in said(mine.id)


def test_a_move_made_off_a_day_off_stays_when_the_day_off_goes(planner):
    """A walk: a day off added on a visit's day (Wed), the planner moved the visit to Tuesday; the next plan (which
    avoided Wednesday itself) forgot the move, and once the day off was removed the plan put the visit back on
    Wednesday while saying it kept the move. [README] every order the plan dates on the day a moved visit was
    moved from goes on the day it was moved to. Ours: the plan keeps the record of the move while it dates the
    order where the planner put it."""
    from fleet.models import SiteDayOff
    from fleet.services.workorders import add_day_off

    site = make_site(code="KEEP")
    _due(site, HOLIDAY - dt.timedelta(days=2), 2)  # Wed 2026-12-23
    plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    wednesday = HOLIDAY - dt.timedelta(days=2)
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {wednesday}
    add_day_off(site_id=site.id, day=wednesday, name="shutdown", today=MONDAY)
    tuesday = wednesday - dt.timedelta(days=1)
    move_visit(site_id=site.id, due_on=wednesday, to_day=tuesday, user=planner, today=MONDAY)
    counts = plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert set(WorkOrder.objects.values_list("due_on", "moved_from")) == {(tuesday, wednesday)}
    assert counts["replanned"] == 0
    SiteDayOff.objects.filter(site=site).delete()
    counts = plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    assert set(WorkOrder.objects.values_list("due_on", "moved_from")) == {(tuesday, wednesday)}
    assert (counts["replanned"], counts["kept_moved"]) == (0, 2)


def test_a_visit_moved_back_onto_a_working_day_keeps_the_window_it_opened_with(planner):
    """A walk: a new order sat in a Wednesday visit marked "plan now: due soon, replace by" the Thursday 15 days on,
    by the plan run that made it. The visit had opened on Thursday 12-31 (a day off at that site) and moved back
    to Wednesday 12-30, taking what fell due within 14 days of Thursday; its orders' window counted from
    Wednesday. [derived] an order's window reaches over the days off work right after its day (here Thursday), so
    nothing the plan put in the visit is marked as no longer asked for there."""
    from fleet.services.workorders import add_day_off, open_visits_page

    site = make_site(code="SHIFT")
    thursday = dt.date(2026, 12, 31)
    add_day_off(site_id=site.id, day=thursday, name="shutdown", today=MONDAY)
    _due(site, thursday, 1)
    _due(site, thursday + dt.timedelta(days=14), 1)
    plan_work_orders(horizon_days=90, user=planner, today=MONDAY)
    orders = list(WorkOrder.objects.all())
    assert {o.due_on for o in orders} == {thursday - dt.timedelta(days=1)}
    visit = open_visits_page(1, user=planner).object_list[0]
    assert [o.plan_now for o in visit["orders"]] == ["", ""]


def test_the_address_of_a_visit_a_new_plan_re_dated_leads_to_its_new_day(client, planner):
    """A walk: once a plan re-dated a visit's orders, its bookmarked or printed address answered "nothing here"
    (a planner's move led on; the plan's re-dating left no `moved_from`). Ours: the audit trail's entry that took
    an order off that day leads to the day it is on now, saying by which plan."""
    site = make_site(code="REDATE")
    capacitors = _due(site, MONDAY + dt.timedelta(days=10), 2)  # Thu 12-17
    client.force_login(planner)
    client.post(reverse("work_orders"), {"action": "plan", "days": "90"})
    first = WorkOrder.objects.first().due_on
    for capacitor in capacitors:
        stored_assessment(capacitor, "due soon", first + dt.timedelta(days=21))
    client.post(reverse("work_orders"), {"action": "plan", "days": "90"})
    now_on = WorkOrder.objects.first().due_on
    assert now_on != first and set(WorkOrder.objects.values_list("moved_from", flat=True)) == {None}
    answer = client.get(reverse("visit_sheet", args=[site.code, first.isoformat()]), follow=True)
    assert answer.redirect_chain[-1][0] == reverse("visit_sheet", args=[site.code, now_on.isoformat()])
    said = " ".join(str(m) for m in answer.context["messages"])
    assert f"was moved to {now_on:%a %Y-%m-%d} by a new plan run by {planner.username}" in said, said


def test_the_updates_that_took_orders_off_a_day_are_found_by_an_index():
    """A visit's old address asks the audit trail which updates took an order off its day; with a million
    entries a scan took a second (measured 2026-12-04 on PostgreSQL). A partial expression index on the day
    serves it (common practice of the trade, no single source: an index on the expression the query filters
    by, PostgreSQL manual "Indexes on Expressions" and "Partial Indexes"). The database is told not to scan
    the table, so the plan shows whether the index can serve the query at all; entries are written so the
    answer is checked too."""
    day = dt.date(2027, 3, 2)
    for object_id, old, new in (("1", day, day + dt.timedelta(days=2)), ("2", day + dt.timedelta(days=1), day)):
        AuditEntry.objects.create(
            model="fleet.workorder",
            object_id=object_id,
            object_repr="order",
            action=AuditEntry.Action.UPDATE,
            changes={"due_on": [old.isoformat(), new.isoformat()]},
        )
    AuditEntry.objects.create(
        model="fleet.motor",
        object_id="1",
        object_repr="motor",
        action=AuditEntry.Action.UPDATE,
        changes={"due_on": [day.isoformat(), "x"]},
    )
    assert list(orders_taken_off(day).values_list("object_id", flat=True)) == ["1"]
    if connection.vendor == "postgresql":  # the plant-scale database; SQLite picks among indexes by its own rules
        with connection.cursor() as cursor:
            cursor.execute("SET LOCAL enable_seqscan = off")
        assert "order_taken_off_day" in orders_taken_off(day).explain()


def test_a_visits_closed_orders_are_read_by_visit_from_an_index():
    """Every visit sheet lists its visit's done and cancelled orders; with 210,000 closed orders at a site
    (years of visits) reading them by the site alone took 38 ms, by a partial index on site and day 0.05 ms
    (EXPLAIN ANALYZE, measured 2026-12-04 on PostgreSQL). Common practice of the trade, no single source:
    PostgreSQL manual, "Partial Indexes". The database is told not to scan the table or use the site's own
    index, so the plan shows whether this index serves the query at all; the list is checked too."""
    site = make_site(code="OLD")
    part = make_part()
    _orders(site, part, MONDAY, 3)
    WorkOrder.objects.filter(pk__in=list(WorkOrder.objects.values_list("pk", flat=True)[:2])).update(
        state="done", closed_at=timezone.now()
    )
    from fleet.services.workorders import closed_visit

    assert closed_visit(site.id, MONDAY)["count"] == 2
    if connection.vendor == "postgresql":  # the plant-scale database; SQLite picks among indexes by its own rules
        with connection.cursor() as cursor:
            cursor.execute("SET LOCAL enable_seqscan = off")
        plan = WorkOrder.objects.filter(site_id=site.id, due_on=MONDAY).exclude(state__in=["planned", "issued"])
        assert "closed_orders_by_visit" in plan.explain()


def test_a_planner_issues_a_visit_from_its_sheet_and_stays_on_it(client, planner, technician):
    """The planner moves and cancels from a visit's sheet but could issue it only from the folded visit on the
    work-orders list (a fresh-eyes walk). The sheet offers "Issue this visit" while it has planned orders,
    issues them as the list does, and comes back to the sheet; a technician sees no such button. Ours."""
    day = timezone.localdate() + dt.timedelta(days=3)
    site = make_site(code="ISS")
    capacitors = [make_fitted_capacitor(motor=make_motor(site=site, route_order=n)) for n in (1, 2)]
    for capacitor in capacitors:
        WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind="replace_run", due_on=day)
    visit = reverse("visit_sheet", args=[site.code, day.isoformat()])
    client.force_login(technician)
    assert "Issue this visit" not in client.get(visit).content.decode()
    client.force_login(planner)
    assert "Issue this visit (2 planned orders)" in client.get(visit).content.decode()
    data = {"action": "issue", "site": site.id, "day": day.isoformat(), "from_visit": "1"}
    response = client.post(reverse("work_orders"), data)
    assert response.status_code == 302 and response["Location"] == visit
    assert set(WorkOrder.objects.filter(site=site).values_list("state", flat=True)) == {"issued"}
    assert "Issue this visit" not in client.get(visit).content.decode()


def test_a_day_off_added_on_a_visit_links_to_that_visit(client, planner):
    """A fresh-eyes walk: "A visit is on that day already: move it from its visit page" named no page to go to."""
    day = timezone.localdate() + dt.timedelta(days=10)
    site = make_site(code="DOV")
    capacitor = make_fitted_capacitor(motor=make_motor(site=site))
    WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind="replace_run", due_on=day)
    client.force_login(planner)
    url = reverse("site_days_off", args=[site.code])
    page = client.post(url, {"day": day.isoformat(), "name": "shutdown"}, follow=True).content.decode()
    visit = reverse("visit_sheet", args=[site.code, day.isoformat()])
    assert "A visit is on that day already (1 open work order): move it from" in page
    assert f'<a class="glove" href="{visit}">its visit page</a>' in page


def test_a_done_replacement_on_the_visit_names_the_part_that_went_in(client, technician):
    """A fresh-eyes walk: the visit's done list read "START-143U-330 Replace start capacitor ... Done" where a
    98 µF stop-gap had been fitted against the advice; nothing said what went in."""
    from fleet.services.readings import replace_capacitor

    day = timezone.localdate() + dt.timedelta(days=3)
    site = make_site(code="DNP")
    design = make_part(code="RUN-8-450", rated_uf=8.0)
    stopgap = make_part(code="RUN-6-450", rated_uf=6.0)
    worn, other = (
        make_fitted_capacitor(motor=make_motor(site=site, route_order=n), part=design, fitted_on=dt.date(2022, 1, 1))
        for n in (1, 2)
    )
    orders = [
        WorkOrder.objects.create(motor=c.motor, fitted_capacitor=c, kind="replace_run", due_on=day)
        for c in (worn, other)
    ]
    replace_capacitor(
        fitted_capacitor=worn,
        part=stopgap,
        removed_on=timezone.localdate(),
        reason="failed",
        user=technician,
        substitute_override=True,
        override_reason="none of the design part on site",
    )
    assert WorkOrder.objects.get(pk=orders[0].pk).state == WorkOrder.State.DONE
    client.force_login(technician)
    text = client.get(reverse("visit_sheet", args=[site.code, day.isoformat()])).content.decode()
    done = text[text.index(f'id="order-{orders[0].id}"') :].split("</tr>")[0]
    assert "RUN-6-450 fitted, a stop-gap against the advice; done, closed by" in done
    replace_capacitor(fitted_capacitor=other, part=design, removed_on=timezone.localdate(), reason="planned")
    text = client.get(reverse("visit_sheet", args=[site.code, day.isoformat()])).content.decode()
    done = text[text.index(f'id="order-{orders[1].id}"') :].split("</tr>")[0]
    assert "RUN-8-450 fitted; done, closed by the system" in done
    # A read-again order closed by a replacement ("past its limit: record the replacement") says it too.
    suspect = make_fitted_capacitor(motor=make_motor(site=site, route_order=3), part=design)
    read_again = WorkOrder.objects.create(motor=suspect.motor, fitted_capacitor=suspect, kind="read_again", due_on=day)
    replace_capacitor(fitted_capacitor=suspect, part=design, removed_on=timezone.localdate(), reason="failed")
    text = client.get(reverse("visit_sheet", args=[site.code, day.isoformat()])).content.decode()
    done = text[text.index(f'id="order-{read_again.id}"') :].split("</tr>")[0]
    assert "RUN-8-450 fitted; done, closed by" in done


def test_a_visit_moved_onto_another_visits_day_says_the_two_became_one(client, planner):
    """A fresh-eyes walk: a visit of 2 orders moved onto a day that held a visit of 4 said "Visit moved ...: 2 work
    orders", and the page then held 6 with no word of a merge."""
    site = make_site(code="MRG")
    part = make_part(code="RUN-9U-450")
    first = timezone.localdate() + dt.timedelta(days=7)
    while first.weekday() >= 5:
        first += dt.timedelta(days=1)
    second = first + dt.timedelta(days=7)
    _orders(site, part, first, 4)
    _orders(site, part, second, 2)
    client.force_login(planner)
    url = reverse("visit_sheet", args=[site.code, second.isoformat()])
    body = client.post(url, {"to_day": first.isoformat()}, follow=True).content.decode()
    assert "2 work orders. It joined the visit already on that day: 6 work orders in one." in body
    assert WorkOrder.objects.filter(site=site, due_on=first).count() == 6


def test_a_stop_gaps_replacement_brings_its_design_part_in_every_count_of_spares(client, technician, planner):
    """A review after stop-gaps' labels named their design part: the visit sheet's spares, the plan's spares and
    the dashboard's months still counted the stop-gap's own part (the order's part is the capacitor's), so the
    technician would pack a second wrong capacitor. Each replacement of a stop-gap now counts, and its row names,
    the design part. [trade] a substitute fitted against the advice is a temporary repair, replaced with the
    specified part at the next opportunity (common practice of the trade, no single source)."""
    from fleet.models import CapacitorPart
    from fleet.services.dashboard import spares_by_month
    from fleet.services.pages import spares_needed

    day = timezone.localdate() + dt.timedelta(days=5)
    site = make_site(code="SGP")
    stop_gap = _stop_gap(site)
    design = CapacitorPart.objects.get(code="RUN-8-450")
    plain = make_fitted_capacitor(
        motor=make_motor(site=site, route_order=2), part=design, fitted_on=dt.date(2022, 1, 1)
    )
    for capacitor in (stop_gap, plain):
        stored_assessment(capacitor, "due soon", day)
        WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind="replace_run", due_on=day)
    SiteStock.objects.create(site=site, part=design, quantity=1)

    taken = {s["code"]: s for s in open_visit(site.id, day)["spares"]}
    assert list(taken) == ["RUN-8-450"], taken
    assert (taken["RUN-8-450"]["quantity"], taken["RUN-8-450"]["short"]) == (2, 1)
    listed = next(v for v in open_visits_page(1).object_list if v["site"].code == "SGP")
    assert [s["code"] for s in listed["spares"]] == ["RUN-8-450"]
    assert [getattr(o.bring_part, "code", None) for o in listed["orders"]] == ["RUN-8-450", None]

    assert [(s["part"].code, s["quantity"]) for s in spares_needed(90, user=planner)] == [("RUN-8-450", 2)]
    months = {row["part"].code: row["planned"] for row in spares_by_month(planner)["parts"]}
    assert sum(months["RUN-8-450"]) == 2 and sum(months.get("RUN-6-450", [0])) == 0, months

    client.force_login(technician)
    sheet = client.get(reverse("visit_sheet", args=[site.code, day.isoformat()])).content.decode()
    _leads_with_the_design_part(sheet, stop_gap.motor.asset_tag)
    other = sheet[sheet.index(plain.motor.asset_tag) :].split("</tr>")[0]
    assert "stop-gap" not in other and "Bring" not in other
    orders_page = client.get(reverse("work_orders")).content.decode()
    assert orders_page.count("(the design part)") == 1
    _leads_with_the_design_part(orders_page, stop_gap.motor.asset_tag)


def _leads_with_the_design_part(page: str, asset_tag: str) -> None:
    """A stop-gap's order row: its Part cell leads with the design part to bring (RUN-8-450), as the link to the
    replacement form, and names the stop-gap fitted now (RUN-6-450) after it, smaller (a walk found the stop-gap's
    code first, as the link, and a tired technician bringing the wrong part)."""
    row = page[page.index(asset_tag) :].split("</tr>")[0]
    cell = row[row.index('data-label="Part"') :].split("</td>")[0]
    text = re.sub(r"<[^>]+>", "", cell[cell.index(">") + 1 :])
    assert text.startswith("Bring RUN-8-450 (the design part)"), text
    assert text.index("RUN-8-450") < text.index("RUN-6-450")
    assert re.search(r'<a class="nowrap part-code" href="[^"]+">RUN-8-450</a>', cell), cell
    fitted = cell[cell.index('class="muted stop-gap-fitted"') :]
    assert fitted.startswith('class="muted stop-gap-fitted">fitted now: <span class="nowrap">RUN-6-450</span>')


def _stop_gap(site, *, route_order=1):
    """A capacitor fitted against the advice (a 6 uF stop-gap where the position's design is 8 uF), in service."""
    from fleet.services.readings import replace_capacitor

    design = make_part(code="RUN-8-450", rated_uf=8.0)
    stopgap_part = make_part(code="RUN-6-450", rated_uf=6.0)
    worn = make_fitted_capacitor(
        motor=make_motor(site=site, route_order=route_order), part=design, fitted_on=dt.date(2022, 1, 1)
    )
    return replace_capacitor(
        fitted_capacitor=worn,
        part=stopgap_part,
        removed_on=timezone.localdate() - dt.timedelta(days=30),
        reason="failed",
        substitute_override=True,
        override_reason="none of the design part on site",
    )


def test_the_planner_orders_a_stop_gap_swapped_on_its_sites_next_visit(client, planner):
    """The plan, the list and the label said to replace a stop-gap with its design part, and no order could be
    planned for it. "Order the swap" on the stand-in parts page plans a replacement order on the site's next open
    visit, naming both parts; sent twice, one order; its visit sheet says to bring the design part and no "plan
    now" word contradicts it (its wear alone would not ask for it). [trade] a substitute fitted against the advice
    is a temporary repair, replaced with the specified part at the next opportunity (common practice of the
    trade, no single source)."""
    site = make_site(code="SWP")
    stop_gap = _stop_gap(site)
    stored_assessment(stop_gap, "sound", None)
    visit_day = timezone.localdate() + dt.timedelta(days=4)
    _orders(site, make_part(code="START-88-250"), visit_day, 1)
    client.force_login(planner)
    page = client.get(reverse("stand_in_parts")).content.decode()
    swap_url = reverse("stop_gap_swap", args=[stop_gap.id])
    assert f'action="{swap_url}"' in page
    answer = client.post(swap_url, follow=True).content.decode()
    order = WorkOrder.objects.get(fitted_capacitor=stop_gap)
    assert (order.kind, order.due_on, order.state) == ("replace_run", visit_day, "planned")
    assert (
        order.reason
        == f"stop-gap RUN-6-450 fitted against the advice on {stop_gap.fitted_on}: fit the design part RUN-8-450"
    )
    assert "Work order planned: Replace run capacitor" in answer and "the design part RUN-8-450 in" in answer
    assert "ordered, visit" in answer and f'action="{swap_url}"' not in answer
    again = client.post(swap_url, follow=True).content.decode()
    assert WorkOrder.objects.filter(fitted_capacitor=stop_gap).count() == 1
    assert "A replacement order was open already" in again
    assert f'<tr id="stop-gap-{stop_gap.id}">' in again and "ordered, visit" in again
    sheet = client.get(reverse("visit_sheet", args=[site.code, visit_day.isoformat()])).content.decode()
    row = sheet[sheet.index(stop_gap.motor.asset_tag) :].split("</tr>")[0]
    assert "Bring RUN-8-450 (the design part)" in re.sub(r"<[^>]+>", "", row) and 'class="plan-now"' not in row
    # A plan run leaves it be: the stop-gap's wear does not ask for it.
    plan_work_orders(user=planner)
    assert WorkOrder.objects.get(pk=order.pk).due_on == visit_day
    # Back at the stop-gap's own row, which says it is ordered (a phone did not see the message at the top).
    assert client.post(swap_url)["Location"].endswith(f"#stop-gap-{stop_gap.id}")


def test_a_swap_skips_a_visit_on_a_day_made_a_day_off_since(planner):
    """A walk: "Order the swap" put the order on the site's next visit, on a day the planner had made a shutdown
    since (its sheet flagged it); it moved off only at the next plan. The swap goes on the next open visit on a day
    that is not a day off. [trade] no work is sent to a site on its shutdown (common practice, no single source)."""
    from fleet.models import SiteDayOff
    from fleet.services.workorders import order_swap

    site = make_site(code="SWD")
    stop_gap = _stop_gap(site)
    stored_assessment(stop_gap, "sound", None)
    shut, later = (timezone.localdate() + dt.timedelta(days=days) for days in (4, 8))
    _orders(site, make_part(code="START-88-250"), shut, 1)
    _orders(site, make_part(code="START-89-250"), later, 1)
    SiteDayOff.objects.create(site=site, day=shut, name="shutdown")
    swap = order_swap(fitted_capacitor_id=stop_gap.id, user=planner)
    assert swap.order.due_on == later


def test_a_swap_without_an_open_visit_goes_a_weeks_notice_ahead_on_a_working_day_and_bad_asks_are_refused(
    client, planner, technician
):
    """With no visit open at the site, the swap is dated the plan's notice ahead (a week: spares and a trip need
    it), on a working day that is not a day off. A capacitor that is no stop-gap, one removed, one at no site of
    the user's and an id past any are refused with a message, and nothing is created; a technician may not order."""
    from fleet.models import SiteDayOff
    from fleet.services.workorders import order_swap

    site = make_site(code="SWN")
    stop_gap = _stop_gap(site)
    monday = dt.date(2026, 12, 7)
    SiteDayOff.objects.create(site=site, day=dt.date(2026, 12, 14), name="shutdown")
    swap = order_swap(fitted_capacitor_id=stop_gap.id, today=monday)
    assert swap.order.due_on == dt.date(2026, 12, 11)  # the Monday a week on is a day off: the Friday before
    plain = make_fitted_capacitor(motor=make_motor(site=site, route_order=5))
    for bad, words in ((plain.id, "no stop-gap"), (2**70, "No such capacitor")):
        with pytest.raises(ValidationError) as refused:
            order_swap(fitted_capacitor_id=bad)
        assert words in " ".join(refused.value.message_dict["capacitor"])
    client.force_login(planner)
    answer = client.post(reverse("stop_gap_swap", args=[plain.id]), follow=True).content.decode()
    assert "it is no stop-gap to swap" in answer
    assert not WorkOrder.objects.filter(fitted_capacitor=plain).exists()
    client.force_login(technician)
    assert client.post(reverse("stop_gap_swap", args=[stop_gap.id])).status_code == 403


def test_a_defect_seen_on_a_read_again_reading_is_ordered_for_today_not_its_visits_day(
    client, technician, django_capture_on_commit_callbacks
):
    """A fresh-eyes walk: a capacitor read as bulged for its read-again order, a week before that order's visit,
    got its replacement order on the visit's day while the plan said replace by today, and the message named the
    later visit. The order is now dated when the plan asks for it, today, and the message names that day; a reading
    below its limit without a defect keeps the visit's day (the test above). [trade] a bulged, leaking or vented
    capacitor is taken out of service at once (common practice of the trade, no single source)."""
    day = timezone.localdate() + dt.timedelta(days=7)
    site = make_site(code="BLG")
    bulged = make_fitted_capacitor(motor=make_motor(site=site))
    WorkOrder.objects.create(motor=bulged.motor, fitted_capacitor=bulged, kind="read_again", due_on=day)
    client.force_login(technician)
    data = {"method": "meter", "capacitance_uf": "3.99", "case_temperature_c": "25", "condition": "bulged"}
    with django_capture_on_commit_callbacks(execute=True):
        client.post(reverse("reading_new", args=[bulged.id]), data)
    replacement = WorkOrder.objects.get(fitted_capacitor=bulged, kind="replace_run", state="planned")
    assert replacement.due_on == timezone.localdate()
    said = after_reading_again_words(Reading.objects.filter(fitted_capacitor=bulged).get())
    assert f"visit of {timezone.localdate():%Y-%m-%d}" in said and "bulged" in said


def test_the_work_orders_list_says_each_orders_work_as_a_link(planner, technician):
    """A walk: on a phone the work-orders list's only way to record a replacement was the part code's link, which
    nothing said was an action; the visit sheet says "Record the replacement" and "Record the reading". The list
    says them too, to the user who may do them, each opening the form and coming back to the list."""
    site = make_site(code="LNK")
    replaced = _due(site, MONDAY + dt.timedelta(days=30), 1)[0]
    read = _due(site, MONDAY + dt.timedelta(days=30), 1, read_again=True)[0]
    plan_work_orders(horizon_days=365, user=planner, today=MONDAY)
    client = Client()
    client.force_login(technician)
    listed = client.get(reverse("work_orders")).content.decode()
    back = f"?next={reverse('work_orders')}"
    replace_link = f'href="{reverse("replace", args=[replaced.id])}{back}">Record the replacement</a>'
    assert replace_link in listed
    assert f'href="{reverse("reading_new", args=[read.id])}{back}">Record the reading</a>' in listed
    client.force_login(planner)  # plans and issues orders; records no replacement
    assert "Record the replacement" not in client.get(reverse("work_orders")).content.decode()


def _friday_visit(site, replace_by, count=2, state="planned"):
    """Capacitors at `site` whose current plan says replace by `replace_by`, each with an open order on that day."""
    capacitors = [make_fitted_capacitor(motor=make_motor(site=site, route_order=n)) for n in range(count)]
    for capacitor in capacitors:
        stored_assessment(capacitor, "due soon", replace_by)
        WorkOrder.objects.create(
            motor=capacitor.motor, fitted_capacitor=capacitor, kind="replace_run", due_on=replace_by, state=state
        )
    return capacitors


def test_a_moved_visit_keeps_the_orders_done_in_it_on_its_sheet_and_in_the_list(client, planner):
    """A walk: a visit with two orders done already was moved (twice); neither the new day's sheet nor the list
    showed them any more ("2 done already" gone, "Done or cancelled in this visit" empty), and the old day's
    address led to the new one. Its closed orders move with it, each remembering the plan's day. Ours."""
    today = timezone.localdate()
    first = today + dt.timedelta(days=14 + (3 - today.weekday()) % 7)  # a Thursday
    second, third = first - dt.timedelta(days=1), first - dt.timedelta(days=2)
    site = make_site(code="MVD")
    done, still = _friday_visit(site, first)
    WorkOrder.objects.filter(fitted_capacitor=done).update(state="done", closed_at=timezone.now())
    move_visit(site_id=site.id, due_on=first, to_day=second, user=planner)
    move_visit(site_id=site.id, due_on=second, to_day=third, user=planner)
    moved = WorkOrder.objects.get(fitted_capacitor=done)
    assert (moved.state, moved.due_on, moved.moved_from) == ("done", third, first)
    (visit,) = [v for v in open_visits_page(1, user=planner).object_list if v["site"].code == "MVD"]
    assert (visit["day"], visit["state"]) == (third, "planned, not issued yet; 1 more done already")
    client.force_login(planner)
    sheet = client.get(reverse("visit_sheet", args=[site.code, third.isoformat()])).content.decode()
    closed_part = sheet[sheet.index("Done or cancelled in this visit") :]
    assert done.motor.asset_tag in closed_part and still.motor.asset_tag not in closed_part


def test_a_move_past_an_orders_replace_by_date_is_warned_of_before_and_after(client, planner):
    """A walk: a visit moved a day past its orders' replace-by date said only "visit moved from", and neither the
    sheet nor the list showed a replace-by date. Both now show each order's date, marked where the visit is after
    it; the day buttons mark the days past the visit's soonest date; the move goes ahead (a warning, not a
    refusal) and says which orders the new day makes late: tag, capacitor, date. [trade] a planned replacement is
    done by its date or knowingly late (common practice of the trade, no single source)."""
    today = timezone.localdate()
    thursday = today + dt.timedelta(days=14 + (3 - today.weekday()) % 7)
    wednesday, friday = thursday - dt.timedelta(days=1), thursday + dt.timedelta(days=1)
    site = make_site(code="LATE")
    first, second = _friday_visit(site, thursday)
    stored_assessment(second, "due soon", thursday + dt.timedelta(days=16))  # its plan allows the Friday

    move = move_visit(site_id=site.id, due_on=thursday, to_day=friday, user=planner)
    assert move.moved == 2
    assert [(o.asset_tag, o.capacitor, o.replace_by) for o in move.late] == [
        (first.motor.asset_tag, f"run capacitor {first.part.code}", thursday)
    ]
    back = move_visit(site_id=site.id, due_on=friday, to_day=thursday, user=planner)
    assert back.late == ()  # on its date: not late

    client.force_login(planner)
    url = reverse("visit_sheet", args=[site.code, thursday.isoformat()])
    sheet = client.get(url).content.decode()
    assert "<th>Replace by</th>" in sheet and 'class="error-text past-replace-by"' not in sheet
    soonest = f'<b><span class="nowrap">{thursday:%a %Y-%m-%d}</span></b> ({first.motor.asset_tag} run capacitor'
    assert f"Soonest replace-by date in this visit: {soonest}" in sheet
    buttons = {
        value: marked
        for marked, value in re.findall(
            r'class="button secondary( past-replace-by)?" data-fills="id_to_day" value="([0-9-]+)"', sheet
        )
    }
    assert buttons[wednesday.isoformat()] == "" and buttons[friday.isoformat()] == " past-replace-by", buttons

    answer = client.post(url, {"to_day": friday.isoformat()}, follow=True).content.decode()
    warning = re.search(r'<li class="warning">(.*?)</li>', answer, re.S)
    assert warning is not None, answer[:3000]
    words = warning.group(1)
    assert f"{friday:%a %Y-%m-%d} is after the replace-by date of 1 order in this visit" in words
    assert f"{first.motor.asset_tag} run capacitor {first.part.code}, replace by {thursday:%a %Y-%m-%d}" in words
    assert second.motor.asset_tag not in words
    assert set(WorkOrder.objects.values_list("due_on", flat=True)) == {friday}  # moved all the same
    row = answer[answer.index(f">{first.motor.asset_tag}</a>") :].split("</tr>")[0]
    assert thursday.isoformat() in row and "the visit is after it" in row
    other = answer[answer.index(f">{second.motor.asset_tag}</a>") :].split("</tr>")[0]
    assert "the visit is after it" not in other

    listed = client.get(reverse("work_orders")).content.decode()
    assert "<th>Replace by</th>" in listed and listed.count("the visit is after it") == 1
    assert "1 past its replace-by date" in listed


def test_a_technician_reads_that_a_planned_visit_is_not_issued_yet(client, planner, technician):
    """A walk: a technician's sheet and list showed a planned, not-issued visit exactly like an issued one. Both now
    say "planned, not issued yet" (the planner may still move or cancel it); the technician may still record a
    replacement (a capacitor may have failed). Once issued, the words go. Ours."""
    day = timezone.localdate() + dt.timedelta(days=3)
    site = make_site(code="NIS")
    capacitors = _friday_visit(site, day)
    sheet_url = reverse("visit_sheet", args=[site.code, day.isoformat()])
    client.force_login(technician)
    sheet = client.get(sheet_url).content.decode()
    assert "This visit: planned, not issued yet." in sheet and "The planner may still move or cancel" in sheet
    assert 'class="not-issued"' not in sheet  # every order planned: said once, above them
    assert sheet.count("Record the replacement</a>") == 2  # still allowed
    listed = client.get(reverse("work_orders")).content.decode()
    assert '<span class="visit-state not-issued">planned, not issued yet</span>' in listed
    assert listed.count('data-label="State">Planned, not issued yet</td>') == 2
    assert "Planned, not issued yet: the planner may still move or cancel them" in listed

    WorkOrder.objects.filter(pk=WorkOrder.objects.get(fitted_capacitor=capacitors[0]).pk).update(state="issued")
    sheet = client.get(sheet_url).content.decode()
    assert "This visit: 1 issued, 1 planned, not issued yet." in sheet
    assert sheet.count('<span class="not-issued">planned, not issued yet</span>') == 1  # on the planned one
    planned_row = sheet[sheet.index(f">{capacitors[1].motor.asset_tag}</a>") :].split("</tr>")[0]
    assert "not issued yet" in planned_row

    client.force_login(planner)
    client.post(reverse("work_orders"), {"action": "issue", "site": site.id, "day": day.isoformat()})
    client.force_login(technician)
    sheet = client.get(sheet_url).content.decode()
    assert "This visit: issued." in sheet and "not issued yet" not in sheet
    listed = client.get(reverse("work_orders")).content.decode()
    assert "not issued yet" not in listed and '<span class="visit-state">issued</span>' in listed


def test_capacitors_to_replace_now_without_a_work_order_are_counted_with_the_button_that_orders_them(
    client, planner, technician, django_assert_num_queries
):
    """A walk: a capacitor to replace now had no work order until the planner happened to plan, and no page said
    so. The work-orders page and the dashboard count them, the planner with the button that creates them; a
    capacitor with an open order, one removed and one not to replace now are not counted. A review: one whose
    order the planner cancelled was counted too, and the plan does not order it again (`plan_work_orders`), so
    the note stayed after the button; it is counted apart, in words of its own. Ours."""
    from fleet.services.workorders import replace_now_without_order

    today = timezone.localdate()
    site = make_site(code="RNW")
    unordered = [make_fitted_capacitor(motor=make_motor(site=site, route_order=n)) for n in range(2)]
    ordered = make_fitted_capacitor(motor=make_motor(site=site, route_order=5))
    later = make_fitted_capacitor(motor=make_motor(site=site, route_order=6))
    cancelled = make_fitted_capacitor(motor=make_motor(site=site, route_order=7))
    for capacitor in (*unordered, ordered, cancelled):
        stored_assessment(capacitor, "replace now", today)
    stored_assessment(later, "due soon", today + dt.timedelta(days=40))
    WorkOrder.objects.create(motor=ordered.motor, fitted_capacitor=ordered, kind="replace_run", due_on=today)
    order = WorkOrder.objects.create(
        motor=cancelled.motor, fitted_capacitor=cancelled, kind="replace_run", due_on=today, window_days=14
    )
    with django_assert_num_queries(2):  # the count, and those with an order cancelled lately: none yet
        assert replace_now_without_order().count == 2  # the order still open counts as ordered
    cancel_order(order_id=order.id, reason="motor out for rewind", user=planner)
    # The count, those with an order cancelled lately (only they are read, a few rows whatever the fleet), their
    # cancelled orders and those orders' sites' days off (a user's sites add the scoping's look-up).
    with django_assert_num_queries(4):
        counted = replace_now_without_order()
    assert (counted.count, counted.kept_cancelled) == (2, 1)
    assert replace_now_without_order(planner).count == 2

    client.force_login(planner)
    for page in ("work_orders", "dashboard"):
        body = client.get(reverse(page)).content.decode()
        note = body[body.index('id="replace-now-unordered"') :].split("</div>")[0]
        assert "2 capacitors to replace now have no work order." in note, page
        assert 'name="days" value="90"><button class="primary" type="submit" name="action" value="plan">' in note
        assert "1 capacitor to replace now has no work order because the planner cancelled its order:" in body, page
    client.force_login(technician)
    body = client.get(reverse("work_orders")).content.decode()
    note = body[body.index('id="replace-now-unordered"') :].split("</div>")[0]
    assert "2 capacitors to replace now have no work order. Ask the planner" in re.sub(r"<[^>]+>", "", note)
    assert 'value="plan"' not in note

    client.force_login(planner)
    client.post(reverse("work_orders"), {"action": "plan", "days": "90"})
    assert not WorkOrder.objects.filter(fitted_capacitor=cancelled, state__in=["planned", "issued"]).exists()
    after = replace_now_without_order(planner)
    assert (after.count, after.kept_cancelled) == (0, 1)
    body = client.get(reverse("work_orders")).content.decode()
    assert 'id="replace-now-unordered"' not in body and 'id="replace-now-cancelled"' in body


def test_a_visit_on_today_is_not_late_for_a_replace_by_date_already_past(client, planner):
    """A review: a "replace now" planned days ago carries a replace-by date now past, and every visit, today's
    too, was marked "the visit is after it". No visit can come sooner than today: the one rule
    (`workorders.late_order`, `is_late`) marks a visit late only when it is after the replace-by date and after
    today, on the list's rows and count, the visit sheet's rows and day buttons, and a move's warning; the list's
    mark, shown as escaped text, is markup again. Ours,
    [trade] a planned replacement is done by its date or knowingly late (common practice, no single source)."""
    from fleet.services.workorders import is_late, past_replace_by, tightest_replace_by

    today = timezone.localdate()
    passed = today - dt.timedelta(days=3)
    site = make_site(code="PAST")
    on_today, on_later = (make_fitted_capacitor(motor=make_motor(site=site, route_order=n)) for n in range(2))
    later_day = today + dt.timedelta(days=2)
    for capacitor, day in ((on_today, today), (on_later, later_day)):
        stored_assessment(capacitor, "replace now", passed)
        WorkOrder.objects.create(motor=capacitor.motor, fitted_capacitor=capacitor, kind="replace_run", due_on=day)

    assert [is_late(day, passed, today) for day in (today, later_day)] == [False, True]
    assert [is_late(day, today + dt.timedelta(days=5), today) for day in (today, later_day)] == [False, False]
    assert not is_late(later_day, None, today)
    visits = {v["day"]: v["late"] for v in open_visits_page(1, user=planner).object_list}
    assert visits == {today: 0, later_day: 1}
    assert past_replace_by([on_today.id, on_later.id], today, today) == []
    late = past_replace_by([on_today.id, on_later.id], later_day, today)  # a move there: late for both
    assert [(o.replace_by, o.late_after) for o in late] == [(passed, today)] * 2
    assert tightest_replace_by(site.id, today, today=today).late_after == today

    client.force_login(planner)
    listed = client.get(reverse("work_orders")).content.decode()
    rows = re.findall(r"<tr>.*?</tr>", listed[listed.index("PAST") :], re.S)
    marked = [
        ['class="error-text past-replace-by"' in row for row in rows if f">{c.motor.asset_tag}<" in row]
        for c in (on_today, on_later)
    ]
    assert marked == [[False], [True]], marked
    assert "&lt;b class=" not in listed  # the mark as markup, not as text (it was escaped on this list)
    sheet = client.get(reverse("visit_sheet", args=[site.code, today.isoformat()])).content.decode()
    assert 'class="error-text past-replace-by"' not in sheet
    assert "That date has passed: a day after today leaves that order later still." in sheet
    sheet = client.get(reverse("visit_sheet", args=[site.code, later_day.isoformat()])).content.decode()
    assert 'class="error-text past-replace-by"' in sheet


def test_each_folded_visit_says_its_state_and_whether_an_order_is_past_its_date(client, planner):
    """A walk: a folded visit showed only its site, day and count. Each now says its state in words (planned,
    issued, some done already) and how many of its orders the visit's day is past the replace-by date of, counted
    in SQL (the list's query count is pinned in test_page_queries). Ours."""
    monday = timezone.localdate() + dt.timedelta(days=10)
    site = make_site(code="FLD")
    _friday_visit(site, monday, count=1)  # planned
    issued = _friday_visit(site, monday + dt.timedelta(days=1), count=2, state="issued")
    WorkOrder.objects.filter(fitted_capacitor=issued[0]).update(state="done", closed_at=timezone.now())
    mixed = _friday_visit(site, monday + dt.timedelta(days=2), count=2)
    WorkOrder.objects.filter(fitted_capacitor=mixed[0]).update(state="issued")
    stored_assessment(mixed[1], "replace now", monday)  # the visit is two days after its date

    visits = {v["day"]: v for v in open_visits_page(1, user=planner).object_list}
    assert [(v["state"], v["late"]) for v in visits.values()] == [
        ("planned, not issued yet", 0),
        ("issued; 1 more done already", 0),
        ("1 issued, 1 planned, not issued yet", 1),
    ]
    client.force_login(planner)
    listed = client.get(reverse("work_orders")).content.decode()
    summaries = [text for text in re.findall(r"<summary>(.*?)</summary>", listed, re.S) if "visit-count" in text]
    assert len(summaries) == 3
    assert '<span class="visit-state">issued; 1 more done already</span>' in summaries[1]
    assert "past" not in summaries[0] and "1 past its replace-by date</b>" in summaries[2]


def test_every_visit_on_the_soonest_day_is_open_as_the_page_says(client, planner):
    """A walk: three sites had visits on the soonest day and only the first was unfolded, while the page said "the
    soonest visit ... open". Every visit of the soonest day is open, later ones folded. Ours."""
    soonest = timezone.localdate() + dt.timedelta(days=10)
    for code in ("SDA", "SDB"):
        _friday_visit(make_site(code=code), soonest, count=1)
    _friday_visit(make_site(code="SDC"), soonest + dt.timedelta(days=3), count=1)
    client.force_login(planner)
    listed = client.get(reverse("work_orders")).content.decode()
    is_open = {
        code: bool(mark)
        for mark, code in re.findall(r'<details class="card visit"( open)?>\s*<summary>.*?(SD[ABC])', listed, re.S)
    }
    assert is_open == {"SDA": True, "SDB": True, "SDC": False}, is_open
    assert "The soonest day's visits, and any due today or earlier, are open." in listed


def test_a_stop_gaps_order_names_the_design_part_on_its_cancel_page_and_in_the_cancelled_list(client, planner):
    """A walk: a stop-gap's swap order said "Bring RUN-30U-450 (the design part)" on its visit sheet, while its
    cancel page and the list of cancelled orders named only the stop-gap's own part. Both name the design part to
    bring, as the sheet does. Ours."""
    from fleet.services.workorders import order_swap

    site = make_site(code="SGC")
    stop_gap = _stop_gap(site)
    stored_assessment(stop_gap, "sound", None)
    order = order_swap(fitted_capacitor_id=stop_gap.id, user=planner).order
    client.force_login(planner)
    page = re.sub(r"<[^>]+>", "", client.get(reverse("work_order_cancel", args=[order.id])).content.decode())
    assert "bring RUN-8-450 (the design part) for the stop-gap RUN-6-450" in page
    client.post(reverse("work_order_cancel", args=[order.id]), {"reason": "motor to be scrapped"})
    listed = client.get(reverse("work_orders")).content.decode()
    cancelled = re.sub(r"<[^>]+>", "", listed[listed.index('id="cancelled"') :])
    assert "Replace run capacitor: RUN-8-450 (the design part) for the stop-gap RUN-6-450" in cancelled


def test_a_motors_page_names_the_open_orders_of_its_capacitors_and_the_part_to_bring(client, planner, technician):
    """A walk: a technician who scanned a motor's label landed on its page, which said nothing of the order the
    visit held for it, nor, for a stop-gap, which part to bring. Each capacitor in service lists its open orders, on
    the motor's page and on its own (work, the design part to bring, the visit's day and state, a link to the visit
    sheet); a cancelled or done order is not listed. [trade] the work order travels with the job to the equipment
    (common practice of the trade, no single source)."""
    site = make_site(code="MPG")
    stop_gap = _stop_gap(site)
    stored_assessment(stop_gap, "sound", None)
    visit_day = timezone.localdate() + dt.timedelta(days=4)
    order = WorkOrder.objects.create(
        motor=stop_gap.motor,
        fitted_capacitor=stop_gap,
        kind="replace_run",
        due_on=visit_day,
        state="issued",
        reason="stop-gap RUN-6-450 fitted against the advice: fit the design part RUN-8-450",
    )
    other = make_fitted_capacitor(motor=make_motor(site=site, route_order=2))
    WorkOrder.objects.create(
        motor=other.motor,
        fitted_capacitor=other,
        kind="replace_run",
        due_on=visit_day,
        state="cancelled",
        closed_at=timezone.now(),
        cancel_reason="read fine",
    )
    client.force_login(technician)
    page = client.get(reverse("motor", args=[stop_gap.motor.asset_tag])).content.decode()
    section = page[page.index(f'id="capacitor-{stop_gap.id}"') :]
    note = section[section.index(f'id="open-order-{order.id}"') :].split("</p>")[0]
    words = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", "", note[note.index(">") + 1 :]))
    assert words.startswith(f"Work order {order.id}: Replace run capacitor, bring RUN-8-450 (the design part);"), words
    assert f"visit of {visit_day:%a %Y-%m-%d}, issued." in words and "fit the design part RUN-8-450" in words
    assert f'href="{reverse("visit_sheet", args=[site.code, visit_day.isoformat()])}"' in note
    assert "open-order" not in client.get(reverse("motor", args=[other.motor.asset_tag])).content.decode()
    # The capacitor's own page (trend and history) says the same.
    page = client.get(reverse("fitted_capacitor", args=[stop_gap.id])).content.decode()
    assert page[page.index(f'id="open-order-{order.id}"') :].split("</p>")[0] == note
    assert "open-order" not in client.get(reverse("fitted_capacitor", args=[other.id])).content.decode()


def test_the_message_after_a_replacement_names_the_work_orders_it_closed(client, technician):
    """A walk: "Replacement recorded" said nothing of the order the technician had come to do, and a tired one
    could not tell whether it was closed. The message names the orders the replacement closed (a replacement
    order and a read-again order of the same capacitor both), and none where there were none."""
    day = timezone.localdate() + dt.timedelta(days=3)
    worn = make_fitted_capacitor(motor=make_motor(site=make_site(code="MSG")), fitted_on=dt.date(2022, 1, 1))
    orders = [
        WorkOrder.objects.create(motor=worn.motor, fitted_capacitor=worn, kind=kind, due_on=day)
        for kind in ("replace_run", "read_again")
    ]
    client.force_login(technician)
    sent = {"part": worn.part.pk, "removed_on": timezone.localdate().isoformat(), "removal_reason": "failed"}
    page = client.post(reverse("replace", args=[worn.id]), sent, follow=True).content.decode()
    assert f"Replacement recorded; work orders {orders[0].id} and {orders[1].id} are done." in page
    assert set(WorkOrder.objects.filter(fitted_capacitor=worn).values_list("state", flat=True)) == {"done"}
    assert FittedCapacitor.objects.filter(motor=worn.motor, removed_on__isnull=True).count() == 1
    newer = make_fitted_capacitor(motor=make_motor(site=worn.motor.site, route_order=2), fitted_on=dt.date(2022, 1, 1))
    page = client.post(reverse("replace", args=[newer.id]), sent, follow=True).content.decode()
    assert "Replacement recorded. Log the new capacitor" in page


def test_the_work_orders_list_shows_one_site_when_asked(client, planner):
    """A walk: on a phone the list of every site's open visits ran to 23,000 px, with no way to keep to the site
    one works at. [ours] `?site=CODE` lists that site's visits alone (the plan's chooser, the plan's rule for a
    code it cannot use: named in a note, every site shown)."""
    soonest = timezone.localdate() + dt.timedelta(days=10)
    for code in ("WOA", "WOB"):
        _friday_visit(make_site(code=code), soonest, count=1)
    client.force_login(planner)
    both = client.get(reverse("work_orders")).content.decode()
    assert "WOA" in both and "WOB" in both and 'id="site-choice"' in both
    one = client.get(reverse("work_orders"), {"site": "WOB"}).content.decode()
    visits = re.findall(r'<details class="card visit"[^>]*>\s*<summary><h2>(\w+)', one)
    assert visits == ["WOB"] and "Work orders by site visit at WOB" in one
    assert '<option value="WOB" selected>' in one
    unknown = client.get(reverse("work_orders"), {"site": "NOPE"})
    assert unknown.status_code == 200
    page = html.unescape(unknown.content.decode())
    assert "Ignored site:" in page and re.findall(r'<details class="card visit"[^>]*>\s*<summary><h2>(\w+)', page) == [
        "WOA",
        "WOB",
    ]


def test_a_follow_up_replacement_on_an_issued_visit_is_issued_and_stays_on_it(
    client, planner, technician, django_capture_on_commit_callbacks
):
    """A walk: the replacement a read-again reading called for joined its issued visit as a planned order, and the
    planner's next "Create work orders" re-dated it (planned orders are re-dated) to an earlier visit opened for
    another capacitor: the technician working the issued visit's sheet no longer saw it. [ours] on an issued visit
    the follow-up is issued too, so a new plan leaves it where the technician was told it is. A 4 µF +/-5 % run
    capacitor's limit is 3.80 µF [IEC 60252-1 tolerance class; common practice of the trade]."""
    day = timezone.localdate() + dt.timedelta(days=5)
    site = make_site(code="ISU")
    low, other = (make_fitted_capacitor(motor=make_motor(site=site, route_order=n)) for n in (1, 2))
    for capacitor in (low, other):
        WorkOrder.objects.create(
            motor=capacitor.motor, fitted_capacitor=capacitor, kind="read_again", due_on=day, state="issued"
        )
    client.force_login(technician)
    data = {"method": "meter", "capacitance_uf": "3.60", "case_temperature_c": "25", "condition": "sound"}
    with django_capture_on_commit_callbacks(execute=True):
        client.post(reverse("reading_new", args=[low.id]), data)
    follow_up = WorkOrder.objects.get(fitted_capacitor=low, kind="replace_run")
    assert (follow_up.due_on, follow_up.state) == (day, "issued")
    sooner = make_fitted_capacitor(motor=make_motor(site=site, route_order=3))  # another capacitor, due sooner
    stored_assessment(sooner, Assessment.Risk.REPLACE_NOW, timezone.localdate() + dt.timedelta(days=1))
    stored_assessment(low, Assessment.Risk.REPLACE_NOW, timezone.localdate() + dt.timedelta(days=1))
    plan_work_orders(horizon_days=90)
    follow_up.refresh_from_db()
    assert (follow_up.due_on, follow_up.state) == (day, "issued")


def test_issuing_or_planning_from_one_sites_list_comes_back_to_that_sites_list(client, planner):
    """A walk: on the work-orders list kept to one site (?site=CODE), "Issue this visit" and "Create work orders
    from the plan" came back to every site's list, the chooser reset. [ours] the list comes back as it was sent
    from: its site (and page) kept."""
    day = timezone.localdate() + dt.timedelta(days=10)
    for code in ("WOC", "WOD"):
        _friday_visit(make_site(code=code), day, count=1)
    site = Site.objects.get(code="WOD")
    client.force_login(planner)
    address = reverse("work_orders") + "?site=WOD"
    issued = client.post(address, {"action": "issue", "site": site.id, "day": day.isoformat()})
    assert issued.status_code == 302 and issued["Location"] == address
    assert set(WorkOrder.objects.filter(site=site).values_list("state", flat=True)) == {"issued"}
    planned = client.post(address, {"action": "plan", "days": "30"}, follow=True)
    assert planned.redirect_chain == [(address, 302)]
    page = planned.content.decode()
    assert re.findall(r'<details class="card visit"[^>]*>\s*<summary><h2>(\w+)', page) == ["WOD"]


def test_planning_from_one_sites_list_plans_that_site_alone(client, planner):
    """Left from a walk: "Create work orders from the plan" on a list kept to one site planned every site, and the
    note beside it counted every site's "replace now" capacitors without an order. [ours] on one site's list the
    button, its note and its message keep to that site; on every site's list it plans every site."""
    soon = timezone.localdate() + dt.timedelta(days=3)
    here, there = make_site(code="PLA"), make_site(code="PLB")
    mine = _due(here, soon, 2)
    theirs = _due(there, soon, 3)
    Assessment.objects.filter(fitted_capacitor__in=mine + theirs, is_current=True).update(risk="replace now")
    client.force_login(planner)
    address = reverse("work_orders") + "?site=PLA"
    page = client.get(address).content.decode()
    note = page[page.index('id="replace-now-unordered"') :].split("</div>")[0]
    assert "2 capacitors to replace now at PLA have no work order." in note
    assert f'action="{address}"' in note and "Create work orders from the plan at PLA" in note
    assert "only PLA is planned" in page
    planned = client.post(address, {"action": "plan", "days": "30"}, follow=True)
    assert set(WorkOrder.objects.values_list("site__code", flat=True)) == {"PLA"}
    said = html.unescape(planned.content.decode())
    assert "2 work orders created and 0 re-dated, in 1 site visit (PLA " in said
    assert "1 open site visit at PLA." in said
    client.post(reverse("work_orders"), {"action": "plan", "days": "30"})
    assert WorkOrder.objects.filter(site=there).count() == 3


def test_a_visit_sheet_leads_back_to_its_sites_work_orders(client, planner):
    """Left from a walk: a visit sheet's "Work orders" link went to every site's list. [ours] it goes to its site's."""
    day = timezone.localdate() + dt.timedelta(days=10)
    _friday_visit(make_site(code="BKA"), day, count=1)
    client.force_login(planner)
    sheet = client.get(reverse("visit_sheet", args=["BKA", day.isoformat()])).content.decode()
    assert f'href="{reverse("work_orders")}?site=BKA">&larr; Work orders at BKA</a>' in sheet


def test_a_plan_row_to_read_again_says_so_beside_its_badge(planner):
    """A walk: "due soon" stood beside crossing dates marked "past", read as a contradiction (the rule: the trend's
    date went by with no reading below the limit since, so the capacitor is read again first). [ours] the row says
    "read again first" beside the badge; a row to replace does not."""
    site = make_site(code="RAF")
    replaced = _due(site, timezone.localdate() + dt.timedelta(days=20), 1)[0]
    read = _due(site, timezone.localdate() + dt.timedelta(days=20), 1, read_again=True)[0]
    client = Client()
    client.force_login(planner)
    page = client.get(reverse("plan")).content.decode()
    rows = page.split("Capacitors to replace (or read again first) within", 1)[1].split("<tr>")  # the plan's table
    (read_row,) = [row for row in rows if reverse("fitted_capacitor", args=[read.id]) in row]
    (replaced_row,) = [row for row in rows if reverse("fitted_capacitor", args=[replaced.id]) in row]
    assert "read again first: its trend date passed" in read_row
    assert "read again first" not in replaced_row
