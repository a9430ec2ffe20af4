"""The planner's dashboard reads stored results by aggregation; the daily digest by email."""

import datetime as dt
import re

import numpy as np
import pytest
from django.core import mail
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone
from scipy import stats

from fleet.charts import spares_figure
from fleet.engineering.lifedata import successor_failures
from fleet.models import DigestEntry, FittedCapacitor, PartLifeFit, SiteMembership, SiteStock, WorkOrder
from fleet.roles import PLANNER, TECHNICIAN
from fleet.services.alerts import send_daily_digest
from fleet.services.dashboard import readings_by_route, risk_mix, spares_by_month, weekly_workload
from tests.factories import (
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_reading,
    make_site,
    make_user,
    stored_assessment,
)

pytestmark = pytest.mark.django_db

TODAY = dt.date(2026, 12, 2)  # a Wednesday; its week starts on Monday 2026-11-30


def fleet(per_site: int, sites=None, part=None):
    """Two sites of capacitors at every risk level, read recently, with work orders and stock."""
    sites = sites or [make_site(), make_site()]
    part = part or make_part(unit_cost=10)
    fitted_capacitors = []
    for site in sites:
        for i in range(per_site):
            fitted_capacitor = make_fitted_capacitor(
                motor=make_motor(site=site), part=part, fitted_on=dt.date(2020, 1, 1)
            )
            make_reading(fitted_capacitor, taken_at=timezone.now() - dt.timedelta(days=3))
            risk = ("replace now", "due soon", "watch", "sound")[i % 4]
            stored_assessment(fitted_capacitor, risk, timezone.localdate() + dt.timedelta(days=10 * i))
            WorkOrder.objects.create(
                motor=fitted_capacitor.motor,
                fitted_capacitor=fitted_capacitor,
                kind="replace_run",
                due_on=timezone.localdate(),
            )
            fitted_capacitors.append(fitted_capacitor)
        SiteStock.objects.create(site=site, part=part, quantity=2)
    PartLifeFit.objects.update_or_create(part=part, defaults=dict(beta=2.0, eta_years=10.0, failures=3, suspensions=10))
    return fitted_capacitors


def test_the_dashboard_takes_as_many_queries_for_a_large_fleet_as_for_a_small_one(client):
    planner = make_user(PLANNER)
    client.force_login(planner)
    fleet(per_site=2)
    client.get(reverse("dashboard"))  # session and permission caches warm
    with CaptureQueriesContext(connection) as small:
        assert client.get(reverse("dashboard")).status_code == 200
    fleet(per_site=12)
    with CaptureQueriesContext(connection) as large:
        response = client.get(reverse("dashboard"))
    assert response.status_code == 200
    assert len(large.captured_queries) == len(small.captured_queries)
    # [derived] every replace-by date of both fleets lies within 110 days: all 28 are in the 26 weeks
    assert response.context["workload"]["total"] == 2 * 2 + 2 * 12


def test_workload_counts_each_week_by_risk_and_site_with_past_dates_in_this_week():
    here, there = make_site(code="HERE"), make_site(code="THERE")
    part = make_part()
    due = [  # (site, risk, replace_by)
        (here, "replace now", TODAY - dt.timedelta(days=40)),  # past its date: this week
        (here, "due soon", TODAY + dt.timedelta(days=5)),  # Monday 2026-12-07: the second week
        (there, "due soon", TODAY + dt.timedelta(days=6)),
        (there, "watch", TODAY + dt.timedelta(weeks=30)),  # beyond 26 weeks: not counted
    ]
    for site, risk, replace_by in due:
        fitted_capacitor = make_fitted_capacitor(motor=make_motor(site=site), part=part)
        stored_assessment(fitted_capacitor, risk, replace_by)
    removed = make_fitted_capacitor(part=part, removed_on=TODAY, removal_reason="planned")
    stored_assessment(removed, "replace now", TODAY)  # no longer in service: not counted
    workload = weekly_workload(None, TODAY)
    assert workload["weeks"][0] == dt.date(2026, 11, 30) and len(workload["weeks"]) == 26
    assert workload["by_risk"]["replace now"][:2] == [1, 0]
    assert workload["by_risk"]["due soon"][:2] == [0, 2]
    assert "watch" not in workload["by_risk"]
    assert workload["by_site"]["HERE"][:2] == [1, 1] and workload["by_site"]["THERE"][:2] == [0, 1]
    assert workload["total"] == 3 and workload["past_due"] == 1


def test_spares_add_the_plan_and_the_failures_expected_from_life_data_against_stock():
    site = make_site()
    part = make_part(unit_cost=10)
    PartLifeFit.objects.create(part=part, beta=2.5, eta_years=8.0, failures=5, suspensions=20)
    planned = make_fitted_capacitor(motor=make_motor(site=site), part=part, fitted_on=dt.date(2021, 12, 10))
    stored_assessment(planned, "due soon", dt.date(2027, 2, 20))  # third month
    unplanned = make_fitted_capacitor(motor=make_motor(site=site), part=part, fitted_on=dt.date(2021, 12, 10))
    SiteStock.objects.create(site=site, part=part, quantity=1)
    spares = spares_by_month(None, TODAY)
    row = spares["parts"][0]
    assert spares["months"][0] == dt.date(2026, 12, 1) and len(spares["months"]) == 12
    assert row["planned"][:4] == [0, 0, 1, 0] and sum(row["planned"]) == 1
    # [pub] scipy.stats.weibull_min conditional probabilities; ages from mid-month
    weibull = stats.weibull_min(2.5, scale=8.0)
    age = (TODAY - dt.date(2021, 12, 16)).days / 365.25  # the 1st of the fitting month and 15 days
    months = [dt.date(2026, 12, 1)] + [dt.date(2027, m, 1) for m in range(1, 13)]
    edges = np.array([max((m - TODAY).days, 0) for m in months]) / 365.25
    unplanned_failures = (weibull.sf(age + edges[:-1]) - weibull.sf(age + edges[1:])) / weibull.sf(age)
    until = (dt.date(2027, 2, 16) - TODAY).days / 365.25  # the planned one counts until mid-February
    cut = np.minimum(edges, until)
    planned_failures = (weibull.sf(age + cut[:-1]) - weibull.sf(age + cut[1:])) / weibull.sf(age)
    in_service = unplanned_failures + planned_failures
    # and the new capacitor the plan fits in February, and those fitted in place of failures, can fail too
    # (the renewal process, `successor_failures`, checked in tests/engineering/test_lifedata.py)
    plan = np.array(row["planned"], float)
    successors = successor_failures([2.5], [8.0], [plan + in_service], edges)[0]
    assert successors[3:].sum() > successors[:2].sum() > 0
    assert row["failures"] == pytest.approx(in_service + successors, rel=1e-6)
    assert row["need"][2] == pytest.approx(1 + row["failures"][2])
    assert row["cost"] == pytest.approx([10 * n for n in row["need"]])
    assert row["stock"] == 1
    # [derived] the stock of one runs short in the first month whose cumulative need, rounded up, passes it
    cumulative = np.ceil(np.cumsum(row["need"]) - 1e-9)
    assert row["short_from"] == spares["months"][int(np.flatnonzero(cumulative > 1)[0])]
    assert unplanned.removed_on is None


def test_the_spares_chart_names_months_with_their_year_and_steps_the_cost_in_round_numbers():
    months = [dt.date(2026, 12, 1).isoformat()] + [dt.date(2027, m, 1).isoformat() for m in range(1, 12)]
    parts = [{"code": "P1", "need": [1.0] * 12, "planned": [1] * 12, "failures": [0.0] * 12}]
    figure = spares_figure(months, parts, [926.4, 231.6, 463.2] + [0.0] * 9)
    layout = figure["layout"]
    assert layout["xaxis"]["tickformat"] == "%b %Y"  # "Jan 2027", never "Jan 27" (read as a day)
    # Every other month is labelled, from the first: counted from January, "Dec 2026" had no label.
    assert (layout["xaxis"]["dtick"], layout["xaxis"]["tick0"]) == ("M2", months[0])
    cost_axis = layout["yaxis2"]
    # [derived] about five ticks up to 926: a step of 1, 2 or 5 times a power of ten, from zero
    assert (cost_axis["tickmode"], cost_axis["tick0"], cost_axis["dtick"]) == ("linear", 0, 200)
    assert "parts' prices" in cost_axis["title"]["text"]  # no currency is known: the unit prices are entered in


def test_parts_and_sites_never_wear_a_risk_colour_and_each_has_its_own_pattern():
    """The spares chart drew one part in the "replace now" red and another in the "sound" green, on the page
    whose risk badges use those colours (ours): parts and sites take hues apart from every risk colour (no
    channel within 40 of one), and a bar pattern of their own, so neither colour vision nor grey print decides."""
    from fleet.charts import RISK_COLOURS, workload_figure

    months = [dt.date(2027, m, 1).isoformat() for m in range(1, 13)]
    parts = [{"code": f"P{k}", "need": [1.0] * 12, "planned": [1] * 12, "failures": [0.0] * 12} for k in range(8)]
    bars = [t for t in spares_figure(months, parts, [0.0] * 12)["data"] if t["type"] == "bar"]
    sites = {f"S{k}": [1] * 12 for k in range(8)}
    workload = workload_figure(months, {"watch": [1] * 12}, sites, [0] * 12)["data"]
    site_bars = [t for t in workload if t["type"] == "bar" and t["name"] in sites]

    def rgb(colour):
        return np.array([int(colour[i : i + 2], 16) for i in (1, 3, 5)])

    for trace in bars + site_bars:
        colour = trace["marker"]["color"]
        assert all(np.abs(rgb(colour) - rgb(risk)).max() > 40 for risk in RISK_COLOURS.values()), colour
    assert len({t["marker"]["pattern"]["shape"] for t in bars}) == 8
    assert len({(t["marker"]["color"], t["marker"]["pattern"]["shape"]) for t in site_bars}) == 8


def test_risk_mix_and_readings_by_route():
    site = make_site(code="R1")
    part = make_part()
    fresh = make_fitted_capacitor(motor=make_motor(site=site), part=part)
    make_reading(fresh, taken_at=timezone.make_aware(dt.datetime(2026, 11, 20, 9)))
    stored_assessment(fresh, "watch", None)
    stale = make_fitted_capacitor(motor=make_motor(site=site), part=part)
    make_reading(stale, taken_at=timezone.make_aware(dt.datetime(2026, 7, 1, 9)))  # 154 days before
    stored_assessment(stale, "replace now", TODAY)
    last_quarter = make_fitted_capacitor(motor=make_motor(site=site), part=part)
    make_reading(last_quarter, taken_at=timezone.make_aware(dt.datetime(2026, 9, 15, 9)))
    make_fitted_capacitor(motor=make_motor(site=site), part=part, fitted_on=dt.date(2026, 11, 1))  # new, not read
    mix = risk_mix(None)
    assert mix["counts"]["R1"]["watch"] == 1 and mix["counts"]["R1"]["replace now"] == 1
    assert mix["counts"]["R1"]["not assessed yet"] == 2
    route = readings_by_route(None, TODAY)["routes"][0]
    # [trade] quarterly readings: overdue after 91 days and 14 of grace; due if not read since 2026-10-01
    assert (route["overdue"], route["due"], route["read"]) == (1, 2, 1)


def test_the_risk_mix_says_it_counts_capacitors_on_the_chart_page_and_download(client):
    """The chart was titled "motors in service" while it counts capacitors: a two-value motor carries a
    start and a run capacitor [trade], each assessed on its own, so one motor counts twice."""
    site = make_site(code="TWO")
    motor = make_motor(site=site, with_circuit=False, motor_type="two_value")
    run = make_fitted_capacitor(motor=motor, part=make_part(), role="run")
    start = make_fitted_capacitor(motor=motor, part=make_part(rated_uf=100, dielectric="electrolytic"), role="start")
    stored_assessment(run, "watch", None)
    stored_assessment(start, "replace now", TODAY)
    client.force_login(make_user(PLANNER))
    response = client.get(reverse("dashboard"))
    assert response.context["mix_chart"]["layout"]["xaxis"]["title"]["text"] == "capacitors in service"
    assert "Capacitors in service at each site by risk level" in response.content.decode()
    text = b"".join(client.get(reverse("dashboard_csv", args=["risk-mix"])).streaming_content).decode("utf-8-sig")
    rows = [line.split(",") for line in text.splitlines()]
    assert rows[0][-1] == "capacitors_in_service"
    two = dict(zip(rows[0], next(row for row in rows if row[0] == "TWO"), strict=True))
    assert (two["watch"], two["replace_now"], two["capacitors_in_service"]) == ("1", "1", "2")


def test_the_week_shows_riskier_capacitors_with_the_reason_and_the_limit_that_moved(client):
    fitted_capacitor = make_fitted_capacitor()
    make_reading(fitted_capacitor, taken_at=timezone.now() - dt.timedelta(days=2))
    stored_assessment(fitted_capacitor, "watch", None, created_at=timezone.now() - dt.timedelta(days=9))
    stored_assessment(
        fitted_capacitor, "replace now", TODAY, limit_source="starting torque", reason="torque falls short"
    )
    same_limit = make_fitted_capacitor()  # riskier too, under the same governing limit: not counted
    stored_assessment(same_limit, "watch", None, created_at=timezone.now() - dt.timedelta(days=9))
    stored_assessment(same_limit, "due soon", TODAY + dt.timedelta(days=30))
    client.force_login(make_user(PLANNER))
    response = client.get(reverse("dashboard"))
    changes = response.context["changes"]
    assert changes["moves"]["riskier"] == 2 and changes["moves"]["limit_changed"] == 1 and changes["readings"] == 1
    body = response.content.decode()
    assert "Torque falls short" in body and "governing limit was tolerance, now starting torque" in body


def test_the_week_says_nothing_of_the_governing_limit_where_none_changed(client):
    """A walk: "the governing limit changed for 0." stood where nothing changed. [ours] The count is said where
    it is one or more, and nothing of it where it is none."""
    riskier = make_fitted_capacitor()
    stored_assessment(riskier, "watch", None, created_at=timezone.now() - dt.timedelta(days=9))
    stored_assessment(riskier, "due soon", TODAY + dt.timedelta(days=30))
    client.force_login(make_user(PLANNER))
    response = client.get(reverse("dashboard"))
    assert response.context["changes"]["moves"]["riskier"] == 1
    assert response.context["changes"]["moves"]["limit_changed"] == 0
    body = response.content.decode()
    assert "1 riskier" in body and "governing limit changed" not in body
    stored_assessment(riskier, "replace now", TODAY, limit_source="starting torque", reason="torque falls short")
    assert "the governing limit changed for 1." in client.get(reverse("dashboard")).content.decode()


def test_the_spares_cost_says_its_unit_is_the_currency_the_parts_prices_are_entered_in(client):
    """A walk: the spares cost "1,602" read as a figure without a unit. No currency is set anywhere (a part's
    unit_cost is a price "in the plant's currency"), so none is printed; the figure says in words beside it that
    it is in the currency the parts' unit costs are entered in. [ours]"""
    fleet(2)
    client.force_login(make_user(PLANNER))
    body = re.sub(r"\s+", " ", client.get(reverse("dashboard")).content.decode())
    kpi = body[body.index("Cost of spares, next 12 months") :].split('<div class="kpi">')[0]
    assert "at the parts' unit costs, in the currency they are entered in" in kpi
    assert not re.search(r"[$€£¥]|EUR|USD|GBP", kpi), kpi


def test_the_week_counts_a_reading_and_its_corrections_as_one_change(client):
    """A typo and its correction were counted as two readings taken: a correction supersedes the reading it
    corrects (both kept, the trend uses the correction), so the week saw one reading [derived]."""
    from fleet.services.readings import record_reading

    fitted_capacitor = make_fitted_capacitor()
    make_reading(fitted_capacitor, taken_at=timezone.now() - dt.timedelta(days=20))  # before the week
    typo = record_reading(fitted_capacitor=fitted_capacitor, values={"method": "meter", "capacitance_uf": "3.59"})
    fixed = record_reading(
        fitted_capacitor=fitted_capacitor,
        values={"method": "meter", "capacitance_uf": "3.95"},
        supersedes_id=typo.id,
    )
    record_reading(
        fitted_capacitor=fitted_capacitor, values={"method": "meter", "capacitance_uf": "3.94"}, supersedes_id=fixed.id
    )
    record_reading(fitted_capacitor=make_fitted_capacitor(), values={"method": "meter", "capacitance_uf": "3.97"})
    client.force_login(make_user(PLANNER))
    response = client.get(reverse("dashboard"))
    assert response.context["changes"]["readings"] == 2
    assert "2 readings taken" in response.content.decode()


def test_charts_are_built_once_for_the_same_numbers_and_follow_a_new_assessment_and_reading(client, monkeypatch):
    """The charts are cached by the numbers they show: a second visit builds none, and after a new
    assessment and a new reading the cached charts are those built afresh from the new numbers."""
    from fleet.charts import routes_figure, workload_figure
    from fleet.services import dashboard as dashboard_service

    built = []

    def counted(builder):
        def build(*numbers):
            built.append(builder.__name__)
            return builder(*numbers)

        build.__name__ = builder.__name__
        return build

    for name in ("workload_figure", "spares_figure", "stock_figure", "risk_mix_figure", "routes_figure"):
        monkeypatch.setattr(dashboard_service, name, counted(getattr(dashboard_service, name)))
    fitted_capacitors = fleet(per_site=2)
    client.force_login(make_user(PLANNER))
    before = client.get(reverse("dashboard")).context
    first_builds = len(built)
    again = client.get(reverse("dashboard")).context
    assert len(built) == first_builds, "the same numbers built a chart again"
    assert again["workload_chart"] == before["workload_chart"]

    # A refit moves a sound capacitor's replacement into this week; a new motor is read today.
    sound = fitted_capacitors[3]
    stored_assessment(sound, "replace now", timezone.localdate())
    make_reading(make_fitted_capacitor(motor=make_motor(site=sound.motor.site)))
    after = client.get(reverse("dashboard")).context
    assert after["workload_chart"] != before["workload_chart"]
    weeks = [w.isoformat() for w in after["workload"]["weeks"]]
    workload = after["workload"]
    assert after["workload_chart"] == workload_figure(
        weeks, workload["by_risk"], workload["by_site"], workload["visits"]
    )
    assert after["routes_chart"] == routes_figure(after["routes"]["routes"])
    assert after["routes_chart"] != before["routes_chart"]
    shown_this_week = sum(
        trace["y"][0]
        for trace in after["workload_chart"]["data"]
        if trace.get("visible", True) and trace["type"] == "bar"
    )
    assert shown_this_week == sum(counts[0] for counts in workload["by_risk"].values())


def test_each_chart_downloads_its_numbers(client):
    fleet(per_site=2)
    client.force_login(make_user(PLANNER))
    for name, heading in (
        ("workload", "week_starting"),
        ("spares", "month,part,planned"),
        ("risk-mix", "site,replace_now"),
        ("readings", "site,site_name,overdue"),
    ):
        response = client.get(reverse("dashboard_csv", args=[name]))
        text = b"".join(response.streaming_content).decode("utf-8-sig")
        assert text.startswith(heading), name
        headings = text.splitlines()[0].split(",")
        assert all(re.fullmatch(r"[A-Za-z0-9_.-]+", h) for h in headings), headings  # snake_case, no spaces
    workload = b"".join(client.get(reverse("dashboard_csv", args=["workload"])).streaming_content).decode("utf-8-sig")
    header = workload.splitlines()[0].split(",")
    assert header[:3] == ["week_starting", "replace_now", "due_soon"], header  # was "replace now"
    assert header[-1] == "site_visits" and any(h.startswith("site_") and h != "site_visits" for h in header)
    assert client.get(reverse("dashboard_csv", args=["nothing"])).status_code == 404


def test_sign_in_lands_planners_on_the_dashboard_and_others_at_home(client):
    for role, landing in ((PLANNER, "dashboard"), (TECHNICIAN, "home")):
        user = make_user(role)
        response = client.post(reverse("login"), {"username": user.username, "password": "a-long-test-password"})
        assert response.url == reverse("after_sign_in")
        assert client.get(response.url).url == reverse(landing)
        client.logout()


def test_the_daily_digest_mails_planners_once_per_condition_with_reason_and_link(settings):
    settings.FLEET_SITE_URL = "https://fleet.example.org"
    here, there = make_site(code="HERE"), make_site(code="THERE")
    everywhere = make_user(PLANNER)
    everywhere.email = "all@example.org"
    everywhere.save()
    limited = make_user(PLANNER)
    limited.email = "there@example.org"
    limited.save()
    SiteMembership.objects.create(user=limited, site=there)
    no_address = make_user(PLANNER)  # no email address: nothing to send to
    technician = make_user(TECHNICIAN)
    technician.email = "tech@example.org"
    technician.save()
    worn = make_fitted_capacitor(motor=make_motor(site=here, asset_tag="HERE-0001"))
    make_reading(worn, taken_at=timezone.now() - dt.timedelta(days=3))
    stored_assessment(worn, "replace now", TODAY, reason="latest reading below the tolerance limit")
    unread = make_fitted_capacitor(motor=make_motor(site=there, asset_tag="THERE-0002"))
    make_reading(unread, taken_at=timezone.make_aware(dt.datetime(2026, 7, 1, 9)))
    stored_assessment(unread, "sound", None)
    gone = make_fitted_capacitor(motor=make_motor(site=here, asset_tag="HERE-0003"))
    make_reading(gone, taken_at=timezone.now() - dt.timedelta(days=3))
    stored_assessment(gone, "replace now", TODAY)
    FittedCapacitor.objects.filter(pk=gone.pk).update(
        removed_on=TODAY, removal_reason=FittedCapacitor.RemovalReason.PLANNED
    )

    assert send_daily_digest(today=TODAY) == {"new": 2, "ended": 0, "emails": 2}
    by_recipient = {message.to[0]: message for message in mail.outbox}
    assert set(by_recipient) == {"all@example.org", "there@example.org"}
    full = by_recipient["all@example.org"].body
    assert "HERE-0001 run capacitor" in full and "latest reading below the tolerance limit" in full
    assert f"https://fleet.example.org{reverse('fitted_capacitor', args=[worn.id])}" in full
    assert "THERE-0002 run capacitor: last read 2026-07-01, 154 days ago" in full
    # [trade] quarterly readings, overdue after 91 days and 14 of grace: the heading says both figures.
    assert "(due every 91 days, overdue 14 days after that: none since " in full
    assert f"https://fleet.example.org{reverse('route', args=['THERE'])}?show=due" in full
    assert "charge that can kill" in full
    assert "1 to replace now, 1 reading overdue" in by_recipient["all@example.org"].subject
    assert "HERE-0001" not in by_recipient["there@example.org"].body  # another site's capacitor
    assert "HERE-0003" not in full  # removed since its assessment: out of service, not reported
    assert no_address.email == ""

    assert send_daily_digest(today=TODAY) == {"new": 0, "ended": 0, "emails": 0}  # the same day again
    assert len(mail.outbox) == 2

    stored_assessment(worn, "due soon", TODAY)  # leaves the top level ...
    assert send_daily_digest(today=TODAY)["ended"] == 1 and len(mail.outbox) == 2
    stored_assessment(worn, "replace now", TODAY)  # ... and enters it again: reported again
    assert send_daily_digest(today=TODAY) == {"new": 1, "ended": 0, "emails": 1}
    assert DigestEntry.objects.count() == 2


def test_the_replacements_count_is_the_plan_it_links_to_with_one_due_on_the_windows_last_day(client):
    """[derived] The dashboard's count of replacements in the weeks it shows and the plan it links to
    take one window: a capacitor due on its last day (the Sunday that ends the 26th week) is in both,
    one due the day after in neither."""
    today = timezone.localdate()
    last_day = today - dt.timedelta(days=today.weekday()) + dt.timedelta(weeks=26, days=-1)
    site, part = make_site(), make_part()
    for replace_by in (today, last_day, last_day + dt.timedelta(days=1), today + dt.timedelta(days=182)):
        stored_assessment(make_fitted_capacitor(motor=make_motor(site=site), part=part), "watch", replace_by)
    client.force_login(make_user(PLANNER))
    page = client.get(reverse("dashboard"))
    link = re.search(r'href="(/plan/\?days=\d+)"', page.content.decode()).group(1)
    plan = client.get(link)
    assert page.context["workload"]["total"] == plan.context["page"].paginator.count == 2
    assert {a.replace_by for a in plan.context["page"].object_list} == {today, last_day}
    assert f'to replace by <span class="nowrap">{last_day:%Y-%m-%d}</span>' in plan.content.decode()


def test_the_risk_cards_count_one_capacitor_and_two_capacitors(client):
    """[trade] plain English: "1 capacitor", "2 capacitors" on the plan's and the home page's cards
    (the plan read "1 capacitors")."""
    today = timezone.localdate()
    site, part = make_site(), make_part()
    stored_assessment(make_fitted_capacitor(motor=make_motor(site=site), part=part), "replace now", today)
    for _ in range(2):
        stored_assessment(make_fitted_capacitor(motor=make_motor(site=site), part=part), "watch", today)
    client.force_login(make_user(PLANNER))
    for name in ("plan", "home"):
        page = re.sub(r"\s+", " ", client.get(reverse(name)).content.decode())
        assert re.search(r"replace now</span><b>1</b>capacitor</div>", page), name
        assert re.search(r"watch</span><b>2</b>capacitors</div>", page), name


def test_a_digest_the_mail_server_refuses_is_said_in_one_line_and_sent_the_next_time(settings, capsys):
    """An operator's walk: `manage.py digest` in production with no mail server ended in a ConnectionRefusedError
    traceback, as would beat's morning digest on a worker. [ours] it says the mail server could not be reached and
    where, records nothing as sent, and the next digest sends it."""
    from django.core.management import CommandError, call_command

    from fleet.tasks import send_daily_digest as digest_task

    settings.FLEET_SITE_URL = "https://fleet.example.org"
    worn = make_fitted_capacitor(motor=make_motor(site=make_site(code="DGT")))
    stored_assessment(worn, "replace now", TODAY)
    planner = make_user(PLANNER)
    planner.email = "planner@example.org"
    planner.save()
    settings.EMAIL_BACKEND = "django.core.mail.backends.smtp.EmailBackend"
    settings.EMAIL_HOST, settings.EMAIL_PORT = "127.0.0.1", 9  # the discard port: nothing listens there
    with pytest.raises(CommandError, match=r"The digest was not sent: the mail server at 127\.0\.0\.1:9 answered"):
        call_command("digest")
    assert digest_task() == 0 and not DigestEntry.objects.exists()
    settings.EMAIL_BACKEND = "django.core.mail.backends.locmem.EmailBackend"
    call_command("digest")
    assert "1 emails sent" in capsys.readouterr().out and DigestEntry.objects.count() == 1
