"""Day boxes read year-month-day only, as their messages ask: a day typed in another order is refused at its field,
never read as month/day/year and saved as another day."""

import datetime as dt

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.forms import DayOffForm, MoveVisitForm, ReplacementForm
from fleet.models import FittedCapacitor, SiteDayOff
from tests.factories import make_fitted_capacitor, make_site

pytestmark = pytest.mark.django_db

# [pub] ISO 8601: a calendar date written year-month-day, 2027-04-01; the boxes' messages ask for it.
# [derived] Django's English input formats (DATE_INPUT_FORMATS) add %m/%d/%Y and %m/%d/%y, so 01/04/27 read as
# 4 January 2027 where many a person writes 1 April.


def later_day() -> dt.date:
    """A day some weeks ahead whose day of the month is 12 or less, so month/day and day/month both read it."""
    day = timezone.localdate() + dt.timedelta(days=40)
    while day.day > 12 or day.day == day.month:
        day += dt.timedelta(days=1)
    return day


@pytest.mark.parametrize("typed", ["%m/%d/%y", "%m/%d/%Y", "%b %d %Y"])
def test_each_form_day_box_refuses_another_order_with_its_message(typed):
    """The day-off, move-visit and replacement boxes took Django's English formats: 01/04/27 was 4 January."""
    day = later_day()
    text = f"{day:{typed}}"
    for form, name in (
        (DayOffForm({"day": text, "name": "shutdown"}), "day"),
        (MoveVisitForm({"to_day": text}), "to_day"),
    ):
        assert not form.is_valid(), (name, text)
        assert form.errors[name] == [
            f"Enter the day as year-month-day, e.g. 2026-12-{'25' if name == 'day' else '24'}."
        ]
    capacitor = make_fitted_capacitor(fitted_on=dt.date(2022, 1, 1))
    replacement = ReplacementForm(
        {"part": capacitor.part.pk, "removed_on": text, "removal_reason": "failed"},
        fitted_capacitor=capacitor,
        design=capacitor.part,
    )
    assert not replacement.is_valid()
    assert replacement.errors["removed_on"] == ["Enter the day as year-month-day, e.g. 2026-03-14."]
    assert DayOffForm({"day": day.isoformat(), "name": "shutdown"}).is_valid()
    assert MoveVisitForm({"to_day": day.isoformat()}).is_valid()


def test_the_days_off_page_saves_no_day_typed_month_first(client, planner):
    """POST /sites/GLH/days-off/ with day=01/04/27 saved 2027-01-04 (the finding's case, a day ahead here)."""
    site = make_site(code="GLH")
    day = later_day()
    client.force_login(planner)
    response = client.post(reverse("site_days_off", args=[site.code]), {"day": f"{day:%m/%d/%y}", "name": "shutdown"})
    assert response.status_code == 400
    assert "year-month-day" in " ".join(response.context["form"].errors["day"])
    assert not SiteDayOff.objects.exists()


def test_the_replacement_page_keeps_no_day_typed_month_first(client, technician):
    """removed_on=05/12/2026 on the replacement form was read as 2026-05-12 and the capacitor taken out then."""
    capacitor = make_fitted_capacitor(fitted_on=dt.date(2022, 1, 1))
    client.force_login(technician)
    response = client.post(
        reverse("replace", args=[capacitor.id]),
        {"part": capacitor.part.pk, "removed_on": "05/12/2026", "removal_reason": "failed"},
    )
    assert response.status_code != 302
    assert "year-month-day" in " ".join(response.context["form"].errors["removed_on"])
    assert FittedCapacitor.objects.get().removed_on is None


def test_the_api_day_filter_and_the_admin_day_boxes_read_year_month_day_only(client, engineer, administrator):
    """The assessments filter's replace_by_before and the admin's day boxes took the same English formats."""
    client.force_login(engineer)
    response = client.get("/api/assessments/?replace_by_before=01/04/27")
    assert response.status_code == 400 and "replace_by_before" in response.json()
    assert client.get("/api/assessments/?replace_by_before=2027-04-01").status_code == 200
    site, day = make_site(), later_day()
    client.force_login(administrator)
    add = reverse("admin:fleet_sitedayoff_add")
    response = client.post(add, {"site": site.pk, "day": f"{day:%m/%d/%Y}", "name": "shutdown"})
    assert response.status_code == 200 and not SiteDayOff.objects.exists()
    assert client.post(add, {"site": site.pk, "day": day.isoformat(), "name": "shutdown"}).status_code == 302
    assert SiteDayOff.objects.get().day == day
