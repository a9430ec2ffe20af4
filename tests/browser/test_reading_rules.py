"""The reading form's live hint follows the server's rulebook; a page sent twice saves once."""

import pytest

from fleet.models import Reading
from tests.factories import make_user

from .test_technician import motor_with_history, sign_in  # noqa: F401 - the fixture is used by name

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]


def test_a_decimal_comma_is_read_as_the_server_reads_it(phone, motor_with_history):  # noqa: F811
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.fill("#id_capacitance_uf", "3,94")
    computed = phone.locator("#computed")
    assert "3.94\u00a0µF" in computed.inner_text() and "within tolerance" in computed.inner_text()
    phone.fill("#id_case_temperature_c", "200")
    assert "Capacitor case temperature (°C): 200 is above 150 °C, the most a reading" in computed.inner_text()
    phone.fill("#id_case_temperature_c", "31")
    phone.click("#save")
    phone.wait_for_url("**/motors/**")
    assert Reading.objects.order_by("-id").first().capacitance_uf == 3.94


def test_the_hint_says_a_voltage_of_zero_must_be_above_zero_as_the_server_does(phone, motor_with_history):  # noqa: F811
    """It said "outside 0 to 5000" for 0 V, which reads as if 0 were allowed."""
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.check("input[value=in_circuit]")
    phone.fill("#id_capacitor_voltage_v", "0")
    text = phone.locator("#computed").inner_text()
    assert "Voltage across capacitor (V): 0 must be above 0 V" in text and "outside" not in text


def test_current_with_no_voltage_is_hinted_as_the_short_circuit_the_server_names(phone, motor_with_history):  # noqa: F811
    """With 0.49 A flowing the hint said "0 must be above 0 V" (a typo, it seemed) while the server
    refused the same values as a suspected short circuit, with what to do about it."""
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.check("input[value=in_circuit]")
    phone.fill("#id_capacitor_current_a", "0.49")
    phone.fill("#id_capacitor_voltage_v", "0")
    hint = phone.locator("#computed").inner_text()
    assert "short circuit suspected. Isolate, lock out, discharge" in hint and "must be above 0 V" not in hint
    readings_before = Reading.objects.count()
    phone.click("#save")
    phone.wait_for_selector("#id_capacitor_voltage_v_error, .errorlist", timeout=15000)
    assert "short circuit suspected" in phone.locator(".errorlist").first.inner_text()
    assert Reading.objects.count() == readings_before


def test_the_hint_warns_of_a_voltage_far_above_the_motors(phone, motor_with_history):  # noqa: F811
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.check("input[value=in_circuit]")
    phone.fill("#id_capacitor_current_a", "0.49")
    phone.fill("#id_capacitor_voltage_v", "2300")
    assert "asked to confirm" in phone.locator("#computed").inner_text()
    phone.shot("10-voltage-far-above-the-motor")
    phone.click("#save")
    phone.wait_for_selector("text=missed decimal point", timeout=15000)  # the answer page, once it is back
    assert phone.is_visible("text=missed decimal point")


def test_the_hint_names_a_case_temperature_that_reads_as_fahrenheit(phone, motor_with_history):  # noqa: F811
    """As the server: above the part's highest case temperature by more than the rulebook's margin, the
    hint says what the value would be in °F and that the server will ask to confirm."""
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.fill("#id_capacitance_uf", "3.95")
    phone.fill("#id_case_temperature_c", "100")
    hint = phone.locator("#computed").inner_text()
    assert "read in °F it would be 38 °C: you will be asked to confirm" in hint
    phone.fill("#id_case_temperature_c", "38")
    assert "°F" not in phone.locator("#computed").inner_text()


def test_the_hint_says_a_value_far_above_the_tolerance_will_be_asked_to_confirm(phone, motor_with_history):  # noqa: F811
    """As the server: 4.6 uF on a 4 uF +5 % part (4.20 at most, 4.52 with the rulebook's 8 % of rating)."""
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.fill("#id_capacitance_uf", "4.6")
    assert "4.60 µF is above this capacitor's tolerance (4.20 µF at most): you will be asked to confirm" in (
        phone.locator("#computed").inner_text()
    )
    phone.fill("#id_capacitance_uf", "4.5")
    assert "asked to confirm" not in phone.locator("#computed").inner_text()


def test_the_same_page_sent_twice_saves_one_reading(phone, motor_with_history):  # noqa: F811
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    phone.fill("#id_capacitance_uf", "3.95")
    before = Reading.objects.count()
    statuses = phone.evaluate(
        """async () => {
            const form = document.getElementById("reading-form");
            const send = () => fetch(form.action || location.href, {method: "POST", body: new FormData(form)});
            const answers = await Promise.all([send(), send()]);
            return answers.map((a) => a.status);
        }"""
    )
    assert statuses == [200, 200]  # both followed their redirect to the motor page
    assert Reading.objects.count() == before + 1


def test_a_value_in_nanofarads_is_hinted_as_the_server_names_it_not_judged_as_microfarads(
    phone,
    motor_with_history,  # noqa: F811
):
    """147600 typed on a capacitor rated in tens of uF: the server names the nanofarad slip, the hint
    said "147600.00 uF - above tolerance" and "above 5000 uF" in 30 px bold. [trade] the slip first."""
    from fleet.engineering.rules import capacitance_unit_slip

    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{motor_with_history.id}/reading/")
    rated = motor_with_history.part.rated_uf
    typed = rated * 1000
    phone.fill("#id_capacitance_uf", f"{typed:g}")
    hint = phone.locator("#computed").inner_text()
    server = capacitance_unit_slip([typed], rated)[0]
    assert "looks like nanofarads" in server and server in hint
    assert "tolerance" not in hint and "5000" not in hint
    size = phone.eval_on_selector("#computed .check", "e => parseFloat(getComputedStyle(e).fontSize)")
    assert size < 20  # a sentence to read, not the figure's 30 px
