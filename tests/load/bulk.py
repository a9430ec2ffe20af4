"""Benchmark: the bulk writer and the long-list filter of fleet.services.bulk (prints figures, asserts nothing).

Not part of pytest (it wants PostgreSQL and a minute). On the benchmark site of `bench_import`
(10,000 capacitors, made once), each write inside a transaction that is rolled back, best of 3:

    DATABASE_URL=postgres://... .venv/bin/python -m tests.load.bulk

- 50,000 checked import readings written by `insert_readings` (one COPY; with the option that
  skips keys another import wrote meanwhile, and without it);
- the 10,000 assessments a refit of those capacitors writes (`insert_frame`);
- `field__any_of` against `field__in` for 1,000 and 10,000 ids and 10,000 and 50,000 import keys.
"""

from __future__ import annotations

import os
import time
from unittest import mock

import django

os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings")
django.setup()

import numpy as np  # noqa: E402
from django.db import connection, transaction  # noqa: E402

from fleet.management.commands.bench_import import bench_fleet, readings_file, rolled_back  # noqa: E402
from fleet.models import Assessment, FittedCapacitor, ImportJob, Reading  # noqa: E402
from fleet.services import assessments  # noqa: E402
from fleet.services.bulk import insert_frame  # noqa: E402
from fleet.services.import_checks import READING_NUMBERS, insert_readings  # noqa: E402
from fleet.services.import_jobs import check_file  # noqa: E402

READINGS = 50_000
CAPACITORS = 10_000


def checked_readings(site, seed: int):
    content = readings_file(site, READINGS, seed=seed)
    return check_file(kind=ImportJob.Kind.READINGS, filename="bench.csv", content=content).result.good


def best_rolled_back(write, runs: int = 3) -> float:
    """Seconds of the fastest of `runs` writes, each undone."""
    seconds = []
    for _ in range(runs):
        with rolled_back():
            started = time.perf_counter()
            write()
            seconds.append(time.perf_counter() - started)
    return min(seconds)


def best_ms(read, runs: int = 5) -> float:
    seconds = []
    for _ in range(runs):
        started = time.perf_counter()
        list(read())
        seconds.append(time.perf_counter() - started)
    return 1e3 * min(seconds)


def report(what: str, seconds: float, rows: int) -> None:
    print(f"{what}: {seconds * 1e3:,.0f} ms for {rows:,} rows ({rows / seconds:,.0f} rows/s)")


def main() -> None:
    print(f"database: {connection.vendor}")
    site = bench_fleet(CAPACITORS)
    good = checked_readings(site, seed=6)  # a file never committed: every row is new
    report("readings import write (skipping clashing keys)", best_rolled_back(lambda: insert_readings(good)), len(good))
    report(
        "  the same, one key already there (COPY refused, then ON CONFLICT DO NOTHING)",
        best_rolled_back(lambda: insert_readings(good.iloc[:1]) and insert_readings(good)),
        len(good),
    )
    frame = good.assign(source=Reading.Source.IMPORT.value)[
        ["fitted_capacitor_id", "taken_at", "method", *READING_NUMBERS, "condition", "notes", "source", "import_key"]
    ]
    report("readings write, no conflict option", best_rolled_back(lambda: insert_frame(Reading, frame)), len(frame))

    if not Reading.objects.filter(fitted_capacitor__motor__site=site).exists():
        with transaction.atomic():  # kept: the readings the refit below fits
            insert_readings(checked_readings(site, seed=5))
    ids = list(FittedCapacitor.objects.filter(motor__site=site).values_list("id", flat=True))
    written = {}
    with (
        rolled_back(),
        mock.patch.object(assessments, "insert_frame", side_effect=lambda _, rows: written.update(rows=rows)),
    ):
        assessments.refit_fitted_capacitors(ids, force=True)
    rows = written["rows"]
    report("assessments write", best_rolled_back(lambda: insert_frame(Assessment, rows)), len(rows))

    ids = np.array(ids, np.int64)
    for count in (1_000, 10_000):
        compare_filters(FittedCapacitor, "id", ids[:count], "ids")
    keys = np.array(Reading.objects.filter(fitted_capacitor__motor__site=site).values_list("import_key", flat=True))
    for count in (10_000, 50_000):
        compare_filters(Reading, "import_key", keys[:count], "text keys")


def compare_filters(model, field: str, values: np.ndarray, what: str) -> None:
    """`field__any_of` (one parameter) against `field__in` (one placeholder per value), same rows."""
    any_of = best_ms(lambda: model.objects.filter(**{f"{field}__any_of": values}).values_list("id", flat=True))
    listed = best_ms(lambda: model.objects.filter(**{f"{field}__in": values.tolist()}).values_list("id", flat=True))
    print(f"{len(values):,} {what}: any_of {any_of:.1f} ms, __in {listed:.1f} ms")


if __name__ == "__main__":
    main()
