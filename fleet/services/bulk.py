"""Rows in and out of the database in bulk, without model instances.

PostgreSQL moves rows by COPY (CSV); other databases (SQLite in development and
tests) by one batched INSERT or one SELECT. Writes here send no signals and write
no audit entries: they are for derived rows (assessments) and invented benchmark
fleets, never for register changes a person made.
"""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd
from django.db import connection
from django.db.models.expressions import RawSQL
from django.utils import timezone

SQLITE_BATCH_ROWS = 5000


def on_postgresql() -> bool:
    return connection.vendor == "postgresql"


def _completed(model, frame: pd.DataFrame) -> pd.DataFrame:
    """The frame with every other non-null column of the table filled from its field's default."""
    frame = frame.copy()
    for field in model._meta.concrete_fields:
        if field.column in frame.columns or field.primary_key and "id" not in frame.columns:
            continue
        if getattr(field, "auto_now_add", False) or getattr(field, "auto_now", False):
            frame[field.column] = timezone.now()
        elif field.has_default():
            frame[field.column] = field.get_db_prep_save(field.get_default(), connection)
        elif not field.null:
            raise ValueError(f"{model.__name__}.{field.name} has no value and no default")
    return frame


def insert_frame(model, frame: pd.DataFrame) -> int:
    """Insert the frame's rows (columns named as the table's; NaN or None for NULL). Returns the count.

    Text columns that are JSON are written as given (already JSON text).
    """
    if frame.empty:
        return 0
    frame = _completed(model, frame)
    table = connection.ops.quote_name(model._meta.db_table)
    columns = [connection.ops.quote_name(name) for name in frame.columns]
    if on_postgresql():
        nullable = [connection.ops.quote_name(f.column) for f in model._meta.concrete_fields if f.null]
        nullable = [name for name in nullable if name in columns]
        force_null = f", FORCE_NULL ({', '.join(nullable)})" if nullable else ""
        buffer = io.StringIO()
        frame.to_csv(buffer, header=False, index=False, na_rep="", quoting=csv.QUOTE_NONNUMERIC)
        statement = f"COPY {table} ({', '.join(columns)}) FROM STDIN WITH (FORMAT csv{force_null})"
        with connection.cursor() as cursor, cursor.cursor.copy(statement) as copy:
            copy.write(buffer.getvalue())
        return len(frame)
    for field in model._meta.concrete_fields:
        if field.column in frame.columns and field.get_internal_type() == "DateTimeField":
            stamps = pd.to_datetime(frame[field.column], utc=True)  # stored as naive UTC text, as Django does
            frame[field.column] = stamps.dt.tz_localize(None).dt.strftime("%Y-%m-%d %H:%M:%S.%f")
    values = frame.astype(object).where(frame.notna(), None)
    rows = [tuple(_plain(v) for v in row) for row in values.itertuples(index=False, name=None)]
    statement = f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({', '.join(['%s'] * len(columns))})"
    with connection.cursor() as cursor:
        for start in range(0, len(rows), SQLITE_BATCH_ROWS):
            cursor.executemany(statement, rows[start : start + SQLITE_BATCH_ROWS])
    return len(frame)


def _plain(value):
    """numpy scalars and pandas timestamps as the Python values a DB-API driver takes."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    return value


ROW_ID_MAX = 2**63 - 1  # the largest id a row can have (a signed 64-bit column)


def storable_ids(ids) -> list[int]:
    """The ids that could be a row's: a number from a form beyond them is no row (SQLite cannot
    even compare one, and stops the query with an overflow)."""
    return [int(i) for i in ids if 0 < int(i) <= ROW_ID_MAX]


def id_in(ids):
    """A value for an `__in` lookup that is one array parameter on PostgreSQL (Django prepares
    a list id by id, which costs more than the query for a chunk of thousands)."""
    ids = [int(i) for i in ids]
    if on_postgresql():
        return RawSQL("SELECT unnest(%s::bigint[])", (ids,))
    return ids


def select_frame(sql: str, params, columns: list[str]) -> pd.DataFrame:
    """The rows of one SELECT as a frame: COPY TO STDOUT on PostgreSQL, one fetch elsewhere.

    Strings come back as text, so the caller casts what it needs; NULL is NaN or None.
    """
    if on_postgresql():
        with (
            connection.cursor() as cursor,
            cursor.cursor.copy(f"COPY ({sql}) TO STDOUT WITH (FORMAT csv)", params) as copy,
        ):
            data = b"".join(bytes(block) for block in copy)
        if not data:
            return pd.DataFrame({name: pd.Series(dtype=object) for name in columns})
        return pd.read_csv(io.BytesIO(data), header=None, names=columns, keep_default_na=False, na_values=[""])
    with connection.cursor() as cursor:
        cursor.execute(sql, params)
        return pd.DataFrame.from_records(cursor.fetchall(), columns=columns)


def copy_read_floor(model) -> tuple[int, float]:
    """Rows of the model's whole table read by COPY TO STDOUT, and the seconds it took:
    what any refit must at least spend reading them (PostgreSQL only)."""
    import time

    table = connection.ops.quote_name(model._meta.db_table)
    started = time.perf_counter()
    rows = 0
    with connection.cursor() as cursor, cursor.cursor.copy(f"COPY {table} TO STDOUT") as copy:
        for row in copy:
            rows += bytes(row).count(b"\n")
    return rows, time.perf_counter() - started
