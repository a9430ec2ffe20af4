"""The database itself refuses what is physically or procedurally wrong."""

import datetime as dt

import pytest
from django.db import IntegrityError, transaction
from django.db.utils import DatabaseError
from django.utils import timezone

from fleet.models import Reading
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_reading

pytestmark = pytest.mark.django_db


def refused(callable_, *args, **kwargs):
    with pytest.raises((IntegrityError, DatabaseError)) as error, transaction.atomic():
        callable_(*args, **kwargs)
    return str(error.value)


def test_negative_capacitance_is_refused(fan_fitted_capacitor):
    message = refused(make_reading, fan_fitted_capacitor, capacitance_uf=-3.0)
    assert "reading_capacitance_not_negative" in message or "CHECK" in message.upper()


def test_part_with_zero_rating_is_refused():
    refused(make_part, rated_uf=0.0)


def test_motor_speed_at_or_above_synchronous_is_refused():
    """1000 rpm is synchronous for 6 poles at 50 Hz; induction motors run below it."""
    message = refused(make_motor, rated_speed_rpm=1000)
    assert "motor_speed_below_synchronous" in message or "CHECK" in message.upper()


def test_a_second_active_run_capacitor_on_one_motor_is_refused(fan_fitted_capacitor):
    message = refused(make_fitted_capacitor, motor=fan_fitted_capacitor.motor, role="run")
    assert "one_active_capacitor_per_role" in message or "UNIQUE" in message.upper()


def test_a_start_and_a_run_capacitor_may_both_be_active(fan_fitted_capacitor):
    make_fitted_capacitor(
        motor=fan_fitted_capacitor.motor, role="start", part=make_part(dielectric="electrolytic", rated_uf=98)
    )


def test_a_replaced_capacitor_frees_its_position(fan_fitted_capacitor):
    fan_fitted_capacitor.removed_on = dt.date(2024, 1, 1)
    fan_fitted_capacitor.removal_reason = "planned"
    fan_fitted_capacitor.save()
    make_fitted_capacitor(motor=fan_fitted_capacitor.motor, role="run", fitted_on=dt.date(2024, 1, 1))


def test_removal_needs_a_reason(fan_fitted_capacitor):
    fan_fitted_capacitor.removed_on = dt.date(2024, 1, 1)
    refused(fan_fitted_capacitor.save)


def test_removal_before_fitting_is_refused(fan_fitted_capacitor):
    fan_fitted_capacitor.removed_on = dt.date(2021, 1, 1)
    fan_fitted_capacitor.removal_reason = "other"
    refused(fan_fitted_capacitor.save)


def test_a_reading_after_the_capacitor_was_removed_is_refused(fan_fitted_capacitor):
    fan_fitted_capacitor.removed_on = dt.date(2024, 1, 1)
    fan_fitted_capacitor.removal_reason = "failed"
    fan_fitted_capacitor.save()
    make_reading(fan_fitted_capacitor, taken_at=timezone.make_aware(dt.datetime(2023, 12, 31, 12)))
    message = refused(make_reading, fan_fitted_capacitor, taken_at=timezone.make_aware(dt.datetime(2024, 2, 1, 12)))
    assert "removed" in message


def test_readings_are_never_edited(fan_fitted_capacitor):
    reading = make_reading(fan_fitted_capacitor)
    reading.capacitance_uf = 3.0
    message = refused(reading.save)
    assert "append-only" in message
    assert Reading.objects.get(pk=reading.pk).capacitance_uf == 4.0


def test_a_correction_supersedes_and_both_are_kept(fan_fitted_capacitor):
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.1)
    right = make_reading(fan_fitted_capacitor, capacitance_uf=3.9, supersedes=wrong)
    assert Reading.objects.filter(fitted_capacitor=fan_fitted_capacitor).count() == 2
    assert wrong.superseded_by == right
    refused(make_reading, fan_fitted_capacitor, capacitance_uf=3.8, supersedes=wrong)


def test_in_circuit_reading_needs_current_and_voltage(fan_fitted_capacitor):
    refused(make_reading, fan_fitted_capacitor, method="in_circuit", capacitor_current_a=0.5)


def test_a_fitted_capacitor_in_the_admin_keeps_the_register_imports_fitting_rules():
    """The import refuses an electrolytic run capacitor and a part rated below the motor's supply; the
    admin's fitted capacitor (full_clean) applies the same rule (common practice of the trade, no single source)."""
    from django.core.exceptions import ValidationError

    motor = make_motor()
    electrolytic = make_part(dielectric="electrolytic", rated_uf=100.0, rated_voltage_v=330)
    low = make_part(rated_voltage_v=motor.rated_voltage_v - 10)
    for part, words in ((electrolytic, "a run position needs film"), (low, "below this motor's")):
        fitted = make_fitted_capacitor(motor=make_motor(), part=make_part())
        fitted.motor, fitted.part = motor, part
        with pytest.raises(ValidationError) as refused:
            fitted.full_clean()
        assert words in refused.value.message_dict["part"][0]
    fitted.part = make_part(rated_voltage_v=450)
    fitted.full_clean()


def test_a_fitting_date_later_than_a_reading_of_the_capacitor_is_refused_at_its_field():
    """An audit of inputs: in the admin a capacitor's fitting date moved from 2020 to 2026-11-01 past its sixteen
    readings from 2023 on, and the refit judged them as read before the capacitor was there. [ours] as a removal
    date earlier than a reading is refused, a fitting date later than one is, naming the first reading's day at the
    site; the reading's own day is still a day the capacitor was fitted."""
    from django.core.exceptions import ValidationError

    fitted = make_fitted_capacitor(fitted_on=dt.date(2020, 2, 28))
    make_reading(fitted, taken_at=dt.datetime(2023, 3, 1, 9, 0, tzinfo=dt.UTC))
    make_reading(fitted, taken_at=dt.datetime(2024, 3, 1, 9, 0, tzinfo=dt.UTC))
    fitted.fitted_on = dt.date(2026, 11, 1)
    with pytest.raises(ValidationError) as refused:
        fitted.full_clean()
    assert refused.value.message_dict["fitted_on"] == [
        "This capacitor has readings before 2026-11-01 (the first on 2023-03-01, site time): the fitting date "
        "cannot be later."
    ]
    fitted.fitted_on = dt.date(2023, 3, 1)
    fitted.full_clean()
