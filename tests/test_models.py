"""The database itself refuses what is physically or procedurally wrong."""

import datetime as dt

import pytest
from django.db import IntegrityError, transaction
from django.db.utils import DatabaseError
from django.utils import timezone

from fleet.models import Reading

from .conftest import make_installation, make_motor, make_part, make_reading

pytestmark = pytest.mark.django_db


def refused(callable_, *args, **kwargs):
    with pytest.raises((IntegrityError, DatabaseError)) as error, transaction.atomic():
        callable_(*args, **kwargs)
    return str(error.value)


def test_negative_capacitance_is_refused(fan_installation):
    message = refused(make_reading, fan_installation, capacitance_uf=-3.0)
    assert "reading_capacitance_positive" in message or "CHECK" in message.upper()


def test_part_with_zero_rating_is_refused():
    refused(make_part, rated_uf=0.0)


def test_motor_speed_at_or_above_synchronous_is_refused():
    """1000 rpm is synchronous for 6 poles at 50 Hz; induction motors run below it."""
    message = refused(make_motor, rated_speed_rpm=1000)
    assert "motor_speed_below_synchronous" in message or "CHECK" in message.upper()


def test_a_second_active_run_capacitor_on_one_motor_is_refused(fan_installation):
    message = refused(make_installation, motor=fan_installation.motor, role="run")
    assert "one_active_capacitor_per_role" in message or "UNIQUE" in message.upper()


def test_a_start_and_a_run_capacitor_may_both_be_active(fan_installation):
    make_installation(
        motor=fan_installation.motor, role="start", part=make_part(dielectric="electrolytic", rated_uf=98)
    )


def test_a_replaced_capacitor_frees_its_position(fan_installation):
    fan_installation.removed_on = dt.date(2024, 1, 1)
    fan_installation.removal_reason = "planned"
    fan_installation.save()
    make_installation(motor=fan_installation.motor, role="run", fitted_on=dt.date(2024, 1, 1))


def test_removal_needs_a_reason(fan_installation):
    fan_installation.removed_on = dt.date(2024, 1, 1)
    refused(fan_installation.save)


def test_removal_before_fitting_is_refused(fan_installation):
    fan_installation.removed_on = dt.date(2021, 1, 1)
    fan_installation.removal_reason = "other"
    refused(fan_installation.save)


def test_a_reading_after_the_capacitor_was_removed_is_refused(fan_installation):
    fan_installation.removed_on = dt.date(2024, 1, 1)
    fan_installation.removal_reason = "failed"
    fan_installation.save()
    make_reading(fan_installation, taken_at=timezone.make_aware(dt.datetime(2023, 12, 31, 12)))
    message = refused(make_reading, fan_installation, taken_at=timezone.make_aware(dt.datetime(2024, 2, 1, 12)))
    assert "removed" in message


def test_readings_are_never_edited(fan_installation):
    reading = make_reading(fan_installation)
    reading.capacitance_uf = 3.0
    message = refused(reading.save)
    assert "append-only" in message
    assert Reading.objects.get(pk=reading.pk).capacitance_uf == 4.0


def test_a_correction_supersedes_and_both_are_kept(fan_installation):
    wrong = make_reading(fan_installation, capacitance_uf=3.1)
    right = make_reading(fan_installation, capacitance_uf=3.9, supersedes=wrong)
    assert Reading.objects.filter(installation=fan_installation).count() == 2
    assert wrong.superseded_by == right
    refused(make_reading, fan_installation, capacitance_uf=3.8, supersedes=wrong)


def test_in_circuit_reading_needs_current_and_voltage(fan_installation):
    refused(make_reading, fan_installation, method="in_circuit", capacitor_current_a=0.5)
