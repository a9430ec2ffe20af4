"""Files for people's own tools: CSV, XLSX and Parquet written from one table description.

A `Table` names its columns (type, unit, meaning) and yields its rows lazily, so every format is
written a chunk at a time: CSV streams line by line, XLSX and Parquet go through a temporary file
(openpyxl's write-only sheet, pyarrow row groups), never the whole export in memory.
Text a spreadsheet could run as a formula is defused: a leading quote in CSV (OWASP's advice),
an explicit text cell in XLSX (no visible quote), plain strings in Parquet (nothing runs there).
"""

from __future__ import annotations

import csv
import datetime as dt
import itertools
import json
import tempfile
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field

from openpyxl import Workbook
from openpyxl.cell import WriteOnlyCell
from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
from openpyxl.styles import Font
from openpyxl.utils import get_column_letter

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r", "'")
TEXT, FLOAT, INT, DATE, DATETIME, BOOL = "text", "float", "int", "date", "datetime", "bool"
CHUNK_ROWS = 5000  # rows per Parquet row group and per batch held in memory


def safe_cell(value) -> str:
    """Text a spreadsheet will not run as a formula (OWASP's CSV-injection advice):
    a cell starting with = + - @ ' or a control character gets a leading quote,
    unless it is a plain number such as -3.2. Strip one leading quote to read it back."""
    text = "" if value is None else str(value)
    if text.startswith(FORMULA_STARTS):
        try:
            float(text)
        except ValueError:
            return "'" + text
    return text


class _Echo:
    """A file-like object whose write returns the line, for streaming csv.writer output."""

    def write(self, value):
        return value


@dataclass(frozen=True)
class Column:
    """One column of an export: its heading (ASCII, unit in the name), type, unit and meaning."""

    name: str
    kind: str = TEXT
    unit: str = ""
    description: str = ""
    source: str = ""  # where a table's query reads it (a values_list path); not written to the file


@dataclass
class Table:
    """An export: a title, its columns, rows as an iterable (read lazily) and what describes it."""

    title: str
    columns: list[Column]
    rows: Iterable[list]
    about: dict = field(default_factory=dict)  # model version, filters, generated at: for the sidecar

    @property
    def header(self) -> list[str]:
        return [c.name for c in self.columns]

    def describe(self) -> dict:
        """The sidecar: what each column holds and in which unit, and what the file was made from."""
        return {
            "title": self.title,
            **self.about,
            "columns": [
                {"name": c.name, "type": c.kind, "unit": c.unit, "description": c.description} for c in self.columns
            ],
            "csv_text_rule": "text beginning with = + - @ or ' carries one extra leading ' in the CSV only",
        }


def csv_bytes(header: list[str], rows) -> bytes:
    """A small CSV of text columns in one piece (the rows an import refused, to fix and send again)."""
    return "".join(stream_csv(Table("rows", [Column(name) for name in header], rows))).encode("utf-8")


def stream_csv(table: Table) -> Iterator[str]:
    """CSV lines one at a time (a byte-order mark first, for spreadsheets), formula-escaped."""
    writer = csv.writer(_Echo())
    yield "\ufeff" + writer.writerow([safe_cell(h) for h in table.header])
    for row in table.rows:
        yield writer.writerow([_csv_value(v) for v in row])


def _csv_value(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dt.datetime):
        return value.isoformat()
    if isinstance(value, str):
        return safe_cell(value)
    return "" if value is None else value


XLSX_WIDTHS = {DATE: 12, DATETIME: 20, FLOAT: 12, INT: 10, BOOL: 8}


def xlsx_file(table: Table):
    """A workbook in a temporary file: typed cells, frozen header row, filters, column widths,
    text as text (a formula-like value stays a visible '=...' string), an "about" sheet with units.
    Returns the open file, positioned at its start."""
    book = Workbook(write_only=True)
    sheet = book.create_sheet(table.title[:31])
    for index, column in enumerate(table.columns, start=1):
        width = XLSX_WIDTHS.get(column.kind, min(max(len(column.name) + 2, 14), 50))
        sheet.column_dimensions[get_column_letter(index)].width = max(width, len(column.name) + 2)
    sheet.freeze_panes = "A2"
    bold = Font(bold=True)
    sheet.append([_xlsx_cell(sheet, c.name, bold) for c in table.columns])
    rows = 0
    for row in table.rows:
        sheet.append([_xlsx_value(sheet, value) for value in row])
        rows += 1
    sheet.auto_filter.ref = f"A1:{get_column_letter(len(table.columns))}{rows + 1}"
    about = book.create_sheet("about")

    def text_row(values, font=None):
        about.append([_xlsx_cell(about, str(v), font) for v in values])

    for key, value in table.describe().items():
        if key != "columns":
            text_row([key, value if isinstance(value, str) else json.dumps(value, ensure_ascii=False)])
    about.append([])
    text_row(["column", "type", "unit", "description"], bold)
    for c in table.columns:
        text_row([c.name, c.kind, c.unit, c.description])
    handle = tempfile.TemporaryFile()  # noqa: SIM115 - returned open; the response closes it
    book.save(handle)
    handle.seek(0)
    return handle


def _xlsx_cell(sheet, value, font=None):
    """A header or "about" cell: text kept as text, in bold if asked."""
    cell = WriteOnlyCell(sheet, value=ILLEGAL_CHARACTERS_RE.sub("\ufffd", value))
    cell.data_type = "s"
    if font is not None:
        cell.font = font
    return cell


def _xlsx_value(sheet, value):
    """A data cell: numbers, dates and booleans as openpyxl types them (dates formatted), date-times
    in UTC without a zone, text as text; only text openpyxl would take for a formula needs a cell."""
    if isinstance(value, str):
        value = ILLEGAL_CHARACTERS_RE.sub("\ufffd", value)
        if value.startswith("="):
            cell = WriteOnlyCell(sheet, value=value)
            cell.data_type = "s"
            return cell
    elif isinstance(value, dt.datetime):
        return value.astimezone(dt.UTC).replace(tzinfo=None)
    return value


def parquet_file(table: Table):
    """A Parquet file in a temporary file, written in row groups of CHUNK_ROWS; each field carries
    its unit and meaning, the file its sidecar facts. Returns the open file at its start."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    types = {TEXT: pa.string(), FLOAT: pa.float64(), INT: pa.int64(), DATE: pa.date32(), BOOL: pa.bool_()}
    types[DATETIME] = pa.timestamp("us", tz="UTC")
    schema = pa.schema(
        [
            pa.field(c.name, types[c.kind], metadata={"unit": c.unit, "description": c.description})
            for c in table.columns
        ],
        metadata={"fleet": json.dumps({k: v for k, v in table.describe().items() if k != "columns"}, default=str)},
    )
    handle = tempfile.TemporaryFile()  # noqa: SIM115 - returned open; the response closes it
    with pq.ParquetWriter(handle, schema) as writer:
        rows = iter(table.rows)
        while batch := list(itertools.islice(rows, CHUNK_ROWS)):
            arrays = [pa.array(values, type=f.type) for values, f in zip(zip(*batch, strict=True), schema, strict=True)]
            writer.write_table(pa.table(arrays, schema=schema))
    handle.seek(0)
    return handle
