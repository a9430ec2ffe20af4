"""Files for people's own tools: CSV that spreadsheets open safely."""

from __future__ import annotations

import csv
import io

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def safe_cell(value) -> str:
    """Text a spreadsheet will not run as a formula (OWASP's CSV-injection advice):
    a cell starting with = + - @ or a control character gets a leading quote,
    unless it is a plain number such as -3.2."""
    text = "" if value is None else str(value)
    if text.startswith(FORMULA_STARTS):
        try:
            float(text)
        except ValueError:
            return "'" + text
    return text


def csv_bytes(header: list[str], rows) -> bytes:
    buffer = io.StringIO(newline="")
    writer = csv.writer(buffer)
    writer.writerow([safe_cell(h) for h in header])
    for row in rows:
        writer.writerow([safe_cell(v) for v in row])
    return buffer.getvalue().encode("utf-8-sig")


class _Echo:
    """A file-like object whose write returns the line, for streaming csv.writer output."""

    def write(self, value):
        return value


def stream_csv(header: list[str], rows):
    """CSV lines one at a time (a byte-order mark first, for spreadsheets), formula-escaped."""
    writer = csv.writer(_Echo())
    yield "\ufeff" + writer.writerow([safe_cell(h) for h in header])
    for row in rows:
        yield writer.writerow([safe_cell(v) for v in row])


PLAN_HEADER = [
    "asset_tag",
    "site",
    "location",
    "role",
    "part_code",
    "rated_uf",
    "risk",
    "replace_by",
    "reason",
    "capacitance_now_uf",
    "latest_verdict",
    "limit",
    "limit_fraction",
    "early_crossing_p10",
    "likely_crossing_p50",
    "late_crossing_p90",
    "low_confidence",
]


def plan_rows(assessments):
    """Rows of the replacement plan, from an iterator of assessments with their joins."""
    for a in assessments:
        installation = a.installation
        yield [
            installation.motor.asset_tag,
            installation.motor.site.code,
            installation.motor.location,
            installation.role,
            installation.part.code,
            installation.part.rated_uf,
            a.risk,
            a.replace_by,
            a.reason,
            round(a.capacitance_now_uf, 3),
            a.latest_verdict,
            a.limit_source,
            round(a.limit_fraction, 4),
            a.p10_on,
            a.p50_on,
            a.p90_on,
            "yes" if a.low_confidence else "no",
        ]


def xlsx_bytes(sheet_title: str, header: list[str], rows) -> bytes:
    """A one-sheet workbook; text cells escaped as in CSV (openpyxl writes '=...' as a formula)."""
    from openpyxl import Workbook

    book = Workbook(write_only=True)
    sheet = book.create_sheet(sheet_title[:31])
    sheet.append(header)
    for row in rows:
        sheet.append([safe_cell(v) if isinstance(v, str) else v for v in row])
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()
