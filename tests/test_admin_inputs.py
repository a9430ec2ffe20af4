"""Hand-made posts to the register keeper's screens: a value no id can be in an autocomplete box, dates outside the
application's own rules. Each is answered at its field, never a 500, nothing saved."""

import datetime as dt

import pytest
from django.contrib import admin
from django.forms.models import model_to_dict
from django.test import RequestFactory
from django.urls import reverse
from django.utils import timezone

from fleet.admin import CheckedAutocompleteSelect, CheckedAutocompleteSelectMultiple
from fleet.engineering.planning import PLAN_HORIZON_DAYS
from fleet.models import FittedCapacitor, SiteDayOff, SiteStock, WorkOrder
from tests.admin_pages import as_shown
from tests.factories import make_fitted_capacitor, make_site

pytestmark = pytest.mark.django_db


def _admins(request):
    """Every admin class registered, and every inline of each."""
    for model_admin in admin.site._registry.values():
        yield model_admin
        yield from model_admin.get_inline_instances(request)


def test_every_autocomplete_box_of_the_admin_is_the_checked_one(administrator):
    """[derived] the fix is general: each admin screen's and inline's `autocomplete_fields` get the widget that
    redraws a refused value without looking it up."""
    request = RequestFactory().get("/")
    request.user = administrator
    found = 0
    for model_admin in _admins(request):
        for name in model_admin.get_autocomplete_fields(request):
            db_field = model_admin.model._meta.get_field(name)
            formfield = model_admin.formfield_for_dbfield(db_field, request)
            widget = getattr(formfield.widget, "widget", formfield.widget)  # inside the related-field wrapper
            assert isinstance(widget, CheckedAutocompleteSelect | CheckedAutocompleteSelectMultiple), (
                model_admin,
                name,
            )
            found += 1
    assert found >= 6


@pytest.mark.parametrize(
    ("model", "field"),
    [(FittedCapacitor, "motor"), (FittedCapacitor, "part"), (SiteStock, "part")],
)
@pytest.mark.parametrize("sent", ["abc", "1.5", "99999999999999999999999"])
def test_a_value_no_id_can_be_in_an_autocomplete_box_is_refused_at_its_field(client, administrator, model, field, sent):
    """A hand-made POST with `motor=abc` raised "Field 'id' expected a number" (a 500) as the box redrew the refused
    form; it is "Select a valid choice." at the field, nothing changed."""
    fitted = make_fitted_capacitor()
    record = fitted if model is FittedCapacitor else SiteStock.objects.create(site=fitted.motor.site, part=fitted.part)
    before = model_to_dict(record)
    data = {k: ("" if v is None else v) for k, v in before.items()}
    data[field] = sent
    client.force_login(administrator)
    response = client.post(f"/admin/fleet/{model._meta.model_name}/{record.pk}/change/", data)
    assert response.status_code == 200
    errors = response.context["adminform"].form.errors
    assert "Select a valid choice" in errors[field][0], errors
    record.refresh_from_db()
    assert model_to_dict(record) == before


@pytest.mark.parametrize("day", [dt.date(1, 1, 1), dt.date(9999, 12, 31)])
def test_the_admin_keeps_a_day_off_to_the_days_off_pages_rule(client, administrator, day):
    """The days-off page and the import refuse a day before today or past the plan's reach
    (`planning.day_off_problems`); the admin took 0001-01-01 and 9999-12-31."""
    site = make_site()
    today = timezone.localdate()
    kept = today + dt.timedelta(days=(7 - today.weekday()) % 7 + 1)  # a Tuesday ahead: a working day
    day_off = SiteDayOff.objects.create(site=site, day=kept, name="shutdown")
    client.force_login(administrator)
    url = f"/admin/fleet/sitedayoff/{day_off.pk}/change/"
    response = client.post(url, {"site": site.pk, "day": day.isoformat(), "name": "shutdown", **as_shown(day_off)})
    assert response.status_code == 200
    errors = response.context["adminform"].form.errors
    assert ("in the past" if day.year == 1 else "past the plan's reach") in errors["day"][0], errors
    day_off.refresh_from_db()
    assert day_off.day == kept
    # The same day off renamed, its day kept, is taken (the rule is for a day added or moved).
    renamed = {"site": site.pk, "day": kept.isoformat(), "name": "stocktake", **as_shown(day_off)}
    assert client.post(url, renamed).status_code == 302
    added = client.post("/admin/fleet/sitedayoff/add/", {"site": site.pk, "day": day.isoformat(), "name": "x"})
    assert added.status_code == 200 and not SiteDayOff.objects.filter(day=day).exists()


@pytest.mark.parametrize(
    ("field", "day", "words"),
    [
        ("due_on", dt.date(1, 1, 1), "Before 1900-01-01"),
        ("moved_from", dt.date(1, 1, 1), "Before 1900-01-01"),
        ("moved_from", dt.date(9999, 12, 31), "past the plan's reach"),
        ("due_on", dt.date(9999, 12, 31), "past the plan's reach"),
    ],
)
def test_the_admin_keeps_a_work_orders_dates_to_the_plans_rule(administrator, field, day, words):
    """[derived] the rulebook's accepted span of dates (`rules.FIRST_ACCEPTED_DAY`) and the plan's reach
    (`PLAN_HORIZON_DAYS`) bound a work order's due day and the plan's day it was moved from; the admin took
    due_on=0001-01-01 and moved_from=9999-12-31."""
    fitted = make_fitted_capacitor()
    order = WorkOrder.objects.create(
        motor=fitted.motor, fitted_capacitor=fitted, kind="inspect", due_on=timezone.localdate()
    )
    request = RequestFactory().post("/")
    request.user = administrator
    model_admin = admin.site._registry[WorkOrder]
    data = {k: ("" if v is None else v) for k, v in model_to_dict(order).items()} | as_shown(order)
    data[field] = day.isoformat()
    form = model_admin.get_form(request, order)(data, instance=order)
    assert not form.is_valid()
    assert words in form.errors[field][0], form.errors
    ok = dict(data, **{field: (timezone.localdate() + dt.timedelta(days=PLAN_HORIZON_DAYS[1] - 1)).isoformat()})
    assert model_admin.get_form(request, order)(ok, instance=order).is_valid()


@pytest.mark.parametrize(("spaces", "words"), [(" ", "This field is required."), ("2 ", None)])
def test_a_whole_number_box_of_spaces_is_empty_not_a_server_error(client, administrator, spaces, words):
    """A whole-number box (a stock row's quantity, a motor's poles, an order's window) holding only spaces is
    empty, as the other number boxes read it: refused where the field is required, and the edge spaces of a
    number are no fault. It was read as NaN and rounded: a 500."""
    fitted = make_fitted_capacitor()
    stock = SiteStock.objects.create(site=fitted.motor.site, part=fitted.part, quantity=3)
    client.force_login(administrator)
    data = {"site": stock.site_id, "part": stock.part_id, "quantity": spaces, **as_shown(stock)}
    response = client.post(f"/admin/fleet/sitestock/{stock.pk}/change/", data)
    stock.refresh_from_db()
    if words:
        assert response.status_code == 200
        assert response.context["adminform"].form.errors["quantity"] == [words]
        assert stock.quantity == 3
    else:
        assert response.status_code == 302 and stock.quantity == 2


def test_who_closed_a_work_order_and_when_are_not_typed_in_the_admin(client, administrator):
    """A fuzz: the admin took a work order's closing time of 9999-12-31. [ours] who created and who closed an order,
    and when, are the record the pages write; the admin shows them and sends none of them back."""
    fitted = make_fitted_capacitor()
    order = WorkOrder.objects.create(
        motor=fitted.motor, fitted_capacitor=fitted, kind="inspect", due_on=timezone.localdate()
    )
    request = RequestFactory().get("/")
    request.user = administrator
    form = admin.site._registry[WorkOrder].get_form(request, order)
    assert not {"created_by", "closed_by", "closed_at"} & set(form.base_fields)
    client.force_login(administrator)
    page = client.get(reverse("admin:fleet_workorder_change", args=[order.id]))
    assert page.status_code == 200 and "Closed at" in page.content.decode()
