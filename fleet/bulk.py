"""Bulk writes at the database's own pace: COPY on PostgreSQL.

Rows go in as columns (numpy arrays or pandas Series), written as one CSV by pyarrow
(no model instances, no per-row Python): missing values (None, NaN, NaT) become NULL,
empty text stays empty text. The database's constraints and row triggers apply to
every row, as for any INSERT.
"""

from __future__ import annotations

import io

import pandas as pd
import pyarrow as pa
from django.db import IntegrityError, connection, transaction
from psycopg.errors import UniqueViolation
from pyarrow import csv as arrow_csv


def _arrow(values) -> pa.Array:
    if isinstance(values, pd.Series) and isinstance(values.dtype, pd.DatetimeTZDtype):
        return pa.array(values.dt.tz_convert("UTC"), from_pandas=True).cast(pa.timestamp("us", tz="UTC"))
    return pa.array(values, from_pandas=True)


def _csv(columns: dict) -> bytes:
    table = pa.table({name: _arrow(values) for name, values in columns.items()})
    buffer = io.BytesIO()
    arrow_csv.write_csv(table, buffer, arrow_csv.WriteOptions(include_header=False, quoting_style="needed"))
    return buffer.getvalue()


def _copy(cursor, table: str, column_list: str, body: bytes) -> None:
    """COPY the CSV in; a refusal (a constraint, a trigger) is raised as Django's own database error."""
    statement = f"COPY {table} ({column_list}) FROM STDIN WITH (FORMAT csv)"
    with connection.wrap_database_errors, cursor.copy(statement) as copy:
        for start in range(0, len(body), 1 << 20):
            copy.write(body[start : start + (1 << 20)])


def copy_rows(table: str, columns: dict, *, skip_conflicts_on: str | None = None) -> None:
    """COPY the rows into `table` (PostgreSQL, inside the caller's transaction).

    With `skip_conflicts_on` (a unique column), a row whose value another writer put there
    meanwhile is skipped rather than refusing them all: the COPY runs in a savepoint, and
    only on a clash do the rows go again through a temporary table and
    INSERT ... ON CONFLICT DO NOTHING (slower, so not the first try).
    """
    if not columns or not len(next(iter(columns.values()))):
        return
    body = _csv(columns)
    column_list = ", ".join(connection.ops.quote_name(name) for name in columns)
    target = connection.ops.quote_name(table)
    with connection.cursor() as cursor:
        if not skip_conflicts_on:
            _copy(cursor, target, column_list, body)
            return
        try:
            with transaction.atomic():
                _copy(cursor, target, column_list, body)
            return
        except IntegrityError as error:
            if not isinstance(error.__cause__, UniqueViolation):
                raise
        staging = connection.ops.quote_name(f"{table}_staging")
        cursor.execute(
            f"CREATE TEMPORARY TABLE {staging} ON COMMIT DROP AS SELECT {column_list} FROM {target} WITH NO DATA"
        )
        _copy(cursor, staging, column_list, body)
        cursor.execute(
            f"INSERT INTO {target} ({column_list}) SELECT {column_list} FROM {staging} "
            f"ON CONFLICT ({connection.ops.quote_name(skip_conflicts_on)}) DO NOTHING"
        )
        cursor.execute(f"DROP TABLE {staging}")
