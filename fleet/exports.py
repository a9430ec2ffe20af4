"""Files for people's own tools: CSV, XLSX and Parquet written from one table description.

A `Table` names its columns (type, unit, meaning) and yields its rows lazily, so every format is
written a chunk at a time: CSV streams line by line, XLSX and Parquet go through a temporary file
(the sheet's XML written row by row into the zip package, pyarrow row groups), never the whole export in memory.
Text a spreadsheet could run as a formula is defused: a leading quote in CSV (OWASP's advice),
an explicit text cell in XLSX (no visible quote), plain strings in Parquet (nothing runs there).
"""

from __future__ import annotations

import csv
import datetime as dt
import itertools
import json
import math
import numbers
import re
import tempfile
import zipfile
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from decimal import Decimal

from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
from openpyxl.utils import get_column_letter
from openpyxl.utils.datetime import to_excel

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r", "'")
# A number as a spreadsheet reads it: ASCII digits, a decimal point, an exponent. Python's float() takes more
# ("-inf", "+nan", "-1_000", other scripts' digits), which a spreadsheet would start a formula with.
PLAIN_NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
TEXT, FLOAT, INT, DATE, DATETIME, BOOL = "text", "float", "int", "date", "datetime", "bool"
CHUNK_ROWS = 5000  # rows per Parquet row group and per batch held in memory


def safe_cell(value) -> str:
    """Text a spreadsheet will not run as a formula (OWASP's CSV-injection advice):
    a cell starting with = + - @ ' or a control character gets a leading quote,
    unless it is a plain number such as -3.2. Strip one leading quote to read it back."""
    text = "" if value is None else str(value)
    if text.startswith(FORMULA_STARTS) and not PLAIN_NUMBER.fullmatch(text):
        return "'" + text
    return text


def unguarded_cell(value):
    """`safe_cell`'s inverse, for a CSV read back (an export imported again, the rows to fix sent again): a leading
    quote followed by what `safe_cell` guards (= + - @ ' tab, carriage return) is taken off, once; any other text
    is left as it is, so a round trip through `safe_cell` gives back what was written. `value` is one cell's text
    or a pyarrow string array (a whole CSV column at once)."""
    if isinstance(value, str):
        return value[1:] if value.startswith("'") and value[1:].startswith(FORMULA_STARTS) else value
    import pyarrow.compute as pc

    starts = "".join(f"\\x{{{ord(c):02x}}}" for c in FORMULA_STARTS)  # RE2 hex escapes: tab and CR as well
    guarded = pc.match_substring_regex(value, "^'[" + starts + "]")
    return pc.if_else(guarded, pc.utf8_slice_codeunits(value, 1), value)


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
    decimals: int | None = None  # a computed figure written to this many decimal places (None: as stored)


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
                {"name": c.name, "type": c.kind, "unit": c.unit, "description": c.description}
                | ({"decimals": c.decimals} if c.decimals is not None else {})
                for c in self.columns
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
XLSX_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
XLSX_RELATIONSHIPS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
XLSX_PACKAGE_RELATIONSHIPS = "http://schemas.openxmlformats.org/package/2006/relationships"
XLSX_CONTENT = "application/vnd.openxmlformats-officedocument.spreadsheetml"
XLSX_BOLD, XLSX_DATE, XLSX_DATETIME = 1, 2, 3  # cell formats in XLSX_STYLES, by position
XLSX_STYLES = (  # fonts: plain, bold; cell formats: plain, bold, date, date-time
    f'<styleSheet xmlns="{XLSX_MAIN}"><numFmts count="2"><numFmt numFmtId="164" formatCode="yyyy-mm-dd"/>'
    '<numFmt numFmtId="165" formatCode="yyyy-mm-dd h:mm:ss&quot; UTC&quot;"/></numFmts><fonts count="2">'
    '<font><sz val="11"/><name val="Calibri"/><family val="2"/></font>'
    '<font><b/><sz val="11"/><name val="Calibri"/><family val="2"/></font></fonts>'
    '<fills count="2"><fill><patternFill patternType="none"/></fill><fill><patternFill patternType="gray125"/></fill>'
    '</fills><borders count="1"><border><left/><right/><top/><bottom/><diagonal/></border></borders>'
    '<cellStyleXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0"/></cellStyleXfs>'
    '<cellXfs count="4"><xf numFmtId="0" fontId="0" fillId="0" borderId="0" xfId="0"/>'
    '<xf numFmtId="0" fontId="1" fillId="0" borderId="0" xfId="0" applyFont="1"/>'
    '<xf numFmtId="164" fontId="0" fillId="0" borderId="0" xfId="0" applyNumberFormat="1"/>'
    '<xf numFmtId="165" fontId="0" fillId="0" borderId="0" xfId="0" applyNumberFormat="1"/></cellXfs>'
    '<cellStyles count="1"><cellStyle name="Normal" xfId="0" builtinId="0"/></cellStyles></styleSheet>'
)
XML_SPECIAL = re.compile(f'[&<>"\r]|{ILLEGAL_CHARACTERS_RE.pattern}')
XML_DECLARATION = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'


def xlsx_file(table: Table):
    """A workbook in a temporary file: typed cells, frozen header row, filters, column widths,
    text as text (a formula-like value stays a visible '=...' string), an "about" sheet with units.
    Returns the open file, positioned at its start.

    The sheets' XML is written here a chunk of rows at a time, one short string per cell: a cell's
    type and its format (one of four, fixed in XLSX_STYLES) follow from its value, so no cell or
    style object is made (openpyxl's writer spent some 80 us a cell on them: 43 s for 48,000 readings)."""
    columns = len(table.columns)
    widths = [max(XLSX_WIDTHS.get(c.kind, min(max(len(c.name) + 2, 14), 50)), len(c.name) + 2) for c in table.columns]
    about = [
        [key, value if isinstance(value, str) or value is None else json.dumps(value, ensure_ascii=False)]
        for key, value in table.describe().items()
        if key != "columns"
    ]
    about_header = len(about) + 2  # after a blank row
    about += [
        [],
        ["column", "type", "unit", "description"],
        *([c.name, c.kind, c.unit, c.description] for c in table.columns),
    ]
    handle = tempfile.TemporaryFile()  # noqa: SIM115 - returned open; the response closes it
    with zipfile.ZipFile(handle, "w", zipfile.ZIP_DEFLATED) as package:
        _write_package_parts(package)
        with package.open("xl/worksheets/sheet1.xml", "w") as part:
            rows = _write_sheet(part, itertools.chain([table.header], table.rows), columns, widths, data=True)
        with package.open("xl/worksheets/sheet2.xml", "w") as part:
            _write_sheet(part, about, 4, [], bold_row=about_header)
        last_cell = f"${_column_letters(columns)[-1]}${rows}"
        name = _xml_text(table.title[:31].replace("'", "''"))
        package.writestr(
            "xl/workbook.xml",
            f'{XML_DECLARATION}<workbook xmlns="{XLSX_MAIN}" xmlns:r="{XLSX_RELATIONSHIPS}">'
            '<bookViews><workbookView activeTab="0"/></bookViews><sheets>'
            f'<sheet name="{_xml_text(table.title[:31])}" sheetId="1" r:id="rId1"/>'
            '<sheet name="about" sheetId="2" r:id="rId2"/></sheets><definedNames>'
            f'<definedName name="_xlnm._FilterDatabase" localSheetId="0" hidden="1">\'{name}\'!$A$1:{last_cell}'
            "</definedName></definedNames></workbook>",
        )
    handle.seek(0)
    return handle


def _write_package_parts(package: zipfile.ZipFile) -> None:
    """The parts of a two-sheet workbook that do not depend on its rows: types, relationships, styles."""
    sheet_type = f"{XLSX_CONTENT}.worksheet+xml"
    package.writestr(
        "[Content_Types].xml",
        f'{XML_DECLARATION}<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
        f'<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
        '<Default Extension="xml" ContentType="application/xml"/>'
        f'<Override PartName="/xl/workbook.xml" ContentType="{XLSX_CONTENT}.sheet.main+xml"/>'
        f'<Override PartName="/xl/worksheets/sheet1.xml" ContentType="{sheet_type}"/>'
        f'<Override PartName="/xl/worksheets/sheet2.xml" ContentType="{sheet_type}"/>'
        f'<Override PartName="/xl/styles.xml" ContentType="{XLSX_CONTENT}.styles+xml"/></Types>',
    )
    package.writestr(
        "_rels/.rels",
        f'{XML_DECLARATION}<Relationships xmlns="{XLSX_PACKAGE_RELATIONSHIPS}"><Relationship Id="rId1" '
        f'Type="{XLSX_RELATIONSHIPS}/officeDocument" Target="xl/workbook.xml"/></Relationships>',
    )
    package.writestr(
        "xl/_rels/workbook.xml.rels",
        f'{XML_DECLARATION}<Relationships xmlns="{XLSX_PACKAGE_RELATIONSHIPS}">'
        f'<Relationship Id="rId1" Type="{XLSX_RELATIONSHIPS}/worksheet" Target="worksheets/sheet1.xml"/>'
        f'<Relationship Id="rId2" Type="{XLSX_RELATIONSHIPS}/worksheet" Target="worksheets/sheet2.xml"/>'
        f'<Relationship Id="rId3" Type="{XLSX_RELATIONSHIPS}/styles" Target="styles.xml"/></Relationships>',
    )
    package.writestr("xl/styles.xml", XML_DECLARATION + XLSX_STYLES)


def _write_sheet(part, rows: Iterable[list], columns: int, widths: list[float], *, data=False, bold_row=0) -> int:
    """One worksheet's XML into an open part, CHUNK_ROWS rows at a time. A data sheet has its first
    row bold, frozen and filtered; otherwise `bold_row` (1-based) is. Returns the number of rows."""
    letters = _column_letters(columns)
    head = f'{XML_DECLARATION}<worksheet xmlns="{XLSX_MAIN}" xmlns:r="{XLSX_RELATIONSHIPS}">'
    if data:
        head += (
            '<sheetViews><sheetView workbookViewId="0"><pane ySplit="1" topLeftCell="A2" activePane="bottomLeft" '
            'state="frozen"/><selection pane="bottomLeft" activeCell="A2" sqref="A2"/></sheetView></sheetViews>'
        )
    if widths:
        head += "<cols>"
        head += "".join(f'<col min="{i}" max="{i}" width="{w}" customWidth="1"/>' for i, w in enumerate(widths, 1))
        head += "</cols>"
    part.write((head + "<sheetData>").encode())
    bold_row = 1 if data else bold_row
    numbered = enumerate(rows, start=1)
    number = 0
    while batch := list(itertools.islice(numbered, CHUNK_ROWS)):
        part.write(
            "".join(
                _xlsx_row(n, letters, values, f' s="{XLSX_BOLD}"' if n == bold_row else "") for n, values in batch
            ).encode()
        )
        number = batch[-1][0]
    tail = "</sheetData>"
    if data:
        tail += f'<autoFilter ref="A1:{letters[-1]}{number}"/>'
    part.write((tail + "</worksheet>").encode())
    return number


def _column_letters(columns: int) -> list[str]:
    return [get_column_letter(index) for index in range(1, columns + 1)]


def _xml_text(text: str) -> str:
    """Text for an XML element or attribute: characters XML cannot hold replaced (as openpyxl does),
    markup escaped, a carriage return kept as a reference (a parser would turn a bare one into \\n)."""
    if XML_SPECIAL.search(text) is None:  # most text: nothing to change
        return text
    text = ILLEGAL_CHARACTERS_RE.sub("\ufffd", text)
    return (
        text.replace("&", "&amp;")
        .replace("<", "&lt;")
        .replace(">", "&gt;")
        .replace('"', "&quot;")
        .replace("\r", "&#13;")
    )


def _xlsx_row(number: int, letters: list[str], values, text_style: str = "") -> str:
    """One <row>: numbers and booleans typed, dates and date-times (in UTC, a cell holds no zone: its
    format shows " UTC", which the import reads back as UTC) as serial numbers in a date format, text
    as an inline string (so nothing is ever read as a formula); empty, None and non-finite values leave
    the cell out."""
    cells = []
    for letter, value in zip(letters, values, strict=False):
        kind = type(value)
        if kind is str:
            if value:
                text = _xml_text(value)
                cells.append(
                    f'<c r="{letter}{number}"{text_style} t="inlineStr"><is><t xml:space="preserve">{text}</t></is></c>'
                )
        elif value is None:
            continue
        elif kind is float:
            if math.isfinite(value):
                cells.append(f'<c r="{letter}{number}"><v>{value!r}</v></c>')
        elif kind is bool:
            cells.append(f'<c r="{letter}{number}" t="b"><v>{int(value)}</v></c>')
        elif kind is int:
            cells.append(f'<c r="{letter}{number}"><v>{value}</v></c>')
        elif kind is dt.datetime:
            serial = to_excel(value.astimezone(dt.UTC).replace(tzinfo=None))
            cells.append(f'<c r="{letter}{number}" s="{XLSX_DATETIME}"><v>{serial!r}</v></c>')
        elif kind is dt.date:
            cells.append(f'<c r="{letter}{number}" s="{XLSX_DATE}"><v>{to_excel(value)}</v></c>')
        elif isinstance(value, numbers.Real | Decimal):  # numpy scalars, decimals
            if math.isfinite(value):
                cells.append(f'<c r="{letter}{number}"><v>{float(value)!r}</v></c>')
        else:
            text = _xml_text(str(value))
            cells.append(f'<c r="{letter}{number}" t="inlineStr"><is><t xml:space="preserve">{text}</t></is></c>')
    return f'<row r="{number}">{"".join(cells)}</row>'


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
