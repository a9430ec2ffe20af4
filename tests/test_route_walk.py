"""A technician's walk down a site's reading route: from the route to a motor, its reading and back, on to the
next motor still to read; the reading form of a capacitor removed that day; a replacement recorded from its order."""

from __future__ import annotations

import re
from urllib.parse import quote

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone
from django.utils.html import strip_tags

from fleet.models import FittedCapacitor, Motor, WorkOrder
from fleet.services import pages
from fleet.services.readings import replace_capacitor
from tests.factories import make_fitted_capacitor, make_motor, make_reading, make_site

pytestmark = pytest.mark.django_db

SOUND_READING = {"method": "meter", "capacitance_uf": "3.95", "case_temperature_c": "25", "condition": "sound"}


def _route(site_code: str, motors: int, read: tuple[int, ...] = ()) -> list[FittedCapacitor]:
    """A site whose motors walk in the order they are made (route places 10, 20, ...), each with a 4 µF ±5 % run
    capacitor; those at the places in `read` read today (not to read again this quarter)."""
    site = make_site(site_code)
    capacitors = []
    for n in range(motors):
        motor = make_motor(site=site, asset_tag=f"{site_code}-{n + 1:04d}", route_order=10 * (n + 1))
        capacitors.append(make_fitted_capacitor(motor=motor))
        if n in read:
            make_reading(capacitors[-1], taken_at=timezone.now() - timezone.timedelta(minutes=5))
    return capacitors


def _words(response) -> str:
    return " ".join(strip_tags(response.content.decode()).split())


def test_a_reading_logged_from_the_route_goes_back_to_the_route_as_left_and_on_to_the_next_motor(client, technician):
    """A walk: route, "Show only the N to read", a motor, Log reading, Save: the motor's page then led back to the
    whole route (the filter lost, at its top), and said "Reading saved" with neither the value nor where to go next.
    The route goes with each link as `?next=`; the saved message gives the value and its verdict as measured and
    the next motor still to read in walking order. [trade] a reading route is walked in a fixed order, each motor
    read once a round (common practice of the trade, no single source)."""
    first, done, third, last = _route("RTE", 4, read=(1,))
    due = reverse("route", args=["RTE"]) + "?show=due"
    back = f"?next={quote(due, safe='')}"
    client.force_login(technician)
    route_page = client.get(due).content.decode()
    motor_page = reverse("motor", args=["RTE-0001"]) + back
    assert f'href="{motor_page}"' in route_page  # the route's link to the motor carries the route
    page = client.get(motor_page).content.decode()
    assert f'<a class="back" href="{due}#motor-RTE-0001">' in page  # back to the filtered route, at this motor
    reading_form = reverse("reading_new", args=[first.id]) + back
    assert f'href="{reading_form}"' in page
    assert (
        f'<a class="back" href="{reverse("motor", args=["RTE-0001"])}{back}">'
        in client.get(reading_form).content.decode()
    )

    response = client.post(reading_form, SOUND_READING)
    assert response["Location"] == f"{motor_page}&saved={first.id}"
    landed = client.get(response["Location"])
    assert "Reading saved for RTE-0001 (run capacitor): 3.95 µF, within tolerance." in _words(landed)
    # RTE-0002 was read today: the next still to read is RTE-0003, its page with the route too.
    next_page = reverse("motor", args=["RTE-0003"]) + back
    assert f'<a class="button next-to-read" href="{next_page}">Next to read: <span class="nowrap">RTE-0003</span>' in (
        landed.content.decode()
    )

    # At the route's end the one skipped on the way is next; once all are read, none is offered.
    client.post(reverse("reading_new", args=[last.id]) + back, SOUND_READING)
    landed = client.get(reverse("motor", args=["RTE-0004"]) + back).content.decode()
    assert f'href="{next_page}">Next to read: <span class="nowrap">RTE-0003</span>' in landed
    response = client.post(reverse("reading_new", args=[third.id]) + back, SOUND_READING, follow=True)
    said = _words(response)
    assert "Next to read" not in said and "No other motor is left to read on the RTE route this quarter." in said
    assert done.motor.asset_tag not in said


def test_the_saved_message_gives_the_verdict_against_the_marked_tolerance(client, technician):
    """[derived] 4 µF marked ±5 % accepts 3.80 to 4.20 µF: 3.70 µF is below tolerance, as the assessment words it
    (`capacitor.VERDICT_NAMES`). [trade] the tolerance is marked as a percentage of rated capacitance (IEC 60252-1
    marking of motor capacitors, from memory, unverified)."""
    (fitted_capacitor,) = _route("VER", 1)
    client.force_login(technician)
    data = {**SOUND_READING, "capacitance_uf": "3.7", "confirmed": "on"}
    response = client.post(reverse("reading_new", args=[fitted_capacitor.id]), data, follow=True)
    assert "Reading saved for VER-0001 (run capacitor): 3.70 µF, below tolerance." in _words(response)
    assert "Next to read" not in _words(response)  # not reached from the route: no route to walk on


@pytest.mark.parametrize(
    "next_page",
    [
        "https://example.org/sites/RTE/route/?show=due",
        "//example.org/sites/RTE/route/?show=due",
        "/sites/OTHER/route/?show=due",  # another site's route: not this motor's way back
        "/sites/RTE/route/../../admin/",
    ],
)
def test_a_way_back_that_is_not_this_sites_route_is_ignored(client, technician, next_page):
    """`?next=` is taken only as a page of ours (`register.page_to_return_to`), never a redirect elsewhere."""
    (fitted_capacitor,) = _route("RTE", 1)
    make_site("OTHER")
    client.force_login(technician)
    back = f"?next={quote(next_page, safe='')}"
    page = client.get(reverse("motor", args=["RTE-0001"]) + back).content.decode()
    assert f'<a class="back" href="{reverse("route", args=["RTE"])}#motor-RTE-0001">' in page
    assert "example.org" not in page.split("</header>")[1].split("Caution")[0]
    response = client.post(reverse("reading_new", args=[fitted_capacitor.id]) + back, SOUND_READING)
    assert response["Location"] == f"{reverse('motor', args=['RTE-0001'])}?saved={fitted_capacitor.id}"


def test_the_next_motor_to_read_is_one_query_and_the_motor_page_keeps_its_count(
    client, technician, django_assert_num_queries
):
    """[derived] the next motor is found by one ordered query, and the motor page reached with the route reads
    the same number of queries on a route of 3 motors as of 30."""
    client.force_login(technician)
    counts = []
    for code, motors in (("SHORT", 3), ("LONG", 30)):
        capacitors = _route(code, motors, read=(0,))
        motor = Motor.objects.select_related("site").get(pk=capacitors[0].motor_id)
        with django_assert_num_queries(1):
            following = pages.next_to_read(motor)
        assert following.asset_tag == f"{code}-0002"
        address = reverse("motor", args=[motor.asset_tag])
        address += f"?next={quote(reverse('route', args=[code]) + '?show=due', safe='')}&saved={capacitors[0].id}"
        client.get(address)
        with CaptureQueriesContext(connection) as queries:
            assert client.get(address).status_code == 200
        counts.append(len(queries))
    assert counts[0] == counts[1], counts


def test_the_removed_capacitors_reading_form_says_so_and_leads_to_the_one_fitted_now(client, technician):
    """A walk on replacement day: the removed capacitor's reading form had the same heading as the new one's
    ("Reading: CST-0022, start capacitor"). Its heading says it is the removed one, out of service, and a button
    leads to the reading form of the capacitor in its place now (the page to go back to kept)."""
    (removed,) = _route("REM", 1)
    successor = replace_capacitor(
        fitted_capacitor=removed, part=removed.part, removed_on=timezone.localdate(), reason="planned"
    )
    client.force_login(technician)
    page = client.get(reverse("reading_new", args=[removed.id])).content.decode()
    heading = " ".join(strip_tags(re.search(r"<h1>.*?</h1>", page, re.S).group(0)).split())
    today = timezone.localdate().isoformat()
    assert heading == f"Reading: REM-0001, the run capacitor removed on {today} (out of service)"
    assert f'id="successor-reading" href="{reverse("reading_new", args=[successor.id])}"' in page
    new_heading = re.search(r"<h1>.*?</h1>", client.get(reverse("reading_new", args=[successor.id])).content.decode())
    assert strip_tags(new_heading.group(0)) == "Reading: REM-0001, run capacitor"
    # The new one's form says which it is (a walk found it said nothing but the role after a replacement).
    new_page = client.get(reverse("reading_new", args=[successor.id])).content.decode()
    assert f'id="fitted-on">Fitted <span class="nowrap">{today}</span>.</span>' in new_page
    visit = reverse("work_orders")
    page = client.get(reverse("reading_new", args=[removed.id]) + f"?next={visit}").content.decode()
    assert f'id="successor-reading" href="{reverse("reading_new", args=[successor.id])}?next=%2Fwork-orders%2F"' in page


def _checked_reason(page: str) -> str | None:
    checked = re.findall(r'<input type="radio" name="removal_reason" value="(\w+)"[^>]*\bchecked\b', page)
    assert len(checked) <= 1, checked
    return checked[0] if checked else None


def _on_an_issued_replacement_order(site_code: str) -> tuple[FittedCapacitor, WorkOrder]:
    """A site of one motor whose run capacitor has an issued replacement order due today."""
    (fitted_capacitor,) = _route(site_code, 1)
    order = WorkOrder.objects.create(
        motor=fitted_capacitor.motor,
        fitted_capacitor=fitted_capacitor,
        kind=WorkOrder.Kind.REPLACE_RUN,
        due_on=timezone.localdate(),
        state=WorkOrder.State.ISSUED,
    )
    return fitted_capacitor, order


def test_a_replacement_form_takes_no_reason_for_granted_from_its_planned_order_either(client, technician):
    """Walks disagreed: one found "Record the replacement" on a planned order opening with no reason chosen and had
    the form start at "Replaced on plan"; a later one saved a capacitor it had found failed on that visit as
    replaced on plan, which the life data count as one still working (a suspension), and the life estimate runs
    long. [trade] a unit removed failed is a failure, one removed still working a suspension (IEC 61649, 2008,
    from memory, unverified). [ours] the technician chooses every time, from the work orders, the motor's page or
    the route alike, told which reason is which and why it counts; saved without one, the form says so."""
    fitted_capacitor, _ = _on_an_issued_replacement_order("PLN")
    client.force_login(technician)
    form = reverse("replace", args=[fitted_capacitor.id])
    from_orders = f"{form}?next={reverse('work_orders')}"
    assert f'href="{from_orders}"' in client.get(reverse("work_orders")).content.decode()
    page = client.get(from_orders).content.decode()
    assert _checked_reason(page) is None and "The life data count it as a failure" in page
    assert _checked_reason(client.get(form).content.decode()) is None  # from the motor's page
    route = f"{form}?next={quote(reverse('route', args=['PLN']), safe='')}"
    assert _checked_reason(client.get(route).content.decode()) is None  # from the route
    unchosen = client.post(from_orders, {"part": fitted_capacitor.part_id, "removed_on": timezone.localdate()})
    assert "Choose why the old capacitor came out" in unchosen.content.decode()
    assert FittedCapacitor.objects.filter(pk=fitted_capacitor.pk, removed_on__isnull=True).exists()


def test_a_half_read_motor_offers_its_other_capacitor_before_the_next_motor(client, technician):
    """A motor with a run and a start capacitor, its run capacitor read from the route: the message offered the next
    motor while the route still listed this one as half read ("start capacitor" to read). It offers the start
    capacitor's reading form first, with the route kept, and the next motor once both are read. [trade] a motor
    isolated and its capacitors discharged for one reading has the other read while it is (common practice of the
    trade, no single source)."""
    run, _ = _route("HLF", 2)
    start = make_fitted_capacitor(motor=run.motor, role="start")
    due = reverse("route", args=["HLF"]) + "?show=due"
    back = f"?next={quote(due, safe='')}"
    client.force_login(technician)
    landed = client.post(reverse("reading_new", args=[run.id]) + back, SOUND_READING, follow=True).content.decode()
    start_form = reverse("reading_new", args=[start.id]) + back
    assert f'href="{start_form}">Still to read here: the start capacitor of' in landed
    assert "Next to read" not in landed
    landed = client.post(start_form, SOUND_READING | {"capacitance_uf": "4.0"}, follow=True).content.decode()
    assert "Still to read here" not in landed and 'Next to read: <span class="nowrap">HLF-0002</span>' in landed
