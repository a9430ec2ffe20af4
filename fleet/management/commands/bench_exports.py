"""Benchmark: the readings export in each format, time and peak memory, at two fleet sizes.

Builds (once, under their own sites) an invented fleet per size with `bench_fleet`'s builder, then
writes the readings of its first site as CSV, XLSX and Parquet through the same code the download uses: time on a
plain run, peak Python memory (tracemalloc) on a second; a bounded writer keeps it flat as rows grow.
Prints figures; asserts nothing.
"""

import time
import tracemalloc

from django.core.management.base import BaseCommand
from django.http import QueryDict

from fleet.exports import parquet_file, stream_csv, xlsx_file
from fleet.models import Reading, Site
from fleet.services.bench_fleet import FleetSize, build_bench_fleet, existing_bench_fleet
from fleet.services.exports import readings_table


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
        parser.add_argument("--capacitors", type=int, nargs=2, default=[1000, 4000])
        parser.add_argument("--readings-each", type=int, default=12)
        parser.add_argument("--skip-memory", action="store_true", help="Time only (the traced run is slow).")

    def handle(self, *args, capacitors, readings_each, skip_memory, **options):
        import pyarrow as pa

        self.stdout.write(f"{'rows':>8} {'format':>8} {'seconds':>8} {'MB out':>8} {'peak MB':>8}")
        for count in capacitors:
            prefix = f"BEXP{count}-"
            if not existing_bench_fleet(prefix):
                size = FleetSize(motors=count, capacitors=count, readings=count * readings_each)
                build_bench_fleet(size, prefix=prefix, progress=lambda _: None)
            site = Site.objects.filter(code__startswith=prefix).order_by("code").first()
            rows = Reading.objects.filter(fitted_capacitor__motor__site=site).count()
            query = QueryDict(mutable=True)
            query["site"] = site.code
            for file_format in ("csv", "xlsx", "parquet"):
                started = time.perf_counter()
                size = _consume(file_format, readings_table(query, None))
                seconds = time.perf_counter() - started
                peak = "-"
                if not skip_memory:  # a second, traced run: tracemalloc slows Python several times over
                    tracemalloc.start()
                    _consume(file_format, readings_table(query, None))
                    peak = f"{tracemalloc.get_traced_memory()[1] / 1e6:.1f}"
                    tracemalloc.stop()
                self.stdout.write(f"{rows:>8} {file_format:>8} {seconds:>8.2f} {size / 1e6:>8.1f} {peak:>8}")
        arrow_mb = pa.default_memory_pool().max_memory() / 1e6
        self.stdout.write(f"Arrow's own allocations, largest at any time in this process: {arrow_mb:.1f} MB")
