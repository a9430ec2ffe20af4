"""Two people editing one record in the admin: the second save is refused, never a silent overwrite.

Each form is posted as the browser sends it: every box of the page as drawn (`tests.admin_pages.as_drawn`), with
the changes a person typed. [derived] from the rule "nothing a user entered is silently lost or overwritten"."""

import json

import pytest
from django.contrib import admin
from django.contrib.admin.options import InlineModelAdmin
from django.test import Client, RequestFactory

from fleet.models import CapacitorPart, FittedCapacitor, Motor, SiteStock
from tests.admin_pages import as_drawn
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_user
from tests.test_admin_inputs import _admins
from tests.test_races import held_before, in_threads, threads_race

pytestmark = pytest.mark.django_db


def _client(user) -> Client:
    client = Client()
    client.force_login(user)
    return client


def _change_url(record) -> str:
    return f"/admin/fleet/{record._meta.model_name}/{record.pk}/change/"


@pytest.fixture
def two_admins(db):
    return _client(make_user("administrator", "first_admin")), _client(make_user("administrator", "second_admin"))


def _top_errors(response) -> str:
    return " ".join(response.context["adminform"].form.non_field_errors())


def test_a_motor_saved_by_two_people_keeps_the_first_save_and_refuses_the_second(two_admins):
    first, second = two_admins
    motor = make_motor(full_load_current_a=2.2, location="Cold room 1")
    first_form, second_form = as_drawn(first.get(_change_url(motor))), as_drawn(second.get(_change_url(motor)))

    assert first.post(_change_url(motor), {**first_form, "full_load_current_a": "2.4"}).status_code == 302
    refused = second.post(_change_url(motor), {**second_form, "location": "Cold room 2"})

    assert refused.status_code == 200
    assert (
        "Someone else saved this motor while you edited it: full-load current is now 2.4 A (was 2.2 A)."
        in _top_errors(refused)
    )
    form = refused.context["adminform"].form
    assert "was 2.2 A" in form.errors["full_load_current_a"][0]
    motor.refresh_from_db()
    assert (motor.full_load_current_a, motor.location) == (2.4, "Cold room 1")
    # The refused form keeps what was typed and shows the other save's value where nothing was typed: saved as
    # drawn again, both changes are kept.
    again = as_drawn(refused)
    assert again["location"] == ["Cold room 2"] and again["full_load_current_a"] == ["2.4"]
    assert second.post(_change_url(motor), again).status_code == 302
    motor.refresh_from_db()
    assert (motor.full_load_current_a, motor.location) == (2.4, "Cold room 2")


def test_a_capacitor_part_typed_over_by_two_people_keeps_the_first_save_and_the_second_ones_typing(two_admins):
    first, second = two_admins
    part = make_part(rated_uf=4.0, description="")
    first_form, second_form = as_drawn(first.get(_change_url(part))), as_drawn(second.get(_change_url(part)))

    assert first.post(_change_url(part), {**first_form, "rated_uf": "4.5"}).status_code == 302
    refused = second.post(_change_url(part), {**second_form, "rated_uf": "5", "description": "new stock"})

    assert refused.status_code == 200
    assert (
        "Someone else saved this capacitor part while you edited it: rated capacitance is now 4.5 µF (was 4 µF)."
        in _top_errors(refused)
    )
    assert "yours is kept in the box" in refused.context["adminform"].form.errors["rated_uf"][0]
    part.refresh_from_db()
    assert (part.rated_uf, part.description) == (4.5, "")
    again = as_drawn(refused)
    assert again["rated_uf"] == ["5"] and again["description"] == ["new stock"]


def test_a_record_nobody_else_saved_saves_as_before(two_admins):
    first, _ = two_admins
    part = make_part(rated_uf=4.0)
    drawn = as_drawn(first.get(_change_url(part)))
    assert first.post(_change_url(part), {**drawn, "rated_uf": "4.4"}).status_code == 302
    part.refresh_from_db()
    assert part.rated_uf == 4.4
    motor = make_motor(location="Cold room 1")
    drawn = as_drawn(first.get(_change_url(motor)))
    assert first.post(_change_url(motor), drawn).status_code == 302  # saved unchanged
    assert first.post(_change_url(motor), {**drawn, "location": "Bay 4"}).status_code == 302  # then changed
    motor.refresh_from_db()
    assert motor.location == "Bay 4"


def test_the_same_value_saved_twice_is_no_conflict(two_admins):
    """Both typed the same new figure: nothing of either is lost, so the second save is taken."""
    first, second = two_admins
    motor = make_motor(full_load_current_a=2.2)
    first_form, second_form = as_drawn(first.get(_change_url(motor))), as_drawn(second.get(_change_url(motor)))
    assert first.post(_change_url(motor), {**first_form, "full_load_current_a": "2.4"}).status_code == 302
    assert second.post(_change_url(motor), {**second_form, "full_load_current_a": "2.4"}).status_code == 302


def test_a_fitted_capacitor_row_on_the_motor_page_saved_meanwhile_is_not_written_back(two_admins):
    """The motor page's capacitor rows are change forms too: a row drawn before another save of that capacitor
    would have written its old serial back with the motor."""
    first, second = two_admins
    fitted = make_fitted_capacitor(serial="A1")
    motor_form = as_drawn(first.get(_change_url(fitted.motor)))
    capacitor_form = as_drawn(second.get(_change_url(fitted)))
    assert second.post(_change_url(fitted), {**capacitor_form, "serial": "B2"}).status_code == 302

    refused = first.post(_change_url(fitted.motor), {**motor_form, "location": "Bay 9"})

    assert refused.status_code == 200
    row = refused.context["inline_admin_formsets"][0].formset.forms[0]
    assert "Someone else saved this fitted capacitor while you edited it: serial is now “B2” (was “A1”)" in " ".join(
        row.non_field_errors()
    )
    fitted.refresh_from_db()
    assert fitted.serial == "B2" and Motor.objects.get(pk=fitted.motor_id).location != "Bay 9"


def test_a_stock_quantity_typed_in_the_list_is_refused_when_it_moved_meanwhile(two_admins):
    first, second = two_admins
    part = make_part()
    fitted = make_fitted_capacitor(part=part)
    stock = SiteStock.objects.create(site=fitted.motor.site, part=part, quantity=5)
    listed = as_drawn(first.get("/admin/fleet/sitestock/"))
    drawn = as_drawn(second.get(_change_url(stock)))
    assert second.post(_change_url(stock), {**drawn, "quantity": "4"}).status_code == 302

    refused = first.post("/admin/fleet/sitestock/", {**listed, "form-0-quantity": "7", "_save": "Save"})

    assert refused.status_code == 200
    form = refused.context["cl"].formset.forms[0]
    assert "quantity is now 4 (was 5)" in " ".join(form.non_field_errors())
    assert "Someone else saved 4 here meanwhile (was 5); yours is kept in the box." in refused.content.decode()
    stock.refresh_from_db()
    assert stock.quantity == 4


def test_a_record_deleted_while_its_save_is_checked_is_not_made_again(two_admins, administrator):
    """The admin finds the record before the form is checked: deleted between the two, the save would have
    inserted it again (an UPDATE of no row is followed by an INSERT)."""
    first, _ = two_admins
    part = make_part()
    drawn = {name: values[0] for name, values in as_drawn(first.get(_change_url(part))).items() if values}
    request = RequestFactory().post("/")
    request.user = administrator
    form = admin.site._registry[CapacitorPart].get_form(request, part)({**drawn, "rated_uf": "4.4"}, instance=part)
    CapacitorPart.objects.filter(pk=part.pk).delete()
    assert not form.is_valid()
    assert "Someone else deleted this capacitor part while you edited it" in " ".join(form.non_field_errors())


def test_a_form_sent_without_what_it_showed_is_refused_and_then_carries_it(two_admins):
    from fleet.services.shown_values import SHOWN_VALUES

    first, _ = two_admins
    part = make_part(rated_uf=4.0)
    drawn = as_drawn(first.get(_change_url(part)))
    drawn.pop(SHOWN_VALUES)
    refused = first.post(_change_url(part), {**drawn, "rated_uf": "4.4"})
    assert refused.status_code == 200 and "did not say what it showed" in _top_errors(refused)
    part.refresh_from_db()
    assert part.rated_uf == 4.0
    again = as_drawn(refused)
    assert json.loads(again[SHOWN_VALUES][0])["rated_uf"] == 4.0
    assert first.post(_change_url(part), again).status_code == 302


def test_every_admin_screen_that_edits_a_record_guards_its_saves(administrator):
    """[derived] the guard is general: every admin class and inline that may change a record edits it through
    `ShownValuesForm`, and its change form draws the hidden box."""
    from fleet.admin import ShownValuesForm
    from fleet.services.shown_values import SHOWN_VALUES

    request = RequestFactory().get("/")
    request.user = administrator
    guarded = 0
    for model_admin in _admins(request):
        if not model_admin.has_change_permission(request):
            continue
        assert issubclass(model_admin.form, ShownValuesForm), model_admin
        if isinstance(model_admin, InlineModelAdmin):
            continue
        assert SHOWN_VALUES in str(model_admin.get_fieldsets(request, model_admin.model())), model_admin
        guarded += 1
    assert guarded >= 8 and admin.site.is_registered(FittedCapacitor)


@threads_race
@pytest.mark.django_db(transaction=True)
def test_two_saves_of_one_motor_at_the_same_moment_keep_one_and_refuse_the_other():
    """Both saves pass every check of the form before either writes (held at the motor's own checks): the
    record read again under its row lock makes the second wait for the first and then see it. [derived]"""
    first, second = _client(make_user("administrator", "first_admin")), _client(make_user("administrator", "second"))
    motor = make_motor(full_load_current_a=2.2, location="Cold room 1")
    first_form, second_form = as_drawn(first.get(_change_url(motor))), as_drawn(second.get(_change_url(motor)))
    changes = {"full_load_current_a": "2.4"}, {"location": "Cold room 2"}

    def send(client, form, change):
        return lambda: client.post(_change_url(motor), {**form, **change})

    with held_before(Motor, "clean", 2):
        answers = in_threads(send(first, first_form, changes[0]), send(second, second_form, changes[1]))

    assert sorted(getattr(answer, "status_code", answer) for answer in answers) == [200, 302]
    refused = next(answer for answer in answers if answer.status_code == 200)
    assert "Someone else saved this motor while you edited it" in refused.content.decode()
    motor.refresh_from_db()
    kept = changes[[answer.status_code for answer in answers].index(302)]
    assert {"full_load_current_a": motor.full_load_current_a, "location": motor.location} == {
        "full_load_current_a": 2.4 if "full_load_current_a" in kept else 2.2,
        "location": kept.get("location", "Cold room 1"),
    }
