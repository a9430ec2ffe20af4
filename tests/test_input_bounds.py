"""Inputs the careful tester found read differently (or not at all) at the API, the exports and the
imports: reading times, dates at the edges of what pandas and Python hold, JSON bodies, unknown
parameters. Each is answered as the form and the other entries answer it: by name, never a 500."""

import datetime as dt
import io

import pytest
from django.core.management import CommandError, call_command
from django.urls import reverse
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from fleet.models import ImportJob, Reading
from fleet.services.import_jobs import check_file, check_job, create_job
from tests.factories import make_fitted_capacitor, make_motor, make_site

pytestmark = pytest.mark.django_db

UTC = dt.UTC


def api_for(user) -> APIClient:
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=user).key}")
    return client


def capacitor_at(zone: str):
    return make_fitted_capacitor(motor=make_motor(site=make_site(time_zone=zone)), fitted_on=dt.date(2022, 1, 1))


def readings_url(fitted_capacitor) -> str:
    return f"/api/fitted-capacitors/{fitted_capacitor.id}/readings/"


def checked_readings(fitted_capacitor, taken_at: str) -> ImportJob:
    tag = fitted_capacitor.motor.asset_tag
    content = f"asset_tag,role,taken_at,method,capacitance_uf\n{tag},run,{taken_at},meter,3.9\n"
    return check_job(create_job(kind="readings", filename="r.csv", content=content.encode(), user=None).id)


# Reading times: the API reads them as the form and the import do.
# [pub] IANA time zone database: Europe/Dublin keeps UTC+01:00 (Irish Standard Time) in summer and UTC+00:00
# in winter; [pub] EU Directive 2000/84/EC: summer time begins at 01:00 UTC on the last Sunday of March
# (29 March 2026), so 01:30 that night does not happen in Dublin.


def test_the_api_reads_a_time_without_offset_as_the_sites_time_as_the_form_does(client, technician):
    fitted_capacitor = capacitor_at("Europe/Dublin")
    response = api_for(technician).post(
        readings_url(fitted_capacitor),
        {"method": "meter", "capacitance_uf": 3.95, "taken_at": "2026-07-15T10:00"},
        format="json",
    )
    assert response.status_code == 201, response.json()
    client.force_login(technician)
    client.post(
        reverse("reading_new", args=[fitted_capacitor.id]),
        {"method": "meter", "condition": "sound", "capacitance_uf": "3.94", "taken_at": "2026-07-16T10:00"},
    )
    stored = sorted(t.astimezone(UTC) for t in Reading.objects.values_list("taken_at", flat=True))
    assert stored == [dt.datetime(2026, 7, 15, 9, 0, tzinfo=UTC), dt.datetime(2026, 7, 16, 9, 0, tzinfo=UTC)]


def test_the_api_takes_an_offset_as_given(technician):
    fitted_capacitor = capacitor_at("Europe/Dublin")
    response = api_for(technician).post(
        readings_url(fitted_capacitor),
        {"method": "meter", "capacitance_uf": 3.95, "taken_at": "2026-07-15T10:00Z"},
        format="json",
    )
    assert response.status_code == 201
    assert Reading.objects.get().taken_at == dt.datetime(2026, 7, 15, 10, 0, tzinfo=UTC)


def test_the_api_refuses_a_local_time_the_clocks_skip_with_the_sites_offsets(technician):
    fitted_capacitor = capacitor_at("Europe/Dublin")
    response = api_for(technician).post(
        readings_url(fitted_capacitor),
        {"method": "meter", "capacitance_uf": 3.95, "taken_at": "2026-03-29T01:30"},
        format="json",
    )
    assert response.status_code == 400
    (message,) = response.json()["taken_at"]
    assert "skipped or repeated in Europe/Dublin" in message and message.endswith("+00:00 or +01:00.")
    assert not Reading.objects.exists()


# A date alone is not a reading's time (the README documents no rule for one).


def test_a_date_alone_is_refused_at_taken_at_by_the_import_the_api_and_the_form(client, technician):
    fitted_capacitor = capacitor_at("Europe/Dublin")
    job = checked_readings(fitted_capacitor, "2026-11-30")
    assert [error[:2] for error in job.errors] == [[2, "taken_at"]] and "time of day" in job.errors[0][2]
    response = api_for(technician).post(
        readings_url(fitted_capacitor),
        {"method": "meter", "capacitance_uf": 3.95, "taken_at": "2026-11-30"},
        format="json",
    )
    assert response.status_code == 400 and "time of day" in response.json()["taken_at"][0]
    client.force_login(technician)
    page = client.post(
        reverse("reading_new", args=[fitted_capacitor.id]),
        {"method": "meter", "condition": "sound", "capacitance_uf": "3.94", "taken_at": "2026-11-30"},
    )
    assert page.status_code == 200 and "time of day" in page.content.decode()
    assert not Reading.objects.exists()
    assert checked_readings(fitted_capacitor, "2026-11-30 00:00").errors == []


# Date filters at the edges of what Python and pandas hold: a 400 naming the parameter, never a 500.
# [pub] Python's datetime.date holds years 1 to 9999; pandas' nanosecond timestamps end at 2262-04-11
# (pandas documentation, "Timestamp limitations").

EDGE_DAYS = ["9999-12-31", "0001-01-01", "2262-05-01"]


@pytest.mark.parametrize("day", EDGE_DAYS)
@pytest.mark.parametrize("name", ["since", "until"])
def test_an_api_reading_date_filter_out_of_range_is_a_400_naming_it(engineer, fan_fitted_capacitor, name, day):
    response = api_for(engineer).get("/api/readings/", {name: day})
    assert response.status_code == 400, response.content[:300]
    message = " ".join(response.json()[name])
    assert "1900-01-01 to 2199-12-31" in message


@pytest.mark.parametrize("day", EDGE_DAYS)
def test_an_api_replace_by_filter_out_of_range_is_a_400_naming_it(engineer, day):
    response = api_for(engineer).get("/api/assessments/", {"replace_by_before": day})
    assert response.status_code == 400 and "replace_by_before" in response.json()


@pytest.mark.parametrize("address", ["readings.csv", "readings.xlsx", "readings.parquet", "readings-about.json"])
@pytest.mark.parametrize("query", ["until=9999-12-31", "since=0001-01-01", "until=2262-05-01"])
def test_an_export_date_filter_out_of_range_is_a_400_naming_it(client, engineer, fan_fitted_capacitor, address, query):
    client.force_login(engineer)
    response = client.get(f"/exports/{address}?{query}")
    assert response.status_code == 400
    assert query.split("=")[0] in response.content.decode() and "2199-12-31" in response.content.decode()


@pytest.mark.parametrize("address", ["assessments.csv", "assessments-about.json"])
def test_an_assessment_export_date_filter_out_of_range_is_a_400(client, engineer, address):
    client.force_login(engineer)
    response = client.get(f"/exports/{address}?replace_by_before=9999-12-31")
    assert response.status_code == 400 and "replace_by_before" in response.content.decode()


@pytest.mark.parametrize(
    ("address", "query"),
    [
        ("/api/assessments/", "replace_by_before=2027-02-30"),
        ("/api/readings/", "since=2026-13-01"),
        ("/exports/readings-about.json", "since=2026-02-29"),
        ("/exports/assessments-about.json", "replace_by_before=2027-02-30"),
    ],
)
def test_a_day_the_calendar_does_not_hold_is_named_so_not_as_out_of_range(client, engineer, address, query):
    """2027-02-30 was "a date from 1900-01-01 to 2199-12-31 (YYYY-MM-DD)", which reads as a span's problem; 2027
    is no leap year and no year has a 13th month [pub: the Gregorian calendar]. The API and the exports' sidecar
    answer by parameter in one shape, `{"since": ["..."]}`, through the one day filter."""
    client.force_login(engineer)
    name, day = query.split("=")
    response = client.get(f"{address}?{query}")
    assert response.status_code == 400
    assert response.json() == {name: [f"{day} is not a day of the calendar"]}


def test_an_export_names_a_day_the_calendar_does_not_hold_in_its_plain_text(client, engineer):
    client.force_login(engineer)
    response = client.get("/exports/readings.csv?since=2026-13-01")
    assert response.status_code == 400
    assert response.content.decode() == "Cannot read the filter: since: 2026-13-01 is not a day of the calendar"


def test_an_export_sidecar_refuses_a_site_in_the_apis_shape(client, engineer):
    """`/exports/readings-about.json?site=XX` answered `{"error": "site: ..."}`, the API `{"site": [...]}`."""
    client.force_login(engineer)
    about = client.get("/exports/readings-about.json?site=XX")
    api = api_for(engineer).get("/api/readings/", {"site": "XX"})
    assert about.status_code == api.status_code == 400
    assert about.json() == api.json() and list(about.json()) == ["site"]


def test_the_last_day_a_filter_takes_still_answers(engineer, fan_fitted_capacitor):
    response = api_for(engineer).get("/api/readings/", {"since": "1900-01-01", "until": "2199-12-31"})
    assert response.status_code == 200


# Import dates beyond pandas' nanosecond timestamps (1677-09-21 to 2262-04-11) or at Python's edges.


def history_errors(fitted_capacitor, fitted_on: str, removed_on: str = "", reason: str = ""):
    tag, part = fitted_capacitor.motor.asset_tag, fitted_capacitor.part.code
    header = "asset_tag,role,part_code,fitted_on,removed_on,removal_reason\n"
    content = header + f"{tag},run,{part},{fitted_on},{removed_on},{reason}\n"
    return check_file(kind="history", filename="history.csv", content=content.encode()).result.errors


@pytest.mark.parametrize(
    ("fitted_on", "removed_on", "field", "words"),
    [
        ("2019-01-01", "9999-12-31", "removed_on", "in the future"),
        ("2019-01-01", "2262-05-01", "removed_on", "in the future"),
        ("0001-01-01", "", "fitted_on", "before 1950"),
        ("2262-05-01", "", "fitted_on", "in the future"),
        ("1800-01-01", "", "fitted_on", "before 1950"),
    ],
)
def test_a_history_date_out_of_range_is_named_by_row_and_field(
    fan_fitted_capacitor, fitted_on, removed_on, field, words
):
    errors = history_errors(fan_fitted_capacitor, fitted_on, removed_on, "planned" if removed_on else "")
    assert (2, field) in [error[:2] for error in errors]
    assert any(words in message for _, name, message in errors if name == field)


def test_the_history_command_prints_the_row_not_a_traceback(tmp_path, fan_fitted_capacitor):
    tag, part = fan_fitted_capacitor.motor.asset_tag, fan_fitted_capacitor.part.code
    path = tmp_path / "h.csv"
    path.write_text(
        f"asset_tag,role,part_code,fitted_on,removed_on,removal_reason,serial,notes\n{tag},run,{part},2019-01-01,9999-12-31,planned,,\n"
    )
    out = io.StringIO()
    with pytest.raises(CommandError):
        call_command("import", "history", str(path), stdout=out, stderr=out)
    assert "removed_on" in out.getvalue() and "in the future" in out.getvalue()


@pytest.mark.parametrize("day", ["0001-01-01", "1800-01-01", "2262-05-01", "9999-12-31"])
def test_a_register_date_out_of_range_is_named_by_row_and_field(fan_fitted_capacitor, day):
    site, part = fan_fitted_capacitor.motor.site.code, fan_fitted_capacitor.part.code
    content = (
        "asset_tag,site_code,location,application,motor_type,load_type,rated_voltage_v,frequency_hz,poles,output_w,"
        "full_load_current_a,rated_speed_rpm,commissioned_on,run_part_code,start_part_code,fitted_on\n"
        f"T-Y1,{site},bay,fan,permanent_split,fan_law,230,50,4,370,2.6,1400,{day},{part},,{day}\n"
    )
    errors = check_file(kind="register", filename="register.csv", content=content.encode()).result.errors
    assert {error[:2] for error in errors} >= {(2, "commissioned_on")} or {error[:2] for error in errors} >= {
        (2, "fitted_on")
    }
    assert all(name in ("commissioned_on", "fitted_on") for _, name, _ in errors)


@pytest.mark.parametrize("taken_at", ["0001-01-01 09:00", "2262-05-01 09:00", "9999-12-31 09:00", "1800-01-01 09:00"])
def test_a_reading_time_out_of_range_is_named_at_taken_at(taken_at):
    fitted_capacitor = capacitor_at("Europe/Dublin")
    job = checked_readings(fitted_capacitor, taken_at)
    assert [error[:2] for error in job.errors] == [[2, "taken_at"]], job.errors


# JSON bodies the parser cannot read, and bodies past the size limit: a JSON answer with `detail`.


@pytest.mark.parametrize("depth", [900, 1000, 100_000])
def test_deeply_nested_json_is_a_json_400(technician, fan_fitted_capacitor, depth):
    body = '{"a": ' + "[" * depth + "]" * depth + "}"
    response = api_for(technician).post(readings_url(fan_fitted_capacitor), body, content_type="application/json")
    assert response.status_code == 400 and response["Content-Type"].startswith("application/json")
    assert response.json()["detail"]
    assert not Reading.objects.exists()


def test_a_field_given_twice_in_a_json_body_is_refused_by_name(technician, fan_fitted_capacitor):
    """Python's JSON parser keeps the last of a key given twice: a script's "capacitance_uf": 30 then 3 was
    saved as 3 uF, the 30 dropped unsaid. [RFC 8259 section 4: names within an object SHOULD be unique; what a
    parser does with duplicates is unpredictable] Refused by name, nothing saved."""
    body = '{"method": "meter", "capacitance_uf": 30, "case_temperature_c": 25, "capacitance_uf": 3}'
    api = api_for(technician)
    response = api.post(readings_url(fan_fitted_capacitor), body, content_type="application/json")
    assert response.status_code == 400, response.content
    assert response.json() == {"capacitance_uf": ["Given twice in the body (30 and 3): send it once."]}
    assert not Reading.objects.exists()
    nan = '{"method": "meter", "capacitance_uf": NaN}'  # still refused as DRF's strict parser refuses it
    refused = api.post(readings_url(fan_fitted_capacitor), nan, content_type="application/json")
    assert refused.status_code == 400 and "JSON parse error" in refused.json()["detail"]


def test_a_body_past_the_size_limit_is_a_json_answer_with_detail(technician, fan_fitted_capacitor, settings):
    settings.DATA_UPLOAD_MAX_MEMORY_SIZE = 1000
    body = '{"method": "meter", "capacitance_uf": 3.95, "notes": "' + "x" * 5000 + '"}'
    response = api_for(technician).post(readings_url(fan_fitted_capacitor), body, content_type="application/json")
    assert response.status_code in (400, 413) and response["Content-Type"].startswith("application/json")
    assert "1000" in response.json()["detail"] or "large" in response.json()["detail"]
    assert not Reading.objects.exists()


# Unknown query parameters: a 400 naming the parameter and the ones the list takes, not the whole list.


@pytest.mark.parametrize(
    ("address", "query", "takes"),
    [
        ("/api/assessments/", {"risks": "watch"}, {"risk", "site", "replace_by_before", "page", "page_size", "format"}),
        ("/api/readings/", {"sites": "CST"}, {"site", "part", "motor", "since", "until", "cursor", "page_size"}),
        ("/api/readings/", {"page": "-1"}, {"cursor", "page_size"}),
    ],
)
def test_an_unknown_list_parameter_is_a_400_naming_it_and_the_known_ones(engineer, address, query, takes):
    response = api_for(engineer).get(address, query)
    assert response.status_code == 400, response.content[:300]
    (name,) = query
    [message] = response.json()[name]  # a list of messages per field, as every field error of the API
    listed = set(message.rsplit(": ", 1)[1].rstrip(".").split(", "))
    assert takes <= listed and name not in listed


def test_an_unknown_parameter_of_a_capacitors_readings_is_a_400(engineer, fan_fitted_capacitor):
    response = api_for(engineer).get(readings_url(fan_fitted_capacitor), {"since": "2026-01-01"})
    assert response.status_code == 400 and "since" in response.json()


def test_known_list_parameters_still_work(engineer, fan_fitted_capacitor):
    client = api_for(engineer)
    assert client.get("/api/assessments/", {"risk": "watch", "page": "1", "page_size": "5"}).status_code == 200
    assert client.get("/api/assessments/", {"format": "json"}).status_code == 200
    first = client.get("/api/readings/", {"page_size": "1", "site": fan_fitted_capacitor.motor.site.code})
    assert first.status_code == 200
    assert client.get(readings_url(fan_fitted_capacitor), {"page": "1", "page_size": "10"}).status_code == 200
    assert client.get(readings_url(fan_fitted_capacitor), {"page": "-1"}).status_code == 400


@pytest.mark.parametrize("typed", ["\u0663", "\uff13", "1_0", "\u00b3", "3\u0663", "9" * 5000])
def test_a_stock_quantity_or_route_place_in_other_digits_is_refused_as_the_rulebook_refuses_a_reading(typed):
    """Before: "\u0663" (Arabic-Indic three), "\uff13" (full-width) and "1_0" were saved as 3, 3 and 10, as Python's
    int() reads them, where the rulebook refuses such digits in every reading field: a quantity or a place is
    typed in ASCII digits, or named at its part or motor and nothing saved."""
    from django.core.exceptions import ValidationError

    from fleet.models import SiteStock
    from fleet.services.register import set_route_order, set_site_stock
    from tests.factories import make_part

    capacitor = make_fitted_capacitor()
    motor, part = capacitor.motor, make_part()
    place = motor.route_order
    with pytest.raises(ValidationError) as stock:
        set_site_stock(site=motor.site, quantities={part.id: typed})
    assert "is not a whole number" in stock.value.message_dict[part.code][0]
    assert not SiteStock.objects.exists()
    with pytest.raises(ValidationError) as route:
        set_route_order(site=motor.site, positions={motor.id: typed})
    assert "is not a whole number" in route.value.message_dict[motor.asset_tag][0]
    motor.refresh_from_db()
    assert motor.route_order == place


@pytest.mark.parametrize("typed,number", [("3", 3), (" 12 ", 12), ("007", 7), ("+2", 2), ("0", 0)])
def test_a_stock_quantity_in_ascii_digits_is_saved(typed, number):
    from fleet.models import SiteStock
    from fleet.services.register import set_site_stock
    from tests.factories import make_part

    capacitor, part = make_fitted_capacitor(), make_part()
    set_site_stock(site=capacitor.motor.site, quantities={part.id: typed})
    assert SiteStock.objects.filter(part=part).values_list("quantity", flat=True).first() == (number or None)


def _b64(text: str) -> str:
    import base64

    return base64.b64encode(text.encode()).decode()


@pytest.mark.parametrize(
    "cursor",
    ["%25", "[]", "abc", "%20", "cD0x%3D", _b64("p=abc"), _b64("p=1&p=2"), _b64("o=1&x=2"), _b64("p=" + "9" * 30),
     _b64("o=0"), _b64("r=0&p=1"), _b64("p=1") + "\n", _b64("o=99999999")],
)  # fmt: skip
def test_an_api_cursor_the_list_did_not_give_is_a_400_naming_it(engineer, fan_fitted_capacitor, cursor):
    """rest_framework's cursor decoding drops what is not base64: `?cursor=%25` and `?cursor=[]` answered 200 with
    the first page while `?cursor=abc` was a 400; a position no id holds was a query error. Every cursor the list
    did not give is the same 400 ([derived]: the API's rule, a parameter it cannot use is a 400 naming it)."""
    api = api_for(engineer)
    answer = api.get(f"/api/readings/?cursor={cursor}")
    assert answer.status_code == 400, (cursor, answer.content[:200])
    assert answer.json() == {"cursor": ["Not a cursor from this list: follow its next and previous links."]}


def test_the_api_readings_cursors_it_gives_are_taken_both_ways(engineer, fan_fitted_capacitor):
    """[derived] the next and previous links the list gives lead to its pages; an empty cursor is one left out."""
    from tests.factories import make_reading

    for day in range(1, 6):
        make_reading(fan_fitted_capacitor, taken_at=dt.datetime(2024, 1, day, 9, tzinfo=UTC))
    api = api_for(engineer)
    first = api.get("/api/readings/?page_size=2&cursor=").json()
    second = api.get(first["next"]).json()
    assert len(first["results"]) == len(second["results"]) == 2
    back = api.get(second["previous"]).json()
    assert [r["id"] for r in back["results"]] == [r["id"] for r in first["results"]]


# [pub] EU Directive 2000/84/EC: summer time ends at 01:00 UTC on the last Sunday of October (25 October 2026),
# so in Dublin the clocks go from 02:00 (UTC+01:00) back to 01:00 (UTC+00:00) and 01:30 happens twice.


def test_the_form_offers_the_two_offsets_of_a_time_the_clocks_repeat_and_saves_the_one_chosen(client, technician):
    """A walk: the form asked to "add its offset, +01:00 or +00:00", which its date-and-time box cannot take, so
    a reading taken in that hour could not be logged from the form. [derived] the two are offered as a choice."""
    fitted_capacitor = capacitor_at("Europe/Dublin")
    client.force_login(technician)
    url = reverse("reading_new", args=[fitted_capacitor.id])
    typed = {"method": "meter", "condition": "sound", "capacitance_uf": "3.94", "taken_at": "2026-10-25T01:30"}
    page = client.post(url, typed)
    assert page.status_code == 200 and not Reading.objects.exists()
    assert "choose below whether it was before or after they changed" in page.context["form"].errors["taken_at"][0]
    body = page.content.decode()
    assert 'name="clock_offset" value="+01:00"' in body and 'name="clock_offset" value="+00:00"' in body
    assert "Before the clocks changed (UTC+01:00)" in body and "After the clocks changed (UTC+00:00)" in body
    assert client.post(url, {**typed, "clock_offset": "+00:00"}).status_code == 302
    assert Reading.objects.get().taken_at == dt.datetime(2026, 10, 25, 1, 30, tzinfo=UTC)


def test_a_clock_choice_left_posted_after_the_time_was_changed_is_ignored(client, technician):
    fitted_capacitor = capacitor_at("Europe/Dublin")
    client.force_login(technician)
    posted = {"method": "meter", "condition": "sound", "capacitance_uf": "3.94", "taken_at": "2026-10-25T03:30"}
    response = client.post(reverse("reading_new", args=[fitted_capacitor.id]), {**posted, "clock_offset": "+01:00"})
    assert response.status_code == 302
    assert Reading.objects.get().taken_at == dt.datetime(2026, 10, 25, 3, 30, tzinfo=UTC)  # winter time, UTC+00:00
