"""When a motor was read: when every capacitor in service on it was read. Its last reading, stored as
`Motor.last_read_at`, is the oldest of its positions' newest readings; a position is a role on the motor,
the capacitors it replaced included, and a reading a correction superseded does not count. The route
pages, the dashboard, the ledger behind it and the daily digest follow that one rule.
[trade] readings are quarterly, of every capacitor (the electrolytic start capacitor, which dries out,
included); overdue after 91 days and 14 of grace (the dashboard's words). Counting a reading of the
replaced capacitor for its successor's place is ours: a reading on the removal day is a visit to that
place, whatever became of the capacitor read."""

from __future__ import annotations

import datetime as dt
import re
from urllib.parse import urlencode

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.models import DigestEntry, FittedCapacitor, Motor
from fleet.roles import PLANNER, TECHNICIAN
from fleet.services.alerts import current_conditions
from fleet.services.dashboard import readings_by_route
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_reading, make_site, make_user

pytestmark = pytest.mark.django_db


def remove(fitted_capacitor: FittedCapacitor, day: dt.date, successor: bool = True) -> FittedCapacitor | None:
    """Take the capacitor out on `day` and (`successor`) fit another in its place the same day."""
    FittedCapacitor.objects.filter(pk=fitted_capacitor.pk).update(removed_on=day, removal_reason="failed")
    if successor:
        return make_fitted_capacitor(
            motor=fitted_capacitor.motor, part=fitted_capacitor.part, role=fitted_capacitor.role, fitted_on=day
        )
    return None


class Round:
    """One site's motors, each a case of the rule; readings are entered after the removals, as an
    import of a day's readings brings them in (a reading taken on its capacitor's removal day)."""

    def __init__(self, code: str = "RND"):
        now = timezone.now()
        self.today = timezone.localdate()
        midnight = dt.datetime.combine(self.today, dt.time(), tzinfo=dt.UTC)
        self.read_today = midnight + (now - midnight) / 2  # today, before now
        self.long_ago = now - dt.timedelta(days=200)
        self.site = make_site(code)
        self.part, self.start_part = make_part(), make_part(rated_uf=80.0, dielectric="electrolytic")

        def motor(n):
            return make_motor(site=self.site, route_order=n, commissioned_on=dt.date(2020, 1, 1))

        # Both places read today: the run capacitor's reading was taken as it came out (read below its
        # limit and replaced) and counts for its successor's place.
        self.replaced = motor(1)
        run = make_fitted_capacitor(motor=self.replaced, part=self.part)
        make_reading(run, taken_at=self.long_ago)
        start = make_fitted_capacitor(motor=self.replaced, part=self.start_part, role="start")
        make_reading(start, taken_at=self.read_today)
        remove(run, self.today)
        make_reading(run, taken_at=self.read_today, capacitance_uf=3.5)

        # Half read: the run capacitor today, the start capacitor 200 days ago. Overdue for its start.
        self.half_read = motor(2)
        self.half_read_run = make_fitted_capacitor(motor=self.half_read, part=self.part)
        make_reading(self.half_read_run, taken_at=self.read_today)
        self.half_read_start = make_fitted_capacitor(motor=self.half_read, part=self.start_part, role="start")
        make_reading(self.half_read_start, taken_at=self.long_ago)

        # Its start capacitor was taken out 10 days ago and not replaced (last read 200 days ago): only
        # the run capacitor, read 10 days ago, is left to read.
        self.start_taken_out = motor(3)
        self.ten_days_ago = now - dt.timedelta(days=10)
        run = make_fitted_capacitor(motor=self.start_taken_out, part=self.part)
        make_reading(run, taken_at=self.ten_days_ago)
        self.taken_out = make_fitted_capacitor(motor=self.start_taken_out, part=self.start_part, role="start")
        make_reading(self.taken_out, taken_at=self.long_ago)
        remove(self.taken_out, timezone.localdate(self.ten_days_ago), successor=False)

        # Read "today" by a mistyped date, corrected to 120 days ago: overdue.
        self.corrected = motor(4)
        self.corrected_run = make_fitted_capacitor(motor=self.corrected, part=self.part)
        self.mistyped = make_reading(self.corrected_run, taken_at=self.read_today)
        self.hundred_twenty_days_ago = now - dt.timedelta(days=120)
        make_reading(self.corrected_run, taken_at=self.hundred_twenty_days_ago, supersedes=self.mistyped)

        # Overdue: read 200 days ago only; and never read since commissioned in 2020.
        self.stale = motor(5)
        self.stale_run = make_fitted_capacitor(motor=self.stale, part=self.part)
        make_reading(self.stale_run, taken_at=self.long_ago)
        self.never = motor(6)
        self.never_run = make_fitted_capacitor(motor=self.never, part=self.part)
        self.overdue = {self.half_read.asset_tag, self.corrected.asset_tag, self.stale.asset_tag, self.never.asset_tag}


def route_rows(html: str) -> dict[str, str]:
    """The route page's rows by asset tag: the status and last-read cells' text."""
    rows = {}
    for row in re.findall(r"<tr[^>]*>(.*?)</tr>", html, flags=re.S):
        tag = re.search(r'href="/motors/([^/"]+)/(?:\?next=[^"]*)?"', row)
        if tag:
            cells = [re.sub(r"<[^>]+>", "", cell).strip() for cell in re.findall(r"<td[^>]*>(.*?)</td>", row, re.S)]
            rows[tag.group(1)] = " ".join(cells[-2:])
    return rows


def test_a_motors_last_reading_is_the_oldest_of_its_places_newest_readings():
    scene = Round()
    last_read = dict(Motor.objects.values_list("asset_tag", "last_read_at"))
    assert last_read[scene.replaced.asset_tag] == scene.read_today  # the run place: its predecessor's reading
    assert last_read[scene.half_read.asset_tag] == scene.long_ago  # its start capacitor's
    assert last_read[scene.start_taken_out.asset_tag] == scene.ten_days_ago  # a place no longer in service
    assert last_read[scene.corrected.asset_tag] == scene.hundred_twenty_days_ago  # not the superseded date
    assert last_read[scene.never.asset_tag] is None


def test_fitting_moving_removing_and_deleting_a_capacitor_works_its_motors_last_reading_out_again():
    scene = Round()

    def last_read(motor):
        return Motor.objects.get(pk=motor.pk).last_read_at

    # A start capacitor fitted again where one was taken out: its place was last read 200 days ago.
    refitted = make_fitted_capacitor(motor=scene.start_taken_out, part=scene.start_part, role="start")
    assert last_read(scene.start_taken_out) == scene.long_ago
    refitted.delete()
    assert last_read(scene.start_taken_out) == scene.ten_days_ago
    # A capacitor in a place the motor never had: a place never read.
    added = make_fitted_capacitor(motor=scene.stale, part=scene.start_part, role="start", fitted_on=scene.today)
    assert last_read(scene.stale) is None
    added.delete()
    assert last_read(scene.stale) == scene.long_ago
    # The half-read motor's start capacitor taken out, not replaced: read today.
    FittedCapacitor.objects.filter(pk=scene.half_read_start.pk).update(removed_on=scene.today, removal_reason="other")
    assert last_read(scene.half_read) == scene.read_today
    # A capacitor moved to another motor (a register correction) takes its readings along.
    FittedCapacitor.objects.filter(pk=scene.stale_run.pk).update(role="start")
    assert last_read(scene.stale) == scene.long_ago
    FittedCapacitor.objects.filter(pk=scene.never_run.pk).update(motor=scene.stale)
    assert last_read(scene.stale) is None  # its run place (the moved capacitor) was never read
    assert last_read(scene.never) is None  # no capacitor, no reading
    FittedCapacitor.objects.filter(pk=scene.never_run.pk).update(motor=scene.never)
    assert last_read(scene.stale) == scene.long_ago


def test_a_motor_read_on_a_capacitor_removed_since_counts_as_read_on_the_dashboard_and_its_route(client):
    scene = Round()
    route = readings_by_route(None, scene.today)["routes"][0]
    assert route["overdue"] == 4  # half read, corrected, stale and never read
    assert route["read"] == 2  # both places read today, one on a capacitor that came out today; read 10 days ago
    assert route["overdue"] + route["due"] + route["read"] == 6

    client.force_login(make_user(TECHNICIAN))
    rows = route_rows(client.get(reverse("route", args=[scene.site.code])).content.decode())
    assert rows[scene.replaced.asset_tag] == f"done {scene.today:%Y-%m-%d}"
    newer = timezone.localdate(scene.ten_days_ago)
    assert rows[scene.start_taken_out.asset_tag] == f"done {newer:%Y-%m-%d}"
    long_ago = timezone.localdate(scene.long_ago)
    assert rows[scene.half_read.asset_tag] == f"overduestart capacitor still to read {long_ago:%Y-%m-%d}"
    assert rows[scene.stale.asset_tag].startswith("overdue") and "still to read" not in rows[scene.stale.asset_tag]
    assert rows[scene.stale.asset_tag].startswith("overdue") and rows[scene.never.asset_tag] == "overdue never"


def test_the_dashboards_overdue_count_is_the_overdue_rows_of_the_route_pages_it_links_to(client):
    scenes = [Round("RNA"), Round("RNB")]
    Motor.objects.filter(pk=scenes[1].stale.pk).update(status=Motor.Status.RETIRED)  # no longer on any route
    client.force_login(make_user(PLANNER))
    page = client.get(reverse("dashboard"))
    links = re.findall(r'href="(/sites/[^/"]+/route/\?show=due)"', page.content.decode())
    assert len(links) == 2
    overdue_rows = []
    for link in links:
        rows = route_rows(client.get(link).content.decode())
        overdue_rows += [tag for tag, cells in rows.items() if cells.startswith("overdue")]
    assert page.context["overdue_total"] == len(overdue_rows) == 7
    assert set(overdue_rows) == scenes[0].overdue | scenes[1].overdue - {scenes[1].stale.asset_tag}


def test_the_digest_reports_the_overdue_capacitors_of_the_overdue_motors_only():
    scene = Round()
    conditions = {
        key[1]: value for key, value in current_conditions(scene.today).items() if key[0] == DigestEntry.Kind.OVERDUE
    }
    # The half-read motor's run capacitor, read today, is not reported with its start capacitor.
    assert set(conditions) == {scene.half_read_start.id, scene.corrected_run.id, scene.stale_run.id, scene.never_run.id}
    days = (scene.today - timezone.localdate(scene.long_ago)).days
    assert conditions[scene.half_read_start.id]["reason"].endswith(f"{days} days ago")


ROUTE_ROW_TEMPLATE = """{% for motor in motors %}
<tr id="motor-{{ motor.asset_tag }}"><td class="num">{% if can_order %}<input type="text" inputmode="numeric" name="order-{{ motor.id }}" id="place-{{ motor.asset_tag }}" value="{{ motor.route_order }}" style="width:4.5em" aria-label="Place of {{ motor.asset_tag }} on the route"><input type="hidden" name="was-{{ motor.id }}" value="{{ motor.route_order }}">{% else %}{{ motor.route_order }}{% endif %}</td>
  <td><a class="button nowrap {% if not motor.due %}secondary{% endif %}" href="{% url 'motor' motor.asset_tag %}">{{ motor.asset_tag }}</a></td>
  <td>{{ motor.location }}<br><span class="muted">{{ motor.get_application_display }}</span></td>
  <td>{% if motor.overdue %}<b class="error-text">overdue</b>{% elif motor.due %}<b>to read</b>{% else %}done{% endif %}{% if motor.still_to_read %}<br><span class="muted">{{ motor.still_to_read|join:" and " }} still to read</span>{% endif %}</td>
  <td data-label="Last read">{{ motor.last_read_at|day:"Y-m-d"|default:"never" }}</td></tr>
{% endfor %}"""  # noqa: E501


@pytest.mark.parametrize("can_order", [True, False])
def test_the_route_rows_written_in_python_are_the_markup_the_template_wrote(can_order):
    """[derived] A route page's rows, now written by a template tag, equal what the template loop they
    replaced renders for the same motors: done, overdue and never read, a motor half read with the
    capacitor still to read, markup in a location escaped, the place on the route as a field or as text."""
    from django.template import engines

    from fleet.services.pages import route_for_site
    from fleet.templatetags.fleet_rows import route_rows

    scene = Round()
    Motor.objects.filter(pk=scene.stale.pk).update(location="Bay <3 & pumps")
    motors, _, _ = route_for_site(scene.site, today=scene.today)
    rows = motors[0:100]
    assert len(rows) == 6 and [motor.still_to_read for motor in rows if motor.still_to_read] == [["start capacitor"]]
    reference = engines["django"].from_string(ROUTE_ROW_TEMPLATE)
    assert route_rows(rows, can_order) == reference.render({"motors": rows, "can_order": can_order})


def test_a_motor_read_this_quarter_with_an_open_read_again_order_is_still_to_read_and_counted_so(client):
    """The plan raises "read again" where a trend's early crossing passed with no reading since; until a
    reading closes it, its motor is still to read, whenever it was last read: the route row says why and
    links to the reading form, and the route's counts, its "only the ones to read" list and the
    dashboard's readings by route count it as its row shows it [derived: one rule for every count]."""
    from fleet.models import WorkOrder

    scene = Round()
    start = FittedCapacitor.objects.get(motor=scene.replaced, role="start", removed_on__isnull=True)
    removed_run = FittedCapacitor.objects.get(motor=scene.replaced, role="run", removed_on__isnull=False)
    still_run = FittedCapacitor.objects.get(motor=scene.start_taken_out, removed_on__isnull=True)
    due_on = scene.today + dt.timedelta(days=3)

    def order(fitted_capacitor, state):
        closed = timezone.now() if state in ("done", "cancelled") else None
        return WorkOrder.objects.create(
            motor=fitted_capacitor.motor,
            fitted_capacitor=fitted_capacitor,
            kind=WorkOrder.Kind.READ_AGAIN,
            state=state,
            due_on=due_on,
            closed_at=closed,
        )

    asked = order(start, "issued")
    order(removed_run, "planned")  # of a capacitor taken out: no longer asks anything of the motor
    order(still_run, "done")  # a reading closed it: read
    client.force_login(make_user(TECHNICIAN))
    url = reverse("route", args=[scene.site.code])
    page = client.get(url).content.decode()
    rows = route_rows(page)
    assert rows[scene.replaced.asset_tag].startswith(
        f"to readread again: work order {asked.id} for the start capacitor, visit {due_on:%Y-%m-%d} Record the reading"
    )
    # The reading form's link carries the route, to come back to it once the reading is saved.
    assert f'href="{reverse("reading_new", args=[start.id])}?{urlencode({"next": url})}"' in page
    assert rows[scene.start_taken_out.asset_tag].startswith("done")
    assert "5 of 6 motors still to read" in page  # four overdue, and the one to read again
    only_due = route_rows(client.get(url, {"show": "due"}).content.decode())
    assert len(only_due) == 5 and scene.replaced.asset_tag in only_due
    route = readings_by_route(None, scene.today)["routes"][0]
    assert (route["overdue"], route["due"], route["read"]) == (4, 1, 1)
    # A reading closes the order (`close_read_again_orders`): the motor is read.
    WorkOrder.objects.filter(pk=asked.pk).update(state="done", closed_at=timezone.now())
    assert route_rows(client.get(url).content.decode())[scene.replaced.asset_tag].startswith("done")
    assert "4 of 6 motors still to read" in client.get(url).content.decode()
