"""The demo command builds its invented scenario once and analyses it."""

import datetime as dt
import re

import pytest
from django.core.management import call_command
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, Motor, Reading, WorkOrder

pytestmark = pytest.mark.django_db


def test_demo_builds_once_and_a_second_run_adds_nothing(capsys, django_capture_on_commit_callbacks):
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
    assert WorkOrder.objects.filter(state="done", closed_at__date=timezone.localdate()).exists()
    orders = WorkOrder.objects.count()
    call_command("demo", "--no-serve")
    assert "nothing added" in capsys.readouterr().out
    assert WorkOrder.objects.count() == orders
    assert (Motor.objects.count(), FittedCapacitor.objects.count(), Reading.objects.count()) == first


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
