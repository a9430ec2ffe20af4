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
