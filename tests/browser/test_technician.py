"""A technician at a motor, on a phone: find it, log readings, fix mistakes, replace."""

import datetime as dt

import pytest
from django.utils import timezone

from fleet.models import FittedCapacitor, Reading, site_zone
from fleet.services.assessments import refit_fitted_capacitors
from tests.factories import PASSWORD, make_fitted_capacitor, make_user, quarterly_readings

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]


@pytest.fixture
def motor_with_history(transactional_db):
    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.02, 4.0, 3.99, 3.97, 3.96])
    refit_fitted_capacitors([fitted_capacitor.id])
    return fitted_capacitor


def test_a_readings_correct_link_is_a_glove_sized_target(phone, motor_with_history):
    """On the capacitor page at 390 px each "Correct" link was a 62 x 20 px line of text in a table cell;
    44 px is the WCAG 2.2 enhanced target size the menu and the back links keep."""
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/")
    heights = phone.eval_on_selector_all("a.correct-reading", "as => as.map(a => a.getBoundingClientRect().height)")
    assert len(heights) == 5 and min(heights) >= 44, heights


def test_a_long_serial_or_override_reason_wraps_on_a_phone(phone, transactional_db):
    """A 60-character date code (the register's most, with no spaces) pushed the motor page to 683 px at 390."""
    make_fitted_capacitor(serial="SN" + "7" * 58, substitute_override=True, override_reason="R" * 200)
    sign_in(phone, make_user("technician"))
    phone.goto(f"/motors/{FittedCapacitor.objects.get().motor.asset_tag}/")
    assert phone.evaluate("document.documentElement.scrollWidth") <= 390


def sign_in(page, user):
    page.goto("/login/")
    page.fill("#id_username", user.username)
    page.fill("#id_password", PASSWORD)
    page.click("button[type=submit]")
    page.wait_for_url("**/")


def test_find_by_tag_and_log_an_in_circuit_reading(phone, motor_with_history):
    technician = make_user("technician")
    sign_in(phone, technician)
    tag = motor_with_history.motor.asset_tag
    phone.fill("#id_tag", tag.lower())
    phone.click("text=Open")
    phone.wait_for_url(f"**/motors/{tag}/")
    assert phone.is_visible("text=never a screwdriver")
    phone.shot("01-motor-page")
    phone.click("text=Log reading")
    phone.check("input[value=in_circuit]")
    phone.fill("#id_capacitor_current_a", "0.49")
    phone.fill("#id_capacitor_voltage_v", "393")
    computed = phone.locator("#computed")
    # 10^6 x 0.49 / (2 pi 50 x 393) = 3.97 uF
    assert "3.97\u00a0µF" in computed.inner_text() and "within tolerance" in computed.inner_text()
    phone.shot("02-in-circuit-computed")
    # A defect seen is the verdict (a walk saw "within tolerance" in green beside "Leaking"), with the caution.
    phone.select_option("#id_condition", "leaking")
    said = computed.inner_text()
    assert "Leaking: replace it, whatever it reads" in said and "within tolerance" not in said
    assert "hold its charge" in said and "local codes" in said
    phone.select_option("#id_condition", "sound")
    assert "within tolerance" in computed.inner_text()
    phone.click("#save")
    phone.wait_for_url(f"**/motors/{tag}/?saved=*")
    phone.wait_for_selector("text=Reading saved", timeout=15000)  # the answer page, once it is back
    assert phone.is_visible("text=Reading saved")
    reading = Reading.objects.order_by("-id").first()
    assert reading.method == "in_circuit" and reading.capacitance_uf == pytest.approx(3.968, abs=0.001)


def test_a_validation_error_keeps_what_was_typed(phone, motor_with_history):
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.fill("#id_capacitance_uf", "3960")
    phone.fill("#id_case_temperature_c", "33")
    phone.fill("#id_notes", "fan belt squeals")
    phone.click("#save")
    phone.wait_for_selector("text=looks like nanofarads", timeout=15000)  # the refused page, once it is back
    assert phone.is_visible("text=looks like nanofarads")
    assert phone.input_value("#id_capacitance_uf") == "3960"
    assert phone.input_value("#id_case_temperature_c") == "33"
    assert phone.input_value("#id_notes") == "fan belt squeals"
    phone.shot("03-unit-slip-kept")
    assert Reading.objects.count() == 5


def test_an_outlier_is_confirmed_and_saved_flagged(phone, motor_with_history):
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.fill("#id_capacitance_uf", "3.3")
    phone.click("#save")
    phone.wait_for_selector("text=far from this capacitor's trend", timeout=15000)  # the answer page, once it is back
    assert phone.is_visible("text=far from this capacitor's trend")
    phone.shot("04-confirm-outlier")
    assert phone.input_value("#id_capacitance_uf") == "3.3"
    phone.click("#confirm")
    phone.wait_for_url("**/motors/**")
    assert Reading.objects.filter(capacitance_uf=3.3, outlier_confirmed=True).exists()


def test_record_a_replacement_on_the_spot(phone, motor_with_history):
    sign_in(phone, make_user("technician"))
    phone.goto(f"/motors/{motor_with_history.motor.asset_tag}/")
    phone.click("text=Record replacement")
    phone.check("input[value=failed]")
    phone.fill("#id_serial", "2611-0042")
    phone.shot("05-replacement")
    phone.click("text=Save replacement")
    phone.wait_for_url("**/reading/")
    phone.wait_for_selector("text=Replacement recorded", timeout=15000)  # the answer page, once it is back
    assert phone.is_visible("text=Replacement recorded")
    old = FittedCapacitor.objects.get(pk=motor_with_history.pk)
    new = FittedCapacitor.objects.get(motor=old.motor, removed_on__isnull=True)
    assert old.removal_reason == "failed" and new.serial == "2611-0042"
    phone.shot("06-first-reading-of-new-capacitor")


def test_what_was_typed_survives_a_lost_connection(phone, motor_with_history):
    """The phone keeps a draft: leave the page unsaved (signal lost, tab closed), come
    back, and the values are there to save; once saved, the draft is gone."""
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/"
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3.94")
    phone.fill("#id_notes", "cover cracked")
    phone.goto(f"/motors/{motor_with_history.motor.asset_tag}/")  # the post never reached the server
    phone.goto(url)
    assert phone.is_visible("#draft-note")
    assert phone.input_value("#id_capacitance_uf") == "3.94"
    assert phone.input_value("#id_notes") == "cover cracked"
    phone.shot("07-draft-restored")
    phone.click("#save")
    phone.wait_for_url("**/motors/**")
    assert Reading.objects.filter(capacitance_uf=3.94, notes="cover cracked").exists()
    phone.goto(url)
    assert not phone.is_visible("#draft-note")
    assert phone.input_value("#id_capacitance_uf") == ""


def test_a_new_readings_draft_never_fills_a_correction(phone, motor_with_history):
    """A new reading typed and left unsaved came back in the correction form of an old reading (its time
    too), and saving it replaced that reading in the trend. Each form keeps its own draft."""
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/"
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3.71")
    phone.fill("#id_notes", "new reading, not saved")
    old = Reading.objects.filter(fitted_capacitor=motor_with_history).order_by("taken_at").first()
    phone.goto(f"{url}?corrects={old.id}")
    assert not phone.is_visible("#draft-note")
    assert phone.input_value("#id_capacitance_uf") != "3.71"
    assert phone.input_value("#id_notes") != "new reading, not saved"
    phone.goto(url)  # the new reading's draft is still there to save
    assert phone.is_visible("#draft-note") and phone.input_value("#id_capacitance_uf") == "3.71"


def _type_leave_and_come_back(phone, url, other):
    """Type a reading, open another page, come back: the draft is restored (as designed)."""
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3.94")
    phone.fill("#id_notes", "cover cracked")
    phone.goto(other)
    phone.goto(url)
    assert phone.is_visible("#draft-note") and phone.input_value("#id_capacitance_uf") == "3.94"


def test_a_reading_saved_whose_answer_never_reached_the_phone_never_comes_back_as_a_draft(phone, motor_with_history):
    """A walk: typed, left, restored, saved, and the form opened again at once: the saved values came back as if
    unsaved, with the old time and no word of a draft; saving them again was refused as a second reading at that
    time. The draft was dropped only by the answer page's script, which a page left while it loaded never ran.
    Here the answer is lost outright (the server saves, the phone sees a failed connection): the form, opened
    again, knows the draft's page was saved, drops the draft and says so."""
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/"
    _type_leave_and_come_back(phone, url, f"/motors/{motor_with_history.motor.asset_tag}/")
    answers = []

    def save_then_lose_the_answer(route):
        if route.request.method != "POST":
            return route.continue_()
        answers.append(route.fetch(max_redirects=0).status)  # the server saves the reading
        route.abort("connectionreset")

    phone.route(f"**{url}", save_then_lose_the_answer)
    phone.click("#save")
    for _ in range(100):  # until the server has answered the save the phone never sees
        if answers:
            break
        phone.wait_for_timeout(100)
    phone.unroute(f"**{url}")
    assert answers == [302] and Reading.objects.filter(capacitance_uf=3.94, notes="cover cracked").count() == 1
    phone.goto(url)
    assert not phone.is_visible("#draft-note")
    assert phone.is_visible("#draft-saved-note")
    assert phone.input_value("#id_capacitance_uf") == "" and phone.input_value("#id_notes") == ""
    assert phone.evaluate(f"() => localStorage.getItem('reading-draft-{motor_with_history.id}')") is None
    phone.shot("08-saved-draft-dropped")


def test_a_draft_restored_before_its_save_went_through_is_saved_once(browser, live_server, motor_with_history):
    """The form opened again while the save was still on its way (a second tab here) restores the draft as
    unsaved: saved from there too, it goes under the draft's own key and is answered "already saved", not
    stored twice nor refused as a second reading at its time."""
    context = browser.new_context(viewport={"width": 390, "height": 844}, base_url=live_server.url)
    first = context.new_page()
    sign_in(first, make_user("technician"))
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/"
    _type_leave_and_come_back(first, url, f"/motors/{motor_with_history.motor.asset_tag}/")
    second = context.new_page()
    second.goto(url)
    assert second.is_visible("#draft-note") and second.input_value("#id_notes") == "cover cracked"
    first.click("#save")
    first.wait_for_selector("text=Reading saved", timeout=15000)
    second.click("#save")
    second.wait_for_selector("text=Reading was already saved (sent twice)", timeout=15000)
    assert Reading.objects.filter(capacitance_uf=3.94).count() == 1
    assert second.evaluate(f"() => localStorage.getItem('reading-draft-{motor_with_history.id}')") is None
    context.close()


def test_a_refused_or_failed_save_keeps_the_draft(phone, motor_with_history):
    """Nothing typed is lost when a save fails: refused by the server, or lost on the way (no signal), the
    draft stays on the phone and comes back, said to be a draft."""
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/"
    motor = f"/motors/{motor_with_history.motor.asset_tag}/"
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3,9,5")
    phone.fill("#id_notes", "cover cracked")
    phone.click("#save")
    phone.wait_for_selector("#error-summary", timeout=15000)
    phone.goto(motor)
    phone.goto(url)
    assert phone.is_visible("#draft-note") and phone.input_value("#id_capacitance_uf") == "3,9,5"
    phone.fill("#id_capacitance_uf", "3.95")
    phone.route(
        f"**{url}",
        lambda route: route.abort("internetdisconnected") if route.request.method == "POST" else route.continue_(),
    )
    phone.click("#save")
    phone.wait_for_timeout(500)
    phone.unroute(f"**{url}")
    assert not Reading.objects.filter(capacitance_uf=3.95).exists()
    phone.goto(url)
    assert phone.is_visible("#draft-note")
    assert phone.input_value("#id_capacitance_uf") == "3.95" and phone.input_value("#id_notes") == "cover cracked"


def test_back_after_a_save_shows_the_form_empty_not_the_values_saved(phone, motor_with_history):
    """A walk: Back from the saved page showed the form with the note and the time just saved, put back by the
    browser and not by the draft, so with no word: it looked unsaved, and saving it was refused as a second
    reading at that time. The browser puts back nothing of its own on this form."""
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/"
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3.94")
    phone.fill("#id_notes", "cover cracked")
    phone.click("#save")
    phone.wait_for_selector("text=Reading saved", timeout=15000)
    phone.go_back()
    phone.wait_for_url(f"**{url}")
    assert phone.input_value("#id_notes") == "" and phone.input_value("#id_capacitance_uf") == ""
    assert not phone.is_visible("#draft-note")


def test_every_draft_restored_says_it_is_a_draft(phone, motor_with_history):
    """Whatever a draft restores, a choice alone (what was seen: leaking) included, the note says it is not saved
    yet: values shown with no word were taken for saved ones."""
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/"
    phone.goto(url)
    phone.select_option("#id_condition", "leaking")
    phone.goto(f"/motors/{motor_with_history.motor.asset_tag}/")
    phone.goto(url)
    assert phone.input_value("#id_condition") == "leaking"
    assert phone.is_visible("#draft-note") and "Not saved yet" in phone.inner_text("#draft-note")


MENU = r"""() => {
  const shown = [...document.querySelectorAll("header a, header summary, header button")].filter((e) =>
    e.checkVisibility({visibilityProperty: true, contentVisibilityAuto: true}));
  return {
    rows: new Set(shown.map((e) => Math.round(e.getBoundingClientRect().top))).size,
    targets: shown.map((e) => {
      const box = e.getBoundingClientRect();
      return {text: e.textContent.trim(), width: box.width, height: box.height, top: Math.round(box.top)};
    }),
    page: document.documentElement.scrollWidth,
  };
}"""


def test_the_technicians_menu_fits_two_rows_of_glove_sized_targets_on_a_phone(phone, browser, live_server):
    """At 390 px the menu wrapped to three rows of 42 px links and a 30 px sign-out button. Now: at most two
    rows, every target at least 44 px (WCAG 2.2 target size, enhanced), the field pages in front and the
    others one tap away under More; at 1366 px every link in view without a tap."""
    user = make_user("technician")
    sign_in(phone, user)
    menu = phone.evaluate(MENU)
    texts = [target["text"] for target in menu["targets"]]
    assert menu["rows"] <= 2, menu
    assert all(t["height"] >= 44 and t["width"] >= 44 for t in menu["targets"]), menu["targets"]
    assert {"Fleet", "Find motor", "Work orders", "Import", "Sign out"} <= set(texts), texts
    assert "Track record" not in texts and menu["page"] <= 390
    phone.shot("menu-technician-390")
    phone.click("header >> text=More")
    opened = [target["text"] for target in phone.evaluate(MENU)["targets"]]
    assert {"Dashboard", "Replacement plan", "Life data", "Track record", "Refits"} <= set(opened), opened
    phone.shot("menu-technician-390-more")
    # Opened on a phone and widened (a tablet turned, a window resized): the desktop's one row, not the
    # phone's folded rows with Sign out alone on a third.
    phone.set_viewport_size({"width": 1366, "height": 900})
    tops = [target["top"] for target in phone.evaluate(MENU)["targets"]]
    assert max(tops) - min(tops) < 22, tops  # one row (Sign out, a shorter button, sits centred in it)
    phone.set_viewport_size({"width": 390, "height": 844})
    phone.click("header >> text=Track record")
    phone.wait_for_url("**/forecast/track-record/")

    desktop = browser.new_context(viewport={"width": 1366, "height": 900}, base_url=live_server.url).new_page()
    sign_in(desktop, user)
    every = [target["text"] for target in desktop.evaluate(MENU)["targets"]]
    assert "More" not in every
    assert {"Find motor", "Work orders", "Import", "Dashboard", "Replacement plan", "Track record", "Refits"} <= set(
        every
    ), every
    desktop.context.close()


def test_a_capacitor_replaced_while_its_form_was_open_takes_the_reading_only_where_the_technician_says(
    phone, motor_with_history
):
    """A walk: the form open in one tab, the replacement recorded in another, the reading saved in the first was
    filed on the removed capacitor. It comes back as typed, asking which capacitor was measured; the capacitor
    fitted now is chosen, the reading is its own, and the draft kept on the phone goes with it and is dropped."""
    from fleet.services.readings import replace_capacitor

    sign_in(phone, make_user("technician"))
    old = motor_with_history
    phone.goto(f"/fitted-capacitors/{old.id}/reading/")
    new = replace_capacitor(fitted_capacitor=old, part=old.part, removed_on=timezone.localdate(), reason="failed")
    phone.fill("#id_capacitance_uf", "3.92")
    phone.click("#save")
    phone.wait_for_selector("#replaced-meanwhile", timeout=15000)
    assert phone.input_value("#id_capacitance_uf") == "3.92" and not phone.is_visible("#save")
    assert not Reading.objects.filter(capacitance_uf=3.92).exists()
    phone.shot("12-replaced-while-the-form-was-open")
    phone.click("#save-to-successor")
    phone.wait_for_url("**/motors/**")
    assert list(Reading.objects.filter(capacitance_uf=3.92).values_list("fitted_capacitor_id", flat=True)) == [new.id]
    for capacitor in (old, new):
        assert phone.evaluate(f"() => localStorage.getItem('reading-draft-{capacitor.id}')") is None


def test_a_draft_typed_in_service_and_restored_after_the_replacement_asks_which_capacitor(phone, motor_with_history):
    """The phone's draft keeps the capacitor as its page showed it: typed while in service, left unsaved, and
    restored on the form once the capacitor is out, it is not filed on the removed capacitor without a word."""
    from fleet.services.readings import replace_capacitor

    sign_in(phone, make_user("technician"))
    old = motor_with_history
    url = f"/fitted-capacitors/{old.id}/reading/"
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3.93")
    phone.goto(f"/motors/{old.motor.asset_tag}/")  # the save never sent
    replace_capacitor(fitted_capacitor=old, part=old.part, removed_on=timezone.localdate(), reason="failed")
    phone.goto(url)
    assert phone.is_visible("#draft-note") and phone.input_value("#id_capacitance_uf") == "3.93"
    phone.click("#save")
    phone.wait_for_selector("#replaced-meanwhile", timeout=15000)
    assert not Reading.objects.filter(capacitance_uf=3.93).exists()
    phone.click("#save-to-removed")
    phone.wait_for_url("**/motors/**")
    assert list(Reading.objects.filter(capacitance_uf=3.93).values_list("fitted_capacitor_id", flat=True)) == [old.id]


def _sign_in_ends(page):
    """The sign-in ends while a form is open (timed out, or signed out in another tab): its session cookie goes,
    the CSRF cookie, which outlives it, stays."""
    kept = [cookie for cookie in page.context.cookies() if cookie["name"] != "sessionid"]
    page.context.clear_cookies()
    page.context.add_cookies(kept)


def test_a_reading_saved_after_the_sign_in_ended_is_said_not_saved_and_comes_back_to_save(phone, motor_with_history):
    """Save pressed once the sign-in had ended went to the sign-in page with no word: the reading not saved, and
    nothing said that the phone kept it. The sign-in page says so; signed in again, the form is back with the
    values typed, the route's `?next=` kept, to save."""
    technician = make_user("technician")
    sign_in(phone, technician)
    url = f"/fitted-capacitors/{motor_with_history.id}/reading/?next=/work-orders/"
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3.94")
    phone.fill("#id_notes", "terminal loose")
    _sign_in_ends(phone)
    phone.click("#save")
    phone.wait_for_selector("#not-saved", timeout=15000)
    assert phone.is_visible("#not-saved-kept") and not phone.is_visible("#not-saved-lost")
    assert "press Save again" in phone.inner_text("#not-saved")
    assert not Reading.objects.filter(capacitance_uf=3.94).exists()
    phone.shot("13-signed-out-not-saved")
    phone.fill("#id_username", technician.username)
    phone.fill("#id_password", PASSWORD)
    phone.click("button[type=submit]")
    phone.wait_for_url(f"**{url}")
    assert phone.is_visible("#draft-note")
    assert phone.input_value("#id_capacitance_uf") == "3.94" and phone.input_value("#id_notes") == "terminal loose"
    phone.shot("14-signed-in-again-draft-restored")
    phone.click("#save")
    phone.wait_for_url("**/work-orders/**")
    assert Reading.objects.filter(capacitance_uf=3.94, notes="terminal loose", taken_by=technician).count() == 1


def test_a_replacement_sent_after_the_sign_in_ended_comes_back_as_typed(phone, motor_with_history):
    """The replacement form keeps no draft of its own: what was sent is held in the tab until the answer
    (page.js), so signed in again the form is back as typed, said to be unsaved."""
    technician = make_user("technician")
    sign_in(phone, technician)
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/replace/")
    phone.check("input[value=failed]")
    phone.fill("#id_serial", "2611-0043")
    phone.fill("#id_notes", "burnt smell")
    _sign_in_ends(phone)
    phone.click("text=Save replacement")
    phone.wait_for_selector("#not-saved", timeout=15000)
    assert phone.is_visible("#not-saved-kept")
    assert FittedCapacitor.objects.filter(motor=motor_with_history.motor).count() == 1
    phone.fill("#id_username", technician.username)
    phone.fill("#id_password", PASSWORD)
    phone.click("button[type=submit]")
    phone.wait_for_url("**/replace/")
    assert phone.is_visible("#form-put-back")
    assert phone.is_checked("input[value=failed]")
    assert phone.input_value("#id_serial") == "2611-0043" and phone.input_value("#id_notes") == "burnt smell"
    phone.shot("15-signed-in-again-replacement-put-back")
    phone.goto(f"/motors/{motor_with_history.motor.asset_tag}/")
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/replace/")  # put back once, not on every visit
    assert not phone.is_visible("#form-put-back") and phone.input_value("#id_serial") == ""


def test_a_replacement_sent_while_the_database_was_busy_comes_back_as_typed(phone, motor_with_history, monkeypatch):
    """The replacement form keeps no draft: sent while a long write held the database past the busy timeout, it
    answered a page that only said to retry, and what was typed was gone. [ours] the page says nothing was saved
    and leads back to the form, filled in as typed."""
    from django.db import OperationalError

    def busy(**values):
        raise OperationalError("database is locked")

    technician = make_user("technician")
    sign_in(phone, technician)
    monkeypatch.setattr("fleet.views.field.replace_capacitor", busy)
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/replace/")
    phone.check("input[value=failed]")
    phone.fill("#id_serial", "2611-0044")
    phone.fill("#id_notes", "hums, no start")
    phone.click("text=Save replacement")
    phone.wait_for_selector("#not-saved", timeout=15000)
    assert phone.is_visible("#not-saved-kept") and "not saved" in phone.inner_text("main")
    phone.shot("16-busy-replacement-not-saved")
    monkeypatch.undo()
    phone.click("text=Back to the form")
    phone.wait_for_selector("#form-put-back")
    assert "while the database was busy" in phone.inner_text("#form-put-back")
    assert phone.is_checked("input[value=failed]")
    assert phone.input_value("#id_serial") == "2611-0044" and phone.input_value("#id_notes") == "hums, no start"
    phone.click("button:has-text('Save replacement')")  # the note names the button too
    phone.wait_for_url("**/reading/**")
    assert FittedCapacitor.objects.get(serial="2611-0044").motor == motor_with_history.motor


def test_a_form_put_back_after_a_busy_database_names_the_button_to_press_again(phone, transactional_db, monkeypatch):
    """A walk: a work order's cancel sent while the database was busy came back filled in, saying "press Save
    again", on a page with no Save button ("Cancel this order"; a visit's "Move the whole visit" the same). [ours]
    the note names the button that was pressed."""
    from django.db import OperationalError

    from fleet.models import WorkOrder

    def busy(**values):
        raise OperationalError("database is locked")

    fitted_capacitor = make_fitted_capacitor()
    order = WorkOrder.objects.create(
        motor=fitted_capacitor.motor,
        fitted_capacitor=fitted_capacitor,
        kind="replace_run",
        due_on=timezone.localdate() + dt.timedelta(days=5),
    )
    sign_in(phone, make_user("planner"))
    monkeypatch.setattr("fleet.views.planning.cancel_order", busy)
    phone.goto(f"/work-orders/{order.id}/cancel/")
    phone.fill("#id_reason", "motor taken out for the winter")
    phone.click("text=Cancel this order")
    phone.wait_for_selector("#not-saved", timeout=15000)
    monkeypatch.undo()
    phone.click("text=Back to the form")
    phone.wait_for_selector("#form-put-back")
    note = phone.inner_text("#form-put-back")
    assert "press \u201cCancel this order\u201d again" in note and "Save" not in note
    assert phone.input_value("#id_reason") == "motor taken out for the winter"


def test_the_time_box_offers_the_minute_and_the_reading_keeps_the_second_it_was_offered(phone, motor_with_history):
    """A walk with gloves: the time box showed seconds ("02:15:17 PM"), fiddly to set, and readings saved from
    the form were listed with seconds beside older ones to the minute. The box offers the minute (step 60); the
    second it offered (the moment the first value was typed) is kept beside it, on the phone with the draft too,
    and saved while the box is left at its minute, so two readings within a minute stay two. [ours]"""
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    box, offered = phone.locator("#id_taken_at"), phone.locator("input[name=offered_at]")
    assert box.get_attribute("step") == "60" and len(box.input_value()) == len("2026-03-14T09:30")
    phone.wait_for_timeout(1100)
    phone.fill("#id_capacitance_uf", "3.95")
    minute, second = box.input_value(), offered.input_value()
    assert len(minute) == len("2026-03-14T09:30") and len(second) == len("2026-03-14T09:30:27")
    assert second.startswith(minute + ":")
    phone.reload()  # the draft on the phone keeps both
    assert box.input_value() == minute and offered.input_value() == second
    phone.click("#save")
    phone.wait_for_url("**/motors/**")
    reading = Reading.objects.get(capacitance_uf=3.95)
    zone = site_zone(motor_with_history.motor.site.time_zone)
    assert timezone.localtime(reading.taken_at, zone).strftime("%Y-%m-%dT%H:%M:%S") == second
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    assert phone.locator("table.readings tbody tr td").first.inner_text() == minute.replace("T", " ")
