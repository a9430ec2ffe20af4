"""Imports off the request path: limits checked before parsing, every job ends in a final state."""

import datetime as dt
import io
import logging
import time
import zipfile
from unittest import mock

import pytest
from django.db import connection
from django.urls import reverse
from django.utils import timezone
from openpyxl import Workbook

from fleet.imports.files import FileRefused, read_table
from fleet.models import FittedCapacitor, ImportJob, Motor, Reading
from fleet.services import import_checks
from fleet.services.import_jobs import check_job, create_job, read_job, run_job
from tests.factories import make_part, make_site

from .test_imports import HEADER, csv_of, fleet_of, good_rows

pytestmark = pytest.mark.django_db

SHEET_HEAD = (
    b'<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
)


def workbook_with_sheet(sheet_chunks) -> bytes:
    """A real workbook (openpyxl) whose first sheet is replaced by the given XML, streamed into the zip."""
    book = Workbook()
    book.active.append(["a"])
    plain = io.BytesIO()
    book.save(plain)
    source = zipfile.ZipFile(plain)
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            if info.filename == "xl/worksheets/sheet1.xml":
                with target.open(info.filename, "w") as stream:
                    for chunk in sheet_chunks:
                        stream.write(chunk)
            else:
                target.writestr(info, source.read(info.filename))
    return out.getvalue()


def huge_sheet(rows: int, columns: int, dimension: bool = True):
    """Sheet XML of rows x columns numeric cells, generated in chunks (never held whole in memory)."""
    yield SHEET_HEAD
    if dimension:
        yield f'<dimension ref="A1:{chr(64 + columns)}{rows}"/>'.encode()
    yield b"<sheetData>"
    row = b"<row>" + b"<c><v>1</v></c>" * columns + b"</row>"
    block = row * 10_000
    for _ in range(rows // 10_000):
        yield block
    yield row * (rows % 10_000)
    yield b"</sheetData></worksheet>"


def never_parsed(*args, **kwargs):
    raise AssertionError("the workbook was parsed")


def test_a_small_xlsx_that_expands_to_a_million_rows_is_refused_before_parsing():
    """The case of the report: a few hundred KB on disk, 1,000,000 x 10 cells unpacked."""
    content = workbook_with_sheet(huge_sheet(1_000_000, 10))
    assert len(content) < 3 * 1024 * 1024
    started = time.perf_counter()
    with mock.patch("openpyxl.load_workbook", never_parsed), pytest.raises(FileRefused, match="limit") as refused:
        read_table(content, "huge.xlsx")
    print(f"refused in {time.perf_counter() - started:.3f} s: {refused.value}")


def test_the_declared_sheet_dimension_is_checked_before_parsing():
    content = workbook_with_sheet([SHEET_HEAD, b'<dimension ref="A1:J1000000"/><sheetData/></worksheet>'])
    with mock.patch("openpyxl.load_workbook", never_parsed), pytest.raises(FileRefused) as refused:
        read_table(content, "declared.xlsx")
    assert "999,999 rows" in str(refused.value) and "FLEET_IMPORT_MAX_ROWS" in str(refused.value)


def test_the_unpacked_size_is_checked_before_parsing(settings):
    settings.FLEET_IMPORT_MAX_UNPACKED_MB = 1
    content = workbook_with_sheet(huge_sheet(20_000, 10, dimension=False))  # about 3 MB unpacked
    with mock.patch("openpyxl.load_workbook", never_parsed), pytest.raises(FileRefused, match="unpacks to 3 MB"):
        read_table(content, "wide.xlsx")


def test_a_sheet_without_a_dimension_is_still_held_to_the_row_limit_before_parsing(settings):
    settings.FLEET_IMPORT_MAX_ROWS = 100
    content = workbook_with_sheet(huge_sheet(5_000, 3, dimension=False))
    with mock.patch("openpyxl.load_workbook", never_parsed), pytest.raises(FileRefused, match="4,999 rows or more"):
        read_table(content, "undeclared.xlsx")


def test_the_parser_stops_at_the_row_limit_too(settings):
    """Should a sheet's rows escape the count before parsing, reading stops at the limit all the same."""
    settings.FLEET_IMPORT_MAX_ROWS = 100
    content = workbook_with_sheet(huge_sheet(5_000, 3, dimension=False))
    with (
        mock.patch("fleet.imports.files._count_row_tags", return_value=0),
        pytest.raises(FileRefused, match="101 rows"),
    ):
        read_table(content, "undeclared.xlsx")


def test_csv_rows_columns_and_size_have_limits(settings):
    settings.FLEET_IMPORT_MAX_ROWS = 3
    with pytest.raises(FileRefused, match="the limit is 3 rows"):
        read_table(b"a,b\n" + b"1,2\n" * 4, "rows.csv")
    assert len(read_table(b"a,b\n" + b"1,2\n" * 3, "rows.csv")[1]) == 3
    settings.FLEET_IMPORT_MAX_COLUMNS = 4
    with pytest.raises(FileRefused, match="more than 4 columns"):
        read_table(b"a,b,c,d,e\n1,2,3,4,5\n", "wide.csv")
    settings.FLEET_IMPORT_MAX_FILE_MB = 1
    with pytest.raises(FileRefused, match="the limit is 1 MB"):
        read_table(b"a\n" + b"x\n" * 600_000, "big.csv")


def test_a_semicolon_csv_with_decimal_commas_is_read():
    fleet_of(2)
    text = "asset_tag;role;taken_at;capacitance_uf;notes\nIMP-0000;run;2024-03-01 09:00;3,93;cold, wet\n"
    text += "IMP-0001;run;2024-03-01 09:05;3,97;\n"
    header, rows = read_table(text.encode(), "semicolons.csv")
    assert header == ["asset_tag", "role", "taken_at", "capacitance_uf", "notes"]
    job = run_job(create_job(kind="readings", filename="semicolons.csv", content=text.encode(), user=None).id, "all")
    assert job.state == ImportJob.State.DONE and job.imported_rows == 2
    assert sorted(Reading.objects.values_list("capacitance_uf", flat=True)) == [3.93, 3.97]
    assert Reading.objects.get(capacitance_uf=3.93).notes == "cold, wet"


def test_a_duplicated_heading_refuses_the_job_with_a_message_naming_it():
    fleet_of(1)
    header = HEADER + ["capacitance_uf"]
    content = csv_of([row + ["3.9"] for row in good_rows(["IMP-0000"], 2)], header=header)
    job = create_job(kind="readings", filename="twice.csv", content=content, user=None)
    for step in (read_job, check_job):
        job = step(job.id)
        assert job.state == ImportJob.State.REFUSED
        assert "'capacitance_uf' appears twice (columns 5 and 10)" in job.message
    assert run_job(job.id, "good").state == ImportJob.State.REFUSED and not Reading.objects.exists()


def test_a_nul_byte_is_reported_by_row_and_field_and_the_other_rows_go_in():
    fleet_of(2)
    rows = good_rows(["IMP-0000", "IMP-0001"], 2)
    rows[2][-1] = "door\x00stop"
    job = check_job(create_job(kind="readings", filename="nul.csv", content=csv_of(rows), user=None).id)
    assert job.state == ImportJob.State.CHECKED
    assert job.errors == [[4, "notes", "holds a NUL character (byte 0): remove it"]]
    job = run_job(job.id, ImportJob.Mode.GOOD_ROWS)
    assert job.state == ImportJob.State.DONE and Reading.objects.count() == 3
    assert all("\x00" not in notes for notes in Reading.objects.values_list("notes", flat=True))


def test_text_longer_than_its_column_is_reported_not_a_server_error():
    content = b"code,name,time_zone\n" + b"X" * 21 + b",Too long,UTC\nOK,Fine,UTC\n"
    job = check_job(create_job(kind="sites", filename="sites.csv", content=content, user=None).id)
    assert job.errors == [[2, "code", "longer than 20 characters"]] and job.good_rows == 1


def test_an_exception_mid_import_ends_the_job_failed_with_nothing_in(caplog):
    fleet_of(2)
    job = create_job(
        kind="readings", filename="q.csv", content=csv_of(good_rows(["IMP-0000", "IMP-0001"], 3)), user=None
    )
    real_insert = import_checks.insert_readings

    def insert_then_fail(good):
        real_insert(good)
        assert Reading.objects.count() == 6  # the rows are in, inside the transaction
        raise RuntimeError("disk on fire")

    with mock.patch("fleet.services.import_checks.insert_readings", insert_then_fail), caplog.at_level(logging.ERROR):
        job = run_job(job.id, ImportJob.Mode.ALL_OR_NOTHING)
    assert job.state == ImportJob.State.FAILED
    assert "unexpected error (RuntimeError)" in job.message and "Nothing was imported" in job.message
    assert not Reading.objects.exists()
    assert "disk on fire" in caplog.text and "Traceback" in caplog.text


def test_an_exception_in_the_check_ends_the_job_failed(caplog):
    fleet_of(1)
    job = create_job(kind="readings", filename="q.csv", content=csv_of(good_rows(["IMP-0000"], 1)), user=None)
    with mock.patch("fleet.services.import_checks.reading_keys", side_effect=KeyError("surprise")):
        job = check_job(job.id)
    assert job.state == ImportJob.State.FAILED and "(KeyError)" in job.message


def test_the_upload_request_only_stores_the_file_and_queues_the_job(client, technician):
    client.force_login(technician)
    upload = io.BytesIO(b"asset_tag,role,taken_at\nA,run,2024-01-01 09:00\n")
    upload.name = "q.csv"
    with (
        mock.patch("fleet.imports.files.read_table", never_parsed),
        mock.patch("fleet.tasks.read_import.delay") as queued,
        mock.patch("django.db.transaction.on_commit", lambda callback: callback()),
    ):
        response = client.post(reverse("imports"), {"kind": "readings", "file": upload})
    job = ImportJob.objects.get()
    assert response.status_code == 302 and job.state == ImportJob.State.RECEIVED
    queued.assert_called_once_with(job.id)
    page = client.get(reverse("import_detail", args=[job.id])).content.decode()
    assert "Reading the file" in page and 'http-equiv="refresh"' in page


def test_an_unreachable_queue_fails_the_job_instead_of_leaving_it_waiting(technician):
    with (
        mock.patch("fleet.tasks.read_import.delay", side_effect=OSError("connection refused")),
        mock.patch("django.db.transaction.on_commit", lambda callback: callback()),
    ):
        job = create_job(kind="readings", filename="q.csv", content=b"a\n1\n", user=technician)
    job.refresh_from_db()
    assert job.state == ImportJob.State.FAILED and "task queue could not be reached" in job.message


def test_a_job_whose_worker_died_ends_failed_instead_of_checking_for_ever(client, technician, settings):
    job = create_job(kind="readings", filename="q.csv", content=b"a\n1\n", user=technician)
    ImportJob.objects.filter(pk=job.pk).update(state=ImportJob.State.CHECKING)  # a worker took it, then was killed
    client.force_login(technician)
    assert "Checking" in client.get(reverse("import_detail", args=[job.id])).content.decode()
    later = timezone.now() + dt.timedelta(seconds=settings.CELERY_TASK_TIME_LIMIT + 61)
    with mock.patch("django.utils.timezone.now", return_value=later):
        page = client.get(reverse("import_detail", args=[job.id])).content.decode()
    job.refresh_from_db()
    assert job.state == ImportJob.State.FAILED and "worker stopped before finishing" in page


@pytest.mark.django_db(transaction=True)
@pytest.mark.skipif(connection.vendor != "postgresql", reason="terminates a PostgreSQL backend")
def test_losing_the_database_connection_mid_insert_leaves_nothing_half_in():
    """Fault test: a register import writes motors, then their capacitors; our backend is terminated
    from a second connection after the motors are in and before the capacitors."""
    import psycopg
    from django.db.models.query import QuerySet

    make_site(code="PK")
    make_part(code="RUN-8", rated_uf=8.0)
    header = "asset_tag,site_code,application,motor_type,load_type,rated_voltage_v,frequency_hz,poles,output_w,"
    header += "full_load_current_a,rated_speed_rpm,run_part_code,fitted_on\n"
    lines = [f"PK-{i},PK,fan,permanent_split,fan_law,230,50,4,250,1.9,1370,RUN-8,2022-03-01\n" for i in range(50)]
    job = create_job(kind="register", filename="register.csv", content=(header + "".join(lines)).encode(), user=None)
    settings_dict = connection.settings_dict
    real_insert = QuerySet._insert
    killed = []

    def insert_and_lose_the_connection(self, *args, **kwargs):
        if self.model is FittedCapacitor and not killed:
            assert Motor.objects.count() == 50  # the motors are in, inside the transaction
            with connection.cursor() as cursor:
                cursor.execute("SELECT pg_backend_pid()")
                pid = cursor.fetchone()[0]
            with psycopg.connect(
                host=settings_dict["HOST"] or "127.0.0.1",
                port=settings_dict["PORT"] or 5432,
                user=settings_dict["USER"],
                password=settings_dict["PASSWORD"] or None,
                dbname=settings_dict["NAME"],
                autocommit=True,
            ) as other:
                other.execute("SELECT pg_terminate_backend(%s)", [pid])
            killed.append(pid)
        return real_insert(self, *args, **kwargs)

    with mock.patch.object(QuerySet, "_insert", insert_and_lose_the_connection):
        job = run_job(job.id, ImportJob.Mode.ALL_OR_NOTHING)
    assert killed
    assert job.state == ImportJob.State.FAILED, job.message
    assert "database connection" in job.message
    assert Motor.objects.count() == 0 and FittedCapacitor.objects.count() == 0


def test_a_file_in_another_encoding_is_refused_naming_its_line():
    """A Latin-1 file was refused as "not UTF-8 text (byte 118)", a UTF-16 one as "(byte 0)": no line a
    spreadsheet user could find."""
    latin = "asset_tag,role,notes\nFAN-1,run,ok\nFAN-1,run,tamb\u00e9 caliente\n".encode("latin-1")
    with pytest.raises(FileRefused, match=r"not UTF-8 text: line 3, after 'FAN-1,run,tamb', byte 0xE9"):
        read_table(latin, "r.csv")
    with pytest.raises(FileRefused, match=r"UTF-16 text"):
        read_table("asset_tag,role\nFAN-1,run\n".encode("utf-16"), "r.csv")


def test_a_workbook_named_csv_is_named_as_a_workbook():
    """An XLSX saved under a .csv name was refused as "not UTF-8 text: line 1, after 'PK\\x03\\x04...'", which
    sends the user hunting for a wrong letter; it says what the file is and what to name it."""
    import openpyxl

    book = openpyxl.Workbook()
    book.active.append(["code", "name", "time_zone"])
    book.active.append(["PK", "Packhouse", "UTC"])
    packed = io.BytesIO()
    book.save(packed)
    with pytest.raises(FileRefused, match=r"a workbook or another zip file, not CSV text: an XLSX workbook must be"):
        read_table(packed.getvalue(), "sites.csv")


def test_a_binary_file_is_refused_as_not_csv_text():
    """A walk: a binary file of NUL bytes was refused as "column headings but no data rows", which sends the user
    to add rows to a file that is no CSV at all. NUL is valid UTF-8; a NUL in a cell is reported at its row and
    field (the test above), in the headings the file is no CSV text."""
    with pytest.raises(FileRefused, match=r"its headings, holds a NUL character: it is not CSV text"):
        read_table(b"\x00" * 64, "r.csv")
    with pytest.raises(FileRefused, match=r"its headings, holds a NUL character"):
        read_table(b"asset_tag,ro\x00le\nFAN-1,run\n", "r.csv")
    assert read_table(b"asset_tag,role\nFAN-1\x00,run\n", "r.csv")[0] == ["asset_tag", "role"]  # a cell's: its row
