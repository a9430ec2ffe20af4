"""Damaged or over-long import files: each is refused in words, as a whole, on the page, in the job and at the
command line; never a traceback, a job failed on "an unexpected error", or a server error."""

import csv
import io
import zipfile

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError
from django.urls import reverse
from openpyxl import Workbook

from fleet.imports.files import FileRefused, read_table
from fleet.models import ImportJob
from fleet.services.import_jobs import check_job, create_job, read_job

pytestmark = pytest.mark.django_db

READINGS_HEADER = "asset_tag,role,taken_at,method,capacitance_uf"
FIELD_LIMIT = csv.field_size_limit()  # 131,072 characters: Python's csv module's default


def long_heading_csv() -> bytes:
    return (READINGS_HEADER + "," + "n" * 140_000 + "\nM-1,run,2026-01-05 09:00,meter,3.9,x\n").encode()


def readings_workbook(sheet_xml=None, leave_out: str = "") -> bytes:
    """A readings workbook (openpyxl) with its first sheet's XML changed by `sheet_xml`, or a part left out."""
    book = Workbook()
    book.active.append(READINGS_HEADER.split(","))
    book.active.append(["M-1", "run", "2026-01-05 09:00", "meter", 3.9])
    plain = io.BytesIO()
    book.save(plain)
    source = zipfile.ZipFile(plain)
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            if info.filename == leave_out:
                continue
            data = source.read(info.filename)
            if info.filename == "xl/worksheets/sheet1.xml" and sheet_xml:
                data = sheet_xml(data)
            target.writestr(info, data)
    return out.getvalue()


def cut_off(xml: bytes) -> bytes:
    return xml[: xml.index(b"</sheetData>") - 20]


def undefined_entity(xml: bytes) -> bytes:
    return xml.replace(
        b"</sheetData>", b'<row r="3"><c r="A3" t="inlineStr"><is><t>&nbsp;</t></is></c></row></sheetData>'
    )


def missing_shared_string(xml: bytes) -> bytes:
    return xml.replace(b"</sheetData>", b'<row r="3"><c r="A3" t="s"><v>99999</v></c></row></sheetData>')


def number_that_is_not(xml: bytes) -> bytes:
    return xml.replace(b"</sheetData>", b'<row r="3"><c r="A3"><v>abc</v></c></row></sheetData>')


def test_a_csv_heading_longer_than_a_field_may_be_is_refused_naming_the_length():
    """A heading line with one field of 140,000 characters met the CSV reader outside its error handling: a
    traceback at the command line, a job failed on "an unexpected error" on the page ([derived]: Python's csv
    module refuses a field over csv.field_size_limit(), 131,072 characters by default)."""
    with pytest.raises(FileRefused) as refused:
        read_table(long_heading_csv(), "long.csv")
    assert f"line 1: a heading is longer than {FIELD_LIMIT:,} characters" in str(refused.value)
    job = read_job(create_job(kind="readings", filename="long.csv", content=long_heading_csv(), user=None).id)
    assert job.state == ImportJob.State.REFUSED and "a heading is longer than" in job.message


def test_a_data_cell_longer_than_a_field_may_be_is_named_as_such_not_as_a_file_cut_off():
    """A cell of 140,000 characters was refused as "the file may be cut off inside a quoted field", which sent
    the user looking for a quote that is not there ([derived]: the line alone is longer than the field limit).
    A quoted field that runs on over many short lines still names the quote."""
    for cell in ("x" * 140_000, '"' + "x" * 140_000 + '"'):
        with pytest.raises(FileRefused) as refused:
            read_table(f"{READINGS_HEADER}\nM-1,run,2026-01-05 09:00,meter,{cell}\n".encode(), "cell.csv")
        message = str(refused.value)
        assert f"line 2: a field is longer than {FIELD_LIMIT:,} characters" in message
        assert "cut off" not in message
    runs_on = f'{READINGS_HEADER}\nM-1,run,2026-01-05 09:00,meter,"3.9\n' + "more notes\n" * 20_000
    with pytest.raises(FileRefused, match="a quoted field runs on over line breaks.*never closed"):
        read_table(runs_on.encode(), "open.csv")


@pytest.mark.parametrize(
    ("damage", "words"),
    [
        (cut_off, "its XML is cut off or malformed: no element found"),
        (undefined_entity, "its XML is cut off or malformed: undefined entity"),
        (missing_shared_string, "a cell refers to a shared text the workbook does not hold"),
        (number_that_is_not, "a row or cell cannot be read"),
    ],
)
def test_a_workbook_whose_sheet_is_damaged_is_refused_in_words(damage, words):
    """openpyxl's read-only mode parses a sheet as its rows are read, so a sheet cut off, holding an entity XML
    does not define, or pointing at shared string 99999 of a workbook with a few raised ParseError or
    IndexError past the guard around load_workbook: the job failed on "an unexpected error" ([pub] XML 1.0,
    4.6 Predefined Entities: five, nbsp not among them; [pub] ECMA-376 Part 1 (SpreadsheetML): a cell of type
    t="s" holds an index into the shared string table)."""
    content = readings_workbook(damage)
    with pytest.raises(FileRefused) as refused:
        read_table(content, "damaged.xlsx")
    assert str(refused.value).startswith("The workbook cannot be read: its sheet is damaged (")
    assert words in str(refused.value)
    job = read_job(create_job(kind="readings", filename="damaged.xlsx", content=content, user=None).id)
    assert job.state == ImportJob.State.REFUSED and words in job.message


def test_a_workbook_with_no_sheet_part_says_so_in_plain_words():
    """A workbook whose sheet part is missing was refused as "list index out of range" ([pub] ECMA-376 Part 2,
    Open Packaging Conventions: each sheet is a part of its own in the zip; this one names a part it lacks)."""
    with pytest.raises(FileRefused) as refused:
        read_table(readings_workbook(leave_out="xl/worksheets/sheet1.xml"), "empty.xlsx")
    assert "it holds no sheet" in str(refused.value) and "index" not in str(refused.value)


def test_a_damaged_file_is_refused_at_the_command_line_without_a_traceback(tmp_path):
    """`manage.py import` met the same errors as a traceback ([derived]: the command refuses what the page
    refuses, and exits non-zero)."""
    for name, content in (("long.csv", long_heading_csv()), ("damaged.xlsx", readings_workbook(cut_off))):
        path = tmp_path / name
        path.write_bytes(content)
        with pytest.raises(CommandError, match=f"{name}: refused. The "):
            call_command("import", "readings", str(path), stdout=io.StringIO())


def test_the_rows_to_fix_of_a_failed_job_are_a_message_not_a_server_error(client, technician):
    """The rows-to-fix download read a failed job's file again in the request and met the error that failed it:
    a 500 ([derived]: a job that failed before its rows were checked has no rows to fix; it answers as a refused
    file does, with its message)."""
    job = create_job(kind="readings", filename="damaged.xlsx", content=readings_workbook(cut_off), user=technician)
    ImportJob.objects.filter(pk=job.pk).update(
        state=ImportJob.State.FAILED, message="The import stopped on an unexpected error (ParseError)."
    )
    client.force_login(technician)
    response = client.get(reverse("import_rejected", args=[job.id]), follow=True)
    assert response.status_code == 200
    assert "There are no rows to download: The import stopped on an unexpected error" in response.content.decode()
    refused = check_job(job.id)  # checked again, the file is refused in words
    assert refused.state == ImportJob.State.REFUSED and "its sheet is damaged" in refused.message


@pytest.mark.parametrize("cell", ["5\x000", "x" * 10_000])
def test_a_parts_file_whose_every_row_is_refused_at_a_cell_is_reported_not_a_traceback(tmp_path, cell):
    """A NUL or an over-long cell refuses its row before the catalogue's checks: with no row left to check, the
    checks of the part's rating (its marked range) still run on none and the report names the row and field."""
    header = "code,rated_uf,tolerance_minus_pct,tolerance_plus_pct,rated_voltage_v,dielectric,frequency_hz,description"
    path = tmp_path / "parts.csv"
    path.write_text(f"{header}\nRUN-NEW-1,5,5,5,450,film,50,{cell}\n", encoding="utf-8")
    report = io.StringIO()
    with pytest.raises(CommandError, match="nothing was imported"):
        call_command("import", "parts", str(path), stdout=report)
    assert "row 2, description:" in report.getvalue()
