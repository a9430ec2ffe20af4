"""The demo command builds its invented scenario once and analyses it."""

import datetime as dt
import io
import re

import pytest
from django.core.management import call_command
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, Motor, Reading, WorkOrder

pytestmark = pytest.mark.django_db


def test_demo_builds_once_and_a_second_run_adds_nothing(capsys, django_capture_on_commit_callbacks, monkeypatch):
    from fleet.management.commands import demo

    def removals():
        return sorted(FittedCapacitor.objects.filter(removed_on__isnull=False).values_list("id", "removal_reason"))

    estimated_on = []  # the register's removals each time the life data are estimated

    def refresh_life_fits(refresh=demo.refresh_life_fits):
        estimated_on.append(removals())
        return refresh()

    monkeypatch.setattr(demo, "refresh_life_fits", refresh_life_fits)
    with django_capture_on_commit_callbacks(execute=True):  # the fleet refit is dispatched on commit
        call_command("demo", "--no-serve", "--scale", "0.05")
    first = (Motor.objects.count(), FittedCapacitor.objects.count(), Reading.objects.count())
    out = capsys.readouterr().out
    assert "Built the demo fleet" in out and "tech" in out and "planner" in out
    assert f"{first[2]} readings" in out  # the count printed is the count stored
    # So are the work orders of each state, counted once the demo is built (issuing visits and the
    # replacement on the visit under way move orders on after they were planned).
    printed = {state: int(n) for n, state in re.findall(r"(\d+) (done|issued|planned)\b", out.split("work orders:")[1])}
    stored = {state: WorkOrder.objects.filter(state=state).count() for state in ("done", "issued", "planned")}
    assert printed == stored, (printed, stored)
    # Visits, done and open, fall on weekdays (a walk found past visits on Saturdays and Sundays); open ones
    # on no day off of their site.
    days = list(WorkOrder.objects.values_list("due_on", "state", "site_id"))
    assert days and all(day.weekday() < 5 for day, _, _ in days), [d for d in days if d[0].weekday() >= 5]
    from fleet.models import SiteDayOff

    off = set(SiteDayOff.objects.values_list("day", "site_id"))
    assert not [d for d in days if d[1] in ("planned", "issued") and (d[0], d[2]) in off]
    assert first[0] > 5 and first[2] > 50
    assert Assessment.objects.filter(is_current=True).exists()
    assert (
        FittedCapacitor.objects.filter(removal_reason="failed").exists()
        or FittedCapacitor.objects.filter(removal_reason="planned").exists()
    )
    # Something true on every page: weeks of assessment history (the week's changes compare with
    # it), work orders in each state, a visit under way.
    week_ago = timezone.now() - dt.timedelta(days=7)
    assert Assessment.objects.filter(created_at__lt=week_ago - dt.timedelta(days=14)).exists()
    # The current assessments are today's, judged from every reading; the history stays behind them
    # (a history refit must not leave a weeks-old judgement current, with its replace-by dates past).
    assert not Assessment.objects.filter(is_current=True, created_at__lt=week_ago).exists()
    assert Assessment.objects.filter(is_current=False, created_at__lt=week_ago).exists()
    states = set(WorkOrder.objects.values_list("state", flat=True))
    assert {"done", "issued"} <= states
    # The life data are estimated once the demo is built: a walk found the life page saying at once that the
    # register had changed since (the replacement recorded on the visit under way came after the estimate).
    assert estimated_on == [removals()]
    assert WorkOrder.objects.filter(state="done", closed_at__date=timezone.localdate()).exists()
    orders = WorkOrder.objects.count()
    call_command("demo", "--no-serve")
    assert "nothing added" in capsys.readouterr().out
    assert WorkOrder.objects.count() == orders
    assert (Motor.objects.count(), FittedCapacitor.objects.count(), Reading.objects.count()) == first
    # Its readings export imported again adds nothing (README): a walk found every in-circuit reading refused, its
    # stored capacitance not the one the rulebook works out from its current and voltage.
    from django.contrib.auth import get_user_model
    from django.test import Client

    from fleet.models import ImportJob
    from fleet.services.import_jobs import import_file

    client = Client()
    client.force_login(get_user_model().objects.get(username="planner"))
    exported = b"".join(client.get("/exports/readings.csv").streaming_content)
    assert Reading.objects.filter(method="in_circuit").exists()
    outcome = import_file(
        kind="readings", filename="readings.csv", content=exported, mode=ImportJob.Mode.ALL_OR_NOTHING, dry_run=True
    )
    result = outcome.result
    assert (result.error_rows, result.duplicates) == (0, result.total), result.errors[:3]
    # In another installation the rows are new, and a row the rulebook asks about is refused unless confirmed: a
    # walk found three demo readings (462-466 V across a capacitor of a 230 V motor) refused, stored unconfirmed.
    # Every demo reading, held to the rulebook with its own confirmation, is asked nothing.
    assert not asked_by_the_rulebook(Reading.objects.all())


def test_the_demo_built_early_in_the_day_holds_no_reading_later_than_its_building(django_capture_on_commit_callbacks):
    """Readings of the demo's last round fell later on the day it was built (09:00-16:00): a reading in the
    future, which every form refuses, made its own whole export refused on import."""
    from unittest import mock

    early = timezone.make_aware(dt.datetime.combine(timezone.localdate(), dt.time(0, 30)))
    with mock.patch("django.utils.timezone.now", return_value=early):
        with django_capture_on_commit_callbacks(execute=True):
            call_command("demo", "--no-serve", "--scale", "0.2")
        assert Reading.objects.exists()
        assert not Reading.objects.filter(taken_at__gt=early).exists()


def test_the_scenarios_holidays_follow_the_calendar():
    """Easter Sunday by the Gregorian computus against dates published in calendars (2000-04-23, 2019-04-21,
    2024-03-31, 2025-04-20, 2026-04-05, 2027-03-28: from memory, unverified); the scenario's holidays (Irish,
    from memory, unverified): 26 December 2026 is a Saturday, taken on Monday 28; 2027's 25 and 26 December
    (Saturday and Sunday) on Monday 27 and Tuesday 28."""
    from fleet.services.demo import _easter_sunday, scenario_holidays

    published = {2000: (4, 23), 2019: (4, 21), 2024: (3, 31), 2025: (4, 20), 2026: (4, 5), 2027: (3, 28)}
    assert {year: (d.month, d.day) for year, d in ((y, _easter_sunday(y)) for y in published)} == published
    days = scenario_holidays([2026, 2027])
    assert all(day.weekday() < 5 for day in days)
    assert {dt.date(2026, 12, 25), dt.date(2026, 12, 28), dt.date(2026, 4, 6), dt.date(2026, 10, 26)} <= days
    assert dt.date(2026, 12, 26) not in days and dt.date(2026, 12, 24) not in days
    assert {dt.date(2027, 12, 27), dt.date(2027, 12, 28), dt.date(2027, 3, 29)} <= days


def test_the_demos_plan_dates_no_visit_on_a_holiday():
    """Ours: the demo stores the scenario's holidays as each site's days off, and its plan, which put a visit on
    Friday 25 December (replace-by dates on Saturday 26 move back to the working day before), now puts it on
    Thursday 24; a visit due on Monday 28 (the Saturday holiday taken on the Monday) goes back over the weekend
    and Christmas to Thursday 24 as well. A visit on a working day stays. Run twice, nothing stored twice."""
    from fleet.models import SiteDayOff
    from fleet.services.demo import store_scenario_days_off
    from fleet.services.workorders import plan_work_orders
    from tests.factories import make_fitted_capacitor, make_motor, make_site, stored_assessment

    today = dt.date(2026, 12, 3)
    site = make_site(code="HOL")
    for replace_by in (dt.date(2026, 12, 26), dt.date(2026, 12, 28), dt.date(2026, 12, 11)):
        stored_assessment(make_fitted_capacitor(motor=make_motor(site=site)), "due soon", replace_by)
    assert store_scenario_days_off(today=today) > 0
    assert store_scenario_days_off(today=today) == 0
    assert {dt.date(2026, 12, 25), dt.date(2026, 12, 28)} <= set(SiteDayOff.objects.values_list("day", flat=True))
    plan_work_orders(horizon_days=90, today=today, window_days=1)
    days = sorted(WorkOrder.objects.values_list("due_on", "moved_from"))
    assert days == [(dt.date(2026, 12, 11), None), (dt.date(2026, 12, 24), None), (dt.date(2026, 12, 24), None)]


def test_the_demo_serves_the_sites_own_error_pages(monkeypatch, settings):
    """A walk of the demo met Django's debugging 404 page (the project's URL patterns) at /sites/XYZ/route/. Ours:
    the demo serves with DEBUG off unless DEBUG is set in the environment, so people trying it meet the site's
    own missing-page and refusal pages."""
    from django.conf import settings as live

    from fleet.management.commands import demo as command

    seen = []
    real = command.call_command

    def served(name, *args, **kwargs):
        if name == "runserver":
            seen.append(live.DEBUG)
            return None
        return real(name, *args, **kwargs)

    monkeypatch.setattr(command, "call_command", served)
    monkeypatch.setattr(command, "build_demo", lambda scale: {"created": False})
    monkeypatch.delenv("DEBUG", raising=False)
    settings.DEBUG = True
    call_command("demo")
    assert seen == [False]
    settings.DEBUG = True
    monkeypatch.setenv("DEBUG", "true")
    call_command("demo")
    assert seen == [False, True]


def test_the_system_checks_print_no_warning_on_the_embedded_default():
    # [ours] a new user's first command (migrate, demo) printed WARNINGS about PostgreSQL-only index columns
    # that SQLite leaves out by design: the checks say nothing a user must act on
    out = io.StringIO()
    call_command("check", "--database", "default", stdout=out, stderr=out)  # as migrate runs them
    assert "WARNINGS" not in out.getvalue() and "no issues" in out.getvalue()


def asked_by_the_rulebook(readings) -> dict:
    """What the rulebook would ask about these stored readings, each with its own confirmation, held to no trend
    (as an import into another installation holds them): {field: the first two questions}; {} for nothing."""
    import numpy as np

    from fleet.engineering.rules import check_readings

    rows = list(
        Reading.objects.values_list(
            "capacitance_uf", "capacitor_current_a", "capacitor_voltage_v", "case_temperature_c", "method",
            "outlier_confirmed", "taken_at", "fitted_capacitor__fitted_on", "fitted_capacitor__part__rated_uf",
            "fitted_capacitor__part__tolerance_plus_pct", "fitted_capacitor__part__tolerance_minus_pct",
            "fitted_capacitor__part__max_case_temperature_c", "fitted_capacitor__motor__rated_voltage_v",
            "fitted_capacitor__motor__full_load_current_a", "fitted_capacitor__motor__frequency_hz",
        )
    )  # fmt: skip
    columns = list(zip(*rows, strict=True))
    judged = check_readings(
        {name: list(columns[k]) for k, name in enumerate(
            ["capacitance_uf", "capacitor_current_a", "capacitor_voltage_v", "case_temperature_c"]
        )},
        method=list(columns[4]),
        confirmed=np.array(columns[5], bool),
        taken_at=np.array([t.replace(tzinfo=None) for t in columns[6]], "datetime64[s]"),
        fitted_on=np.array(columns[7], "datetime64[D]"),
        removed_on=np.full(len(rows), np.datetime64("NaT"), "datetime64[D]"),
        now=np.datetime64(timezone.now().replace(tzinfo=None), "s"),
        rated_uf=np.array(columns[8], float),
        tolerance_plus_pct=np.array(columns[9], float),
        tolerance_minus_pct=np.array(columns[10], float),
        max_case_temperature_c=np.array(columns[11], float),
        motor_voltage_v=np.array(columns[12], float),
        full_load_current_a=np.array(columns[13], float),
        frequency_hz=np.array(columns[14], float),
    )  # fmt: skip
    return {name: [m for m in words if m][:2] for name, words in judged.confirm.items() if any(words)}


def test_demo_readings_the_rulebook_asks_about_are_stored_confirmed():
    """A walk moved the demo's readings to another installation: three (462-466 V across the run capacitor of a
    230 V motor, over twice its voltage) were refused, stored unconfirmed where the form would have asked. A demo
    motor whose capacitor sees that voltage has its readings confirmed, as its technician would have had to."""
    import numpy as np

    from fleet.services.demo import _age_capacitor_line
    from tests.factories import make_motor, make_part

    motor = make_motor(rated_voltage_v=230.0)
    part = make_part(rated_uf=30.0, rated_voltage_v=500)
    visits = [dt.date(2022, 1, 10) + dt.timedelta(days=91 * k) for k in range(12)]
    readings = _age_capacitor_line(
        motor, "run", part, dt.date(2022, 1, 3), visits, visits[0], 40.0, 470.0, np.random.default_rng(3), None
    )
    Reading.objects.bulk_create(readings)
    assert any(r.capacitor_voltage_v > 460 for r in readings)
    assert not asked_by_the_rulebook(Reading.objects.all())
