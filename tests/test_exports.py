"""Exports: what the CSV, XLSX and Parquet files say equals what the database holds (awkward text
included), typed cells, formulas defused, the user's sites only, a query count flat in the rows.
Every check is [derived]: the file must hold the database's rows, or [trade] for the spreadsheet
conventions (OWASP's advice on formula injection: a leading quote in CSV)."""

import csv
import datetime as dt
import io

import pyarrow.parquet as pq
import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone
from openpyxl import load_workbook
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from fleet.api import AssessmentSerializer, BulkReadingSerializer
from fleet.imports import columns as import_columns
from fleet.models import Assessment, FittedCapacitor, Reading, SiteMembership
from fleet.roles import PLANNER, RELIABILITY_ENGINEER
from fleet.services.assessments import MODEL_VERSION, refit_fitted_capacitors
from fleet.services.exports import ASSESSMENT_COLUMNS, LIMIT_COLUMNS, PLAN_COLUMNS, READING_COLUMNS
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_site, make_user, quarterly_readings

pytestmark = pytest.mark.django_db

AWKWARD = [
    '=HYPERLINK("http://x","y")',
    "+1+2",
    "-3.2",
    "@SUM(A1)",
    "'quoted already",
    'comma, "quotes" and\nnewline',
    "Kühlhaus Süd – ölpumpe µF °C Ω",
]
FORMATS = ["csv", "xlsx", "parquet"]


@pytest.fixture
def awkward_fleet(db):
    """Two sites (one with a non-ASCII name), motors and notes holding text a spreadsheet might run."""
    sites = [make_site("NORD", name='Gewächshaus Nord, Haus "3"'), make_site("SUD", name="=Süd")]
    fitted_capacitors = []
    for i, text in enumerate(AWKWARD):
        motor = make_motor(site=sites[i % 2], location=text)
        fitted_capacitor = make_fitted_capacitor(motor=motor)
        start = timezone.make_aware(dt.datetime(2024, 1, 8, 9, 30))
        quarterly_readings(fitted_capacitor, start, [4.0, 3.9, 3.8, 3.7], notes=text, esr_ohm=None)
        fitted_capacitors.append(fitted_capacitor)
    refit_fitted_capacitors([i.id for i in fitted_capacitors])
    return sites, fitted_capacitors


def _download(client, kind, file_format, query=None):
    response = client.get(reverse("export", args=[kind, file_format]), query or {})
    assert response.status_code == 200, response.content
    content = b"".join(response.streaming_content)
    return response, content


def _unquote_csv(text: str) -> str:
    """The reading rule the sidecar states: one leading quote was added to defuse the cell."""
    return text[1:] if text.startswith("'") else text


def _parse(content: bytes, file_format: str, columns) -> list[dict]:
    """Rows of an export as Python values, by column name."""
    if file_format == "parquet":
        return pq.read_table(io.BytesIO(content)).to_pylist()
    kinds = {c.name: c.kind for c in columns}
    if file_format == "xlsx":  # a spreadsheet date is a date-time at midnight
        rows = list(load_workbook(io.BytesIO(content)).worksheets[0].iter_rows(values_only=True))
        return [
            {k: v.date() if kinds.get(k) == "date" and v is not None else v for k, v in zip(rows[0], row, strict=True)}
            for row in rows[1:]
        ]
    reader = csv.DictReader(io.StringIO(content.decode("utf-8-sig"), newline=""))
    readers = {
        "int": int,
        "float": float,
        "date": dt.date.fromisoformat,
        "datetime": dt.datetime.fromisoformat,
        "bool": lambda v: v == "true",
        "text": _unquote_csv,
    }
    return [{k: None if v == "" else readers[kinds[k]](v) for k, v in row.items()} for row in reader]


def _same_time(file_value, db_value):
    if file_value.tzinfo is None:  # XLSX: UTC without a zone
        file_value = file_value.replace(tzinfo=dt.UTC)
    return file_value == db_value


@pytest.mark.parametrize("file_format", FORMATS)
def test_readings_round_trip_with_awkward_text(client, awkward_fleet, file_format):
    client.force_login(make_user(RELIABILITY_ENGINEER))
    _, content = _download(client, "readings", file_format)
    rows = _parse(content, file_format, READING_COLUMNS)
    stored = Reading.objects.select_related("fitted_capacitor__motor__site", "fitted_capacitor__part").order_by(
        "taken_at", "id"
    )
    assert len(rows) == stored.count() == 4 * len(AWKWARD)
    for row, reading in zip(rows, stored, strict=True):
        assert row["id"] == reading.id and row["fitted_capacitor_id"] == reading.fitted_capacitor_id
        assert row["site"] == reading.fitted_capacitor.motor.site.code
        assert row["notes"] == reading.notes  # = + - @ ' commas quotes newline non-ASCII, all as stored
        assert row["capacitance_uf"] == reading.capacitance_uf and isinstance(row["capacitance_uf"], int | float)
        assert row["case_temperature_c"] == reading.case_temperature_c and row["esr_ohm"] is None
        assert _same_time(row["taken_at"], reading.taken_at)
        assert row["confirmed"] is False and row["source"] == "demo"
    assert {row["notes"] for row in rows} == set(AWKWARD)


@pytest.mark.parametrize("file_format", FORMATS)
def test_assessments_carry_every_limits_dates_as_stored(client, awkward_fleet, file_format):
    client.force_login(make_user(RELIABILITY_ENGINEER))
    _, content = _download(client, "assessments", file_format)
    rows = {row["fitted_capacitor_id"]: row for row in _parse(content, file_format, ASSESSMENT_COLUMNS + LIMIT_COLUMNS)}
    current = Assessment.objects.filter(is_current=True).select_related("fitted_capacitor__motor")
    assert set(rows) == {a.fitted_capacitor_id for a in current}
    for assessment in current:
        row = rows[assessment.fitted_capacitor_id]
        assert row["location"] == assessment.fitted_capacitor.motor.location
        assert row["risk"] == assessment.risk and row["replace_by"] == assessment.replace_by
        assert row["limit_source"] == assessment.limit_source and row["model_version"] == MODEL_VERSION
        assert len(assessment.limits) >= 2
        for limit in assessment.limits:
            slug = limit["name"].replace(" ", "_").replace("-", "_")
            # A spreadsheet keeps 15 significant digits [pub: the XLSX number is an IEEE double, Excel shows 15].
            if limit["name"] == "dissipation factor":  # its level is the part's maximum, as the API gives it
                assert row[f"{slug}_maximum"] == pytest.approx(limit["maximum"], rel=1e-14)
            else:
                assert row[f"{slug}_fraction"] == pytest.approx(limit["fraction_of_rated"], rel=1e-14)
            assert row[f"{slug}_used"] == limit["used"]
            for key in ("p10_on", "p50_on", "p90_on"):
                expected = dt.date.fromisoformat(limit[key]) if limit[key] else None
                assert row[f"{slug}_{key}"] == expected


def test_xlsx_cells_are_typed_with_a_frozen_filtered_header_and_text_kept_as_text(client, awkward_fleet):
    client.force_login(make_user(RELIABILITY_ENGINEER))
    _, content = _download(client, "readings", "xlsx")
    book = load_workbook(io.BytesIO(content))
    sheet = book.worksheets[0]
    assert sheet.freeze_panes == "A2"
    assert sheet.auto_filter.ref == f"A1:Y{1 + 4 * len(AWKWARD)}"
    header = [cell.value for cell in sheet[1]]
    notes = sheet.cell(row=2, column=header.index("notes") + 1)
    formula_like = [row for row in sheet.iter_rows(min_row=2) if str(row[header.index("notes")].value).startswith("=")]
    assert formula_like and all(row[header.index("notes")].data_type == "s" for row in formula_like)
    assert notes.data_type == "s"
    taken = sheet.cell(row=2, column=header.index("taken_at") + 1)
    assert isinstance(taken.value, dt.datetime) and taken.is_date and "h:mm" in taken.number_format
    uf = sheet.cell(row=2, column=header.index("capacitance_uf") + 1)
    assert uf.data_type == "n"
    assert sheet.column_dimensions["A"].width >= len("id") + 2
    about = {row[0]: row[1] for row in book["about"].iter_rows(values_only=True) if row[0]}
    assert about["model_version"] == MODEL_VERSION and about["capacitance_uf"] == "float"


def test_csv_defuses_formulas_with_a_quote_and_streams(client, awkward_fleet):
    client.force_login(make_user(RELIABILITY_ENGINEER))
    response, content = _download(client, "readings", "csv")
    assert response.streaming
    text = content.decode("utf-8-sig")
    assert "'=HYPERLINK" in text and "'@SUM" in text and "''quoted already" in text
    assert ",-3.2\r\n" in text  # a plain number is left alone (notes is the last column)
    assert response["Link"] == f'<{reverse("export_about", args=["readings"])}>; rel="describedby"'


def test_parquet_fields_carry_units_and_the_file_the_model_version(client, awkward_fleet):
    client.force_login(make_user(RELIABILITY_ENGINEER))
    _, content = _download(client, "readings", "parquet", {"site": "NORD"})
    table = pq.read_table(io.BytesIO(content))
    assert table.schema.field("capacitance_uf").metadata[b"unit"] == b"uF"
    assert str(table.schema.field("taken_at").type) == "timestamp[us, tz=UTC]"
    assert MODEL_VERSION.encode() in table.schema.metadata[b"fleet"] and b'"NORD"' in table.schema.metadata[b"fleet"]
    assert set(table.column("site").to_pylist()) == {"NORD"}


def test_the_sidecar_names_units_model_version_and_filters(client, awkward_fleet):
    client.force_login(make_user(RELIABILITY_ENGINEER))
    about = client.get(reverse("export_about", args=["readings"]), {"site": "SUD"}).json()
    units = {c["name"]: c["unit"] for c in about["columns"]}
    assert units["capacitance_uf"] == "uF" and units["case_temperature_c"] == "degC" and units["esr_ohm"] == "ohm"
    assert about["model_version"] == MODEL_VERSION and about["filters"] == {"site": "SUD"}


def test_filters_narrow_like_the_api_and_a_bad_one_is_named(client, awkward_fleet):
    sites, fitted_capacitors = awkward_fleet
    client.force_login(make_user(RELIABILITY_ENGINEER))
    part = fitted_capacitors[0].part.code
    query = {"part": part, "since": "2024-04-01", "until": "2024-07-08"}
    _, content = _download(client, "readings", "csv", query)
    rows = _parse(content, "csv", READING_COLUMNS)
    assert [r["taken_at"].date() for r in rows] == [dt.date(2024, 4, 8), dt.date(2024, 7, 8)]
    bad = client.get(reverse("export", args=["readings", "csv"]), {"since": "last tuesday"})
    assert bad.status_code == 400 and "since" in bad.content.decode()
    assert client.get(reverse("export", args=["readings", "pdf"])).status_code == 404
    assert client.get(reverse("export", args=["secrets", "csv"])).status_code == 404
    # An unknown part or motor is named, not answered with an empty file that looks like "no readings".
    for kind, name in (("readings", "part"), ("readings", "motor"), ("life-data", "part")):
        unknown = client.get(reverse("export", args=[kind, "csv"]), {name: "NOPE-0000"})
        assert unknown.status_code == 400 and name in unknown.content.decode(), (kind, name)


def test_life_data_rows_are_failures_and_suspensions_of_the_part(client):
    part = make_part(code="LIFE-EXP")
    today = timezone.localdate()
    failed = make_fitted_capacitor(part=part, fitted_on=today - dt.timedelta(days=900))
    FittedCapacitor.objects.filter(id=failed.id).update(
        removed_on=today - dt.timedelta(days=100), removal_reason="failed"
    )
    running = make_fitted_capacitor(part=part, fitted_on=today - dt.timedelta(days=300))
    make_fitted_capacitor()  # another part: left out
    client.force_login(make_user(RELIABILITY_ENGINEER))
    _, content = _download(client, "life-data", "parquet", {"part": "LIFE-EXP"})
    rows = {r["fitted_capacitor_id"]: r for r in pq.read_table(io.BytesIO(content)).to_pylist()}
    assert set(rows) == {failed.id, running.id}
    assert (rows[failed.id]["age_days"], rows[failed.id]["failed"]) == (800, True)
    assert (rows[running.id]["age_days"], rows[running.id]["failed"], rows[running.id]["removed_on"]) == (
        300,
        False,
        None,
    )


@pytest.mark.parametrize("kind", ["readings", "assessments", "life-data", "plan"])
@pytest.mark.parametrize("file_format", FORMATS)
def test_every_export_holds_the_users_sites_only(client, awkward_fleet, kind, file_format):
    sites, _ = awkward_fleet
    user = make_user(RELIABILITY_ENGINEER if kind != "plan" else PLANNER)
    SiteMembership.objects.create(user=user, site=sites[0])
    client.force_login(user)
    horizon = {"days": 730} if kind == "plan" else {}  # only the plan takes a horizon; the others refuse `days`
    for query in (horizon, {**horizon, "site": "SUD"}):
        if "site" in query:
            # A site the user does not work at is refused like an unknown one, naming the parameter (the
            # plan too: its page notes it and shows every site, but a file cannot carry the note).
            refused = client.get(reverse("export", args=[kind, file_format]), query)
            assert refused.status_code == 400 and b"site" in refused.content
            continue
        _, content = _download(client, kind, file_format, query)
        rows = (
            _parse(content, file_format, [])
            if file_format != "csv"
            else list(csv.DictReader(io.StringIO(content.decode("utf-8-sig"), newline="")))
        )
        assert {row["site"] for row in rows} <= {"NORD"}
        if "site" not in query:
            assert rows  # the user's own site is there
            # Every table carries the key that joins it to the others (the plan had none).
            ids = {str(fitted.id) for fitted in FittedCapacitor.objects.filter(motor__site__code="NORD")}
            assert {str(row["fitted_capacitor_id"]).removesuffix(".0") for row in rows} <= ids
            # A fresh-eyes walk: the trend value came out as 131.38147444019103 µF; to 0.001 µF it is read.
            trend = [str(row["capacitance_now_uf"]) for row in rows if "capacitance_now_uf" in row]
            assert all(len(text.split(".")[-1]) <= 3 for text in trend if "." in text), trend


def test_a_user_without_the_permission_gets_403(client, awkward_fleet):
    from django.contrib.auth.models import User

    client.force_login(User.objects.create_user("no-role", password="a-long-test-password"))
    for kind in ("readings", "assessments", "life-data", "plan"):
        assert client.get(reverse("export", args=[kind, "csv"])).status_code == 403
        assert client.get(reverse("export_about", args=[kind])).status_code == 403


@pytest.mark.parametrize("file_format", FORMATS)
def test_query_count_stays_flat_as_the_readings_grow(client, file_format):
    client.force_login(make_user(RELIABILITY_ENGINEER))
    counts = []
    for motors in (2, 8):
        for _ in range(motors):
            fitted_capacitor = make_fitted_capacitor(motor=make_motor(site=make_site()))
            quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8)), [4.0, 3.9, 3.8])
        with CaptureQueriesContext(connection) as queries:
            _download(client, "readings", file_format)
        counts.append(len(queries))
    assert counts[0] == counts[1]


def _api(user) -> APIClient:
    api = APIClient()
    api.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=user).key}")
    return api


def test_a_reading_posted_through_the_api_is_stored_with_source_api(technician, fan_fitted_capacitor):
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    response = _api(technician).post(url, {"method": "meter", "capacitance_uf": 3.95}, format="json")
    assert response.status_code == 201 and response.json()["source"] == "api"
    assert Reading.objects.get().source == Reading.Source.API


def test_bulk_readings_api_filters_pages_and_scopes(awkward_fleet):
    sites, fitted_capacitors = awkward_fleet
    user = make_user(RELIABILITY_ENGINEER)
    api = _api(user)
    seen, url, query = [], reverse("api_readings"), {"site": "NORD", "page_size": 5}
    while url:
        body = api.get(url, query).json()
        seen += body["results"]
        url, query = body["next"], None
    nord = Reading.objects.filter(fitted_capacitor__motor__site__code="NORD")
    assert [r["id"] for r in seen] == sorted(nord.values_list("id", flat=True))
    assert {r["site"] for r in seen} == {"NORD"} and seen[0]["asset_tag"].startswith("M-")
    assert api.get(reverse("api_readings"), {"until": "soon"}).status_code == 400
    SiteMembership.objects.create(user=user, site=sites[1])
    assert {r["site"] for r in api.get(reverse("api_readings"), {"page_size": 100}).json()["results"]} == {"SUD"}


def test_bulk_readings_api_query_count_is_flat(engineer):
    api = _api(engineer)
    counts = []
    for motors in (2, 8):
        for _ in range(motors):
            fitted_capacitor = make_fitted_capacitor(motor=make_motor(site=make_site()))
            quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8)), [4.0, 3.9])
        with CaptureQueriesContext(connection) as queries:
            assert api.get(reverse("api_readings"), {"page_size": 100}).status_code == 200
        counts.append(len(queries))
    assert counts[0] == counts[1]


def test_the_plan_and_life_data_pages_link_their_filtered_exports(client, awkward_fleet):
    import html
    import re

    sites, fitted_capacitors = awkward_fleet
    client.force_login(make_user(RELIABILITY_ENGINEER))
    plan = client.get(reverse("plan"), {"site": "SUD", "days": 730}).content.decode()
    life = client.get(reverse("life_data"), {"part": fitted_capacitors[0].part.code}).content.decode()
    links = [html.unescape(href) for href in re.findall(r'href="(/exports/[^"]+)"', plan + life)]
    assert "/exports/assessments.parquet?site=SUD" in links and "/exports/readings.csv?site=SUD" in links
    assert f"/exports/life-data.xlsx?part={fitted_capacitors[0].part.code}" in links
    for link in links:
        assert client.get(link).status_code == 200, link


def test_exports_need_a_sign_in(client):
    for url in (reverse("export", args=["readings", "csv"]), reverse("export_about", args=["readings"])):
        response = client.get(url)
        assert response.status_code == 302 and response["Location"].startswith(reverse("login"))


def test_xlsx_keeps_every_value_kind_and_opens_in_both_reading_modes():
    """[derived] The workbook written here holds what the table held: text with markup, a carriage
    return and a control character (replaced, as XML cannot hold it), numbers, dates, date-times,
    booleans; empty and non-finite numbers leave the cell empty."""
    from decimal import Decimal

    from fleet.exports import BOOL, DATE, DATETIME, FLOAT, INT, Column, Table, xlsx_file

    columns = [
        Column("text"),
        Column("number", FLOAT),
        Column("count", INT),
        Column("day", DATE),
        Column("at", DATETIME),
        Column("flag", BOOL),
    ]
    at = dt.datetime(2025, 3, 30, 1, 30, 15, tzinfo=dt.timezone(dt.timedelta(hours=2)))
    rows = [
        ['a < b & "c"\r\nnext', 0.1 + 0.2, 7, dt.date(2025, 2, 28), at, True],
        ["=1+1 \x01", float("nan"), None, None, None, False],
        ["", Decimal("2.5"), -3, dt.date(1999, 12, 31), None, None],
    ]
    with xlsx_file(Table("values", columns, iter(rows), {"model_version": "test", "site": None})) as handle:
        content = handle.read()
    for read_only in (False, True):
        book = load_workbook(io.BytesIO(content), read_only=read_only)
        # read-only rows end at their last cell (the sheet states no dimension: it is written before its rows)
        cells = [row + (None,) * (6 - len(row)) for row in book["values"].iter_rows(values_only=True)]
        assert cells[0] == ("text", "number", "count", "day", "at", "flag")
        assert cells[1] == (
            'a < b & "c"\r\nnext',
            0.1 + 0.2,
            7,
            dt.datetime(2025, 2, 28),
            dt.datetime(2025, 3, 29, 23, 30, 15),
            True,
        )
        assert cells[2] == ("=1+1 \ufffd", None, None, None, None, False)
        assert cells[3] == (None, 2.5, -3, dt.datetime(1999, 12, 31), None, None)
        about = {row[0]: (*row, None)[1] for row in book["about"].iter_rows(values_only=True) if row and row[0]}
        assert about["model_version"] == "test" and about["at"] == "datetime"
        assert about["site"] is None  # no site asked: an empty cell, not the word "null" (a walk found it)
    sheet = load_workbook(io.BytesIO(content))["values"]
    assert sheet["A1"].font.b and sheet["A3"].data_type == "s" and sheet.auto_filter.ref == "A1:F4"


# The filters each export takes, as its 400 lists them.
EXPORT_FILTERS = [
    ("readings", "motor, part, since, site, until"),
    ("assessments", "fitted_against_advice, replace_by_before, risk, site"),
    ("life-data", "part, site"),
    ("plan", "days, site"),
]


@pytest.mark.parametrize("kind, takes", EXPORT_FILTERS)
def test_an_export_refuses_a_parameter_it_does_not_take_or_one_given_twice(client, awkward_fleet, kind, takes):
    """The README: the exports refuse what the API lists refuse, through the same rule
    (`filters.parameter_problems`). Before: ?bogus=1 answered 200 with every row, and a site given twice used one."""
    client.force_login(make_user(RELIABILITY_ENGINEER))
    address = reverse("export", args=[kind, "csv"])
    unknown = client.get(address, {"bogus": "1"})
    assert unknown.status_code == 400
    assert (
        unknown.content.decode()
        == f"Cannot read the filter: bogus: Not a parameter of this list, which takes: {takes}."
    )
    twice = client.get(f"{address}?site=NORD&site=SUD")
    assert twice.status_code == 400
    assert "site: Give site once (given 2 times: NORD, SUD)" in twice.content.decode()
    about = client.get(reverse("export_about", args=[kind]), {"bogus": "1"})
    assert about.status_code == 400 and "Not a parameter of this list" in about.json()["bogus"][0]


@pytest.mark.parametrize("kind, takes", EXPORT_FILTERS)
def test_the_readmes_exports_table_names_the_filters_each_export_takes(kind, takes):
    """The README's Exports table, row by row, against the filters the export's 400 lists (the assessments row
    left out `fitted_against_advice`, which the export takes as the API does; found on a walk)."""
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    exports = readme[readme.index("## Exports") :]
    row = next(line for line in exports.splitlines() if line.startswith(f"| `{kind}` |"))
    filters_cell = row.split(" | ")[2]
    named = [word for word in filters_cell.split("`")[1::2] if not word.startswith("/")]
    assert sorted(named) == takes.split(", "), row


def _read_path(source: str) -> str:
    """What a column or an API field reads, one spelling for both: `fitted_capacitor.motor.asset_tag` (the API's)
    and `fitted_capacitor__motor__asset_tag` (a values_list path) alike, a foreign key's id as `..._id`."""
    path = source.replace(".", "__")
    return path.removesuffix("__id") + "_id" if path.endswith("__id") else path


def test_every_export_names_a_field_as_the_api_and_the_import_do():
    """The engineer joins exports: the plan called the governing limit `limit` and its early date
    `early_crossing_p10` where the assessments export said `governing_limit` and `p10_on`, and the API
    `limit_source` and `p10_on`; the API's readings said `outlier_confirmed` where the readings export and the
    import say `confirmed`. [derived] one name per thing: the API's where it has one, the import's where an
    export feeds it."""
    for table, serializer in (
        (READING_COLUMNS, BulkReadingSerializer),
        (ASSESSMENT_COLUMNS, AssessmentSerializer),
        (PLAN_COLUMNS, AssessmentSerializer),
    ):
        api_names = {_read_path(field.source): name for name, field in serializer().fields.items()}
        shared = {
            column.name: api_names[_read_path(column.source)]
            for column in table
            if _read_path(column.source) in api_names
        }
        assert shared == {name: name for name in shared}
    checked = {"id", "supersedes", "confirmed", "limit_source", "limit_fraction", "p10_on", "fitted_capacitor_id"}
    assert checked <= {c.name for c in READING_COLUMNS + ASSESSMENT_COLUMNS + PLAN_COLUMNS}
    assert {c.name for c in PLAN_COLUMNS} <= {c.name for c in ASSESSMENT_COLUMNS}
    assert set(import_columns.READING_COLUMNS) <= {c.name for c in READING_COLUMNS}  # an export imports again


def test_the_plan_the_assessments_and_the_api_agree_under_each_shared_name(client, awkward_fleet):
    """[derived] joined on fitted_capacitor_id (the plan, the assessments export) or on the reading's id (the
    readings export, the API's readings), every column of the same name holds the same value."""
    fitted_capacitor = awkward_fleet[1][0]
    wrong = Reading.objects.filter(fitted_capacitor=fitted_capacitor).latest("taken_at")
    quarterly_readings(  # a correction, confirmed
        fitted_capacitor, wrong.taken_at, [3.1], supersedes=wrong, outlier_confirmed=True, notes="re-read"
    )
    client.force_login(make_user(PLANNER))
    _, content = _download(client, "plan", "csv", {"days": 730})
    plan = {row["fitted_capacitor_id"]: row for row in _parse(content, "csv", PLAN_COLUMNS)}
    client.force_login(engineer := make_user(RELIABILITY_ENGINEER))
    judged = _parse(_download(client, "assessments", "csv")[1], "csv", ASSESSMENT_COLUMNS + LIMIT_COLUMNS)
    assert plan and set(plan) <= {row["fitted_capacitor_id"] for row in judged}
    for row in judged:
        if row["fitted_capacitor_id"] in plan:
            assert {name: row[name] for name in plan[row["fitted_capacitor_id"]]} == plan[row["fitted_capacitor_id"]]
    readings = _parse(_download(client, "readings", "csv")[1], "csv", READING_COLUMNS)
    answered = {r["id"]: r for r in _api(engineer).get(reverse("api_readings"), {"page_size": 5000}).json()["results"]}
    assert len(answered) == len(readings) == 4 * len(AWKWARD) + 1
    for row in readings:
        api_row = answered[row["id"]]
        shared = (set(row) & set(api_row)) - {"taken_at"}  # the same instant, ISO 8601 written two ways
        assert {name: row[name] for name in shared} == {name: api_row[name] for name in shared}
    (correction,) = (row for row in readings if row["supersedes"] is not None)
    assert (correction["supersedes"], correction["confirmed"]) == (wrong.id, True)
    assert {"id", "supersedes", "confirmed", "fitted_capacitor_id", "capacitance_uf", "notes"} <= shared
