"""The API answers bad input at the field or parameter, through one rule, and drops nothing sent: unknown
body fields, parameters given twice or not taken, a format it does not answer in, a body that is not JSON,
and messages that name the value and where the valid ones are. [derived: the README's API section; the
project's rule that nothing a user entered is silently lost.]"""

import datetime as dt

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.models import Reading
from fleet.services.assessments import refit_fitted_capacitors
from tests.factories import quarterly_readings
from tests.test_api import client_for

pytestmark = pytest.mark.django_db

WRITABLE = "case_temperature_c"  # one of the fields a reading takes, named in the list


def readings_url(fitted_capacitor) -> str:
    return reverse("api_fitted_capacitor_readings", args=[fitted_capacitor.id])


@pytest.mark.parametrize(
    "extra",
    [{"colour": "red"}, {"case_temprature_c": 41}, {"colour": "red", "case_temprature_c": 41}, {"id": 7}],
)
def test_a_body_field_a_reading_does_not_take_is_named_with_the_ones_it_takes(technician, fan_fitted_capacitor, extra):
    """Before: 201, the unknown field dropped unseen (a misspelt temperature lost)."""
    body = {"method": "meter", "capacitance_uf": 3.9, **extra}
    response = client_for(technician).post(readings_url(fan_fitted_capacitor), body, format="json")
    assert response.status_code == 400, response.json()
    answer = response.json()
    assert sorted(answer) == sorted(extra)
    for name in extra:
        assert answer[name][0].startswith("Not a field of this call, which takes: ")
        assert WRITABLE in answer[name][0] and "method" in answer[name][0] and "colour" not in answer[name][0]
    assert not Reading.objects.exists()


def test_a_form_encoded_body_answers_415_and_the_web_form_still_saves(technician, fan_fitted_capacitor, client):
    """The README: the body is a JSON object. Before, a form-encoded POST was read and saved (201)."""
    api = client_for(technician)
    response = api.post(readings_url(fan_fitted_capacitor), {"method": "meter", "capacitance_uf": "3.9"})
    assert response.status_code == 415
    assert response.json()["detail"].startswith("The body was sent as multipart/form-data")
    assert "application/json" in response.json()["detail"]
    encoded = api.post(
        readings_url(fan_fitted_capacitor),
        "method=meter&capacitance_uf=3.9",
        content_type="application/x-www-form-urlencoded",
    )
    assert encoded.status_code == 415 and "application/x-www-form-urlencoded" in encoded.json()["detail"]
    assert not Reading.objects.exists()
    client.force_login(technician)
    form = client.post(
        reverse("reading_new", args=[fan_fitted_capacitor.id]),
        {"method": "meter", "condition": "sound", "capacitance_uf": "3,9"},
    )
    assert form.status_code == 302 and Reading.objects.get().capacitance_uf == pytest.approx(3.9)


@pytest.mark.parametrize(
    "address, query",
    [
        ("api_assessments", "site=CST&site=PKH"),
        ("api_assessments", "risk=watch&risk=sound"),
        ("api_readings", "since=2026-01-01&since=2026-02-01"),
    ],
)
def test_a_parameter_given_twice_is_named_not_one_value_used(engineer, fan_fitted_capacitor, address, query):
    """Before: 200, one of the values used silently."""
    name = query.split("=")[0]
    response = client_for(engineer).get(f"{reverse(address)}?{query}")
    assert response.status_code == 400
    [words] = response.json()[name]  # a list of messages per field, as every field error of the API
    assert words.startswith(f"Give {name} once (given 2 times: ")


def test_the_substitutes_refuse_a_parameter_they_do_not_take(engineer, fan_fitted_capacitor):
    """Before: ?x=1 answered 200, as if it had not been sent."""
    url = reverse("api_fitted_capacitor_substitutes", args=[fan_fitted_capacitor.id])
    client = client_for(engineer)
    response = client.get(url, {"x": "1"})
    assert response.status_code == 400
    assert response.json() == {"x": ["Not a parameter of this list, which takes: format, parts."]}
    twice = client.get(f"{url}?parts=A&parts=B")
    assert twice.status_code == 400 and "parts" in twice.json()


@pytest.mark.parametrize("address", ["api_assessments", "api_readings"])
def test_a_format_the_api_does_not_answer_in_is_named(engineer, fan_fitted_capacitor, address):
    """Before: 404 {"detail": "Not found."} for the whole address."""
    client = client_for(engineer)
    response = client.get(reverse(address), {"format": "xml"})
    assert response.status_code == 400
    assert response.json() == {"format": ["Not a format of the API, which answers in: json."]}
    assert client.get(reverse(address), {"format": "json"}).status_code == 200


def test_a_bad_format_without_a_token_still_answers_401_first(fan_fitted_capacitor):
    from rest_framework.test import APIClient

    assert APIClient().get(reverse("api_assessments"), {"format": "xml"}).status_code == 401


def test_a_changed_repeat_of_an_idempotency_key_is_answered_in_the_apis_words(technician, fan_fitted_capacitor):
    """Before: at `client_key`, in the reading form's words ("Save again to log them as another reading")."""
    client = client_for(technician)
    url = readings_url(fan_fitted_capacitor)
    first = client.post(url, {"method": "meter", "capacitance_uf": 3.9}, format="json", HTTP_IDEMPOTENCY_KEY="k-1")
    assert first.status_code == 201
    changed = client.post(url, {"method": "meter", "capacitance_uf": 3.8}, format="json", HTTP_IDEMPOTENCY_KEY="k-1")
    assert changed.status_code == 400
    words = changed.json()["Idempotency-Key"][0]
    assert "client_key" not in changed.json() and "Save again" not in words
    assert f"reading {first.json()['id']} (3.9 µF" in words and "new key" in words
    assert f'"supersedes": {first.json()["id"]}' in words
    assert Reading.objects.count() == 1


@pytest.mark.parametrize(
    "changed",
    [
        {"taken_at": "2026-11-07T10:30"},
        {"condition": "vented"},
        {"esr_ohm": "abc"},
    ],
)
def test_an_idempotency_key_sent_again_with_another_time_condition_or_a_bad_value_is_not_a_repeat(
    technician, fan_fitted_capacitor, changed
):
    """Before: 200 and the first reading back, the vented capacitor or the later reading silently dropped
    (a fuzz test found it): only the measured numbers and the notes were compared. Nothing a technician
    sends may be lost unseen."""
    client = client_for(technician)
    url = readings_url(fan_fitted_capacitor)
    body = {"method": "meter", "capacitance_uf": 3.9, "taken_at": "2026-11-07T10:00"}
    assert client.post(url, body, format="json", HTTP_IDEMPOTENCY_KEY="k-2").status_code == 201
    same = client.post(url, body, format="json", HTTP_IDEMPOTENCY_KEY="k-2")
    assert same.status_code == 200  # the same body again: the reading saved the first time
    again = client.post(url, {**body, **changed}, format="json", HTTP_IDEMPOTENCY_KEY="k-2")
    assert again.status_code == 400 and "Idempotency-Key" in again.json()
    assert Reading.objects.count() == 1


def test_the_reading_form_sent_again_with_a_defect_seen_is_not_taken_for_the_reading_saved(
    technician, fan_fitted_capacitor
):
    """Before: "Reading was already saved (sent twice)" and the bulged capacitor dropped (a fuzz test: save,
    go back, mark it bulged, save again with the page's one-time key)."""
    from django.test import Client

    client = Client()
    client.force_login(technician)
    url = reverse("reading_new", args=[fan_fitted_capacitor.id])
    form = {"method": "meter", "capacitance_uf": "3.9", "taken_at": "2026-11-07T10:00", "client_key": "page-1"}
    client.post(url, {**form, "condition": "sound"})
    again = client.post(url, {**form, "condition": "bulged"})
    assert again.status_code == 200 and "these values differ" in again.content.decode()
    assert Reading.objects.count() == 1
    client.post(url, {**form, "condition": "bulged", "client_key": "page-2", "taken_at": "2026-11-07T10:05"})
    assert list(Reading.objects.order_by("id").values_list("condition", flat=True)) == ["sound", "bulged"]


@pytest.mark.parametrize(
    "address, name, value, where",
    [
        ("api_assessments", "site", "XXX", "/plan/"),
        ("api_readings", "site", "cst", "/plan/"),
        ("api_readings", "part", "NOPE", "/life/"),
        ("api_readings", "motor", "CST-9999", "/find/"),
    ],
)
def test_an_unknown_code_is_named_with_where_the_valid_ones_are(
    engineer, fan_fitted_capacitor, address, name, value, where
):
    """Before: "Select a valid choice. That choice is not one of the available choices." without the value."""
    response = client_for(engineer).get(reverse(address), {name: value})
    assert response.status_code == 400
    message = response.json()[name][0]
    assert f' "{value}" ' in message and where in message and "Select a valid choice" not in message


def test_an_unknown_risk_level_lists_the_levels(engineer):
    message = client_for(engineer).get(reverse("api_assessments"), {"risk": "bogus"}).json()["risk"][0]
    assert message == '"bogus" is not a risk level: replace now, due soon, watch, sound.'


def test_since_later_than_until_is_named_at_both(engineer, fan_fitted_capacitor):
    """Before: 200 with an empty list, as if there were no readings."""
    response = client_for(engineer).get(reverse("api_readings"), {"since": "2026-10-01", "until": "2026-01-01"})
    assert response.status_code == 400
    body = response.json()
    assert set(body) == {"since", "until"}
    assert (
        body["since"]
        == body["until"]
        == ["since (2026-10-01) is later than until (2026-01-01): nothing lies between; swap them?"]
    )


@pytest.mark.parametrize("taken_at", ["0001-01-01T00:30+14:00", "9999-12-31T23:30-12:00", "1899-12-31T12:00"])
def test_a_time_outside_the_accepted_span_says_so(technician, fan_fitted_capacitor, taken_at):
    """Before: "year 0 is out of range" (Python's words, from year 0001 at +14:00 placed at UTC)."""
    body = {"method": "meter", "capacitance_uf": 3.9, "taken_at": taken_at}
    response = client_for(technician).post(readings_url(fan_fitted_capacitor), body, format="json")
    assert response.status_code == 400
    assert response.json()["taken_at"] == [
        "The date is outside the span accepted, from 1900-01-01 to 2199-12-31 (UTC): check the year."
    ]


def test_a_filter_given_once_still_narrows(engineer, fan_fitted_capacitor):
    quarterly_readings(fan_fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.98, 3.96])
    refit_fitted_capacitors([fan_fitted_capacitor.id])
    body = client_for(engineer).get(reverse("api_assessments"), {"site": fan_fitted_capacitor.motor.site.code}).json()
    assert body["count"] == 1


def test_a_second_reading_at_the_time_of_one_stored_is_refused_at_taken_at_by_the_api_and_the_form(
    client, technician, fan_fitted_capacitor
):
    """Before: the API stored the same body sent twice (no Idempotency-Key) as two readings, and another value
    at the same time as a third: two points at one instant in the trend, where the import skips the first and
    refuses the second. Now both are refused at taken_at, naming the stored reading; a correction made at the
    corrected reading's time is still welcome. [derived: the project's rule that duplicated rows are never
    silently accepted.]"""
    api = client_for(technician)
    body = {"taken_at": "2026-03-14T09:30", "method": "meter", "capacitance_uf": 3.95, "case_temperature_c": 30}
    assert api.post(readings_url(fan_fitted_capacitor), body, format="json").status_code == 201
    for sent in (body, {**body, "capacitance_uf": 3.59}):
        again = api.post(readings_url(fan_fitted_capacitor), sent, format="json")
        assert again.status_code == 400 and "a reading at this time already" in again.json()["taken_at"][0]
    client.force_login(technician)
    form = {"method": "meter", "condition": "sound", "taken_at": "2026-03-14T09:30", "capacitance_uf": "3.59"}
    page = client.post(reverse("reading_new", args=[fan_fitted_capacitor.id]), form)
    assert page.status_code == 200 and "a reading at this time already" in page.content.decode()
    assert list(Reading.objects.values_list("capacitance_uf", flat=True)) == [3.95]
    stored = Reading.objects.get()
    correction = api.post(
        readings_url(fan_fitted_capacitor), {**body, "capacitance_uf": 3.59, "supersedes": stored.id}, format="json"
    )
    assert correction.status_code == 201
    another_time = api.post(readings_url(fan_fitted_capacitor), {**body, "taken_at": "2026-03-14T09:31"}, format="json")
    assert another_time.status_code == 201 and Reading.objects.count() == 3


@pytest.mark.parametrize(("body", "kind"), [([{"method": "meter", "capacitance_uf": 3.9}], "list"), (3.9, "float")])
def test_a_body_that_is_not_one_json_object_is_named_so(technician, fan_fitted_capacitor, body, kind):
    """A fresh-eyes walk: a JSON array answered the framework's "Invalid data. Expected a dictionary, but got list."
    The API says what to send in its own words; nothing is saved."""
    response = client_for(technician).post(readings_url(fan_fitted_capacitor), body, format="json")
    assert response.status_code == 400
    words = response.json()["non_field_errors"][0]
    assert words.startswith("Send one reading as a JSON object of fields") and words.endswith(f"a JSON {kind}.")
    assert not Reading.objects.exists()


@pytest.mark.parametrize("name", ["capacitance_uf", "esr_ohm", "case_temperature_c"])
def test_an_integer_too_large_for_a_float_is_refused_at_its_field(technician, fan_fitted_capacitor, name):
    """Before: 500 (OverflowError) for a capacitance of 401 digits, while the other fields said "Not a finite
    number" (a fuzz test found it). JSON allows integers of any length (RFC 8259 leaves the range to the
    implementation)."""
    client = client_for(technician)
    body = {"method": "meter", "capacitance_uf": 3.9, "taken_at": "2026-11-20T01:00", name: 10**400}
    response = client.post(readings_url(fan_fitted_capacitor), body, format="json")
    assert response.status_code == 400 and name in response.json()
    assert Reading.objects.count() == 0
