"""Benchmark: the fleet refit against the database's own read floor, in-process and on workers.

Builds (once per database) an invented fleet of the given size in bulk, then
prints in one run: the COPY read floor of the readings table, the fleet refit
end to end in-process and with 1 and 2 separate Celery workers (readings per
second, ratio to the floor, each worker's peak memory), a chunk's peak Python
memory, and a naive per-capacitor loop on a sample. Prints figures; asserts nothing.
"""

from __future__ import annotations

import os
import resource
import signal
import statistics
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

from celery import current_app
from django.conf import settings
from django.core.management.base import BaseCommand
from django.db import connection
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, Motor, Reading, RefitRun
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.bench_fleet import FleetSize, build_bench_fleet, existing_bench_fleet
from fleet.services.bulk import copy_read_floor, on_postgresql
from fleet.services.refits import start_fleet_refit

ROOT = Path(__file__).resolve().parents[3]


def _cpu_seconds(pid: int | None = None) -> float:
    """User + system CPU seconds of a process so far (this one by default); nan without /proc.
    Read beside the wall time: on a shared machine it is the steadier figure."""
    if pid is None:
        usage = resource.getrusage(resource.RUSAGE_SELF)
        return usage.ru_utime + usage.ru_stime
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return float("nan")
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


DATABASE_CONNECTIONS = "datname = current_database()"  # each server process connected to this database
SERVER_OWN = "backend_type <> 'client backend'"  # autovacuum, WAL writer, checkpointer, background writer


def _database_cpu_seconds(which: str = DATABASE_CONNECTIONS) -> dict[int, float]:
    """CPU seconds so far of the database server's processes `which` selects (PostgreSQL on this machine;
    empty otherwise): its connections to this database, or its own processes, whose work a refit causes but
    no connection is charged for."""
    if not on_postgresql():
        return {}
    with connection.cursor() as cursor:
        cursor.execute(f"SELECT pid FROM pg_stat_activity WHERE {which}")
        return {pid: _cpu_seconds(pid) for (pid,) in cursor.fetchall()}


def _machine_cpu_seconds() -> tuple[float, float]:
    """The machine's (busy, idle) CPU seconds so far, over all cores (/proc/stat; nan without it): whether
    a run left cores idle, or spent them in processes it does not count."""
    try:
        ticks = [int(n) for n in Path("/proc/stat").read_text().splitlines()[0].split()[1:9]]
    except OSError:
        return float("nan"), float("nan")
    idle = ticks[3] + ticks[4]  # idle and waiting on I/O
    return (sum(ticks) - idle) / os.sysconf("SC_CLK_TCK"), idle / os.sysconf("SC_CLK_TCK")


def _peak_rss_mb(pid: int) -> float:
    """Peak resident memory of a process (VmHWM), in MB; nan where /proc is not there."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return float("nan")


FLEET_TABLES = (Motor, FittedCapacitor, Reading, Assessment)


def analyze_tables() -> None:
    """VACUUM (ANALYZE) the fleet's tables, as autovacuum does on a server where it runs: after a
    bulk build (and the assessments of earlier runs) the planner needs the tables' statistics,
    or it plans for a few hundred rows and sorts and hashes millions on disk."""
    with connection.cursor() as cursor:
        for model in FLEET_TABLES:
            cursor.execute(f"VACUUM (ANALYZE) {connection.ops.quote_name(model._meta.db_table)}")


def _stop_on_sigterm(signum, frame):
    raise SystemExit(128 + signum)


class Command(BaseCommand):
    help = "Build an invented fleet (once) and print fleet-refit figures against the COPY read floor."

    def add_arguments(self, parser):
        parser.add_argument("--motors", type=int, default=100_000)
        parser.add_argument("--capacitors", type=int, default=150_000, help="Capacitors in service (positions).")
        parser.add_argument("--readings", type=int, default=2_000_000)
        parser.add_argument("--workers", type=int, nargs="*", default=[1, 2], help="Worker counts to run, e.g. 1 2.")
        parser.add_argument("--chunk-size", type=int, default=settings.FLEET_REFIT_CHUNK_SIZE)
        parser.add_argument("--loop-sample", type=int, default=100, help="Capacitors refitted one at a time.")
        parser.add_argument("--no-in-process", action="store_true", help="Skip the in-process refit.")

    def say(self, text: str) -> None:
        self.stdout.write(text)
        self.stdout.flush()

    def handle(self, *args, **options):
        parts = f", in parts of {settings.FLEET_REFIT_PART_SIZE}" if settings.FLEET_REFIT_PART_SIZE else ""
        self.say(f"database: {connection.vendor}, {os.cpu_count()} cores; chunk size {options['chunk_size']}{parts}")
        if existing_bench_fleet():
            self.say("using the benchmark fleet already in this database")
        else:
            started = time.perf_counter()
            size = FleetSize(options["motors"], options["capacitors"], options["readings"])
            counts = build_bench_fleet(size, progress=lambda text: self.say(f"  {text}"))
            self.say(f"fleet built in {time.perf_counter() - started:.1f} s: {counts}")
        if on_postgresql():
            started = time.perf_counter()
            analyze_tables()
            self.say(f"tables vacuumed and analyzed in {time.perf_counter() - started:.1f} s")
        readings = Reading.objects.count()
        self.say(f"database holds {FittedCapacitor.objects.count():,} capacitors and {readings:,} readings")

        floor_s = float("nan")
        if on_postgresql():
            # The fastest of three: a floor, not one run that may have met a cold cache or a busy core.
            runs = [copy_read_floor(Reading) for _ in range(3)]
            rows, floor_s = min(runs, key=lambda run: run[1])
            each = ", ".join(f"{seconds:.2f}" for _, seconds in runs)
            self.say(
                f"COPY read floor: {rows:,} reading rows in {floor_s:.2f} s ({rows / floor_s:,.0f} rows/s;"
                f" fastest of {each} s)"
            )
        self.chunk_memory(options["chunk_size"])
        self.chunk_cpu(options["chunk_size"])
        if not options["no_in_process"]:
            self.timed_refit("in-process", floor_s, options["chunk_size"], eager=True)
        for count in options["workers"]:
            if not settings.CELERY_BROKER_URL:
                self.say(f"{count} worker(s): skipped (no CELERY_BROKER_URL)")
                continue
            self.on_workers(count, floor_s, options["chunk_size"])
        self.naive_loop(options["loop_sample"], readings)

    def timed_refit(self, label: str, floor_s: float, chunk_size: int, eager: bool, workers=()) -> None:
        previous = current_app.conf.task_always_eager
        current_app.conf.task_always_eager = eager
        pids = [None, *(w.pid for w in workers)]
        cpu_before = [_cpu_seconds(pid) for pid in pids]
        database_before = _database_cpu_seconds()
        background_before = _database_cpu_seconds(SERVER_OWN)
        machine_before = _machine_cpu_seconds()
        try:
            started = time.perf_counter()
            started_at = timezone.now()
            run = start_fleet_refit(kind="bench", chunk_size=chunk_size, force=True)
            while RefitRun.objects.get(pk=run.pk).state in (RefitRun.State.RUNNING, RefitRun.State.QUEUED):
                time.sleep(0.2)
            seconds = time.perf_counter() - started
        finally:
            current_app.conf.task_always_eager = previous
        cpu = [_cpu_seconds(pid) - before for pid, before in zip(pids, cpu_before, strict=True)]
        database_cpu = sum(
            now - database_before.get(pid, 0.0) for pid, now in _database_cpu_seconds().items() if now == now
        )
        background_now = _database_cpu_seconds(SERVER_OWN)
        background_cpu = sum(now - background_before.get(pid, 0.0) for pid, now in background_now.items() if now == now)
        machine_busy, machine_idle = (
            after - before for after, before in zip(_machine_cpu_seconds(), machine_before, strict=True)
        )
        run.refresh_from_db()
        self.say(
            f"fleet refit, {label}: {seconds:.1f} s for {run.total:,} capacitors and {run.readings:,} readings "
            f"({run.readings / seconds:,.0f} readings/s; {seconds / floor_s:.1f}x the COPY read floor) "
            f"state {run.state}{': ' + run.message if run.message else ''}"
        )
        # The run's record is written once the part priors are fitted and the capacitors listed: the
        # time before it is the serial start, while the workers wait.
        before_chunks_s = (run.started_at - started_at).total_seconds()
        self.say(
            f"  before the chunks (part priors, capacitor list): {before_chunks_s:.1f} s; chunks and after: "
            f"{seconds - before_chunks_s:.1f} s"
        )
        self.say(
            f"  CPU: {cpu[0]:.1f} s in this process"
            + "".join(f", {c:.1f} s in worker {k + 1}" for k, c in enumerate(cpu[1:]))
            + f", {database_cpu:.1f} s in the database server's processes still connected"
            + f" ({(sum(cpu) + database_cpu) / max(run.readings, 1) * 1e6:.0f} CPU us a reading in all)"
        )
        self.say(
            f"  the server's own processes (autovacuum, WAL, checkpoints): {background_cpu:.1f} s; the machine: "
            f"{machine_busy:.1f} CPU-s busy, {machine_idle:.1f} idle"
        )

    def on_workers(self, count: int, floor_s: float, chunk_size: int) -> None:
        """Start `count` solo-pool workers on the configured broker, refit, read their peak memory."""
        current_app.control.purge()
        workers = [
            subprocess.Popen(
                [sys.executable, "-m", "celery", "-A", "config", "worker", "--pool", "solo", "--loglevel", "WARNING"]
                + ["-n", f"bench{k}-{os.getpid()}@%h", "--without-gossip", "--without-mingle"],
                cwd=ROOT,
                # Each worker keeps its database connection through the run, so the server's CPU
                # for its chunks is still there to be counted at the end.
                env=dict(os.environ, DB_CONN_MAX_AGE="3600"),
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
            )
            for k in range(count)
        ]
        # Stopped with SIGTERM (kill, a CI timeout), the workers go too: by default the signal ends this
        # process without running the `finally` below, and they were left polling the broker.
        previous = signal.signal(signal.SIGTERM, _stop_on_sigterm)
        try:
            deadline = time.monotonic() + 60
            while len(current_app.control.ping(timeout=0.5) or []) < count and time.monotonic() < deadline:
                time.sleep(0.5)
            self.timed_refit(f"{count} worker(s)", floor_s, chunk_size, eager=False, workers=workers)
            peaks = ", ".join(f"{_peak_rss_mb(w.pid):.0f} MB" for w in workers)
            self.say(f"  worker peak memory (RSS): {peaks}")
        finally:
            signal.signal(signal.SIGTERM, previous)
            for worker in workers:
                worker.terminate()
            for worker in workers:
                try:
                    worker.wait(timeout=30)
                except subprocess.TimeoutExpired:
                    worker.kill()

    def chunk_memory(self, chunk_size: int) -> None:
        ids = list(FittedCapacitor.objects.filter(removed_on__isnull=True).order_by("id").values_list("id", flat=True))
        ids = ids[:chunk_size]
        refit_fitted_capacitors(ids[:10], force=True)  # imports, stored priors: not the chunk's own memory
        tracemalloc.start()
        outcome = refit_fitted_capacitors(ids, force=True, part_size=settings.FLEET_REFIT_PART_SIZE)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        self.say(
            f"one chunk of {len(ids):,} capacitors ({outcome.readings:,} readings): "
            f"peak Python memory {peak / 2**20:.0f} MB (tracemalloc)"
        )

    def chunk_cpu(self, chunk_size: int, chunks: int = 5) -> None:
        """CPU seconds of a chunk in this process and in its database server process (median of a few
        chunks after the first), in parts as a worker refits it: the two sides a worker's chunk costs,
        steadier than wall time on a shared machine."""
        ids = list(FittedCapacitor.objects.filter(removed_on__isnull=True).order_by("id").values_list("id", flat=True))
        server_pid = None
        if on_postgresql():
            with connection.cursor() as cursor:
                cursor.execute("SELECT pg_backend_pid()")
                server_pid = cursor.fetchone()[0]
        worker_s, server_s = [], []
        for start in range(0, min(len(ids), chunk_size * chunks), chunk_size):
            before = time.process_time(), _cpu_seconds(server_pid) if server_pid else float("nan")
            refit_fitted_capacitors(
                ids[start : start + chunk_size], force=True, part_size=settings.FLEET_REFIT_PART_SIZE
            )
            worker_s.append(time.process_time() - before[0])
            server_s.append((_cpu_seconds(server_pid) if server_pid else float("nan")) - before[1])
        if len(worker_s) < 2:
            return
        self.say(
            f"one chunk of {chunk_size:,} capacitors, CPU (median of {len(worker_s) - 1} after the first): "
            f"{statistics.median(worker_s[1:]):.2f} s in this process, "
            f"{statistics.median(server_s[1:]):.2f} s in its database server process"
        )

    def naive_loop(self, sample_size: int, readings: int) -> None:
        ids = list(FittedCapacitor.objects.filter(removed_on__isnull=True).order_by("id").values_list("id", flat=True))
        if not ids or sample_size <= 0:
            return
        sample = ids[:sample_size]
        started = time.perf_counter()
        for fitted_capacitor_id in sample:
            refit_fitted_capacitors([fitted_capacitor_id], force=True)
        per_capacitor_s = (time.perf_counter() - started) / len(sample)
        self.say(
            f"naive per-capacitor loop: {per_capacitor_s * 1e3:.1f} ms a capacitor; "
            f"{per_capacitor_s * len(ids):,.0f} s for the {len(ids):,} in service (extrapolated from {len(sample)})"
        )
