"""Benchmark: the readings export in each format, time and peak memory, at two fleet sizes.

Generates (once, under their own sites) the benchmark fleets of `bench_refit`, then writes the
readings of each as CSV, XLSX and Parquet through the same code the download uses. Peak memory
is Python's (tracemalloc) plus pyarrow's own pool; a bounded writer keeps it flat as rows grow.
Prints figures; asserts nothing.
"""

import time
import tracemalloc

from django.core.management.base import BaseCommand
from django.http import QueryDict

from fleet.exports import parquet_file, stream_csv, xlsx_file
from fleet.services.exports import readings_table

from .bench_refit import generate_fleet


def _consume(file_format, table) -> int:
    """Write the table in one format; the size in bytes."""
    if file_format == "csv":
        return sum(len(line.encode()) for line in stream_csv(table))
    handle = xlsx_file(table) if file_format == "xlsx" else parquet_file(table)
    with handle:
        handle.seek(0, 2)
        return handle.tell()


class Command(BaseCommand):
    help = "Time the readings export as CSV, XLSX and Parquet, and measure its peak memory, at two sizes."

    def add_arguments(self, parser):
        parser.add_argument("--capacitors", type=int, nargs=2, default=[1000, 5000])
        parser.add_argument("--readings-each", type=int, default=12)

    def handle(self, *args, capacitors, readings_each, **options):
        import pyarrow as pa

        self.stdout.write(f"{'rows':>8} {'format':>8} {'seconds':>8} {'MB out':>8} {'peak MB':>8} {'arrow MB':>9}")
        for count in capacitors:
            site = generate_fleet(count, readings_each)
            for file_format in ("csv", "xlsx", "parquet"):
                query = QueryDict(mutable=True)
                query["site"] = site.code
                table = readings_table(query, None)
                pool = pa.default_memory_pool()
                pool.release_unused()
                tracemalloc.start()
                started = time.perf_counter()
                size = _consume(file_format, table)
                seconds = time.perf_counter() - started
                _, peak = tracemalloc.get_traced_memory()
                tracemalloc.stop()
                rows = count * readings_each
                self.stdout.write(
                    f"{rows:>8} {file_format:>8} {seconds:>8.2f} {size / 1e6:>8.1f} {peak / 1e6:>8.1f} "
                    f"{pool.max_memory() / 1e6:>9.1f}"
                )
