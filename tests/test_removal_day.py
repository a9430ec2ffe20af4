"""A removal date is a day at the site: a reading taken during it is the removed capacitor's, by the
form, the API and the import alike, and the database's triggers agree; a reading after it is refused.

[trade] a technician reads the old capacitor in the morning and replaces it later that day, and may
record the replacement first: that morning's reading is a real measurement of the old capacitor.
[derived] the triggers hold the widest day (migration 0032): a reading is refused from 36 hours after
the removal date's UTC midnight, the end of that day at UTC-12; the application's rule is the site's
own midnight.
"""

import datetime as dt
import zoneinfo

import pytest
from django.core.exceptions import ValidationError
from django.db import DatabaseError, IntegrityError, transaction
from django.urls import reverse
from django.utils.html import strip_tags

from fleet.models import FittedCapacitor, Reading
from fleet.services.readings import replace_capacitor
from tests.factories import make_fitted_capacitor, make_motor, make_reading, make_site

from .test_rules import api_for, form_post, import_check, import_row

pytestmark = pytest.mark.django_db

REMOVED_ON = dt.date(2024, 6, 13)
MADRID = zoneinfo.ZoneInfo("Europe/Madrid")  # UTC+2 in June [pub] EU summer time
CHICAGO = zoneinfo.ZoneInfo("America/Chicago")  # UTC-5 in June [pub] US daylight saving time


def replaced(zone: str):
    """A capacitor at a site in `zone`, replaced on REMOVED_ON (recorded first), and its successor."""
    old = make_fitted_capacitor(motor=make_motor(site=make_site(time_zone=zone)), fitted_on=dt.date(2022, 1, 1))
    new = replace_capacitor(fitted_capacitor=old, part=old.part, removed_on=REMOVED_ON, reason="failed")
    old.refresh_from_db()
    return old, new


def at(zone, day, hour, minute=0):
    return dt.datetime.combine(day, dt.time(hour, minute), tzinfo=zone)


def post_api(user, fitted_capacitor, taken_at):
    return api_for(user).post(
        reverse("api_fitted_capacitor_readings", args=[fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": 3.6, "taken_at": taken_at.isoformat()},
        format="json",
    )


def test_the_morning_reading_of_the_capacitor_replaced_that_day_is_kept_by_form_api_and_import(client, technician):
    old, new = replaced("Europe/Madrid")
    client.force_login(technician)
    page = client.get(reverse("reading_new", args=[old.id]))
    note = strip_tags(page.content.decode()[page.content.decode().index('id="removed-note"') :][:800])
    assert "removed on 2024-06-13" in note and "Readings taken that day" in note  # before anything is typed
    assert f'href="{reverse("reading_new", args=[new.id])}"' in page.content.decode()
    assert form_post(client, old, capacitance_uf="3.6", taken_at="2024-06-13T08:00").status_code == 302
    assert post_api(technician, old, at(MADRID, REMOVED_ON, 8, 30)).status_code == 201
    result = import_check([import_row(old, taken_at="2024-06-13 09:00")])
    assert result.errors == [] and result.good["fitted_capacitor_id"].tolist() == [old.id]
    assert sorted(Reading.objects.filter(fitted_capacitor=old).values_list("taken_at", flat=True)) == [
        at(MADRID, REMOVED_ON, 8),
        at(MADRID, REMOVED_ON, 8, 30),
    ]


def test_an_evening_reading_west_of_utc_is_still_the_removal_day_for_every_path_and_the_trigger(client, technician):
    """21:00 in Chicago on the removal day is 02:00 UTC the next day: the site's day, not UTC's."""
    old, _ = replaced("America/Chicago")
    client.force_login(technician)
    assert form_post(client, old, capacitance_uf="3.6", taken_at="2024-06-13T21:00").status_code == 302
    assert post_api(technician, old, at(CHICAGO, REMOVED_ON, 22)).status_code == 201
    result = import_check([import_row(old, taken_at="2024-06-13 23:00")])
    assert result.errors == [] and result.good["fitted_capacitor_id"].tolist() == [old.id]
    make_reading(old, taken_at=at(CHICAGO, REMOVED_ON, 23, 59))  # the trigger alone
    assert Reading.objects.filter(fitted_capacitor=old).count() == 3


def test_a_reading_the_day_after_the_removal_is_refused_by_every_path_with_the_way_to_the_one_fitted_now(
    client, technician
):
    old, new = replaced("Europe/Madrid")
    client.force_login(technician)
    response = form_post(client, old, capacitance_uf="3.6", taken_at="2024-06-14T00:00")
    message = response.context["form"].errors["taken_at"][0]
    assert response.status_code == 200 and "removed on 2024-06-13" in message
    assert f'<a href="{reverse("reading_new", args=[new.id])}">' in response.content.decode()
    api = post_api(technician, old, at(MADRID, REMOVED_ON + dt.timedelta(days=1), 8))
    assert api.status_code == 400 and reverse("reading_new", args=[new.id]) in api.json()["taken_at"][0]
    # The import gives a reading of the next day to the capacitor fitted then; with none fitted, it refuses.
    result = import_check([import_row(old, taken_at="2024-06-14 08:00")])
    assert result.good["fitted_capacitor_id"].tolist() == [new.id]
    # A row that names the removed capacitor by id (an edited readings export) is refused, and told the way out.
    result = import_check([import_row(old, taken_at="2024-06-14 08:00", fitted_capacitor_id=str(old.id))])
    ((row, field, words),) = result.errors
    assert (row, field) == (2, "taken_at") and "after this capacitor was removed on 2024-06-13" in words
    assert words.endswith("leave that empty and the reading goes to the capacitor fitted in this position that day")
    FittedCapacitor.objects.filter(pk=new.pk).update(removed_on=REMOVED_ON, removal_reason="failed")
    result = import_check([import_row(old, taken_at="2024-06-14 00:30")])
    assert result.errors == [(2, "taken_at", "no capacitor in this role was fitted to this motor on that date")]
    assert not Reading.objects.exists()


def test_the_trigger_refuses_a_reading_past_the_widest_removal_day_and_no_earlier(technician):
    """[derived] 12:00 UTC the day after the removal ends the removal day at UTC-12 (migration 0032)."""
    old, _ = replaced("UTC")
    bound = dt.datetime(2024, 6, 14, 12, tzinfo=dt.UTC)
    with pytest.raises((IntegrityError, DatabaseError), match="after its capacitor was removed"), transaction.atomic():
        make_reading(old, taken_at=bound)
    make_reading(old, taken_at=bound - dt.timedelta(seconds=1))  # the app refuses it at a UTC site; the trigger not
    assert Reading.objects.filter(fitted_capacitor=old).count() == 1
    api = post_api(technician, old, bound - dt.timedelta(hours=1))
    assert api.status_code == 400 and "removed on 2024-06-13" in api.json()["taken_at"][0]


def test_a_removal_date_is_refused_only_before_the_site_day_of_a_reading():
    """clean(), replace_capacitor and the trigger: a reading at 21:00 in Chicago on the 13th allows a
    removal on the 13th (it is 02:00 UTC on the 14th) and refuses one on the 12th, naming the site's day."""
    fitted = make_fitted_capacitor(motor=make_motor(site=make_site(time_zone="America/Chicago")))
    make_reading(fitted, taken_at=at(CHICAGO, REMOVED_ON, 21))
    fitted.removed_on, fitted.removal_reason = REMOVED_ON - dt.timedelta(days=1), "failed"
    with pytest.raises(ValidationError) as error:
        fitted.full_clean()
    assert "the last on 2024-06-13, site time" in error.value.message_dict["removed_on"][0]
    fitted.refresh_from_db()
    with pytest.raises(ValidationError):
        replace_capacitor(
            fitted_capacitor=fitted, part=fitted.part, removed_on=REMOVED_ON - dt.timedelta(days=1), reason="failed"
        )
    fitted.removed_on, fitted.removal_reason = REMOVED_ON, "failed"
    fitted.full_clean()
    fitted.refresh_from_db()
    new = replace_capacitor(fitted_capacitor=fitted, part=fitted.part, removed_on=REMOVED_ON, reason="failed")
    assert new.fitted_on == REMOVED_ON
    late = make_fitted_capacitor(motor=make_motor(site=make_site(time_zone="UTC")))
    make_reading(late, taken_at=dt.datetime(2024, 6, 14, 12, tzinfo=dt.UTC))
    with pytest.raises((IntegrityError, DatabaseError)), transaction.atomic():
        FittedCapacitor.objects.filter(pk=late.pk).update(removed_on=REMOVED_ON, removal_reason="failed")
    FittedCapacitor.objects.filter(pk=late.pk).update(
        removed_on=REMOVED_ON + dt.timedelta(days=1), removal_reason="failed"
    )


def test_an_import_names_the_date_of_a_reading_from_before_the_first_fitting_and_the_role_a_motor_never_had():
    """The row and the field to put right: a reading dated before the motor's first capacitor in that role
    was fitted is wrong in `taken_at` (the date is named), not in `role`; a role the motor never had is."""
    old, _ = replaced("Europe/Madrid")
    result = import_check([import_row(old, taken_at="2019-03-01 09:00"), import_row(old, role="start")])
    assert result.errors == [
        (2, "taken_at", f"before the first capacitor in this role was fitted to this motor ({old.fitted_on})"),
        (3, "role", "this motor has had no capacitor in this role"),
    ]
    assert not Reading.objects.exists()
