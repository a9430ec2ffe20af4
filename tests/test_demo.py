"""The demo command builds its invented scenario once and analyses it."""

import pytest
from django.core.management import call_command

from fleet.models import Assessment, FittedCapacitor, Motor, Reading

pytestmark = pytest.mark.django_db


def test_demo_builds_once_and_a_second_run_adds_nothing(capsys, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=True):  # the fleet refit is dispatched on commit
        call_command("demo", "--no-serve", "--scale", "0.05")
    first = (Motor.objects.count(), FittedCapacitor.objects.count(), Reading.objects.count())
    out = capsys.readouterr().out
    assert "Built the demo fleet" in out and "tech" in out and "planner" in out
    assert first[0] > 5 and first[2] > 50
    assert Assessment.objects.filter(is_current=True).exists()
    assert (
        FittedCapacitor.objects.filter(removal_reason="failed").exists()
        or FittedCapacitor.objects.filter(removal_reason="planned").exists()
    )
    call_command("demo", "--no-serve")
    assert "nothing added" in capsys.readouterr().out
    assert (Motor.objects.count(), FittedCapacitor.objects.count(), Reading.objects.count()) == first
