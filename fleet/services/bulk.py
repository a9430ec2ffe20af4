"""Rows in and out of the database in bulk, without model instances, and filters on long lists.

Writes: `insert_frame` sends a frame's columns by COPY on PostgreSQL (one CSV written by
pyarrow: NULL and empty text stay apart, no per-row Python) and by batched INSERT on other
databases (SQLite in development and tests). Constraints and row triggers apply to every
row, as for any INSERT. Writes here send no signals and write no audit entries: they are
for derived rows (assessments), imported readings and invented benchmark fleets, never for
register changes a person made.

Reads: `select_frame` (one text value parsed by pyarrow on PostgreSQL), `select_packed` (numbers and times in
their binary form, one bytea value read by numpy: the refit's readings) and `field__any_of=array`, a filter on
tens of thousands of values sent as one parameter (`field__in` sends one placeholder per
value, and building that query costs more than running it).
"""

from __future__ import annotations

import datetime as dt
import io
import json
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd
import psycopg
import pyarrow as pa
import pyarrow.compute as pc
from django.db import IntegrityError, connection, transaction
from django.db.models import Field, ForeignObject, JSONField, Lookup
from django.utils import timezone
from pyarrow import csv as arrow_csv

SQLITE_BATCH_ROWS = 5000
COPY_BLOCK_BYTES = 1 << 20
SEPARATOR = "\x1f"  # ASCII unit separator: joins text values for `any_of` on PostgreSQL


def on_postgresql() -> bool:
    return connection.vendor == "postgresql"


def _completed(model, frame: pd.DataFrame) -> pd.DataFrame:
    """The frame with every other non-null column of the table filled from its field's default,
    and date-times as UTC (aware)."""
    frame = frame.copy()
    for field in model._meta.concrete_fields:
        if field.column in frame.columns:
            if field.get_internal_type() == "DateTimeField":
                frame[field.column] = pd.to_datetime(frame[field.column], utc=True)
            continue
        if field.primary_key:
            continue
        if getattr(field, "auto_now_add", False) or getattr(field, "auto_now", False):
            frame[field.column] = pd.Timestamp(timezone.now())
        elif field.has_default():
            default = field.get_default()
            frame[field.column] = (
                json.dumps(default) if isinstance(field, JSONField) else field.get_db_prep_save(default, connection)
            )
        elif not field.null:
            raise ValueError(f"{model.__name__}.{field.name} has no value and no default")
    return frame


def insert_frame(model, frame: pd.DataFrame, *, skip_conflicts_on: str | None = None) -> int:
    """Insert the frame's rows (columns named as the table's; NaN, NaT or None for NULL), in the
    caller's transaction. JSON columns are given as JSON text. Returns the rows written.

    With `skip_conflicts_on` (a unique column), a row whose value is already there (another
    writer put it there meanwhile) is skipped instead of refusing them all.
    """
    if frame.empty:
        return 0
    frame = _completed(model, frame)
    column_list = ", ".join(connection.ops.quote_name(name) for name in frame.columns)
    if on_postgresql():
        return _copy_in(model._meta.db_table, column_list, _csv(frame), len(frame), skip_conflicts_on)
    table = connection.ops.quote_name(model._meta.db_table)
    conflict = f" ON CONFLICT ({connection.ops.quote_name(skip_conflicts_on)}) DO NOTHING" if skip_conflicts_on else ""
    statement = f"INSERT INTO {table} ({column_list}) VALUES ({', '.join(['%s'] * len(frame.columns))}){conflict}"
    rows = _python_rows(frame)
    written = 0
    with connection.cursor() as cursor:
        for start in range(0, len(rows), SQLITE_BATCH_ROWS):
            cursor.executemany(statement, rows[start : start + SQLITE_BATCH_ROWS])
            written += cursor.rowcount
    return written


def _csv(frame: pd.DataFrame) -> bytes:
    """The frame as CSV for COPY: a missing value is an empty field, empty text is `""`.

    Date-times go as UTC text with its offset, made by pyarrow's cast of the naive UTC time
    (its CSV writer formats a time-zone-aware column about twenty times slower)."""
    columns = {}
    for name, values in frame.items():
        if isinstance(values.dtype, pd.DatetimeTZDtype):
            utc = pa.array(values.dt.tz_convert("UTC").dt.tz_localize(None).dt.floor("us"), from_pandas=True)
            text = pc.cast(utc.cast(pa.timestamp("us")), pa.string())
            columns[name] = pc.binary_join_element_wise(text, pa.scalar("+00:00"), "")
        else:
            columns[name] = pa.array(values, from_pandas=True)
    buffer = io.BytesIO()
    arrow_csv.write_csv(pa.table(columns), buffer, arrow_csv.WriteOptions(include_header=False, quoting_style="needed"))
    return buffer.getvalue()


def _copy(cursor, table: str, column_list: str, body: bytes) -> None:
    """COPY the CSV in; a refusal (a constraint, a trigger) is raised as Django's own database error."""
    statement = f"COPY {table} ({column_list}) FROM STDIN WITH (FORMAT csv)"
    with connection.wrap_database_errors, cursor.copy(statement) as copy:
        for start in range(0, len(body), COPY_BLOCK_BYTES):
            copy.write(body[start : start + COPY_BLOCK_BYTES])


def _copy_in(table: str, column_list: str, body: bytes, rows: int, skip_conflicts_on: str | None) -> int:
    """COPY on PostgreSQL. Skipping conflicts, the COPY runs in a savepoint, and only on a unique
    clash do the rows go again through a temporary table and INSERT ... ON CONFLICT DO NOTHING
    (slower, so not the first try)."""
    from psycopg.errors import UniqueViolation  # PostgreSQL's driver: imported only when it is in use

    target = connection.ops.quote_name(table)
    with connection.cursor() as cursor:
        raw = cursor.cursor
        if not skip_conflicts_on:
            _copy(raw, target, column_list, body)
            return rows
        try:
            with transaction.atomic():
                _copy(raw, target, column_list, body)
            return rows
        except IntegrityError as error:
            if not isinstance(error.__cause__, UniqueViolation):
                raise
        staging = connection.ops.quote_name(f"{table}_staging")
        cursor.execute(
            f"CREATE TEMPORARY TABLE {staging} ON COMMIT DROP AS SELECT {column_list} FROM {target} WITH NO DATA"
        )
        _copy(raw, staging, column_list, body)
        cursor.execute(
            f"INSERT INTO {target} ({column_list}) SELECT {column_list} FROM {staging} "
            f"ON CONFLICT ({connection.ops.quote_name(skip_conflicts_on)}) DO NOTHING"
        )
        written = cursor.rowcount
        cursor.execute(f"DROP TABLE {staging}")
        return written


def _python_rows(frame: pd.DataFrame) -> list[tuple]:
    """The rows as DB-API values; date-times as naive UTC text the way Django stores them on SQLite
    (microseconds only when there are some), so stored and filtered values compare alike. Built a
    column at a time: only a column of Python objects (text, dates) is looked at value by value."""
    columns = []
    for _, values in frame.items():
        if isinstance(values.dtype, pd.DatetimeTZDtype):
            naive = values.dt.tz_convert("UTC").dt.tz_localize(None)
            text = naive.dt.strftime("%Y-%m-%d %H:%M:%S").where(
                naive.dt.microsecond == 0, naive.dt.strftime("%Y-%m-%d %H:%M:%S.%f")
            )
            values = text.where(values.notna(), None)
        column = values.astype(object).where(values.notna(), None).tolist()  # numbers as Python's own
        columns.append([_plain(v) for v in column] if values.dtype == object else column)
    return list(zip(*columns, strict=True))


def _plain(value):
    """numpy scalars, pandas timestamps and dates as the Python values a DB-API driver takes."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):  # ISO text, as Django stores it
        return value.isoformat()
    return value


ID_ARRAY_SQL = "string_to_array(%s, ',')::bigint[]"


def id_array_text(ids) -> str:
    """Integer ids as the one text parameter of `ID_ARRAY_SQL` (PostgreSQL): psycopg adapts a list
    parameter value by value in Python, the server splits this text in C."""
    return ",".join(map(str, np.asarray(ids, np.int64).tolist()))


@ForeignObject.register_lookup  # a foreign key keeps lookups of its own: register there too
@Field.register_lookup
class AnyOf(Lookup):
    """`field__any_of=values`: the rows `field__in` finds, with the whole list as one parameter.

    PostgreSQL: one text split by the server (`= ANY(string_to_array(...))`; an array when a text
    value holds the separator); SQLite: one JSON text (`IN (SELECT value FROM json_each(...))`).
    Pass a numpy array or a pandas Index/Series rather than a list: Django walks a list value by
    value before the lookup sees it.
    """

    lookup_name = "any_of"
    prepare_rhs = False

    def as_sql(self, compiler, connection):
        lhs, lhs_params = self.process_lhs(compiler, connection)
        values = self.rhs.tolist() if hasattr(self.rhs, "tolist") else list(self.rhs)
        if connection.vendor != "postgresql":
            return f"{lhs} IN (SELECT value FROM json_each(%s))", [*lhs_params, json.dumps(values)]
        kind = getattr(getattr(self.rhs, "dtype", None), "kind", "O")  # an integer array needs no look at each value
        integers = kind in "iu" or (kind == "O" and all(isinstance(v, int) and not isinstance(v, bool) for v in values))
        if values and integers:
            # The range lets the planner see how few rows a chunk of neighbouring ids is: without
            # it, it guesses from the table's size and scans all of it (in parallel).
            return (
                f"({lhs} BETWEEN %s AND %s AND {lhs} = ANY({ID_ARRAY_SQL}))",
                [*lhs_params, min(values), max(values), *lhs_params, id_array_text(values)],
            )
        if values and all(isinstance(v, str) for v in values):
            joined = SEPARATOR.join(values)
            if joined.count(SEPARATOR) == len(values) - 1:
                return f"{lhs} = ANY(string_to_array(%s, %s))", [*lhs_params, joined, SEPARATOR]
        return f"{lhs} = ANY(%s)", [*lhs_params, values]


ROW_ID_MAX = 2**63 - 1  # the largest id a row can have (a signed 64-bit column)


def storable_ids(ids) -> list[int]:
    """The ids that could be a row's: a number from a form beyond them is no row (SQLite cannot
    even compare one, and stops the query with an overflow)."""
    return [int(i) for i in ids if 0 < int(i) <= ROW_ID_MAX]


def select_frame(sql: str, params, columns: list[str]) -> pd.DataFrame:
    """The rows of one SELECT as a frame, for chunk-sized selects (at most a few million values).

    PostgreSQL: the server writes every row as CSV text into one value (`string_agg` of each row's
    text form), and pyarrow parses it in one pass: no Python per row, where reading a COPY gives
    one message, and so one Python call, per row. Elsewhere, one fetch. Strings come back as
    text, so the caller casts what it needs; NULL is NaN or None.
    """
    if on_postgresql():
        with connection.cursor() as cursor:
            cursor.execute(f"SELECT string_agg(btrim(q::text, '()'), E'\\n') FROM ({sql}) AS q", params)
            text = cursor.fetchone()[0]
        if not text:
            return pd.DataFrame({name: pd.Series(dtype=object) for name in columns})
        return _row_texts_frame(text.encode(), columns)
    with connection.cursor() as cursor:
        cursor.execute(sql, params)
        return pd.DataFrame.from_records(cursor.fetchall(), columns=columns)


# Kinds of value for `select_packed`: the server's binary send function and the numpy type it fills.
PACKED_KINDS = {
    "int8": ("int8send", ">i8"),
    "float8": ("float8send", ">f8"),
    "timestamptz": ("timestamptz_send", ">i8"),  # microseconds since 2000-01-01 00:00 UTC
    "int2": ("int2send", ">i2"),
}
POSTGRES_EPOCH_US = 946_684_800_000_000  # 2000-01-01 00:00 UTC in microseconds since 1970


def select_packed(fields: list[tuple[str, str, str]], from_where: str, params) -> pd.DataFrame:
    """`SELECT fields FROM from_where` as a frame, on PostgreSQL, for the refit's big reads (every reading of
    a chunk of capacitors).

    The server sends each value in its fixed-width binary form (the `*send` functions), every row's values
    joined into one bytea value, and numpy reads that buffer as a record array: no value is written out as
    text and parsed back, no Python runs per row, and the value comes as bytes (a cursor of binary results;
    a text result would come hex-encoded). Each field is (name, SQL expression that is never NULL, kind of
    `PACKED_KINDS`): the caller turns NULL into a stand-in (NaN, 0). A `timestamptz` comes back as UTC.
    """
    parts = " || ".join(f"{PACKED_KINDS[kind][0]}({expression})" for _, expression, kind in fields)
    record = np.dtype([(name, PACKED_KINDS[kind][1]) for name, _, kind in fields])
    connection.ensure_connection()
    with connection.wrap_database_errors:
        raw = psycopg.Cursor(connection.connection)
        raw.format = psycopg.pq.Format.BINARY
    cursor = connection.make_debug_cursor(raw) if connection.queries_logged else connection.make_cursor(raw)
    with cursor:
        cursor.execute(f"SELECT string_agg({parts}, ''::bytea) FROM {from_where}", params)
        data = cursor.fetchone()[0] or b""
    rows = np.frombuffer(data, dtype=record)
    frame = pd.DataFrame({name: rows[name].astype(rows.dtype[name].newbyteorder("=")) for name in record.names})
    for name, _, kind in fields:
        if kind == "timestamptz":
            frame[name] = pd.to_datetime(frame[name] + POSTGRES_EPOCH_US, unit="us", utc=True)
    return frame


def _row_texts_frame(data: bytes, columns: list[str]) -> pd.DataFrame:
    """Rows in PostgreSQL's text form of a row, less its parentheses, one a line: CSV where a
    value that is empty or holds a comma, quote, backslash, parenthesis or white space is quoted,
    with its quotes and backslashes doubled; NULL is an empty field."""
    table = arrow_csv.read_csv(
        io.BytesIO(data),
        read_options=arrow_csv.ReadOptions(column_names=columns, use_threads=False),
        parse_options=arrow_csv.ParseOptions(escape_char="\\", double_quote=True, newlines_in_values=True),
        convert_options=arrow_csv.ConvertOptions(
            null_values=[""], strings_can_be_null=True, quoted_strings_can_be_null=False
        ),
    )
    frame = table.to_pandas()
    for name, kind in zip(table.column_names, table.schema.types, strict=True):
        if pa.types.is_null(kind):  # every value NULL: NaN, as a CSV reader gives
            frame[name] = frame[name].astype(float)
    return frame


def side_by_side(first: Callable, *reads: Callable) -> list:
    """The results of `first` (on this connection, in this thread) and of `reads`, each read on a
    connection of its own at the same time, where those see what this one sees: on PostgreSQL
    outside a transaction, so that there is only committed data to see. Elsewhere (SQLite, or
    within a transaction: a caller's, a test's) all run here, one after the other.

    The server works on the reads on other cores meanwhile; for reads of a few hundred
    milliseconds (a new connection costs a few)."""
    if not reads or not on_postgresql() or connection.in_atomic_block:
        return [first(), *(read() for read in reads)]

    def on_own_connection(read: Callable):
        try:
            return read()
        finally:
            connection.close()  # this thread's own connection

    with ThreadPoolExecutor(max_workers=len(reads), thread_name_prefix="side-read") as pool:
        beside = [pool.submit(on_own_connection, read) for read in reads]
        return [first(), *(future.result() for future in beside)]


def copy_read_floor(model) -> tuple[int, float]:
    """Rows of the model's whole table read by COPY TO STDOUT, and the seconds it took:
    what any refit must at least spend reading them (PostgreSQL only)."""
    table = connection.ops.quote_name(model._meta.db_table)
    started = time.perf_counter()
    rows = 0
    with connection.cursor() as cursor, cursor.cursor.copy(f"COPY {table} TO STDOUT") as copy:
        for row in copy:
            rows += bytes(row).count(b"\n")
    return rows, time.perf_counter() - started
