"""Hostile values thrown at the reading form, the API and the importer (Hypothesis).

Whatever comes in (huge, NaN, infinity, negative, unicode, NUL, very long, wrong types):
never a 500, never a partial write, never a non-finite number stored. Example counts are
modest: the CI budget is shared.
"""

import math

import pytest
from django.db import transaction
from django.urls import reverse
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from fleet.imports.columns import READING_COLUMNS, mapped_frame
from fleet.models import Reading
from fleet.services.import_checks import check_readings, insert_readings
from fleet.services.import_jobs import create_job
from tests.factories import make_fitted_capacitor, make_user

pytestmark = pytest.mark.django_db

FUZZ = settings(
    max_examples=60,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow, HealthCheck.data_too_large],
)
NASTY_TEXT = [
    "nan",
    "NaN",
    "inf",
    "-Infinity",
    "1e999",
    "-1e308",
    "3,8",
    "1,234.5",
    "\x00",
    "4\x00",
    "\uff14",
    " ",
    "1_000",
    "0x10",
    "x" * 5000,
    "\u202e4.0",
    "3.95",
]
text_values = st.one_of(
    st.sampled_from(NASTY_TEXT), st.text(max_size=40), st.from_regex(r"-?[0-9]{1,12}([.,][0-9]{0,6})?")
)
json_values = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(10**30), max_value=10**30),
    st.floats(allow_nan=False, allow_infinity=False),
    text_values,
    st.lists(st.integers(), max_size=2),
    st.dictionaries(st.text(max_size=3), st.integers(), max_size=2),
)
MEASURED = list(Reading.MEASURED_FIELDS)
SECONDARY = [name for name in MEASURED if name != "capacitance_uf"]
# A plausible capacitance for the 4 uF fixture half the time, so hostile secondary values get their chance.
capacitance_text = st.one_of(st.floats(3.8, 4.1).map(lambda v: f"{v:.3f}"), text_values)
measured_text = st.fixed_dictionaries(
    {"capacitance_uf": capacitance_text}, optional={name: text_values for name in SECONDARY}
)
methods = st.one_of(st.just("meter"), st.sampled_from(["meter", "in_circuit", "", "METER", "\x00", "x" * 100]))
notes = st.one_of(st.text(max_size=60), st.sampled_from(["\x00", "n" * 3000, ""]))


def assert_all_stored_values_finite():
    for row in Reading.objects.values_list(*MEASURED):
        assert all(v is None or math.isfinite(v) for v in row), row


@pytest.fixture
def fuzz_target(db):
    fitted_capacitor = make_fitted_capacitor()
    technician = make_user("technician")
    return fitted_capacitor, technician


@FUZZ
@given(data=measured_text, method=methods, note=notes)
def test_the_reading_form_never_fails_and_never_stores_a_non_finite_number(client, fuzz_target, data, method, note):
    fitted_capacitor, technician = fuzz_target
    client.force_login(technician)
    before = Reading.objects.count()
    response = client.post(
        reverse("reading_new", args=[fitted_capacitor.id]),
        {**data, "method": method, "notes": note, "condition": "sound"},
    )
    assert response.status_code in {200, 302}
    assert Reading.objects.count() == before + (1 if response.status_code == 302 else 0)
    assert_all_stored_values_finite()


@FUZZ
@given(
    data=st.fixed_dictionaries(
        {"capacitance_uf": st.one_of(st.floats(3.8, 4.1), json_values)},
        optional={name: json_values for name in SECONDARY},
    ),
    method=methods,
    note=st.one_of(notes, st.integers(), st.none()),
    taken_at=st.one_of(
        st.none(),
        st.text(max_size=30),
        st.sampled_from(["0001-01-01", "9999-12-31T23:59:59+14:00", "2024-02-30", "2024-03-01T09:00:00Z"]),
        st.datetimes().map(lambda d: d.isoformat()),
    ),
)
def test_the_api_never_fails_and_never_stores_a_non_finite_number(fuzz_target, data, method, note, taken_at):
    fitted_capacitor, technician = fuzz_target
    client = APIClient()
    client.force_authenticate(technician)
    body = {**data, "method": method, "notes": note}
    if taken_at is not None:
        body["taken_at"] = taken_at
    before = Reading.objects.count()
    response = client.post(reverse("api_fitted_capacitor_readings", args=[fitted_capacitor.id]), body, format="json")
    assert response.status_code in {201, 400, 409}, response.content[:300]
    assert Reading.objects.count() == before + (1 if response.status_code == 201 else 0)
    assert_all_stored_values_finite()


@FUZZ
@given(body=st.binary(max_size=200))
def test_the_api_survives_a_body_that_is_not_json(fuzz_target, body):
    fitted_capacitor, technician = fuzz_target
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.get_or_create(user=technician)[0].key}")
    response = client.post(
        reverse("api_fitted_capacitor_readings", args=[fitted_capacitor.id]), body, content_type="application/json"
    )
    assert response.status_code in {201, 400, 409}


row_values = st.fixed_dictionaries(
    {"capacitance_uf": capacitance_text},
    optional={
        **{name: text_values for name in SECONDARY},
        "method": methods,
        "role": st.sampled_from(["run", "start", "", "\x00", "RUN"]),
        "taken_at": st.one_of(
            st.sampled_from(["2024-03-01 09:00", "0001-01-01", "2099-01-01", "", "\x00", "2024-13-45"]),
            st.text(max_size=20),
        ),
        "notes": notes,
        "condition": st.sampled_from(["sound", "", "bulged", "\x00", "x" * 50]),
    },
)


@FUZZ
@given(rows=st.lists(row_values, min_size=1, max_size=8))
def test_the_importer_never_fails_and_writes_only_checked_rows(fuzz_target, rows):
    fitted_capacitor, _ = fuzz_target
    header = list(READING_COLUMNS)
    base = {"asset_tag": fitted_capacitor.motor.asset_tag, "role": "run", "taken_at": "2024-03-01 09:00"}
    body = [[{**base, **row}.get(name, "") for name in header] for row in rows]
    result = check_readings(mapped_frame(header, body, {n: n for n in header}, READING_COLUMNS))
    bad_rows = {r for r, _, _ in result.errors}
    assert len(result.good) + len(bad_rows) + result.duplicates <= len(rows)
    assert not bad_rows & set(result.good.get("row", []))
    before = Reading.objects.count()
    with transaction.atomic():
        insert_readings(result.good)
    assert Reading.objects.count() - before <= len(result.good)
    assert_all_stored_values_finite()


def test_shown_values_nested_deeper_than_json_reads_are_taken_as_none_sent(client, fuzz_target):
    """The hidden `shown_values` a page sends back (what it showed, for a save meanwhile): a hostile "[[[[..."
    is a form that sent nothing readable, never a server error, on the reading form and the import page."""
    fitted_capacitor, technician = fuzz_target
    client.force_login(technician)
    deep = "[" * 100_000
    response = client.post(
        reverse("reading_new", args=[fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": "3.95", "condition": "sound", "shown_values": deep},
    )
    assert response.status_code == 302
    assert Reading.objects.filter(fitted_capacitor=fitted_capacitor).count() == 1
    job = create_job(kind="readings", filename="r.csv", content=b"asset_tag,role\n", user=technician)
    response = client.post(reverse("import_detail", args=[job.id]), {"action": "check", "shown_values": deep})
    assert response.status_code == 200
