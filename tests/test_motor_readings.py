"""When a motor was read: when any capacitor fitted to it (either role, in service or removed since) was
read; its last reading is the newest such reading, stored as `Motor.last_read_at`. The dashboard, the
route pages it links to, the ledger behind the dashboard and the daily digest follow that one rule.
[trade] readings are quarterly; overdue after 91 days and 14 of grace (the dashboard's words). The
rule on removed capacitors is ours: a reading is a visit to the motor, whatever became of the
capacitor read."""

from __future__ import annotations

import datetime as dt
import re

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.models import DigestEntry, FittedCapacitor, Motor
from fleet.roles import PLANNER, TECHNICIAN
from fleet.services.alerts import current_conditions
from fleet.services.dashboard import readings_by_route
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_reading, make_site, make_user

pytestmark = pytest.mark.django_db


def remove(fitted_capacitor: FittedCapacitor, day: dt.date) -> FittedCapacitor:
    """Take the capacitor out on `day` and fit its successor the same day."""
    FittedCapacitor.objects.filter(pk=fitted_capacitor.pk).update(removed_on=day, removal_reason="failed")
    return make_fitted_capacitor(motor=fitted_capacitor.motor, part=fitted_capacitor.part, fitted_on=day)


class Round:
    """One site's motors, each a case of the rule; readings are entered after the removals, as an
    import of a day's readings brings them in (a reading taken on its capacitor's removal day)."""

    def __init__(self, code: str = "RND"):
        now = timezone.now()
        self.today = timezone.localdate()
        midnight = dt.datetime.combine(self.today, dt.time(), tzinfo=dt.UTC)
        self.read_today = midnight + (now - midnight) / 2  # today, before now
        long_ago = now - dt.timedelta(days=200)
        self.site = make_site(code)
        part, start_part = make_part(), make_part(rated_uf=80.0, dielectric="electrolytic")

        def motor(n):
            return make_motor(site=self.site, route_order=n, commissioned_on=dt.date(2020, 1, 1))

        # Read today on its run capacitor, which came out today (read below its limit and replaced);
        # its start capacitor, in service, was last read 200 days ago.
        self.replaced = motor(1)
        run = make_fitted_capacitor(motor=self.replaced, part=part)
        make_reading(run, taken_at=long_ago)
        self.replaced_start = make_fitted_capacitor(motor=self.replaced, part=start_part, role="start")
        make_reading(self.replaced_start, taken_at=long_ago)
        remove(run, self.today)
        make_reading(run, taken_at=self.read_today, capacitance_uf=3.5)

        # Last read 120 days ago on the start capacitor in service, 10 days ago on a run capacitor
        # removed that day: the removed one's reading is the newer.
        self.newer_on_removed = motor(2)
        self.newer_start = make_fitted_capacitor(motor=self.newer_on_removed, part=start_part, role="start")
        make_reading(self.newer_start, taken_at=now - dt.timedelta(days=120))
        removed = make_fitted_capacitor(motor=self.newer_on_removed, part=part)
        self.ten_days_ago = now - dt.timedelta(days=10)
        remove(removed, timezone.localdate(self.ten_days_ago))
        make_reading(removed, taken_at=self.ten_days_ago)

        # Overdue: read 200 days ago only; and never read since commissioned in 2020.
        self.stale = motor(3)
        self.stale_run = make_fitted_capacitor(motor=self.stale, part=part)
        make_reading(self.stale_run, taken_at=long_ago)
        self.never = motor(4)
        self.never_run = make_fitted_capacitor(motor=self.never, part=part)
        self.overdue = {self.stale.asset_tag, self.never.asset_tag}


def route_rows(html: str) -> dict[str, str]:
    """The route page's rows by asset tag: the status and last-read cells' text."""
    rows = {}
    for row in re.findall(r"<tr>(.*?)</tr>", html, flags=re.S):
        tag = re.search(r'href="/motors/([^/"]+)/"', row)
        if tag:
            cells = [re.sub(r"<[^>]+>", "", cell).strip() for cell in re.findall(r"<td[^>]*>(.*?)</td>", row, re.S)]
            rows[tag.group(1)] = " ".join(cells[-2:])
    return rows


def test_a_motors_last_reading_is_the_newest_of_any_capacitor_fitted_to_it():
    scene = Round()
    last_read = dict(Motor.objects.values_list("asset_tag", "last_read_at"))
    assert last_read[scene.replaced.asset_tag] == scene.read_today
    assert last_read[scene.newer_on_removed.asset_tag] == scene.ten_days_ago
    assert last_read[scene.never.asset_tag] is None


def test_a_motor_read_on_a_capacitor_removed_since_counts_as_read_on_the_dashboard_and_its_route(client):
    scene = Round()
    route = readings_by_route(None, scene.today)["routes"][0]
    assert route["overdue"] == 2  # stale and never read; not the two read on capacitors removed since
    assert route["read"] >= 1  # read today, on a capacitor that came out today
    assert route["overdue"] + route["due"] + route["read"] == 4

    client.force_login(make_user(TECHNICIAN))
    rows = route_rows(client.get(reverse("route", args=[scene.site.code])).content.decode())
    assert rows[scene.replaced.asset_tag] == f"done {scene.today:%Y-%m-%d}"
    newer = timezone.localdate(scene.ten_days_ago)
    assert rows[scene.newer_on_removed.asset_tag].endswith(f"{newer:%Y-%m-%d}")
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
    assert page.context["overdue_total"] == len(overdue_rows) == 3
    assert set(overdue_rows) == scenes[0].overdue | {scenes[1].never.asset_tag}


def test_the_digest_reports_the_capacitors_of_the_overdue_motors_only():
    scene = Round()
    overdue = {key[1] for key in current_conditions(scene.today) if key[0] == DigestEntry.Kind.OVERDUE}
    # The start capacitors not read for 200 and 120 days sit on motors read today and 10 days ago.
    assert overdue == {scene.stale_run.id, scene.never_run.id}
