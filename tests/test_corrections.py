"""Corrections: a reading entered wrong is corrected from the capacitor page or the API, never edited."""

import datetime as dt

import pytest
from django.core.exceptions import ValidationError
from django.urls import reverse
from django.utils import timezone
from django.utils.html import strip_tags

from fleet.models import Assessment, Reading, site_zone
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.readings import record_reading, replace_capacitor
from tests.factories import make_fitted_capacitor, make_reading, make_user, quarterly_readings

from .test_api import client_for

pytestmark = pytest.mark.django_db


def test_the_form_corrects_a_reading_at_its_time_and_the_trend_uses_the_correction(
    client, technician, fan_fitted_capacitor
):
    """[derived] append-only: both readings kept; the fit leaves the corrected one out."""
    readings = quarterly_readings(
        fan_fitted_capacitor, timezone.now() - dt.timedelta(days=400), [4.0, 3.98, 3.96, 3.94]
    )
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.2, taken_at=timezone.now() - dt.timedelta(hours=3))
    client.force_login(technician)
    page = client.get(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id])).content.decode()
    assert f"?corrects={wrong.id}" in page
    url = reverse("reading_new", args=[fan_fitted_capacitor.id])
    form = client.get(url, {"corrects": wrong.id}).content.decode()
    assert "Correcting the reading of" in form and "Save correction" in form
    response = client.post(
        url, {"method": "meter", "capacitance_uf": "3.92", "condition": "sound", "supersedes": str(wrong.id)}
    )
    assert response.status_code == 302
    # Back on the capacitor's page its "Correct" was on (it went to the motor's page).
    assert response.url.startswith(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id]) + "?saved=")
    after = strip_tags(client.get(response.url).content.decode())
    assert "Correction saved for" in after
    # The page takes the draft to drop (a walk read "Ignored saved: Not a parameter of this page" after each one).
    assert "Ignored" not in after and "Not a parameter" not in after
    correction = Reading.objects.get(supersedes=wrong)
    assert correction.capacitance_uf == 3.92 and correction.taken_at == wrong.taken_at
    assert Reading.objects.filter(pk=wrong.pk).exists()  # kept, never overwritten
    refit_fitted_capacitors([fan_fitted_capacitor.id])
    assessment = Assessment.objects.get(fitted_capacitor=fan_fitted_capacitor, is_current=True)
    assert assessment.readings_used == len(readings) + 1
    page = client.get(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id])).content.decode()
    assert "corrected: not used in the trend" in page and f"?corrects={wrong.id}" not in page
    # The motor page, where a label scan lands, marks them too (it listed both as plain readings).
    motor_page = client.get(reverse("motor", args=[fan_fitted_capacitor.motor.asset_tag])).content.decode()
    assert motor_page.count("corrected: not used in the trend") == 1 and motor_page.count("a correction<") == 1


def test_a_correction_starts_from_the_reading_it_corrects_and_the_chart_draws_the_correction_only(
    client, technician, fan_fitted_capacitor
):
    """A correction form that opened blank lost what was right: a capacitance typed again was stored
    without its case temperature (38 C), so the trend took it as if at 25 C [derived]. The form now
    holds every value of the reading it corrects; the chart draws the correction, not the reading it
    superseded (the fit leaves that one out)."""
    quarterly_readings(fan_fitted_capacitor, timezone.now() - dt.timedelta(days=400), [4.0, 3.98, 3.96, 3.94])
    wrong = make_reading(
        fan_fitted_capacitor,
        capacitance_uf=3.19,
        case_temperature_c=38.0,
        ambient_temperature_c=21.5,
        notes="hot cabinet",
        taken_at=timezone.now() - dt.timedelta(hours=3),
    )
    client.force_login(technician)
    url = reverse("reading_new", args=[fan_fitted_capacitor.id])
    form = client.get(url, {"corrects": wrong.id}).context["form"]
    assert form.initial["capacitance_uf"] == "3.19" and form.initial["case_temperature_c"] == "38.0"
    assert form.initial["ambient_temperature_c"] == "21.5" and form.initial["notes"] == "hot cabinet"
    assert form.initial["method"] == "meter" and "esr_ohm" not in form.initial
    fields = {name: value for name, value in form.initial.items() if name not in {"taken_at"}}
    response = client.post(url, {**fields, "capacitance_uf": "3.91", "taken_at": form.initial["taken_at"]})
    assert response.status_code == 302
    correction = Reading.objects.get(supersedes=wrong)
    assert (correction.capacitance_uf, correction.case_temperature_c) == (3.91, 38.0)
    refit_fitted_capacitors([fan_fitted_capacitor.id])
    page = client.get(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id]))
    figure = page.context["chart"]
    drawn = [y for trace in figure["data"] if trace.get("mode") == "markers" for y in trace["y"]]
    assert len(drawn) == 5  # four quarterly readings and the correction
    assert min(drawn) > 3.5  # the superseded 3.19 (3.2 at 25 C) is not among them


def test_the_form_for_a_reading_corrected_before_leads_to_its_newest_correction(
    client, technician, fan_fitted_capacitor
):
    """A technician who opens "correct" on a reading corrected twice is led to the newest correction, the
    one a correction may replace (a save there would have logged one more reading beside it)."""
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.2)
    first = record_reading(fitted_capacitor=fan_fitted_capacitor, values={"method": "meter", "capacitance_uf": "3.9"},
                           user=technician, supersedes_id=wrong.id)  # fmt: skip
    second = record_reading(fitted_capacitor=fan_fitted_capacitor, values={"method": "meter", "capacitance_uf": "3.8"},
                            user=technician, supersedes_id=first.id)  # fmt: skip
    client.force_login(technician)
    url = reverse("reading_new", args=[fan_fitted_capacitor.id])
    page = client.get(url, {"corrects": wrong.id}).content.decode()
    assert "already corrected" in page and f'href="{url}?corrects={second.id}"' in page
    assert 'id="correct-instead"' not in client.get(url, {"corrects": second.id}).content.decode()


def test_a_removed_capacitors_reading_is_corrected_from_its_page_and_a_new_one_after_removal_is_still_refused(
    client, technician, planner, fan_fitted_capacitor
):
    """A slip found after a replacement: the removed capacitor's page offered no "Correct", though the form took
    the correction typed by hand. Both readings stay with the removed capacitor (append-only, [derived]); a new
    reading taken after the removal day still belongs to the capacitor fitted now and is refused here."""
    removed_on = timezone.localdate() - dt.timedelta(days=10)
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.2, taken_at=timezone.now() - dt.timedelta(days=40))
    successor = replace_capacitor(
        fitted_capacitor=fan_fitted_capacitor, part=fan_fitted_capacitor.part, removed_on=removed_on, reason="planned"
    )
    page_url = reverse("fitted_capacitor", args=[fan_fitted_capacitor.id])
    client.force_login(planner)  # no right to add readings: no link
    assert f"?corrects={wrong.id}" not in client.get(page_url).content.decode()
    client.force_login(technician)
    assert f'href="{reverse("reading_new", args=[fan_fitted_capacitor.id])}?corrects={wrong.id}"' in (
        client.get(page_url).content.decode()
    )
    url = reverse("reading_new", args=[fan_fitted_capacitor.id])
    form = strip_tags(client.get(url, {"corrects": wrong.id}).content.decode())
    assert "Correcting the reading of" in form and "of this removed capacitor" in form
    assert f"removed on {removed_on:%Y-%m-%d}" in form and "This form corrects one of its readings" in form
    response = client.post(
        url, {"method": "meter", "capacitance_uf": "3.92", "condition": "sound", "supersedes": str(wrong.id)}
    )
    assert response.status_code == 302
    correction = Reading.objects.get(supersedes=wrong)
    assert correction.fitted_capacitor_id == fan_fitted_capacitor.id and correction.taken_at == wrong.taken_at
    # A new reading of the removed capacitor, taken now (after its removal day): refused at its time, as before.
    refused = client.post(url, {"method": "meter", "capacitance_uf": "3.9", "condition": "sound"})
    assert refused.status_code == 200 and f"removed on {removed_on}" in refused.context["form"].errors["taken_at"][0]
    assert reverse("reading_new", args=[successor.id]) in refused.content.decode()
    assert Reading.objects.filter(fitted_capacitor=fan_fitted_capacitor).count() == 2


def test_a_reading_is_corrected_once_and_only_on_its_own_capacitor(technician, fan_fitted_capacitor):
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.2)
    first = record_reading(fitted_capacitor=fan_fitted_capacitor, values={"method": "meter", "capacitance_uf": "3.9"},
                           user=technician, supersedes_id=wrong.id)  # fmt: skip
    with pytest.raises(ValidationError) as twice:
        record_reading(fitted_capacitor=fan_fitted_capacitor, values={"method": "meter", "capacitance_uf": "3.8"},
                       user=technician, supersedes_id=wrong.id)  # fmt: skip
    # [ours] a technician knows a reading by its time and value, not by an internal id; both at the site's clock,
    # as the readings tables write them (to the minute)
    taken = timezone.localtime(wrong.taken_at, site_zone(fan_fitted_capacitor.motor.site.time_zone))
    shown = f"{taken:%Y-%m-%d %H:%M}"
    assert twice.value.message_dict["supersedes"][0] == (
        f"The reading of {shown} (3.20 µF) was already corrected by the reading of {shown} (3.90 µF): correct that "
        "one instead."
    )
    other = make_fitted_capacitor(motor=None)
    with pytest.raises(ValidationError) as elsewhere:
        record_reading(fitted_capacitor=other, values={"method": "meter", "capacitance_uf": "3.9"},
                       user=technician, supersedes_id=first.id)  # fmt: skip
    assert "not a reading of this capacitor" in elsewhere.value.message_dict["supersedes"][0]
    assert Reading.objects.count() == 2


def test_the_api_takes_a_correction_and_names_the_field_when_it_cannot(technician, fan_fitted_capacitor):
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.2)
    client = client_for(technician)
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    saved = client.post(url, {"method": "meter", "capacitance_uf": 3.9, "supersedes": wrong.id}, format="json")
    assert saved.status_code == 201 and saved.json()["supersedes"] == wrong.id
    again = client.post(url, {"method": "meter", "capacitance_uf": 3.8, "supersedes": wrong.id}, format="json")
    assert again.status_code == 400 and "already corrected" in again.json()["supersedes"][0]
    unknown = client.post(url, {"method": "meter", "capacitance_uf": 3.8, "supersedes": 999999}, format="json")
    assert unknown.status_code == 400 and "not a reading of this capacitor" in unknown.json()["supersedes"][0]
    for beyond in (2**63, 10**23):  # past any row's id: SQLite cannot even look one up (it was a 500)
        answer = client.post(url, {"method": "meter", "capacitance_uf": 3.8, "supersedes": beyond}, format="json")
        assert answer.status_code == 400 and "not a reading of this capacitor" in answer.json()["supersedes"][0]
    assert Reading.objects.count() == 2


@pytest.mark.parametrize("key", ["", "correction-1"])
def test_the_same_api_correction_sent_again_is_answered_as_the_replay(technician, fan_fitted_capacitor, key):
    """A script that sends its correction again (no answer the first time), with or without an
    Idempotency-Key: one correction stored, the second answer 200 with it. Another correction of the
    same reading, or the same one from another user, is still refused by name. [derived]"""
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.2)
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    headers = {"HTTP_IDEMPOTENCY_KEY": key} if key else {}
    body = {"method": "meter", "capacitance_uf": 3.9, "notes": "re-measured", "supersedes": wrong.id}
    client = client_for(technician)
    first = client.post(url, body, format="json", **headers)
    again = client.post(url, body, format="json", **headers)
    assert (first.status_code, again.status_code) == (201, 200)
    assert again.json()["id"] == first.json()["id"] and again.json()["supersedes"] == wrong.id
    assert Reading.objects.filter(supersedes=wrong).count() == 1 and Reading.objects.count() == 2
    other = client.post(url, {**body, "capacitance_uf": 3.8}, format="json")
    assert other.status_code == 400 and "already corrected" in other.json()["supersedes"][0]
    colleague = client_for(make_user("technician")).post(url, body, format="json")
    assert colleague.status_code == 400 and "already corrected" in colleague.json()["supersedes"][0]
    assert Reading.objects.count() == 2


def test_the_admin_refuses_a_correction_of_another_capacitors_reading(fan_fitted_capacitor):
    """In the admin, a reading saved as the correction of another capacitor's reading took that reading out
    of the other capacitor's trend; the form and the API refuse it (one rule, `Reading.clean`)."""
    other = make_fitted_capacitor()
    theirs = make_reading(other, capacitance_uf=3.9)
    correction = Reading(
        fitted_capacitor=fan_fitted_capacitor,
        taken_at=theirs.taken_at,
        method="meter",
        capacitance_uf=3.95,
        condition="sound",
        supersedes=theirs,
    )
    with pytest.raises(ValidationError) as refused:
        correction.full_clean()
    assert refused.value.message_dict["supersedes"] == [f"Reading {theirs.id} is not a reading of this capacitor."]
    correction.supersedes = make_reading(fan_fitted_capacitor, capacitance_uf=3.9)
    correction.full_clean()


def test_a_meter_value_typed_before_choosing_in_circuit_is_refused_at_its_field_not_dropped(
    client, technician, fan_fitted_capacitor
):
    """[trade] nothing a technician typed is lost without a word: 3.95 uF typed, then "in circuit" chosen
    with its current and voltage, was saved as the worked-out value alone. It is refused at the capacitance
    field, nothing saved; cleared, the reading saves. A correction of an in-circuit reading does not start
    with the worked-out value in the meter field (it would be refused the same way)."""
    client.force_login(technician)
    url = reverse("reading_new", args=[fan_fitted_capacitor.id])
    values = {
        "method": "in_circuit",
        "capacitance_uf": "3.95",
        "capacitor_current_a": "0.434",
        "capacitor_voltage_v": "350",
        "condition": "sound",
    }
    refused = client.post(url, values)
    assert refused.status_code == 200 and not Reading.objects.exists()
    message = strip_tags(str(refused.context["form"].errors["capacitance_uf"]))
    assert "3.95 µF from the meter would not be saved" in message
    assert client.post(url, {**values, "capacitance_uf": ""}).status_code == 302
    saved = Reading.objects.get()
    assert saved.method == Reading.Method.IN_CIRCUIT and saved.capacitance_uf == pytest.approx(
        1e6 * 0.434 / (2 * 3.141592653589793 * 50 * 350), abs=0.001
    )
    form = client.get(url, {"corrects": saved.id}).context["form"]
    assert form.initial["method"] == "in_circuit" and "capacitance_uf" not in form.initial
    assert form.initial["capacitor_current_a"] == "0.434"


def test_a_correction_that_changes_nothing_is_refused_naming_the_reading(client, technician, fan_fitted_capacitor):
    """A walk saved a correction with every value of the reading it corrected: a second record of one reading,
    the first marked "corrected" for nothing. [derived] refused at the correction, naming the reading, nothing
    saved; the same reading with one value changed (the case temperature) is a correction."""
    wrong = make_reading(fan_fitted_capacitor, capacitance_uf=3.2, case_temperature_c=30.0)
    same = {"method": "meter", "capacitance_uf": "3.2", "case_temperature_c": "30", "condition": "sound"}
    with pytest.raises(ValidationError) as unchanged:
        record_reading(fitted_capacitor=fan_fitted_capacitor, values=same, user=technician, supersedes_id=wrong.id)
    (message,) = unchanged.value.message_dict["supersedes"]
    assert "gives the reading of " in message and "(3.20 µF) again as it is" in message
    assert Reading.objects.count() == 1
    client.force_login(technician)
    page = client.post(
        reverse("reading_new", args=[fan_fitted_capacitor.id]), {**same, "supersedes": str(wrong.id)}
    ).content.decode()
    assert "again as it is" in page and Reading.objects.count() == 1
    record_reading(
        fitted_capacitor=fan_fitted_capacitor,
        values={**same, "case_temperature_c": "31"},
        user=technician,
        supersedes_id=wrong.id,
    )
    assert Reading.objects.filter(supersedes=wrong, case_temperature_c=31.0).exists()
