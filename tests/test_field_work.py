"""Field work as it happens: the time a reading was measured, a part that is not the design's,
a motor found by part of its tag or by where it is, the decimal comma everywhere, and the
risk set beside the last reading in words."""

import datetime as dt
import math
import re
import zoneinfo
from unittest import mock

import numpy as np
import pytest
from django.db import connection
from django.template.defaultfilters import date as date_format
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone
from django.utils.html import strip_tags

from fleet.models import Assessment, FittedCapacitor, PartLifeFit, Reading, SiteMembership
from fleet.services import pages
from fleet.services.readings import stored_client_key
from fleet.templatetags.fleet_format import day, percent_to_a_tenth, verdict_and_risk
from tests.factories import (
    confirmation_of,
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_site,
    make_user,
    stored_assessment,
)

from .test_rules import api_for, form_post, import_check, import_row
from .test_substitutes import post_replacement

pytestmark = pytest.mark.django_db

MADRID = zoneinfo.ZoneInfo("Europe/Madrid")


@pytest.fixture
def madrid_fitted_capacitor():
    site = make_site(time_zone="Europe/Madrid")
    return make_fitted_capacitor(motor=make_motor(site=site), fitted_on=dt.date(2024, 1, 10))


# The time measured


def test_taken_at_is_site_time_and_is_stored_on_the_reading(client, technician, madrid_fitted_capacitor):
    """[trade] a technician writes the wall-clock time where they stand: 09:30 in Madrid in March
    (UTC+1, before the clocks change on 31 March 2024) is 08:30 UTC."""
    client.force_login(technician)
    response = form_post(client, madrid_fitted_capacitor, capacitance_uf="3.95", taken_at="2024-03-14T09:30")
    assert response.status_code == 302
    reading = Reading.objects.get()
    assert reading.taken_at == dt.datetime(2024, 3, 14, 8, 30, tzinfo=dt.UTC)
    assert reading.created_at > reading.taken_at  # when it reached the server is kept apart


def test_taken_at_defaults_to_now_and_the_page_offers_now_in_site_time(client, technician, madrid_fitted_capacitor):
    client.force_login(technician)
    page = client.get(reverse("reading_new", args=[madrid_fitted_capacitor.id]))
    offered = dt.datetime.fromisoformat(page.context["form"].initial["taken_at"]).replace(tzinfo=MADRID)
    assert abs((offered - timezone.now()).total_seconds()) < 120
    assert 'type="datetime-local"' in page.content.decode() and "Europe/Madrid" in page.content.decode()
    before = timezone.now()
    assert form_post(client, madrid_fitted_capacitor, capacitance_uf="3.95", taken_at="").status_code == 302
    assert Reading.objects.get().taken_at >= before


@pytest.mark.parametrize(
    "taken_at,message",
    [
        ("2099-01-01T10:00", "Taken at 2099-01-01 10:00 is after now at the site ("),
        ("2024-01-09T23:00", "Before this capacitor was fitted on 2024-01-10"),
        ("2024-03-31T02:30", "skipped or repeated in Europe/Madrid"),  # [pub] EU summer time starts 02:00 -> 03:00
        ("yesterday", "Not a date and time"),
    ],
)
def test_a_taken_at_the_rulebook_refuses_is_said_once_at_its_field_and_linked_from_the_summary(
    client, technician, madrid_fitted_capacitor, taken_at, message
):
    """Ours: the summary, the field and the live hint said the same thing three times. The message stands once,
    at the field; the summary above the cautions names the field and links to it."""
    client.force_login(technician)
    response = form_post(client, madrid_fitted_capacitor, capacitance_uf="3.95", taken_at=taken_at)
    assert response.status_code == 200 and not Reading.objects.exists()
    assert message in response.context["form"].errors["taken_at"][0]
    body = response.content.decode()
    summary = body[body.index('id="error-summary"') : body.index("Caution: capacitors store a charge")]
    assert re.search(r'<a href="#wrap_taken_at">Taken at</a>', summary)
    assert message not in strip_tags(summary)
    assert strip_tags(body).count(message) == 1
    field = body[body.index('id="wrap_taken_at"') :]
    assert message in strip_tags(field[: field.index("</ul>")])
    assert f'value="{taken_at}"' in body  # what was typed is shown again, not lost


def test_a_time_in_the_future_names_the_sites_clock_now(client, technician, madrid_fitted_capacitor):
    """[ours] "In the future" alone: the technician could not tell whether the date or the hour was wrong, nor
    which clock it was held to. The site's time now and its zone are named."""
    client.force_login(technician)
    response = form_post(client, madrid_fitted_capacitor, capacitance_uf="3.95", taken_at="2099-01-01T10:00")
    now = timezone.localtime(timezone.now(), MADRID)
    message = response.context["form"].errors["taken_at"][0]
    assert message.startswith("Taken at 2099-01-01 10:00 is after now at the site (")
    assert message.endswith(", Europe/Madrid): check the date and the time")
    said = dt.datetime.strptime(message.split("(")[1].split(",")[0], "%Y-%m-%d %H:%M").replace(tzinfo=MADRID)
    assert abs((said - now).total_seconds()) < 120


def test_two_readings_within_one_minute_each_at_the_time_offered_are_two_readings(
    client, technician, madrid_fitted_capacitor
):
    """A walk: a second reading of one capacitor within a minute, each saved at the time the form offered, was
    refused as "a reading at this time already": the form offered the minute, the API stores the second. Then a
    walk with gloves: the box's seconds were fiddly to set. The box offers the minute (step 60) and keeps the
    second it offered beside it (site time), so a technician's two measurements 28 s apart are still two
    readings; the same second is still one, and a time typed to the minute is that minute. [ours]"""
    client.force_login(technician)
    url = reverse("reading_new", args=[madrid_fitted_capacitor.id])
    offered = []
    for second in (12, 40):
        moment = dt.datetime(2026, 3, 14, 8, 30, second, tzinfo=dt.UTC)
        with mock.patch("django.utils.timezone.now", return_value=moment):
            page = client.get(url)
            initial = page.context["form"].initial
            offered.append((initial["taken_at"], initial["offered_at"]))
            body = page.content.decode()
            assert 'type="datetime-local"' in body and 'step="60"' in body and 'step="1"' not in body
            assert f'value="{initial["taken_at"]}"' in body and f'value="{initial["offered_at"]}"' in body
            saved = form_post(
                client,
                madrid_fitted_capacitor,
                capacitance_uf="3.95",
                taken_at=offered[-1][0],
                offered_at=offered[-1][1],
            )
            assert saved.status_code == 302
    assert offered == [  # Madrid, UTC+1 in March
        ("2026-03-14T09:30", "2026-03-14T09:30:12"),
        ("2026-03-14T09:30", "2026-03-14T09:30:40"),
    ]
    assert sorted(Reading.objects.values_list("taken_at", flat=True)) == [
        dt.datetime(2026, 3, 14, 8, 30, 12, tzinfo=dt.UTC),
        dt.datetime(2026, 3, 14, 8, 30, 40, tzinfo=dt.UTC),
    ]
    with mock.patch("django.utils.timezone.now", return_value=dt.datetime(2026, 3, 14, 8, 31, tzinfo=dt.UTC)):
        again = form_post(client, madrid_fitted_capacitor, capacitance_uf="3.94", taken_at=offered[1][0],
                          offered_at=offered[1][1])  # fmt: skip
        assert again.status_code == 200 and Reading.objects.count() == 2
        assert "reading at this time already" in again.context["form"].errors["taken_at"][0]
        assert (
            f"reading {Reading.objects.get(capacitance_uf=3.95, taken_at__second=40).id} of"
            in (again.context["form"].errors["taken_at"][0])
        )
        # Changed to another minute, the box's time is the time saved: the second offered goes with its minute only.
        moved = form_post(client, madrid_fitted_capacitor, capacitance_uf="3.93", taken_at="2026-03-14T09:29",
                          offered_at=offered[1][1])  # fmt: skip
        assert moved.status_code == 302
    assert Reading.objects.get(capacitance_uf=3.93).taken_at == dt.datetime(2026, 3, 14, 8, 29, tzinfo=dt.UTC)


def test_a_time_taken_already_is_said_with_every_other_problem_of_the_reading(
    client, technician, madrid_fitted_capacitor
):
    """A walk: a reading at the time of one stored, its capacitance typed in farads (4 µF as 0.000004, to confirm)
    and its case temperature out of range, came back with the time clash alone; the rest showed only once the time
    was changed. The form names every problem at once: the refusals, and the value to check with them, whose
    confirmation is offered once nothing is refused (a button there could save nothing). The API names the
    refusals together. [ours: the form names every field's problem at once]"""
    client.force_login(technician)
    stored = form_post(client, madrid_fitted_capacitor, capacitance_uf="3.95", taken_at="2024-03-14T09:30")
    assert stored.status_code == 302
    sent = {"capacitance_uf": "0.000004", "case_temperature_c": "200", "taken_at": "2024-03-14T09:30"}
    response = form_post(client, madrid_fitted_capacitor, **sent)
    assert response.status_code == 200 and Reading.objects.count() == 1
    errors = response.context["form"].errors
    assert "reading at this time already" in errors["taken_at"][0]
    assert errors["case_temperature_c"][0].startswith("200 is above 150 °C")
    assert errors["capacitance_uf"][0].startswith("0.000004 looks like farads: 4 µF?")
    body = response.content.decode()
    summary = strip_tags(body[body.index('id="error-summary"') : body.index("Caution: capacitors store a charge")])
    assert "Not saved: 2 to put right, 1 to check" in summary and "Capacitance (µF) (to check)" in summary
    assert 'id="confirm"' not in body and 'name="confirmed"' not in body
    for value in sent.values():
        assert f'value="{value}"' in body  # nothing typed is lost
    # Put right, the value in farads is asked to confirm, and kept once confirmed.
    fixed = {**sent, "case_temperature_c": "31", "taken_at": "2024-03-14T09:31"}
    asked = form_post(client, madrid_fitted_capacitor, **fixed)
    assert asked.status_code == 200 and 'id="confirm"' in asked.content.decode()
    assert list(asked.context["form"].errors) == ["capacitance_uf"]
    assert form_post(client, madrid_fitted_capacitor, **fixed, **confirmation_of(asked)).status_code == 302
    # The API: the time taken already and the rulebook's refusal in one answer.
    api = api_for(technician)
    answer = api.post(
        reverse("api_fitted_capacitor_readings", args=[madrid_fitted_capacitor.id]),
        {"taken_at": "2024-03-14T09:30", "method": "meter", "capacitance_uf": 3.95, "case_temperature_c": 200},
        format="json",
    )
    assert answer.status_code == 400 and set(answer.json()) == {"taken_at", "case_temperature_c"}
    assert Reading.objects.count() == 2


def test_the_reading_form_lists_the_users_saved_keys_as_stored_so_a_saved_draft_is_dropped(
    client, technician, fan_fitted_capacitor
):
    """A walk: a reading saved while its answer page was left before it loaded came back on the form as an
    unsaved draft (its time then refused as taken already). The form names its own one-time key as stored and
    lists the keys of this user's saved readings of the capacitor, so the phone drops a draft whose key was
    saved (tests/browser/test_technician.py drives it); another user's keys are not listed. [ours]"""
    client.force_login(technician)
    url = reverse("reading_new", args=[fan_fitted_capacitor.id])
    page = client.get(url)
    key = page.context["form"].initial["client_key"]
    digest = page.context["key_digest"]
    assert digest and f'data-key-digest="{digest}"' in page.content.decode()
    assert page.context["saved_keys"] == []
    form = {"method": "meter", "condition": "sound", "capacitance_uf": "3.95", "client_key": key}
    assert client.post(url, form).status_code == 302
    again = client.get(url)
    assert again.context["saved_keys"] == [digest] and again.context["key_digest"] != digest
    assert f'<script id="saved-keys" type="application/json">["{digest}"]</script>' in again.content.decode()
    client.force_login(make_user("technician", username="other-tech"))
    assert client.get(url).context["saved_keys"] == []
    # Refused, the page goes on under the key it was sent with (the draft kept on the phone too).
    refused = client.post(url, {**form, "client_key": "k2", "capacitance_uf": "3,9,5"})
    assert refused.status_code == 200
    assert refused.context["key_digest"] == stored_client_key(refused.wsgi_request.user, "k2")


# The design part


def test_a_part_fitted_against_the_advice_is_not_the_next_ones_design(client, technician, fan_fitted_capacitor):
    """[derived] 4.8 uF is outside the fan's run band around its 4 uF design (test_substitutes): fitted
    once with the override, the same 4.8 uF part again needs the override again, and 4 uF is the design."""
    client.force_login(technician)
    big = make_part(code="FILM-4U8", rated_uf=4.8)
    assert post_replacement(
        client, fan_fitted_capacitor, big, substitute_override="on", override_reason="van"
    ).status_code
    wrong = FittedCapacitor.objects.get(motor=fan_fitted_capacitor.motor, removed_on__isnull=True)
    page = client.get(reverse("replace", args=[wrong.id]))
    assert page.context["form"]["part"].value() == fan_fitted_capacitor.part_id
    assert "not this motor's design part" in page.content.decode()
    again = post_replacement(client, wrong, big)
    body = again.content.decode()
    assert again.status_code == 200 and "FILM-4U8 is unsuitable here" in body
    cautions = body.index("Caution: capacitors store a charge")
    assert body.index('id="error-summary"') < cautions < body.index('<form method="post" class="card"')
    assert FittedCapacitor.objects.filter(motor=fan_fitted_capacitor.motor).count() == 2
    assert post_replacement(client, wrong, fan_fitted_capacitor.part).status_code == 302
    assert (
        "Fitted against the substitute advice"
        not in client.get(reverse("motor", args=[fan_fitted_capacitor.motor.asset_tag])).content.decode()
    )


# Finding a motor


def test_a_motor_is_found_by_part_of_its_tag_or_by_words_of_its_place(client, technician):
    site = make_site(code="CST", name="Cool store")
    target = make_motor(site=site, asset_tag="CST-0093", location="Condensing unit 3")
    make_motor(site=site, asset_tag="CST-0094", location="Condensing unit 4")
    make_motor(site=make_site(name="Packhouse"), asset_tag="PKH-0930", location="Grader line")
    client.force_login(technician)
    find = reverse("find")
    assert client.get(find, {"tag": "0093"})["Location"] == reverse("motor", args=["CST-0093"])
    assert client.get(find, {"tag": " unit   3 "})["Location"] == reverse("motor", args=[target.asset_tag])
    both = client.get(find, {"tag": "cool store condensing"})
    assert both.status_code == 200 and [m.asset_tag for m in both.context["matches"]] == ["CST-0093", "CST-0094"]
    assert client.get(find, {"tag": "grader"})["Location"] == reverse("motor", args=["PKH-0930"])
    none = client.get(find, {"tag": "boiler"})
    assert "matches &#x27;boiler&#x27;" in none.content.decode()


@pytest.mark.parametrize(
    "typed",
    [
        *("CST 0093", "cst 0093", " CST  0093 ", "CST_0093", "cst.0093", "CST/0093", "CST - 0093", "CST-0093"),
        *("CST\u20130093", "cst\u20140093", "CST\u22120093", "CST\u20110093"),  # the dashes a phone puts for '-'
        # A keyboard left in full-width mode (East Asian input methods): letters, digits, hyphen and space U+FF01-FF5E
        # and U+3000, read as their ASCII forms by Unicode's compatibility normalisation (NFKC, UAX #15).
        *("\uff23\uff33\uff34\uff0d\uff10\uff10\uff19\uff13", "\uff43\uff53\uff54\u3000\uff10\uff10\uff19\uff13"),
    ],
)
def test_a_tag_is_found_whatever_separator_is_typed_between_its_parts(client, technician, typed):
    """ "CST 0093" (a space where the label has a hyphen) found nothing while "cst-0093" and "0093" did:
    a space, '-', '_', '.' and '/' between a tag's parts are read alike, in any case."""
    site = make_site(code="CST", name="Cool store")
    make_motor(site=site, asset_tag="CST-0093", location="Condensing unit 3")
    make_motor(site=site, asset_tag="CST-0094", location="Condensing unit 4")
    make_motor(site=site, asset_tag="CST-00931", location="Condensing unit 31")
    client.force_login(technician)
    assert client.get(reverse("find"), {"tag": typed})["Location"] == reverse("motor", args=["CST-0093"])


def test_a_tag_with_underscores_or_dots_is_found_by_a_space_and_in_part(client, technician):
    site = make_site(code="GH2", name="Glasshouse 2")
    make_motor(site=site, asset_tag="GH2_F.017", location="Bay 1")
    make_motor(site=site, asset_tag="GH2_F.018", location="Bay 2")
    client.force_login(technician)
    find = reverse("find")
    for typed in ("gh2 f 017", "GH2-F-017", "gh2 f.017", "f 017"):
        assert client.get(find, {"tag": typed})["Location"] == reverse("motor", args=["GH2_F.017"]), typed
    both = client.get(find, {"tag": "gh2 f 01"})
    assert [m.asset_tag for m in both.context["matches"]] == ["GH2_F.017", "GH2_F.018"]


@pytest.mark.parametrize("typed", ["cst0093", "CST0093", "Cst0093", "st0093"])
def test_a_tag_typed_without_its_separator_is_found(client, technician, typed):
    """[ours] "cst 0093" opened the motor while "cst0093" (the separator left out where letters meet digits,
    as a phone keyboard invites) found nothing. Whole, it is looked up by the index; in part, compared without
    separators; a tag stored without a separator is still found as typed."""
    site = make_site(code="CST", name="Cool store")
    make_motor(site=site, asset_tag="CST-0093", location="Condensing unit 3")
    make_motor(site=site, asset_tag="CST-00931", location="Condensing unit 31")
    make_motor(site=site, asset_tag="GH2_F.017", location="Bay 1")
    client.force_login(technician)
    find = reverse("find")
    if typed == "st0093":  # part of a tag: both that hold it are offered
        listed = client.get(find, {"tag": typed})
        assert [m.asset_tag for m in listed.context["matches"]] == ["CST-0093", "CST-00931"]
    else:
        assert client.get(find, {"tag": typed})["Location"] == reverse("motor", args=["CST-0093"])
    assert client.get(find, {"tag": "gh2f017"})["Location"] == reverse("motor", args=["GH2_F.017"])
    make_motor(site=site, asset_tag="CST0093", location="Condensing unit 3b")
    assert client.get(find, {"tag": "cst0093"})["Location"] == reverse("motor", args=["CST0093"])


@pytest.mark.parametrize("typed", ["cst93", "CST 93", "cst-93", "cst_093"])
def test_a_short_number_with_its_site_code_finds_the_tag_with_its_zeros(client, technician, typed):
    """[ours] "93" found CST-0093 (and GLH-0093) in part, but "cst93" and "CST 93" found nothing: a number
    read off a label without its leading zeros is padded as plants number motors, and looked up whole."""
    site = make_site(code="CST", name="Cool store")
    make_motor(site=site, asset_tag="CST-0093", location="Condensing unit 3")
    make_motor(site=make_site(code="GLH"), asset_tag="GLH-0093", location="Bay 9")
    client.force_login(technician)
    assert client.get(reverse("find"), {"tag": typed})["Location"] == reverse("motor", args=["CST-0093"])


@pytest.mark.parametrize("typed", ["cst 0093", "cst0093"])
def test_a_whole_tag_typed_with_a_space_is_looked_up_by_the_tag_index(typed):
    """The usual look-up stays cheap at 100,000 motors: a whole tag, however its separators were typed (or
    left out where letters meet digits), is found by the index on the tags' capitals, not by reading every
    tag. PostgreSQL is told not to scan the table so that the plan shows whether the index can serve the
    look-up at all."""
    make_motor(site=make_site(code="CST"), asset_tag="CST-0093")
    with CaptureQueriesContext(connection) as queries:
        found, _, _ = pages.find_motors(typed)
    assert found.asset_tag == "CST-0093" and len(queries.captured_queries) == 1
    with connection.cursor() as cursor:
        if connection.vendor == "postgresql":
            cursor.execute("SET LOCAL enable_seqscan = off")
        cursor.execute(("EXPLAIN " if connection.vendor == "postgresql" else "EXPLAIN QUERY PLAN ") + queries[0]["sql"])
        plan = str(cursor.fetchall())
    assert "motor_tag_unique_any_case" in plan, plan


@pytest.mark.skipif(connection.vendor != "postgresql", reason="trigram indexes are PostgreSQL's (pg_trgm)")
@pytest.mark.parametrize("typed", ["009", "condensing unit"])
def test_part_of_a_tag_or_a_location_is_looked_up_by_the_trigram_indexes(typed):
    """What no whole tag matches is compared in part with every tag (without its separators) and location:
    a LIKE '%...%' that reads all 100,000 motors unless pg_trgm's indexes serve it (PostgreSQL documentation,
    F.35 pg_trgm, "Index Support"). The plan must name the indexes of migration 0053, so the query's
    expressions and the indexes' must stay the same; PostgreSQL is told not to scan the table, so the plan
    shows whether the indexes can serve the search at all (nor to walk the tags' b-tree in order, which a table
    of two motors makes the cheaper plan)."""
    site = make_site(code="CST", name="Cool store")
    make_motor(site=site, asset_tag="CST-0093", location="Condensing unit 3")
    make_motor(site=site, asset_tag="CST-0094", location="Condensing unit 4")
    with CaptureQueriesContext(connection) as queries:
        found, matches, count = pages.find_motors(typed)
    assert found is None and count == 2 and [m.asset_tag for m in matches] == ["CST-0093", "CST-0094"]
    with connection.cursor() as cursor:
        cursor.execute("SET LOCAL enable_seqscan = off")
        cursor.execute("SET LOCAL enable_indexscan = off")
        cursor.execute("EXPLAIN " + queries.captured_queries[-1]["sql"])
        plan = str(cursor.fetchall())
    assert "motor_bare_tag_trigram" in plan and "motor_location_trigram" in plan, plan


def test_finding_keeps_to_the_users_sites_and_takes_constant_queries(client, django_assert_max_num_queries):
    home, away = make_site(name="Home farm"), make_site(name="Away farm")
    for n in range(30):
        make_motor(site=away, asset_tag=f"AWY-{n:04d}", location="Fan row")
    make_motor(site=home, asset_tag="HOM-0001", location="Fan row")
    user = make_user("technician")
    SiteMembership.objects.create(user=user, site=home)
    client.force_login(user)
    with django_assert_max_num_queries(12):
        response = client.get(reverse("find"), {"tag": "fan row"})
    assert response["Location"] == reverse("motor", args=["HOM-0001"])  # the 30 elsewhere are not offered
    assert "No motor" in client.get(reverse("find"), {"tag": "AWY"}).content.decode()


# The decimal comma, every path


@pytest.mark.parametrize("text,expected", [("31,5", 31.5), ("31.5", 31.5), ("3,1,5", None)])
def test_a_decimal_comma_in_any_measured_field_is_read_alike_by_form_api_and_import(client, technician, text, expected):
    """The rulebook's number syntax (fleet/engineering/rules.py) for the case temperature, not only the
    capacitance: one decimal comma is a decimal mark, two are refused by name on every path."""
    fitted_capacitors = [make_fitted_capacitor() for _ in range(3)]
    client.force_login(technician)
    form = form_post(client, fitted_capacitors[0], capacitance_uf="3,95", case_temperature_c=text)
    api = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fitted_capacitors[1].id]),
        {"method": "meter", "capacitance_uf": "3,95", "case_temperature_c": text},
        format="json",
    )
    result = import_check([import_row(fitted_capacitors[2], capacitance_uf="3,95", case_temperature_c=text)])
    if expected is None:
        assert "decimal separator" in form.context["form"].errors["case_temperature_c"][0]
        assert "decimal separator" in api.json()["case_temperature_c"][0]
        assert "decimal separator" in result.errors[0][2] and result.errors[0][1] == "case_temperature_c"
        assert not Reading.objects.exists()
    else:
        assert (form.status_code, api.status_code, len(result.good)) == (302, 201, 1)
        stored = sorted(Reading.objects.values_list("capacitance_uf", "case_temperature_c"))
        assert stored == [(3.95, expected), (3.95, expected)]
        assert result.good["case_temperature_c"].tolist() == [expected]


def test_the_life_data_costs_take_the_rulebooks_numbers(client, engineer):
    make_part(code="LIFE-1")
    client.force_login(engineer)
    page = client.get(reverse("life_data"), {"part": "LIFE-1", "planned_cost": "60,5", "failure_cost": "1.200,5"})
    assert page.context["planned_cost"] == 60.5
    assert page.context["failure_cost"] == 400.0  # refused, not guessed as 1.2 or 1200.5
    assert "1.200,5" in page.content.decode()
    # A number input refuses "60,5" in a browser set to English before it is sent: a text box with the
    # decimal keypad takes what the rulebook takes.
    for name in ("planned_cost", "failure_cost"):
        assert f'type="text" inputmode="decimal" autocomplete="off" name="{name}"' in page.content.decode()


def test_the_life_data_costs_past_any_replacement_are_refused_by_name(client, engineer):
    """A cost of 1e300 went into the age-replacement curve (costs overflow there); the page now says which
    cost it did not use and why (MAX_REPLACEMENT_COST, ours)."""
    make_part(code="LIFE-2")
    client.force_login(engineer)
    page = client.get(reverse("life_data"), {"part": "LIFE-2", "planned_cost": "1e300", "failure_cost": "5000"})
    assert page.status_code == 200
    assert page.context["planned_cost"] == 60.0 and page.context["failure_cost"] == 5000.0
    assert "The planned cost must be at most 1,000,000; &#x27;1e300&#x27; was not used, 60 was." in (
        page.content.decode()
    )
    # Past what a float holds (1e309 reads as infinity) it is still a number too large, not "not above zero".
    page = client.get(reverse("life_data"), {"part": "LIFE-2", "planned_cost": "1e309"})
    assert "The planned cost must be at most 1,000,000; &#x27;1e309&#x27; was not used" in page.content.decode()


def test_the_life_data_page_finds_a_short_replacement_age_when_failures_cost_far_more(client, engineer):
    """[pub] Barlow and Proschan's age replacement (checked against their optimality condition in
    tests/engineering/test_lifedata.py): for beta 1.48, eta 5.5 years, a planned change at 60 against a
    failure at 10,000, about 3.5 months; the page said no replacement age beat running to failure."""
    part = make_part(code="LIFE-3")
    points = [[age, 1.0 - math.exp(-((age / 5.5) ** 1.48))] for age in (0.8, 1.6, 2.4, 3.5, 4.7)]
    PartLifeFit.objects.create(part=part, beta=1.48, eta_years=5.5, failures=12, suspensions=40, plot_points=points)
    client.force_login(engineer)
    page = client.get(reverse("life_data"), {"part": "LIFE-3", "planned_cost": "60", "failure_cost": "10000"})
    text = page.content.decode()
    assert "No replacement age beats running to failure" not in text
    assert re.search(r"Replacing at <b>3\.[45]\xa0months</b>", text), text[text.find("Replacement age") :][:400]


def test_a_short_best_replacement_age_is_marked_clear_of_the_cost_axis_in_the_unit_the_page_words_it(client, engineer):
    """[pub] Barlow and Proschan's age replacement, as above: about 3.5 months. The chart drew its marker at
    0.3 on an axis of years running to 16.5, on the cost axis, labelled "best: 0.3 y" beside "3.5 months" in
    the text. Its axis is now in months, running from 0 to five times the best age (ours), and the marker is
    labelled as the text words it. A best age of years keeps the axis in years over the whole curve."""
    part = make_part(code="LIFE-3")
    points = [[age, 1.0 - math.exp(-((age / 5.5) ** 1.48))] for age in (0.8, 1.6, 2.4, 3.5, 4.7)]
    PartLifeFit.objects.create(part=part, beta=1.48, eta_years=5.5, failures=12, suspensions=40, plot_points=points)
    client.force_login(engineer)
    page = client.get(reverse("life_data"), {"part": "LIFE-3", "planned_cost": "60", "failure_cost": "10000"})
    best = page.context["life"]["replacement"].optimum_age
    layout = page.context["cost_chart"]["layout"]
    (marker,) = [shape for shape in layout["shapes"] if shape["x0"] == shape["x1"]]
    (label,) = [note["text"] for note in layout["annotations"] if note["text"].startswith("best: ")]
    assert layout["xaxis"]["title"]["text"] == "replacement age (months)"
    assert marker["x0"] == pytest.approx(12.0 * best) and label == f"best: {12.0 * best:.1f}\xa0months"
    assert f"Replacing at <b>{12.0 * best:.1f}\xa0months</b>" in page.content.decode()
    low, high = layout["xaxis"]["range"]
    assert low == 0.0 and 0.15 <= marker["x0"] / high <= 0.25
    assert max(page.context["cost_chart"]["data"][0]["x"]) <= high
    years = client.get(reverse("life_data"), {"part": "LIFE-3", "planned_cost": "60", "failure_cost": "400"})
    layout = years.context["cost_chart"]["layout"]
    assert layout["xaxis"]["title"]["text"] == "replacement age (years)"
    assert layout["xaxis"]["range"][1] == pytest.approx(max(years.context["cost_chart"]["data"][0]["x"]))
    assert any(note["text"].endswith("\xa0years") for note in layout["annotations"])


@pytest.mark.parametrize("end_cost, words_side", [(26.0, "top"), (24.0, "bottom")])
def test_the_run_to_failure_words_stand_on_the_side_of_their_line_the_cost_curve_does_not_end_on(end_cost, words_side):
    """A walk at 390 px: the cost curve of a part without wear-out ends just above the run-to-failure line, and
    the line's words, set above it at the right edge, lay across the curve. [ours] Where the curve ends above
    the line, the words hang below it (anchored at their top); where it ends below, they stand above it."""
    from fleet.charts import cost_curve_figure

    ages = np.linspace(0.1, 40.0, 60)
    cost = end_cost + (120.0 - end_cost) * np.exp(-ages)  # falling from 120 to end_cost at the right edge
    layout = cost_curve_figure(ages, cost, run_to_failure=25.0, optimum_age=None)["layout"]
    (words,) = [note for note in layout["annotations"] if note["text"] == "run to failure"]
    assert words["y"] == 25.0 and words["xanchor"] == "right" and words["yanchor"] == words_side


def test_the_life_data_part_menu_lists_codes_under_their_dielectric(client, engineer):
    """Ours: each part was "code (dielectric)", cut off in the box at 390 px: "START-143U-330 (Aluminium ele".
    The codes stand alone under a group named for their dielectric; the chosen part's dielectric is written
    under the heading."""
    make_part(code="RUN-1", dielectric="film")
    make_part(code="START-1", dielectric="electrolytic")
    # Within a group by rating, not by text: START-98U before START-143U ("START-143U" sorts first as text).
    make_part(code="START-143U", dielectric="electrolytic", rated_uf=143)
    make_part(code="START-98U", dielectric="electrolytic", rated_uf=98)
    client.force_login(engineer)
    body = client.get(reverse("life_data"), {"part": "START-1"}).content.decode()
    menu = body[body.index('<select id="part"') : body.index("</select>")]
    groups = re.findall(r'<optgroup label="([^"]+)">(.*?)</optgroup>', menu)
    assert [(label, re.findall(r">([^<]+)</option>", options)) for label, options in groups] == [
        ("Aluminium electrolytic (start)", ["START-1", "START-98U", "START-143U"]),
        ("Metallised film (run)", ["RUN-1"]),
    ]
    assert '<option value="START-1" selected>' in menu
    assert '<p class="muted">Aluminium electrolytic (start)</p>' in body


# The verdict and the risk, in words


def _assessment(**fields):
    values = dict(
        latest_verdict="within tolerance", risk="replace now", limit_source="tolerance", limit_fraction=0.9, reason="r"
    )
    values.update(fields)
    return Assessment(**values)


def test_a_limits_share_of_rated_is_written_to_a_tenth():
    """An audit: "tolerance at 90 % of rated" beside an 88.00 µF limit of a 98 µF part (-10.2 %). [ours]"""
    assert percent_to_a_tenth(88.0 / 98.0) == "89.8\u00a0%"
    assert percent_to_a_tenth(0.9) == "90\u00a0%" and percent_to_a_tenth(None) == "-"


def test_a_green_verdict_beside_a_red_risk_is_explained():
    words = verdict_and_risk(_assessment(reason="latest reading, referred to 25 °C, 129.8 µF: below the limit"))
    assert words.startswith("As measured, the last reading is within the marked tolerance; the plan still says")
    assert "referred to 25 °C" in words and words.endswith("129.8 µF: below the limit.")
    torque = verdict_and_risk(_assessment(risk="due soon", limit_source="starting torque", limit_fraction=0.85))
    assert "starting torque limit, crossed at 85 % of the rated capacitance" in torque
    assert "dissipation factor" in verdict_and_risk(_assessment(limit_source="dissipation factor"))
    # An audit: a reading whose ESR gave a dissipation factor over the part's maximum (the tolerance still
    # governing the dates) was said to be judged "referred to 25 °C and their trend". [ours]
    over = verdict_and_risk(_assessment(reason="dissipation factor 12.4 %, above the part's 10.0 % maximum"))
    assert "because its dissipation factor, worked out from the ESR read, is above the part's maximum" in over
    assert "25 °C" not in over
    # An audit: "Latest: below tolerance" beside "due soon" went unexplained, and "within tolerance" beside "due
    # soon" was said to be judged "not one reading as measured", where the trend alone makes it due. [ours]
    soon = verdict_and_risk(_assessment(latest_verdict="below tolerance", risk="due soon"))
    assert "the plan says due soon, not replace now, because, referred to 25 °C" in soon
    assert "Read it again" not in soon  # its replacement is planned already
    from fleet.templatetags.fleet_format import microfarads_beside

    assert microfarads_beside(189.069, 189.072) == "189.069" and microfarads_beside(189.1, 189.072) == "189.10"
    assert microfarads_beside(None, 189.0) == "-" and microfarads_beside(3.91, None) == "3.91"
    ahead = verdict_and_risk(_assessment(risk="due soon"))
    assert "because its trend, referred to 25 °C, reaches the limit soon" in ahead
    relaxed = verdict_and_risk(_assessment(latest_verdict="below tolerance", risk="watch"))
    assert "below tolerance" in relaxed and relaxed.endswith("Read it again to confirm.")
    assert verdict_and_risk(_assessment(latest_verdict="below tolerance")) == ""
    assert verdict_and_risk(_assessment(risk="sound")) == ""
    assert verdict_and_risk(None) == ""
    # The capacitor page prints the reason as its "Why" just above: the sentence points to it, not again.
    above = verdict_and_risk(_assessment(reason="latest reading, referred to 25 °C, 129.8 µF"), "above")
    assert "129.8" not in above and above.endswith(": see Why, above.")


def test_the_capacitor_page_reconciles_verdict_and_risk_once(client, engineer, fan_fitted_capacitor):
    """A green verdict beside a "due soon": one sentence says why (pointing to the Why above it), and the
    verdict as measured is not stated a second time in the line after it."""
    stored_assessment(fan_fitted_capacitor, "due soon", timezone.localdate(), reason="trend reaches the limit")
    client.force_login(engineer)
    page = strip_tags(client.get(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id])).content.decode())
    assert page.count("within the marked tolerance") == 1 and "see Why, above" in page
    assert "Latest reading as measured, against the marking" not in page
    assert page.lower().count("trend reaches the limit") == 1
    assert "a straight fit can be drawn curving" in page  # why a "linear" trend's chart bends ahead


def test_the_capacitor_page_marks_a_crossing_date_that_has_passed(client, engineer, fan_fitted_capacitor):
    """An audit: the capacitor page wrote the early crossing 2026-11-17 as a date to come, beside the plan row's
    "2026-11-17, past". [ours] the same words on both."""
    today = timezone.localdate()
    assessment = stored_assessment(fan_fitted_capacitor, "due soon", today + dt.timedelta(days=7))
    p10, p50, p90 = (today + dt.timedelta(days=n) for n in (-18, 20, 200))
    Assessment.objects.filter(pk=assessment.pk).update(p10_on=p10, p50_on=p50, p90_on=p90)
    client.force_login(engineer)
    page = strip_tags(client.get(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id])).content.decode())
    assert f"{p10.isoformat()}, past / {p50.isoformat()} / {p90.isoformat()}" in page


def test_a_reading_waiting_for_its_refit_is_said_on_the_motor_and_capacitor_pages(
    client, technician, fan_fitted_capacitor
):
    """An operator's walk with refits on separate workers: right after Save the motor page said "watch, latest:
    within tolerance" beside the message that a 3.70 µF reading, below tolerance, was saved; two seconds later
    "replace now" (up to 15 minutes with no worker running). [ours] until its refit the pages say that reading
    is being reassessed, with its own verdict as measured; once assessed, nothing."""
    from tests.factories import make_reading

    earlier = make_reading(fan_fitted_capacitor, capacitance_uf=3.95)
    assessment = stored_assessment(fan_fitted_capacitor, "watch", timezone.localdate() + dt.timedelta(days=200))
    Assessment.objects.filter(pk=assessment.pk).update(max_reading_id=earlier.id)
    client.force_login(technician)
    for page in (
        reverse("motor", args=[fan_fitted_capacitor.motor.asset_tag]),
        reverse("fitted_capacitor", args=[fan_fitted_capacitor.id]),
    ):
        assert "Being reassessed" not in client.get(page).content.decode()
    newer = make_reading(fan_fitted_capacitor, taken_at=timezone.now(), capacitance_uf=3.70)
    for page in (
        reverse("motor", args=[fan_fitted_capacitor.motor.asset_tag]),
        reverse("fitted_capacitor", args=[fan_fitted_capacitor.id]),
    ):
        said = strip_tags(client.get(page).content.decode())
        assert "Being reassessed: the reading of" in said and "(3.70 µF, below tolerance) is not in the risk" in said
        # The page's "latest" is that reading, not the one before it (a walk: "Latest: within tolerance" under it).
        assert "within tolerance" not in said and "within the marked tolerance" not in said
    Assessment.objects.filter(pk=assessment.pk).update(max_reading_id=newer.id)
    assert (
        "Being reassessed"
        not in client.get(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id])).content.decode()
    )


def test_the_motor_page_says_why_a_capacitor_within_tolerance_is_to_be_replaced(
    client, technician, fan_fitted_capacitor
):
    stored_assessment(
        fan_fitted_capacitor,
        "replace now",
        dt.date(2026, 1, 5),
        reason="latest reading, referred to 25 °C, 3.79 µF: below the tolerance limit (3.80 µF)",
        capacitance_now_uf=3.81,
    )
    client.force_login(technician)
    body = client.get(reverse("motor", args=[fan_fitted_capacitor.motor.asset_tag])).content.decode()
    assert "the plan still says replace now because it judges the readings referred to 25 °C" in body


def test_dates_are_kept_on_one_line():
    assert day(dt.date(2026, 12, 2)) == '<span class="nowrap">2026-12-02</span>'
    assert day(None) == ""
    evening = dt.datetime(2026, 12, 2, 23, 59, tzinfo=dt.timezone(dt.timedelta(hours=-5)))
    for value in (evening, dt.date(999, 1, 2)):  # [derived] the ISO day as Django's own "Y-m-d" writes it
        assert day(value) == f'<span class="nowrap">{date_format(value, "Y-m-d")}</span>'


def test_a_defect_logged_is_said_again_once_saved_with_the_caution_and_shown_on_the_motor_page(
    client, technician, django_capture_on_commit_callbacks
):
    """A fresh-eyes walk: a technician logged a bulged capacitor and the page they landed on said "Reading saved",
    nothing more, and the motor page never said "bulged". The saved page now says what to do with it and the
    caution for a damaged capacitor, and the motor page's readings show the defect. [trade] a bulged, leaking or
    vented capacitor is replaced whatever it measures and handled as charged until discharged (common practice of
    the trade, no single source); the site's rules and local codes govern how."""
    bulged, sound = make_fitted_capacitor(), make_fitted_capacitor()
    client.force_login(technician)
    data = {"method": "meter", "capacitance_uf": "3.99", "case_temperature_c": "25", "condition": "bulged"}
    with django_capture_on_commit_callbacks(execute=True):  # the refit the save queues
        page = client.post(reverse("reading_new", args=[bulged.id]), data, follow=True).content.decode()
    said = " ".join(strip_tags(page).split())
    assert f"Bulged or raised top: replace the run capacitor of {bulged.motor.asset_tag}, whatever it reads" in said
    assert "may still hold its charge" in said and "local codes" in said
    assert '3.99<br><b class="error-text">Bulged or raised top</b></td>' in page  # the motor page's reading
    # A re-walk: the motor page then said the plan was "replace now" because "it judges the readings referred to
    # 25 °C and their trend": the defect is why, and the capacitor page's readings show it too.
    motor_page = client.get(reverse("motor", args=[bulged.motor.asset_tag])).content.decode()
    motor_page = " ".join(strip_tags(motor_page).split())
    assert "because a capacitor seen bulged, leaking or vented is replaced whatever it measures" in motor_page
    assert "referred to 25" not in motor_page
    assert "Latest: bulged (within tolerance as measured)." in motor_page  # not a green "within tolerance"
    capacitor_page = client.get(reverse("fitted_capacitor", args=[bulged.id])).content.decode()
    assert '3.99<br><b class="error-text">Bulged or raised top</b></td>' in capacitor_page
    data["condition"] = "sound"
    page = strip_tags(client.post(reverse("reading_new", args=[sound.id]), data, follow=True).content.decode())
    assert "whatever it reads" not in page and "Bulged" not in page


def test_a_start_capacitors_reading_lands_at_its_card_on_the_motor_page(client, technician):
    """A re-walk: after the start capacitor of a two-value motor was read, its motor's page opened at the top, on
    the run capacitor, the start capacitor's new verdict some 3,700 px down a phone. A sound reading of a capacitor
    listed below another lands at its own card; a run capacitor's (the first card), or a defect's (its warning is
    at the top), lands at the top."""
    motor = make_motor(motor_type="two_value")
    run = make_fitted_capacitor(motor=motor, role="run")
    start = make_fitted_capacitor(
        motor=motor, role="start", part=make_part(rated_uf=40.0, rated_voltage_v=250, dielectric="electrolytic")
    )
    client.force_login(technician)
    data = {"method": "meter", "capacitance_uf": "40.5", "case_temperature_c": "25", "condition": "sound"}
    landed = client.post(reverse("reading_new", args=[start.id]), data)["Location"]
    assert landed.endswith(f"?saved={start.id}#capacitor-{start.id}"), landed
    assert f'id="capacitor-{start.id}"' in client.get(landed.split("#")[0]).content.decode()
    data["capacitance_uf"] = "3.99"
    assert "#" not in client.post(reverse("reading_new", args=[run.id]), data)["Location"]
    data.update(capacitance_uf="40.4", condition="leaking")
    assert "#" not in client.post(reverse("reading_new", args=[start.id]), data)["Location"]


def test_the_boxes_for_tags_and_serials_are_not_autocorrected_on_a_phone(client, technician):
    """A walk: a phone's autocorrect turned a typed "cst 93" into "cat 93" in the find box, and may rewrite a
    serial or date code ("2611-ab" is no word). Those boxes tell the phone not to correct or spell-check them."""
    fitted_capacitor = make_fitted_capacitor()
    client.force_login(technician)
    pages = {
        "home": reverse("home"),
        "find": reverse("find"),
        "replace": reverse("replace", args=[fitted_capacitor.id]),
    }
    for page, address in pages.items():
        html = client.get(address).content.decode()
        name = "serial" if page == "replace" else "tag"
        box = re.search(rf'<input type="text" name="{name}"[^>]*>', html)
        assert box, (page, name)
        assert 'autocorrect="off"' in box.group(0) and 'spellcheck="false"' in box.group(0), (page, box.group(0))


def test_a_hidden_value_the_page_cannot_use_is_named_in_the_summary(client, technician, madrid_fitted_capacitor):
    """An audit of inputs: a reading form sent with a one-time key longer than any the page makes answered "Not
    saved: 1 to put right" and named nothing (the key's field is hidden). [ours] the summary says which of the
    page's hidden values it cannot use and to open the form again."""
    client.force_login(technician)
    answer = form_post(client, madrid_fitted_capacitor, capacitance_uf="3.95", client_key="k" * 65)
    page = answer.content.decode()
    assert answer.status_code == 200 and not Reading.objects.exists()
    assert "The page sent a client_key it cannot use" in page and "open the form again from its link" in page
