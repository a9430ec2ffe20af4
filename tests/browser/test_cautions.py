"""The electrical-safety cautions: folded only by the person who folded them, in that sign-in."""

import pytest

from tests.factories import make_fitted_capacitor, make_user

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]

CAUTIONS = "details[data-cautions]"
# [trade] lockout, discharge through a rated tool and a check for zero before touching: the body of the cautions
LOCKOUT = "text=never a screwdriver"


def sign_in(page, user):
    """Sign in from the login page and wait until the sign-in has landed (the login page's own URL ends in
    a slash too, so waiting for "**/" can return before the new session exists)."""
    page.goto("/login/")
    page.fill("#id_username", user.username)
    page.fill("#id_password", "a-long-test-password")
    page.click("main button[type=submit]")  # not the header's Sign out, there while signed in
    page.wait_for_url(lambda url: "/login/" not in url)


def sign_out(page):
    page.click("form[data-sign-out] button")
    page.wait_for_url("**/login/**")


def test_cautions_folded_by_one_user_are_open_for_the_next_one_in_the_same_tab(phone):
    """A technician folded the cautions on a reading page, signed out, and an engineer signing in on the
    same tab found the motor page's cautions folded: the fold was kept for the tab, not the person."""
    fitted_capacitor = make_fitted_capacitor()
    technician, engineer = make_user("technician"), make_user("reliability engineer")
    sign_in(phone, technician)
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.click(f"{CAUTIONS} > summary")
    assert phone.locator(CAUTIONS).get_attribute("open") is None
    # The capacitor in hand's stored energy stays in view, folded.
    assert phone.is_visible("[data-stored-energy]") and not phone.is_visible(LOCKOUT)
    assert "can hold about" in phone.inner_text("[data-stored-energy]")
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    assert phone.locator(CAUTIONS).get_attribute("open") is None  # folded for the rest of this sign-in
    phone.shot("cautions-folded-energy-shown")

    sign_out(phone)
    sign_in(phone, engineer)
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    assert phone.locator(CAUTIONS).get_attribute("open") is not None
    assert phone.is_visible(LOCKOUT)

    # The same person signing in again reads them afresh too.
    sign_out(phone)
    sign_in(phone, technician)
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    assert phone.locator(CAUTIONS).get_attribute("open") is not None
    assert phone.is_visible(LOCKOUT)


def test_a_fold_is_not_carried_to_a_sign_in_that_never_signed_out_here(phone):
    """Another user signing in (in another tab of the same browser, say) makes a new sign-in: the fold
    the first user left in this tab does not apply to it."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    phone.click(f"{CAUTIONS} > summary")
    sign_in(phone, make_user("planner"))  # the login page, straight over the first sign-in
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    assert phone.locator(CAUTIONS).get_attribute("open") is not None
    assert phone.is_visible(LOCKOUT)


def test_folded_cautions_print_whole_where_no_beforeprint_event_runs(phone):
    """A planner folded the cautions, then printed a visit sheet from a browser that sends no
    "beforeprint" (a print to PDF from a share menu, a headless print): the sheet carried the heading
    alone, without the lockout and discharge steps. Printed, the folded box shows its body."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("planner"))
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    phone.click(f"{CAUTIONS} > summary")
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    assert phone.locator(CAUTIONS).get_attribute("open") is None and not phone.is_visible(LOCKOUT)
    phone.emulate_media(media="print")  # print media alone: no event runs
    assert phone.locator(CAUTIONS).get_attribute("open") is None
    assert phone.is_visible(LOCKOUT)
    phone.emulate_media(media="screen")
    assert not phone.is_visible(LOCKOUT)  # folded on screen still


def test_the_live_work_caution_shows_beside_in_circuit_whatever_the_fold(phone):
    """[trade] an in-circuit reading is live work (qualified persons, suitable PPE): with the cautions
    folded, that line was hidden inside the fold just when the technician chose "in circuit". It stands
    beside the current and voltage fields, shown whenever they are, and only then."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.click(f"{CAUTIONS} > summary")
    assert phone.locator(CAUTIONS).get_attribute("open") is None
    assert not phone.is_visible("#live-work")  # a meter reading: the capacitor isolated and discharged
    phone.check("input[name=method][value=in_circuit]")
    assert phone.is_visible("#live-work")
    assert "qualified persons with suitable PPE" in phone.inner_text("#live-work")
    phone.shot("live-work-caution-in-circuit")


def test_a_meter_value_left_typed_stays_in_view_when_in_circuit_is_chosen(phone):
    """[trade] nothing typed is dropped unseen: a capacitance typed, then "in circuit" chosen, keeps its box in
    view (greyed, with what becomes of the value: test_reading_rules.py); cleared, the box goes with the method."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_capacitance_uf", "3.95")
    phone.check("input[name=method][value=in_circuit]")
    assert phone.is_visible("#id_capacitance_uf") and phone.is_visible("#id_capacitor_current_a")
    phone.check("input[name=method][value=meter]")
    phone.fill("#id_capacitance_uf", "")
    phone.check("input[name=method][value=in_circuit]")
    assert not phone.is_visible("#id_capacitance_uf")
