"""Bulk import of readings and of a motor register from CSV or XLSX.

Our own documented headings (README, "Import files"); a file with other headings
is mapped column by column. Checking is vectorised over the whole file in chunks
(the progress bar follows the chunks); every problem is reported with its row
(as numbered in the file, header = row 1) and field. Nothing is written by the
check. The import writes every good row in one transaction, or nothing.
Re-importing a file adds nothing: each reading carries a key of its content.
"""

from __future__ import annotations

import csv
import datetime as dt
import functools
import hashlib
import io
import operator
import re
import zipfile
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
from django.conf import settings
from django.utils import timezone
from pyarrow import csv as arrow_csv

from fleet.engineering.rules import check_readings as reading_rules
from fleet.engineering.rules import parse_numbers
from fleet.models import CODE_CHARACTERS, CODE_PATTERN, CapacitorPart, FittedCapacitor, Motor, Reading, Site
from fleet.roles import scope_to_user, visible_site_ids
from fleet.services.bulk import insert_frame

READING_COLUMNS = {
    "asset_tag": "Motor asset tag (required)",
    "role": "start or run (required)",
    "taken_at": "Date and time, ISO 8601, e.g. 2026-03-14 09:30 (required; site time if no offset)",
    "method": "meter or in_circuit (default meter)",
    "capacitance_uf": "Capacitance in µF (meter readings)",
    "capacitor_current_a": "Capacitor current in A (in-circuit readings)",
    "capacitor_voltage_v": "Voltage across the capacitor in V (in-circuit readings)",
    "line_voltage_v": "Line voltage in V",
    "main_current_a": "Main winding current in A",
    "aux_current_a": "Auxiliary winding current in A",
    "line_current_a": "Line current in A",
    "case_temperature_c": "Capacitor case temperature in °C",
    "ambient_temperature_c": "Ambient temperature in °C",
    "esr_ohm": "ESR in Ω",
    "condition": "sound, bulged, leaking or vented (default sound)",
    "notes": "Free text",
}
READING_REQUIRED = ("asset_tag", "role", "taken_at")
READING_NUMBERS = list(Reading.MEASURED_FIELDS)

REGISTER_COLUMNS = {
    "asset_tag": "Motor asset tag, unique (required)",
    "site_code": "Site code, as in the register (required)",
    "location": "Where the motor is",
    "application": "fan, pump, compressor, conveyor or other (required)",
    "motor_type": "capacitor_start, permanent_split or two_value (required)",
    "load_type": "fan_law or constant (required)",
    "rated_voltage_v": "Nameplate voltage in V (required)",
    "frequency_hz": "50 or 60 (required)",
    "poles": "2, 4, 6, 8, 10 or 12 (required)",
    "output_w": "Rated output in W (required)",
    "full_load_current_a": "Full-load current in A (required)",
    "rated_speed_rpm": "Rated speed in rpm (required)",
    "commissioned_on": "Date commissioned, ISO 8601",
    "run_part_code": "Part code of the run capacitor fitted (PSC and two-value motors)",
    "start_part_code": "Part code of the start capacitor fitted (capacitor-start and two-value motors)",
    "fitted_on": "Date the capacitors were fitted, ISO 8601 (required)",
}
REGISTER_REQUIRED = (
    "asset_tag",
    "site_code",
    "application",
    "motor_type",
    "load_type",
    "rated_voltage_v",
    "frequency_hz",
    "poles",
    "output_w",
    "full_load_current_a",
    "rated_speed_rpm",
    "fitted_on",
)
REGISTER_NUMBERS = ["rated_voltage_v", "frequency_hz", "poles", "output_w", "full_load_current_a", "rated_speed_rpm"]

CHUNK_ROWS = 50_000  # rows checked per step of the progress bar
MAX_REPORTED_ERRORS = 2000


class TextColumns(Sequence):
    """A file's data rows held as text columns (pyarrow), as the fast CSV reader leaves them.

    Reads like the list of rows the exact reader gives (`len`, `rows[i]` is a list of text), so a
    report can quote a row as uploaded; `column(j)` gives a whole column at once, without rows.
    """

    def __init__(self, columns: list[pa.Array]):
        self.columns = columns

    def __len__(self) -> int:
        return len(self.columns[0]) if self.columns else 0

    def __getitem__(self, index: int) -> list[str]:
        if not -len(self) <= index < len(self):
            raise IndexError(index)
        return [column[index].as_py() for column in self.columns]

    def column(self, position: int) -> pd.Series:
        return pd.Series(self.columns[position], dtype=str)


class FileRefused(Exception):
    """The file as a whole cannot be read (cut off, wrong format, no header)."""


@dataclass
class CheckResult:
    good: pd.DataFrame  # one row per good line, with resolved ids and parsed values
    errors: list[tuple[int, str, str]] = field(default_factory=list)  # (row, field, message)
    duplicates: int = 0  # rows already in the database (skipped, not errors)
    total: int = 0

    @property
    def error_rows(self) -> int:
        return len({row for row, _, _ in self.errors})


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


def read_table(content: bytes, filename: str) -> tuple[list[str], list[list[str]] | TextColumns]:
    """Header and rows as text, within the limits, which are checked before parsing.

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
        header, body = _read_csv(content, limits)
    _refuse_repeated_headings(header)
    return header, body


def csv_delimiter(first_line: str) -> str:
    """Comma, semicolon (where the decimal mark is a comma) or tab: whichever the header line holds most of."""
    return max((",", ";", "\t"), key=first_line.count)


def _read_csv(content: bytes, limits: Limits) -> tuple[list[str], list[list[str]] | TextColumns]:
    try:
        text = content.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise FileRefused(f"The file is not UTF-8 text (byte {error.start}). Save it as CSV UTF-8.") from error
    end_of_header = text.find("\n")
    delimiter = csv_delimiter(text[: end_of_header if end_of_header >= 0 else len(text)])
    fast = _read_csv_columns(content, text, delimiter, limits)
    return fast if fast is not None else _read_csv_rows(text, delimiter, limits)


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
    first = next(csv.reader(io.StringIO(text[:1_000_000], newline=""), delimiter=delimiter), [])
    if len(first) > limits.columns:
        raise limits.too_many_columns()
    try:
        table = arrow_csv.read_csv(
            io.BytesIO(content.removeprefix(b"\xef\xbb\xbf")),
            read_options=arrow_csv.ReadOptions(autogenerate_column_names=True, use_threads=False),
            parse_options=arrow_csv.ParseOptions(delimiter=delimiter, newlines_in_values=True),
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
    maybe_blank = functools.reduce(pc.and_, [pc.match_substring_regex(c, _MAYBE_BLANK) for c in columns])
    if pc.any(maybe_blank).as_py():  # rare: the exact test on those rows only
        candidates = np.flatnonzero(maybe_blank.to_numpy(zero_copy_only=False))
        cells = [c.take(candidates).to_pylist() for c in columns]
        blank = np.zeros(len(columns[0]), bool)
        blank[candidates] = [not "".join(row).strip() for row in zip(*cells, strict=True)]
        columns = [c.filter(pa.array(~blank)) for c in columns]
    if not len(columns[0]):
        raise FileRefused("The file is empty.")
    if len(columns[0]) - 1 > limits.rows:
        raise limits.too_many_rows(min(len(columns[0]) - 1, limits.rows + 1))
    return [c[0].as_py().strip() for c in columns], TextColumns([c.slice(1) for c in columns])


def _read_csv_rows(text: str, delimiter: str, limits: Limits) -> tuple[list[str], list[list[str]]]:
    """The exact reader, row by row: what the fast one leaves to it, with its messages."""
    rows = []
    try:
        for row in csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True):
            if not "".join(row).strip():
                continue
            if not rows and len(row) > limits.columns:
                raise limits.too_many_columns()
            rows.append(row)
            if len(rows) > limits.rows + 1:
                raise limits.too_many_rows(len(rows) - 1)
    except csv.Error as error:
        raise FileRefused(f"The CSV cannot be read: {error}. The file may be cut off inside a quoted field.") from error
    if not rows:
        raise FileRefused("The file is empty.")
    header, body = [h.strip() for h in rows[0]], rows[1:]
    for number, row in enumerate(body, start=2):
        if len(row) != len(header):
            raise FileRefused(
                f"Row {number} has {len(row)} fields where the header has {len(header)}: the file looks cut off "
                f"or a field holds an unquoted {'semicolon' if delimiter == ';' else 'comma'}. Nothing was imported."
            )
    return header, body


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
        raise FileRefused("The workbook cannot be read: it is not an XLSX file (not a zip archive).") from error
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
    with archive.open(sheet) as stream:
        head = stream.read(64 * 1024)
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
    rows = _count_row_tags(archive, sheet, stop_after=limits.rows + 1)
    if rows > limits.rows + 1:
        raise limits.too_many_rows(rows - 1)


_ROW_TAG = re.compile(rb"<(?:\w+:)?row[\s/>]")


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


def _read_xlsx(content: bytes, limits: Limits) -> tuple[list[str], list[list[str]]]:
    _check_workbook_size(content, limits)
    from openpyxl import load_workbook

    try:
        sheet = load_workbook(io.BytesIO(content), read_only=True, data_only=True).worksheets[0]
    except Exception as error:  # noqa: BLE001 - any unreadable workbook is refused the same way
        raise FileRefused(f"The workbook cannot be read: {error}") from error

    def text(value):
        if value is None:
            return ""
        if isinstance(value, dt.datetime | dt.date):
            return value.isoformat()
        return str(value)

    header: list[str] = []
    body: list[list[str]] = []
    width = 0
    for values in sheet.iter_rows(values_only=True, max_col=limits.columns + 1):
        row = [text(v) for v in values]
        if not any(cell.strip() for cell in row):
            continue
        if not header:
            width = max(i for i, cell in enumerate(row) if cell.strip()) + 1
            if width > limits.columns:
                raise limits.too_many_columns()
            header = [h.strip() for h in row[:width]]
            continue
        body.append(row[:width] + [""] * (width - len(row)))
        if len(body) > limits.rows:
            raise limits.too_many_rows(len(body))
    if not header:
        raise FileRefused("The first sheet is empty.")
    return header, body


def suggest_mapping(columns: list[str], ours: dict[str, str]) -> dict[str, str]:
    """Our field -> the file's column, matching names regardless of case, spaces, dashes."""

    def norm(name):
        return "".join(ch for ch in name.lower() if ch.isalnum())

    by_norm = {norm(c): c for c in columns}
    return {name: by_norm[norm(name)] for name in ours if norm(name) in by_norm}


def mapped_frame(
    header: list[str], rows: list[list[str]] | TextColumns, mapping: dict[str, str], ours: dict[str, str]
) -> pd.DataFrame:
    """Our fields as text columns (stripped; "" where the file has no such column), and each row's number."""
    position = {}
    for number, heading in enumerate(header):
        position.setdefault(heading, number)
    out = {}
    for name in ours:
        column = position.get(mapping.get(name))
        if column is None:
            out[name] = pd.Series([""] * len(rows), dtype=str)
        elif isinstance(rows, TextColumns):
            out[name] = rows.column(column).str.strip()
        else:
            out[name] = pd.Series(list(map(operator.itemgetter(column), rows)), dtype=str).str.strip()
    out["row"] = np.arange(len(rows)) + 2
    return pd.DataFrame(out)


class _Problems:
    """Collects (row, field, message) from boolean masks over a chunk."""

    def __init__(self, chunk: pd.DataFrame):
        self.chunk = chunk
        self.bad = np.zeros(len(chunk), bool)
        self.items: list[tuple[int, str, str]] = []

    def add(self, mask, field_name: str, message):
        mask = np.asarray(mask, bool) & ~self.bad
        rows = self.chunk["row"].to_numpy()[mask]
        messages = message[mask] if isinstance(message, np.ndarray) else [message] * int(mask.sum())
        self.items += [(int(r), field_name, str(m)) for r, m in zip(rows, messages, strict=True)]
        self.bad |= mask


def _numbers(chunk, names, problems):
    """Numbers by the rulebook's one parser (decimal comma, finite only)."""
    values = {}
    for name in names:
        values[name], messages = parse_numbers(chunk[name])
        problems.add(messages != "", name, messages)
    return values


def text_problems(frame: pd.DataFrame, max_lengths: dict[str, int]) -> _Problems:
    """Cells the database cannot hold: a NUL character in any field, text longer than its column."""
    problems = _Problems(frame)
    for name in frame.columns.drop("row"):
        problems.add(frame[name].str.contains("\x00", regex=False), name, "holds a NUL character (byte 0): remove it")
    for name, limit in max_lengths.items():
        problems.add(frame[name].str.len() > limit, name, f"longer than {limit} characters")
    return problems


def finite_numbers(chunk: pd.DataFrame, names, problems: _Problems) -> dict[str, np.ndarray]:
    """Numbers (point or comma decimal mark); infinities refused. Blank cells are NaN."""
    values = _numbers(chunk, names, problems)
    for name in names:
        problems.add(np.isinf(values[name]), name, "not a finite number")
    return values


def repeated_in_file(problems: _Problems, keys: pd.Series, field_name: str, what: str) -> None:
    """A key seen on an earlier row of the file: reported on the later row, naming the first."""
    keys = keys.reset_index(drop=True)
    rows = problems.chunk["row"].reset_index(drop=True)
    repeated = keys.duplicated(keep="first") & keys.notna()
    first_row = dict(zip(keys[~repeated], rows[~repeated], strict=True))
    messages = np.array([f"{what} as row {first_row.get(k)}" for k in keys], dtype=object)
    problems.add(repeated.to_numpy(), field_name, messages)


def parse_dates(texts: pd.Series) -> pd.Series:
    """ISO 8601 dates (a time part is ignored); blanks and bad values are NaT."""
    return pd.to_datetime(texts.str.slice(0, 10), errors="coerce", format="%Y-%m-%d")


# A time of day followed by an offset or Z: "09:30+02:00", "09:30:15.5 -0500", "09:30Z".
_OFFSET_AT_END = r"\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?:[zZ]|[+-]\d{2}(?::?\d{2})?)$"


def parse_times(texts: pd.Series, zones: pd.Series) -> tuple[pd.Series, np.ndarray]:
    """ISO 8601 date-times as UTC, and a message for each row whose local time cannot be placed ("" if fine).

    A time with an offset (or Z) is taken as given; offsets may differ from row to row (a file
    across a daylight-saving change), hence one parse with utc=True. A time without one is
    wall-clock time in the row's zone (`zones`: its site's), localised one zone at a time; a
    local time the clocks skip or repeat there, or a zone nobody knows, gets a message.
    """
    parsed = pd.to_datetime(texts, errors="coerce", format="ISO8601", utc=True)
    local = (~texts.str.contains(_OFFSET_AT_END, regex=True)).to_numpy() & parsed.notna().to_numpy()
    wall = parsed.dt.tz_localize(None)
    messages = np.full(len(texts), "", dtype=object)
    for zone in pd.unique(zones[local]):
        rows = local & zones.eq(zone).to_numpy()
        try:
            placed = wall[rows].dt.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
        except (KeyError, ValueError):  # the site's zone is not a known name (zoneinfo raises a KeyError subclass)
            parsed[rows] = pd.NaT
            messages[rows] = f"the site's time zone {zone!r} is unknown: add the offset, e.g. +01:00, or fix the site"
            continue
        parsed[rows] = placed.dt.tz_convert("UTC")
        messages[rows & parsed.isna().to_numpy()] = (
            f"this local time is skipped or repeated in {zone} (clocks changed): add the offset, e.g. +01:00"
        )
    return parsed, messages


def outside_sites(frame: pd.DataFrame, user, column: str) -> _Problems:
    """Rows for a motor (by `asset_tag`) or a site (by `site_code`) outside the sites `user` works at.

    A user limited to some sites imports only there; `user=None` (a command) and unlimited users
    are never refused here.
    """
    problems = _Problems(frame)
    if not column or user is None or visible_site_ids(user) is None:
        return problems
    mine = set(scope_to_user(Site.objects.all(), user).values_list("code", flat=True))
    if column == "site_code":
        codes = frame["site_code"]
        messages = codes.map("site {}, which you do not work at".format).to_numpy(dtype=object)
        problems.add(codes.ne("") & ~codes.isin(mine), "site_code", messages)
        return problems
    tags = frame[column].str.upper()
    wanted = sorted(t for t in set(tags) - {""} if "\x00" not in t)
    site_of = {}
    for start in range(0, len(wanted), 5000):
        site_of |= {
            tag.upper(): code
            for tag, code in Motor.objects.filter(asset_tag__in=wanted[start : start + 5000])
            .exclude(site__code__in=mine)
            .values_list("asset_tag", "site__code")
        }
    if not site_of:
        return problems
    elsewhere = tags.map(site_of).astype(object)
    messages = (
        "motor " + frame[column] + " is at site " + elsewhere.fillna("") + ", which you do not work at"
    ).to_numpy(dtype=object)
    problems.add(elsewhere.notna().to_numpy(), column, messages)
    return problems


def reading_keys(installation_ids, taken_at_utc: pd.Series, methods, capacitance_uf) -> np.ndarray:
    """Each reading's content key (capacitor, UTC time, method, value): a file imported twice adds nothing.

    The key text is "id|time|method|value" with the time as `Timestamp.isoformat()` writes it,
    so keys stay those of the readings imported before.
    """
    if not len(taken_at_utc):
        return np.array([], dtype=object)
    times = pd.Series(taken_at_utc).reset_index(drop=True)
    whole = times.dt.tz_localize(None).to_numpy("datetime64[ns]")
    text = np.datetime_as_string(whole.astype("datetime64[s]"), unit="s").astype(object) + "+00:00"
    fractional = whole != whole.astype("datetime64[s]")
    if fractional.any():
        text[fractional] = [moment.isoformat() for moment in times[fractional]]
    ids = pd.Series(np.asarray(installation_ids, np.int64)).astype(str).to_numpy(object)
    values = pd.Series(np.asarray(capacitance_uf, float)).map("{:.4f}".format).to_numpy(object)
    joined = ids + "|" + text + "|" + np.asarray(methods, object) + "|" + values
    return np.array([hashlib.sha256(key.encode()).hexdigest()[:40] for key in joined], dtype=object)


FITTED_COLUMNS = {
    "id": "installation_id",
    "motor__asset_tag": "tag",
    "role": "role",
    "fitted_on": "fitted_on",
    "removed_on": "removed_on",
    "part__rated_uf": "rated_uf",
    "motor__frequency_hz": "frequency_hz",
    "motor__rated_voltage_v": "voltage_v",
    "motor__full_load_current_a": "full_load_a",
    "motor__site__time_zone": "time_zone",
}


def _fitted_of_tags(tags: np.ndarray) -> pd.DataFrame:
    """Every capacitor ever fitted to the motors named (upper-case tags), one query."""
    rows = FittedCapacitor.objects.filter(motor__asset_tag__any_of=tags).values_list(*FITTED_COLUMNS)
    fitted = pd.DataFrame.from_records(list(rows), columns=list(FITTED_COLUMNS.values()))
    fitted["tag"] = fitted["tag"].astype(str).str.upper()
    fitted["fitted_on"] = pd.to_datetime(fitted["fitted_on"]).astype("datetime64[s]")
    fitted["removed_on"] = pd.to_datetime(fitted["removed_on"]).astype("datetime64[s]")
    return fitted


def _fitted_on_the_day(tag: pd.Series, role: pd.Series, day: np.ndarray, fitted: pd.DataFrame) -> pd.DataFrame:
    """For each row, the capacitor in that role on that motor that day (the latest fitted, if several): NaN if none."""
    rows = pd.DataFrame(
        {"i": np.arange(len(tag)), "tag": tag.to_numpy(object), "role": role.to_numpy(object), "day": day}
    )
    candidates = rows.merge(fitted.astype({"tag": object, "role": object}), on=["tag", "role"], how="inner")
    in_window = (candidates["fitted_on"] <= candidates["day"]) & (
        candidates["removed_on"].isna() | (candidates["day"] <= candidates["removed_on"])
    )
    match = candidates[in_window.to_numpy(bool)].sort_values(["i", "fitted_on"]).drop_duplicates("i", keep="last")
    return match.set_index("i").reindex(np.arange(len(tag)))


def check_readings(frame: pd.DataFrame, *, on_progress=None, default_tz: str = "UTC") -> CheckResult:
    """Validate mapped reading rows; resolve each to the capacitor fitted at the time.

    Vectorised over the whole file (chunks of CHUNK_ROWS for the progress bar), with the
    rulebook the form and the API use. A time without an offset is in the time zone of the
    motor's site (`default_tz` for a tag not in the register, whose row is refused anyway).
    """
    upper_tags = frame["asset_tag"].str.upper()
    # A NUL cannot reach PostgreSQL, not even in a lookup: such a tag is simply unknown.
    wanted = pd.unique(upper_tags[upper_tags.ne("") & ~upper_tags.str.contains("\x00", regex=False)].to_numpy(object))
    fitted = _fitted_of_tags(np.asarray(wanted, dtype=object))
    zone_of_tag = fitted.drop_duplicates("tag").set_index("tag")["time_zone"]
    now = np.datetime64(timezone.now().replace(tzinfo=None), "s")
    good_parts, errors = [], []
    for start in range(0, len(frame), CHUNK_ROWS):
        chunk = frame.iloc[start : start + CHUNK_ROWS].reset_index(drop=True)
        problems = _Problems(chunk)
        for name in READING_REQUIRED:
            problems.add(chunk[name].eq(""), name, "required")
        tag = upper_tags.iloc[start : start + CHUNK_ROWS].reset_index(drop=True)
        zones = zone_of_tag.reindex(tag.to_numpy(object))
        problems.add(zones.isna().to_numpy(), "asset_tag", "unknown asset tag: not in the register")
        role = chunk["role"].str.lower()
        problems.add(~role.isin(FittedCapacitor.Role.values), "role", "must be start or run")
        taken, unplaced = parse_times(chunk["taken_at"], pd.Series(zones.fillna(default_tz).to_numpy(object)))
        problems.add(unplaced != "", "taken_at", unplaced)
        problems.add(taken.isna(), "taken_at", "not a date and time (use 2026-03-14 09:30)")
        taken_utc = taken.dt.tz_localize(None).to_numpy("datetime64[s]")
        match = _fitted_on_the_day(tag, role, taken_utc.astype("datetime64[D]").astype("datetime64[s]"), fitted)
        problems.add(
            match["installation_id"].isna().to_numpy() & taken.notna().to_numpy(),
            "role",
            "no capacitor in this role was fitted to this motor on that date",
        )
        # Every rule of a reading, from the one rulebook the form and the API use.
        result = reading_rules(
            {name: chunk[name] for name in READING_NUMBERS},
            method=chunk["method"],
            condition=chunk["condition"],
            notes=chunk["notes"],
            rated_uf=match["rated_uf"].to_numpy(float),
            frequency_hz=match["frequency_hz"].to_numpy(float),
            motor_voltage_v=match["voltage_v"].to_numpy(float),
            full_load_current_a=match["full_load_a"].to_numpy(float),
            fitted_on=pd.to_datetime(match["fitted_on"]).to_numpy("datetime64[D]"),
            removed_on=pd.to_datetime(match["removed_on"]).to_numpy("datetime64[D]"),
            taken_at=taken_utc,
            now=now,
        )
        for name, messages in result.errors.items():
            problems.add(messages != "", name, messages)
        for name, messages in result.confirm.items():
            problems.add(messages != "", name, messages + "; the import cannot confirm it: use the reading form")
        good = ~problems.bad
        rows = pd.DataFrame(
            {
                "row": chunk["row"].to_numpy()[good],
                "installation_id": match["installation_id"].to_numpy()[good].astype(np.int64),
                "taken_at": taken[good].reset_index(drop=True),
                "method": result.values["method"][good],
                "condition": result.values["condition"][good],
                "notes": result.values["notes"][good],
                **{name: result.values[name][good] for name in READING_NUMBERS},
                "capacitance_uf": np.round(result.values["capacitance_uf"][good], 4),
            }
        )
        rows["import_key"] = reading_keys(
            rows["installation_id"], rows["taken_at"], rows["method"], rows["capacitance_uf"]
        )
        good_parts.append(rows)
        errors += problems.items
        if on_progress:
            on_progress(min(start + CHUNK_ROWS, len(frame)))
    good = pd.concat(good_parts, ignore_index=True) if good_parts else pd.DataFrame(columns=["row", "import_key"])
    repeated = good["import_key"].duplicated(keep="first").to_numpy()
    if repeated.any():
        first_row = good[~repeated].set_index("import_key")["row"]
        later = good[repeated]
        errors += [
            (int(row), "taken_at", f"the same reading as row {first}")
            for row, first in zip(later["row"], first_row.reindex(later["import_key"]).to_numpy(), strict=True)
        ]
        good = good[~repeated].reset_index(drop=True)
    existing = (
        set(
            Reading.objects.filter(import_key__any_of=good["import_key"].to_numpy(object)).values_list(
                "import_key", flat=True
            )
        )
        if len(good)
        else set()
    )
    if existing:
        good = good[~good["import_key"].isin(existing)].reset_index(drop=True)
    errors.sort()
    return CheckResult(good=good, errors=errors, duplicates=len(existing), total=len(frame))


def insert_readings(good: pd.DataFrame, user=None) -> list[int]:
    """Write checked readings (caller holds the transaction); returns the capacitors touched.

    One `insert_frame` (COPY on PostgreSQL; the row triggers of fleet_reading run on each row as
    for any insert). A reading whose key another import wrote meanwhile is skipped.
    """
    if not len(good):
        return []
    rows = pd.DataFrame(
        {
            "installation_id": good["installation_id"].to_numpy(np.int64),
            "taken_at": good["taken_at"].array,
            "taken_by_id": pd.array(np.full(len(good), None if user is None else user.pk), dtype="Int64"),
            "method": good["method"].to_numpy(object),
            **{name: good[name].to_numpy(float) for name in READING_NUMBERS},
            "condition": good["condition"].to_numpy(object),
            "notes": good["notes"].fillna("").to_numpy(object),
            "source": Reading.Source.IMPORT.value,
            "import_key": good["import_key"].to_numpy(object),
        }
    )
    insert_frame(Reading, rows, skip_conflicts_on="import_key")
    return sorted(set(good["installation_id"].astype(int).tolist()))


def check_register(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Validate a motor register: sites and parts must exist; tags already there are skipped."""
    sites = dict(Site.objects.values_list("code", "id"))
    parts = dict(CapacitorPart.objects.values_list("code", "id"))
    existing = {t.upper() for t in Motor.objects.values_list("asset_tag", flat=True)}
    problems = _Problems(frame)
    for name in REGISTER_REQUIRED:
        problems.add(frame[name].eq(""), name, "required")
    for name in REGISTER_COLUMNS:
        problems.add(frame[name].str.contains("\x00", regex=False), name, "contains a NUL character: remove it")
    too_long = frame["asset_tag"].str.len() > Motor._meta.get_field("asset_tag").max_length
    problems.add(
        frame["asset_tag"].ne("") & ~frame["asset_tag"].str.fullmatch(CODE_PATTERN),
        "asset_tag",
        f"use {CODE_CHARACTERS}",
    )
    problems.add(too_long, "asset_tag", "longer than 40 characters")
    problems.add(frame["location"].str.len() > 120, "location", "longer than 120 characters")
    numbers = _numbers(frame, REGISTER_NUMBERS, problems)
    problems.add(~frame["site_code"].isin(sites), "site_code", "unknown site code: add the site first")
    for name, allowed in (
        ("application", Motor.Application.values),
        ("motor_type", Motor.MotorType.values),
        ("load_type", Motor.LoadType.values),
    ):
        problems.add(~frame[name].str.lower().isin(allowed), name, "must be one of " + ", ".join(allowed))
    volts, hertz, poles = numbers["rated_voltage_v"], numbers["frequency_hz"], numbers["poles"]
    problems.add((volts <= 0) | (volts > 1000), "rated_voltage_v", "outside 1 to 1000 V")
    problems.add(~np.isin(hertz, [50, 60]), "frequency_hz", "must be 50 or 60")
    problems.add(~np.isin(poles, [2, 4, 6, 8, 10, 12]), "poles", "must be 2, 4, 6, 8, 10 or 12")
    for name in ("output_w", "full_load_current_a"):
        problems.add(numbers[name] <= 0, name, "must be above zero")
    synchronous = 120.0 * hertz / np.where(poles > 0, poles, np.nan)
    problems.add(
        numbers["rated_speed_rpm"] >= synchronous, "rated_speed_rpm", "at or above synchronous speed (120 f / poles)"
    )
    kind = frame["motor_type"].str.lower()
    needs_run = kind.isin(["permanent_split", "two_value"])
    needs_start = kind.isin(["capacitor_start", "two_value"])
    problems.add(needs_run & frame["run_part_code"].eq(""), "run_part_code", "this motor type has a run capacitor")
    problems.add(
        needs_start & frame["start_part_code"].eq(""), "start_part_code", "this motor type has a start capacitor"
    )
    for name in ("run_part_code", "start_part_code"):
        problems.add(frame[name].ne("") & ~frame[name].isin(parts), name, "unknown part code: add the part first")
    for name in ("fitted_on", "commissioned_on"):
        parsed = pd.to_datetime(frame[name], errors="coerce", format="ISO8601")
        problems.add(frame[name].ne("") & parsed.isna(), name, "not a date (use 2026-03-14)")
        problems.add(parsed > pd.Timestamp(timezone.localdate()), name, "in the future")
    tags = frame["asset_tag"].str.upper()
    repeated = tags.duplicated(keep="first") & tags.ne("")
    first_row = dict(zip(tags[~repeated], frame["row"][~repeated], strict=True))
    problems.add(
        repeated, "asset_tag", np.array([f"the same tag as row {first_row.get(t)}" for t in tags], dtype=object)
    )
    already = tags.isin(existing).to_numpy() & ~problems.bad
    good_mask = ~problems.bad & ~already
    good = frame[good_mask].copy()
    for name in REGISTER_NUMBERS:
        good[name] = numbers[name][good_mask]
    good["site_id"] = good["site_code"].map(sites)
    if on_progress:
        on_progress(len(frame))
    return CheckResult(
        good=good.reset_index(drop=True), errors=sorted(problems.items), duplicates=int(already.sum()), total=len(frame)
    )


def insert_register(good: pd.DataFrame) -> list[int]:
    """Create motors and their fitted capacitors (caller holds the transaction)."""
    parts = dict(CapacitorPart.objects.values_list("code", "id"))
    motors = Motor.objects.bulk_create(
        [
            Motor(
                asset_tag=row.asset_tag,
                site_id=int(row.site_id),
                location=row.location,
                application=row.application.lower(),
                motor_type=row.motor_type.lower(),
                load_type=row.load_type.lower(),
                rated_voltage_v=row.rated_voltage_v,
                frequency_hz=int(row.frequency_hz),
                poles=int(row.poles),
                output_w=row.output_w,
                full_load_current_a=row.full_load_current_a,
                rated_speed_rpm=row.rated_speed_rpm,
                commissioned_on=dt.date.fromisoformat(row.commissioned_on[:10]) if row.commissioned_on else None,
            )
            for row in good.itertuples(index=False)
        ],
        batch_size=2000,
    )
    fitted = []
    for motor, row in zip(motors, good.itertuples(index=False), strict=True):
        fitted_on = dt.date.fromisoformat(row.fitted_on[:10])
        for role, code in (
            (FittedCapacitor.Role.RUN, row.run_part_code),
            (FittedCapacitor.Role.START, row.start_part_code),
        ):
            if code:
                fitted.append(FittedCapacitor(motor=motor, role=role, part_id=parts[code], fitted_on=fitted_on))
    FittedCapacitor.objects.bulk_create(fitted, batch_size=2000)
    return [m.id for m in motors]
