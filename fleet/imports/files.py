"""Reading an import file within its limits: CSV (delimiter found from the header line) or
XLSX (first sheet, sizes checked before parsing). Bytes in, headings and rows of text out; no database."""

from __future__ import annotations

import csv
import datetime as dt
import functools
import io
import itertools
import re
import zipfile
import zlib
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
from django.conf import settings
from pyarrow import csv as arrow_csv

from fleet.exports import unguarded_cell


class TextColumns(Sequence):
    """A file's data rows held as text columns (pyarrow), as the fast CSV reader leaves them.

    Reads like the list of rows the exact reader gives (`len`, `rows[i]` is a list of text), so a
    report can quote a row as uploaded; `column(j)` gives a whole column at once, without rows;
    `numbers` holds each row's number in the file (`row_numbers`).
    """

    def __init__(self, columns: list[pa.Array], numbers: np.ndarray):
        self.columns = columns
        self.numbers = numbers

    def __len__(self) -> int:
        return len(self.columns[0]) if self.columns else 0

    def __getitem__(self, index: int) -> list[str]:
        if not -len(self) <= index < len(self):
            raise IndexError(index)
        return [column[index].as_py() for column in self.columns]

    def column(self, position: int) -> pd.Series:
        return pd.Series(self.columns[position], dtype=str)


class NumberedRows(list):
    """A file's data rows as lists of text (the exact CSV reader's and the workbook's), with each row's
    number in the file (`row_numbers`) and a workbook's cells that hold a formula with no saved value
    (`unsaved_formulas`: (row index, column index); the cell's text is the formula's)."""

    def __init__(self, rows: list[list[str]], numbers, unsaved_formulas=frozenset()):
        super().__init__(rows)
        self.numbers = np.asarray(numbers, np.int64)
        self.unsaved_formulas = frozenset(unsaved_formulas)


def row_numbers(rows) -> np.ndarray:
    """Each data row's number as the file shows it: a CSV's line where the row starts (the headings on
    line 1; blank lines and line breaks inside quoted fields count), an XLSX sheet's row. A plain list
    of rows (no file) is numbered 2, 3, ... under its headings."""
    numbers = getattr(rows, "numbers", None)
    return np.arange(len(rows), dtype=np.int64) + 2 if numbers is None else numbers


class FileRefused(Exception):
    """The file as a whole cannot be read (cut off, wrong format, no header)."""


@dataclass(frozen=True)
class Limits:
    """What a file may hold; checked before it is parsed (settings FLEET_IMPORT_MAX_*)."""

    file_bytes: int
    unpacked_bytes: int
    rows: int
    columns: int

    @classmethod
    def from_settings(cls) -> Limits:
        return cls(
            file_bytes=settings.FLEET_IMPORT_MAX_FILE_MB * 1024 * 1024,
            unpacked_bytes=settings.FLEET_IMPORT_MAX_UNPACKED_MB * 1024 * 1024,
            rows=settings.FLEET_IMPORT_MAX_ROWS,
            columns=settings.FLEET_IMPORT_MAX_COLUMNS,
        )

    def too_many_rows(self, rows: int) -> FileRefused:
        return FileRefused(
            f"The file has {rows:,} rows or more; the limit is {self.rows:,} rows (FLEET_IMPORT_MAX_ROWS). "
            "Split it into smaller files."
        )

    def too_many_columns(self) -> FileRefused:
        return FileRefused(
            f"The file has more than {self.columns} columns, the limit (FLEET_IMPORT_MAX_COLUMNS). "
            "Remove the columns that are not imported."
        )


def read_table(content: bytes, filename: str) -> tuple[list[str], NumberedRows | TextColumns]:
    """Header and rows as text, within the limits, which are checked before parsing; blank rows left
    out, each row numbered as the file shows it (`row_numbers`).

    A ragged row (a file cut off mid-row) or a heading given twice refuses the file.
    """
    limits = Limits.from_settings()
    if len(content) > limits.file_bytes:
        raise FileRefused(
            f"The file is {len(content) / 2**20:.1f} MB; the limit is {settings.FLEET_IMPORT_MAX_FILE_MB} MB "
            "(FLEET_IMPORT_MAX_FILE_MB). Split it into smaller files."
        )
    if filename.lower().endswith(".xlsx"):
        header, body = _read_xlsx(content, limits)
    else:
        # NUL is valid UTF-8, and a cell holding one is reported at its row and field; headings holding one
        # are no CSV text (a UTF-16 file or a zip is named as such by `_not_utf8`).
        named_apart = content[:2] in (b"\xff\xfe", b"\xfe\xff") or content[:4] == b"PK\x03\x04"
        if b"\x00" in content.split(b"\n", 1)[0] and not named_apart:
            raise FileRefused(
                "The file's first line, its headings, holds a NUL character: it is not CSV text but a binary file, "
                'or text saved as UTF-16 ("Unicode text"). Save it as CSV UTF-8.'
            )
        header, body = _read_csv(content, limits)
    _refuse_repeated_headings(header)
    if not len(body):
        raise FileRefused(
            "The file has column headings but no data rows, so there is nothing to import: "
            "add the rows under the headings."
        )
    return header, body


def _not_utf8(content: bytes, start: int) -> str:
    """Where a file stops being UTF-8, in words a spreadsheet user can find: its line and the
    character there (a UTF-16 file, as some spreadsheets save "Unicode text", is named as such)."""
    if content[:2] in (b"\xff\xfe", b"\xfe\xff"):
        return 'The file is UTF-16 text ("Unicode text"). Save it as CSV UTF-8.'
    if content[:4] == b"PK\x03\x04":  # a zip: an XLSX workbook named .csv (or another packed file)
        return "The file is a workbook or another zip file, not CSV text: an XLSX workbook must be named .xlsx."
    line = content.count(b"\n", 0, start) + 1
    row_start = content.rfind(b"\n", 0, start) + 1
    before = content[row_start:start].decode("utf-8", "replace")[-20:]
    return (
        f"The file is not UTF-8 text: line {line}, after {before!r}, byte 0x{content[start]:02X} "
        "(a letter saved in another encoding). Save it as CSV UTF-8."
    )


def csv_delimiter(first_line: str) -> str:
    """Comma, semicolon (where the decimal mark is a comma) or tab: whichever the header line holds most of."""
    return max((",", ";", "\t"), key=first_line.count)


def _read_csv(content: bytes, limits: Limits) -> tuple[list[str], NumberedRows | TextColumns]:
    try:
        text = content.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise FileRefused(_not_utf8(content, error.start)) from error
    end_of_header = text.find("\n")
    delimiter = csv_delimiter(text[: end_of_header if end_of_header >= 0 else len(text)])
    fast = _read_csv_columns(content, text, delimiter, limits)
    if fast is not None:
        header, body = fast
        body = TextColumns([unguarded_cell(column) for column in body.columns], body.numbers)
    else:
        header, body = _read_csv_rows(text, delimiter, limits)
        body = NumberedRows([[unguarded_cell(cell) for cell in row] for row in body], body.numbers)
    # The exports' guard against formulas (a leading quote) comes off, so an export imported again is what it wrote.
    return [unguarded_cell(heading) for heading in header], body


# Cells that may be blank to Python's str.strip (a superset of its whitespace, for pyarrow's regular expressions).
_MAYBE_BLANK = r"^[\s\x{1c}-\x{1f}\x{85}\x{a0}\x{1680}\x{2000}-\x{200a}\x{2028}\x{2029}\x{202f}\x{205f}\x{3000}]*$"
# A quoted field (one starting at the start of a line or after a delimiter, `D`) whose closing quote is
# followed by anything but a delimiter or a line end, or that the file ends inside: Python's strict reader
# refuses both, pyarrow's does not. It may also match where the file is fine (a quote inside a quoted field
# after `D`): that only sends the file the slow, exact way.
_LOOSE_QUOTES = r'(?:\A|(?<=[D\r\n]))"(?:[^"]|"")*+(?:"(?=[^D\r\n"])|\Z)'


def _read_csv_columns(
    content: bytes, text: str, delimiter: str, limits: Limits
) -> tuple[list[str], TextColumns] | None:
    """The file parsed by pyarrow into text columns: the same header and cells as `_read_csv_rows`, at a
    fraction of the cost. None when the file needs the exact reader: rows of other widths, blank-looking
    lines, fields too long for it, or loose quotes (the exact reader names what is wrong, by row)."""
    if '"' in text and re.search(_LOOSE_QUOTES.replace("D", re.escape(delimiter)), text):
        return None
    try:
        first = next(csv.reader(io.StringIO(text[:1_000_000], newline=""), delimiter=delimiter), [])
    except csv.Error as error:  # a heading too long for the reader
        raise FileRefused(_csv_error_words(error, 1, delimiter, text)) from error
    if len(first) > limits.columns:
        raise limits.too_many_columns()
    try:
        table = arrow_csv.read_csv(
            io.BytesIO(content.removeprefix(b"\xef\xbb\xbf")),
            read_options=arrow_csv.ReadOptions(autogenerate_column_names=True, use_threads=False),
            # Blank lines are kept as rows (of empty cells), so that each row's line can be counted.
            parse_options=arrow_csv.ParseOptions(
                delimiter=delimiter, newlines_in_values=True, ignore_empty_lines=False
            ),
            convert_options=arrow_csv.ConvertOptions(
                column_types={f"f{i}": pa.string() for i in range(limits.columns + 1)},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )
    except (pa.ArrowInvalid, UnicodeDecodeError):
        return None
    if table.num_columns > limits.columns:
        raise limits.too_many_columns()
    columns = [table.column(i).combine_chunks().cast(pa.string()) for i in range(table.num_columns)]
    if not columns or max(pc.max(pc.utf8_length(c)).as_py() or 0 for c in columns) > csv.field_size_limit():
        return None
    lines = np.ones(len(columns[0]), np.int64)  # the lines each record spans
    if '"' in text:  # a quoted field may hold line breaks
        for column in columns:
            lines += pc.count_substring(column, "\n").to_numpy(zero_copy_only=False)
    starts = np.cumsum(lines) - lines + 1  # the line each record starts on
    maybe_blank = functools.reduce(pc.and_, [pc.match_substring_regex(c, _MAYBE_BLANK) for c in columns])
    if pc.any(maybe_blank).as_py():  # rare: the exact test on those rows only
        candidates = np.flatnonzero(maybe_blank.to_numpy(zero_copy_only=False))
        cells = [c.take(candidates).to_pylist() for c in columns]
        blank = np.zeros(len(columns[0]), bool)
        blank[candidates] = [not "".join(row).strip() for row in zip(*cells, strict=True)]
        columns = [c.filter(pa.array(~blank)) for c in columns]
        starts = starts[~blank]
    if not len(columns[0]):
        raise FileRefused("The file is empty.")
    if len(columns[0]) - 1 > limits.rows:
        raise limits.too_many_rows(min(len(columns[0]) - 1, limits.rows + 1))
    return [c[0].as_py().strip() for c in columns], TextColumns([c.slice(1) for c in columns], starts[1:])


def _read_csv_rows(text: str, delimiter: str, limits: Limits) -> tuple[list[str], NumberedRows]:
    """The exact reader, row by row: what the fast one leaves to it, with its messages."""
    rows, starts = [], []
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    try:
        for row in reader:
            start = reader.line_num - sum(cell.count("\n") for cell in row)  # the line the row starts on
            if not "".join(row).strip():
                continue
            if not rows and len(row) > limits.columns:
                raise limits.too_many_columns()
            rows.append(row)
            starts.append(start)
            if len(rows) > limits.rows + 1:
                raise limits.too_many_rows(len(rows) - 1)
    except csv.Error as error:
        raise FileRefused(_csv_error_words(error, reader.line_num, delimiter, text)) from error
    if not rows:
        raise FileRefused("The file is empty.")
    header, body = [h.strip() for h in rows[0]], NumberedRows(rows[1:], starts[1:])
    for number, row in zip(body.numbers, body, strict=True):
        if len(row) != len(header):
            raise FileRefused(
                f"Row {number} has {len(row)} fields where the header has {len(header)}: the file looks cut off "
                f"or a field holds an unquoted {'semicolon' if delimiter == ';' else 'comma'}. Nothing was imported."
            )
    return header, body


def _csv_error_words(error: csv.Error, line: int, delimiter: str, text: str) -> str:
    """Python's CSV error, with the line it stopped at and what to do about it."""
    separator = {",": "comma", ";": "semicolon", "\t": "tab"}[delimiter]
    if "expected after" in str(error):
        what = (
            f'a field in quotes is closed by " and followed by other text instead of a {separator}: write a quote '
            'inside a quoted field as two quotes ("")'
        )
    elif "field limit" in str(error) and _line_length(text, line) > csv.field_size_limit():
        # The line alone is longer than a field may be: a field too long, not a quote left open over lines.
        where = "a heading" if line == 1 else "a field"
        what = (
            f"{where} is longer than {csv.field_size_limit():,} characters, the most a field may hold: "
            "shorten it, or take the column out of the file"
        )
    elif "field limit" in str(error):
        what = (
            f"a quoted field runs on over line breaks past {csv.field_size_limit():,} characters, the most a field "
            "may hold: the file may be cut off inside a quoted field, or a quote opened in it is never closed"
        )
    else:
        what = f"{error}; the file may be cut off inside a quoted field"
    return f"The CSV cannot be read at line {line}: {what}. Nothing was imported."


def _line_length(text: str, line: int) -> int:
    """The length of the file's line `line` (counted from 1, as the CSV reader counts them; 0 past the end)."""
    start = 0
    for _ in range(line - 1):
        start = text.find("\n", start) + 1
        if not start:
            return 0
    end = text.find("\n", start)
    return (end if end >= 0 else len(text)) - start


def _refuse_repeated_headings(header: list[str]) -> None:
    seen: dict[str, int] = {}
    for number, heading in enumerate(header, start=1):
        key = heading.strip().lower()
        if key and key in seen:
            raise FileRefused(
                f"The heading {heading!r} appears twice (columns {seen[key]} and {number}): "
                "keep one of them or rename the other."
            )
        seen.setdefault(key, number)


_DIMENSION = re.compile(rb"<(?:\w+:)?dimension\s+ref=\"([A-Za-z0-9:$]+)\"")
_RELATIONSHIP_ID = "{http://schemas.openxmlformats.org/officeDocument/2006/relationships}id"


def _check_workbook_size(content: bytes, limits: Limits) -> None:
    """Refuse a workbook by its zip directory and its first sheet's declared dimension, before parsing it."""
    try:
        archive = zipfile.ZipFile(io.BytesIO(content))
    except zipfile.BadZipFile as error:
        raise FileRefused(
            "The workbook cannot be read: it is not an XLSX file, or it is cut off (not a whole zip archive)."
        ) from error
    unpacked = sum(info.file_size for info in archive.infolist())
    if unpacked > limits.unpacked_bytes:
        raise FileRefused(
            f"The workbook unpacks to {unpacked / 2**20:,.0f} MB; the limit is "
            f"{settings.FLEET_IMPORT_MAX_UNPACKED_MB} MB (FLEET_IMPORT_MAX_UNPACKED_MB). "
            "Split it, or save it as CSV."
        )
    sheet = _first_sheet_path(archive)
    if sheet is None:
        return
    try:
        with archive.open(sheet) as stream:
            head = stream.read(64 * 1024)
        rows = _count_row_tags(archive, sheet, stop_after=limits.rows + 1)
    except (zipfile.BadZipFile, zlib.error, EOFError) as error:  # a corrupt member is found as it is unpacked
        raise FileRefused(_damaged_sheet_words(error)) from error
    found = _DIMENSION.search(head)
    if found:
        from openpyxl.utils.cell import range_boundaries

        try:
            min_col, min_row, max_col, max_row = range_boundaries(found.group(1).decode().replace("$", ""))
        except (ValueError, TypeError):
            min_col = min_row = max_col = max_row = None
        if max_row is not None and max_row - (min_row or 1) > limits.rows:
            raise limits.too_many_rows(max_row - (min_row or 1))
        if max_col is not None and max_col - (min_col or 1) + 1 > limits.columns:
            raise limits.too_many_columns()
    if rows > limits.rows + 1:
        raise limits.too_many_rows(rows - 1)


_ROW_TAG = re.compile(rb"<(?:\w+:)?row[\s/>]")
_FORMULA_TAG = re.compile(rb"<(?:\w+:)?f[\s/>]")


def _has_formulas(archive: zipfile.ZipFile, sheet: str | None) -> bool:
    """Whether the sheet's XML holds a formula (`<f>`), read as a stream; True when the sheet is not found."""
    if sheet is None:
        return True
    carried = b""
    with archive.open(sheet) as stream:
        while chunk := stream.read(1024 * 1024):
            text = carried + chunk
            if _FORMULA_TAG.search(text):
                return True
            carried = text[-16:]
    return False


def _count_row_tags(archive: zipfile.ZipFile, sheet: str, stop_after: int) -> int:
    """Rows in the sheet's XML, counted on the unpacked stream (a dimension may be missing or wrong).

    A tag that straddles two chunks is counted once: each pass counts the tags that start
    before the last 32 bytes and carries those bytes into the next pass.
    """
    count, carried = 0, b""
    with archive.open(sheet) as stream:
        while chunk := stream.read(1024 * 1024):
            text = carried + chunk
            cut = max(len(text) - 32, 0)
            count += sum(1 for found in _ROW_TAG.finditer(text) if found.start() < cut)
            carried = text[cut:]
            if count > stop_after:
                return count
    return count + len(_ROW_TAG.findall(carried))


def _first_sheet_path(archive: zipfile.ZipFile) -> str | None:
    """The zip member of the workbook's first sheet, from workbook.xml and its relationships."""
    from xml.etree import ElementTree

    try:
        for name in ("xl/workbook.xml", "xl/_rels/workbook.xml.rels"):
            if archive.getinfo(name).file_size > 1024 * 1024:
                return None
        book = ElementTree.fromstring(archive.read("xl/workbook.xml"))
        relations = ElementTree.fromstring(archive.read("xl/_rels/workbook.xml.rels"))
    except (KeyError, ElementTree.ParseError):
        return None
    first = next((e for e in book.iter() if e.tag.endswith("}sheet")), None)
    if first is None:
        return None
    target = next(
        (e.get("Target", "") for e in relations if e.get("Id") == first.get(_RELATIONSHIP_ID)),
        "",
    )
    path = target.lstrip("/") if target.startswith("/") else f"xl/{target}"
    return path if path in archive.namelist() else None


# A date-time cell whose format ends in a literal UTC or Z (as the exports write them) holds a UTC time.
_UTC_FORMAT = re.compile(r'(?:"\s*(?:UTC|Z)"|\\Z)$')


def date_text(value: dt.date, number_format: str) -> str:
    """A date or date-time cell as a person types it and the import reads it back (the rows to fix carry it),
    never Python's 2025-03-01T00:00:00: a date cell at midnight as 2025-03-01; a date-time as 2025-03-01 09:30
    (its seconds, and their fraction, where it has them), with +00:00 where its format ends in UTC or Z (as the
    exports write a UTC time)."""
    from openpyxl.styles.numbers import is_datetime

    if not isinstance(value, dt.datetime):
        return value.isoformat()
    if value.time() == dt.time() and is_datetime(number_format) != "datetime":
        return value.date().isoformat()
    text = f"{value:%Y-%m-%d %H:%M}"
    if value.second or value.microsecond:
        text += f":{value:%S}" + f".{value.microsecond:06d}".rstrip("0").rstrip(".")
    return text + ("+00:00" if _UTC_FORMAT.search(number_format) else "")


def _unsaved_formula(cell, formula_cell) -> str:
    """The formula's text ("=1+1") of a cell that holds a formula but no saved value (a workbook written by a
    program that does not compute formulas), else ""."""
    if getattr(cell, "value", None) is not None or getattr(formula_cell, "data_type", None) != "f":
        return ""
    formula = getattr(formula_cell, "value", None)
    formula = getattr(formula, "text", formula)  # an array formula
    return formula if isinstance(formula, str) and formula else ""


def _undamaged(rows):
    """The rows of a read-only sheet; whatever its parser meets in a damaged sheet refuses the file in words."""
    try:
        yield from rows
    except Exception as error:  # noqa: BLE001 - the parser's errors only (the loop's own are not thrown in here)
        raise FileRefused(_damaged_sheet_words(error)) from error


def _damaged_sheet_words(error: Exception) -> str:
    """What is wrong with a sheet the parser could not read to its end, in words a spreadsheet user can act on."""
    from xml.etree.ElementTree import ParseError

    if isinstance(error, ParseError):
        what = f"its XML is cut off or malformed: {error}"
    elif isinstance(error, IndexError):
        what = "a cell refers to a shared text the workbook does not hold"
    elif isinstance(error, zipfile.BadZipFile | zlib.error | EOFError):
        what = f"its packed data is corrupt: {error}"
    else:
        what = f"a row or cell cannot be read: {error}"
    return (
        f"The workbook cannot be read: its sheet is damaged ({what}). Nothing was imported. "
        "Open it in the spreadsheet and save it again, or save it as CSV."
    )


def _read_xlsx(content: bytes, limits: Limits) -> tuple[list[str], NumberedRows]:
    _check_workbook_size(content, limits)
    from openpyxl import load_workbook

    try:
        sheets = load_workbook(io.BytesIO(content), read_only=True, data_only=True).worksheets
        if not sheets:
            raise FileRefused(
                "The workbook cannot be read: it holds no sheet (its sheets are missing from the file, "
                "which may not have been saved whole). Save it again, or save it as CSV."
            )
        sheet = sheets[0]
        # Formulas are read a second time, as formulas, only from a sheet that holds some: a formula whose value
        # was never saved reads as an empty cell, which must not pass for one left blank.
        archive = zipfile.ZipFile(io.BytesIO(content))
        formulas = (
            load_workbook(io.BytesIO(content), read_only=True, data_only=False).worksheets[0]
            if _has_formulas(archive, _first_sheet_path(archive))
            else None
        )
    except FileRefused:
        raise
    except Exception as error:  # noqa: BLE001 - any unreadable workbook is refused the same way
        raise FileRefused(f"The workbook cannot be read: {error}") from error

    def text(cell):
        value = getattr(cell, "value", None)
        if value is None:
            return ""
        if isinstance(value, dt.datetime | dt.date):
            return date_text(value, cell.number_format or "")
        return str(value)

    header: list[str] = []
    body: list[list[str]] = []
    numbers: list[int] = []
    unsaved: set[tuple[int, int]] = set()
    width = 0
    # A read-only sheet is parsed as its rows are read: a damaged one fails here, not in load_workbook.
    rows = _undamaged(sheet.iter_rows(max_col=limits.columns + 1))
    formula_rows = (
        _undamaged(formulas.iter_rows(max_col=limits.columns + 1)) if formulas is not None else itertools.repeat(None)
    )
    # Read-only sheets yield every row from the first, missing ones as empty: the count is the sheet's row.
    for number, (cells, formula_cells) in enumerate(zip(rows, formula_rows, strict=False), start=1):
        row = [text(c) for c in cells]
        for j, (cell, formula_cell) in enumerate(
            zip(cells, formula_cells, strict=False) if formula_cells is not None else ()
        ):
            if formula := _unsaved_formula(cell, formula_cell):
                row[j] = formula
                if header and j < width:
                    unsaved.add((len(body), j))
        if not any(cell.strip() for cell in row):
            continue
        if not header:
            width = max(i for i, cell in enumerate(row) if cell.strip()) + 1
            if width > limits.columns:
                raise limits.too_many_columns()
            header = [h.strip() for h in row[:width]]
            continue
        body.append(row[:width] + [""] * (width - len(row)))
        numbers.append(number)
        if len(body) > limits.rows:
            raise limits.too_many_rows(len(body))
    if not header:
        raise FileRefused("The first sheet is empty.")
    return header, NumberedRows(body, numbers, unsaved)
