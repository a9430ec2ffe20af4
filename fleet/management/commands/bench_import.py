"""Benchmark: readings import, register import and circuit estimation, on a generated fleet.

Builds (once, under its own site) motors with run capacitors, writes a readings file of
`--rows` rows and a register file of `--register` motors, then times, each inside a
transaction that is rolled back (so the command can run again on the same database):
the COPY floor of the readings table (PostgreSQL; with and without the insert trigger; with the
foreign-key checks a commit runs, forced before the rollback),
the check of the readings file (the dry run), its import (check and write, before the
refits it queues), the nameplate circuit estimate per design, and the register import
with its circuit estimates. Prints wall seconds and, beside them, the CPU seconds of this process and
of its database server process (on a shared machine the steadier figure). Prints figures; asserts nothing.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import io
import time

import numpy as np
from django.core.management.base import BaseCommand
from django.db import connection, transaction
from django.utils import timezone

from fleet.engineering.nameplate import Nameplate, estimate_designs, estimate_parameters
from fleet.management.commands.bench_fleet import _cpu_seconds
from fleet.models import CapacitorPart, FittedCapacitor, ImportJob, Motor, Site
from fleet.services.circuits import estimate_circuits
from fleet.services.demo import DEMO_PARTS, DESIGNS, EXAMPLE_FAN_CIRCUIT, EXAMPLE_FAN_NAMEPLATE, FREQUENCY_HZ, VOLTAGE_V
from fleet.services.import_checks import insert_readings
from fleet.services.import_jobs import check_file, import_file

SITE_CODE = "BENCHIMP"
RUN_RATINGS_UF = (2.0, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0, 12.0, 16.0, 20.0, 25.0, 30.0, 35.0, 40.0, 50.0)
START_RATINGS_UF = (60.0, 80.0, 100.0, 120.0, 145.0, 180.0, 208.0, 250.0, 300.0, 350.0)


class _RolledBack(Exception):
    pass


@contextlib.contextmanager
def rolled_back():
    """Run a block inside a transaction that is always undone."""
    try:
        with transaction.atomic():
            yield
            raise _RolledBack
    except _RolledBack:
        pass


def bench_fleet(capacitors: int) -> Site:
    """A site of PSC fans, one run capacitor each, fitted three years ago (made once)."""
    code = f"{SITE_CODE}{capacitors}"
    site = Site.objects.filter(code=code).first()
    if site:
        return site
    fitted_on = timezone.localdate() - dt.timedelta(days=3 * 365)
    with transaction.atomic():
        site = Site.objects.create(
            code=code, name=f"Import benchmark, {capacitors} capacitors", time_zone="Europe/Madrid"
        )
        ensure_bench_parts()
        part = CapacitorPart.objects.get(code=_part_code("run", 4.0))
        motors = Motor.objects.bulk_create(
            [
                Motor(asset_tag=f"{code}-{i:06d}", site=site, **EXAMPLE_FAN_NAMEPLATE, **EXAMPLE_FAN_CIRCUIT)
                for i in range(capacitors)
            ],
            batch_size=2000,
        )
        FittedCapacitor.objects.bulk_create(
            [FittedCapacitor(motor=m, role="run", part=part, fitted_on=fitted_on) for m in motors], batch_size=2000
        )
    return site


def readings_file(site: Site, rows: int, seed: int = 5) -> bytes:
    """A readings CSV: quarterly readings of every capacitor, one in ten in circuit, site time without offset."""
    rng = np.random.default_rng(seed)
    tags = list(Motor.objects.filter(site=site).order_by("asset_tag").values_list("asset_tag", flat=True))
    first = timezone.localdate() - dt.timedelta(days=3 * 365 - 30)
    out = io.StringIO()
    out.write(
        "asset_tag,role,taken_at,method,capacitance_uf,capacitor_current_a,capacitor_voltage_v,"
        "case_temperature_c,ambient_temperature_c,esr_ohm,condition,notes\n"
    )
    for n in range(rows):
        tag = tags[n % len(tags)]
        quarter = n // len(tags)
        day = first + dt.timedelta(days=91 * quarter + int(rng.integers(0, 20)))
        minute = int(rng.integers(7 * 60, 17 * 60))
        taken = f"{day.isoformat()} {minute // 60:02d}:{minute % 60:02d}"
        capacitance = 4.0 * (1.0 - 0.004 * quarter) * (1.0 + rng.normal(0.0, 0.006))
        temperature = f"{rng.uniform(25, 45):.1f}"
        if n % 10 == 9:
            volts = rng.uniform(330, 370)
            amps = 2 * np.pi * FREQUENCY_HZ * capacitance * 1e-6 * volts
            out.write(f"{tag},run,{taken},in_circuit,,{amps:.4f},{volts:.1f},{temperature},21.0,,sound,\n")
        else:
            esr = f"{rng.uniform(0.01, 0.05):.3f}" if n % 4 == 0 else ""
            note = "dusty guard" if n % 97 == 0 else ""
            out.write(f"{tag},run,{taken},meter,{capacitance:.3f},,,{temperature},,{esr},sound,{note}\n")
    return out.getvalue().encode()


def bench_designs(count: int, seed: int = 11) -> list[dict]:
    """Distinct plausible nameplates: the demo's designs scaled in output, with the catalogue's nearest capacitors."""
    rng = np.random.default_rng(seed)
    rated_uf = {code: uf for code, uf, *_ in DEMO_PARTS}
    designs = []
    for n in range(count):
        template = DESIGNS[n % len(DESIGNS)]
        scale = float(rng.uniform(0.6, 1.6))
        sync_rpm = 120 * FREQUENCY_HZ / template.poles
        slip = (1 - template.rated_speed_rpm / sync_rpm) * float(rng.uniform(0.8, 1.2))
        run_uf = start_uf = 0.0
        if template.run_part:
            run_uf = min(RUN_RATINGS_UF, key=lambda r: abs(r - scale * rated_uf[template.run_part]))
        if template.start_part:
            start_uf = min(START_RATINGS_UF, key=lambda r: abs(r - scale * rated_uf[template.start_part]))
        designs.append(
            dict(
                application=template.application,
                motor_type=template.motor_type,
                load_type=template.load_type,
                poles=template.poles,
                output_w=round(template.output_w * scale),
                full_load_current_a=round(template.full_load_current_a * scale**0.9, 2),
                rated_speed_rpm=round(sync_rpm * (1 - slip)),
                run_uf=run_uf,
                start_uf=start_uf,
            )
        )
    return designs


def _part_code(role: str, rated_uf: float) -> str:
    return f"BENCH-IMP-{role.upper()}-{rated_uf:g}U"


def ensure_bench_parts() -> None:
    for role, ratings, volts, dielectric in (
        ("run", RUN_RATINGS_UF, 450, "film"),
        ("start", START_RATINGS_UF, 330, "electrolytic"),
    ):
        for rated_uf in ratings:
            CapacitorPart.objects.get_or_create(
                code=_part_code(role, rated_uf),
                defaults=dict(
                    rated_uf=rated_uf,
                    tolerance_minus_pct=5 if role == "run" else 0,
                    tolerance_plus_pct=5 if role == "run" else 20,
                    rated_voltage_v=volts,
                    dielectric=dielectric,
                    class_of_operation="B" if role == "run" else "D",
                ),
            )


def register_file(site: Site, motors: int, designs: list[dict], seed: int = 13) -> bytes:
    """A register CSV of `motors` new motors at `site`, their nameplates drawn from `designs`."""
    rng = np.random.default_rng(seed)
    fitted_on = (timezone.localdate() - dt.timedelta(days=400)).isoformat()
    out = io.StringIO()
    out.write(
        "asset_tag,site,location,application,motor_type,load_type,rated_voltage_v,frequency_hz,poles,"
        "output_w,full_load_current_a,rated_speed_rpm,commissioned_on,run_part_code,start_part_code,fitted_on\n"
    )
    for n in range(motors):
        d = designs[int(rng.integers(0, len(designs)))]
        run = _part_code("run", d["run_uf"]) if d["run_uf"] else ""
        start = _part_code("start", d["start_uf"]) if d["start_uf"] else ""
        out.write(
            f"REG{n:06d},{site.code},Bay {n % 40 + 1},{d['application']},{d['motor_type']},{d['load_type']},"
            f"{VOLTAGE_V:g},{FREQUENCY_HZ},{d['poles']},{d['output_w']},{d['full_load_current_a']},"
            f"{d['rated_speed_rpm']},{fitted_on},{run},{start},{fitted_on}\n"
        )
    return out.getvalue().encode()


def _import_all(kind: str, content: bytes):
    """The import as the command and the web page run it: all rows or none."""
    return import_file(kind=kind, filename=f"{kind}.csv", content=content, mode=ImportJob.Mode.ALL_OR_NOTHING)


READING_COPY_COLUMNS = (
    "fitted_capacitor_id, taken_at, method, capacitance_uf, condition, notes, outlier_confirmed, source, import_key, "
    "created_at"
)


class Command(BaseCommand):
    help = "Print readings-import rows/s (check and import), circuit-estimate seconds per design, register import."

    def add_arguments(self, parser):
        parser.add_argument("--rows", type=int, default=50_000, help="rows in the readings file")
        parser.add_argument("--capacitors", type=int, default=12_500, help="capacitors the readings belong to")
        parser.add_argument("--register", type=int, default=10_000, help="motors in the register file")
        parser.add_argument("--designs", type=int, default=100, help="distinct nameplates in the register file")
        parser.add_argument("--readings-only", action="store_true", help="skip circuit estimates and the register")

    def handle(self, *args, rows, capacitors, register, designs, readings_only, **options):
        self.stdout.write(f"database: {connection.vendor}; {dt.datetime.now(dt.UTC):%Y-%m-%d %H:%M} UTC")
        started = time.perf_counter()
        site = bench_fleet(capacitors)
        content = readings_file(site, rows)
        self.stdout.write(
            f"fleet and file ready in {time.perf_counter() - started:.1f} s ({len(content) / 2**20:.1f} MB)"
        )
        if connection.vendor == "postgresql":
            self._copy_floor(site, rows)
        self._readings(content, rows)
        if readings_only:
            return
        self._designs(bench_designs(designs))
        self._register(site, register, bench_designs(designs))

    def _report(self, what: str, seconds: float, rows: int, cpu: tuple[float, float] | None = None) -> None:
        used = f"; CPU {cpu[0]:.2f} s here + {cpu[1]:.2f} s database, {rows / sum(cpu):,.0f} rows/CPU-s" if cpu else ""
        self.stdout.write(f"{what}: {seconds:.2f} s for {rows:,} rows ({rows / seconds:,.0f} rows/s{used})")

    def _vacuum(self) -> None:
        """Rolled-back inserts leave dead rows and index entries that the next insert of the same keys
        must step over: clear them so every timed run starts alike (PostgreSQL, outside a transaction)."""
        if connection.vendor == "postgresql" and not connection.in_atomic_block:
            with connection.cursor() as cursor:
                cursor.execute("VACUUM fleet_reading, fleet_motor")

    def _cpu(self) -> tuple[float, float]:
        """CPU seconds so far of this process and of its database server process (PostgreSQL on this machine)."""
        server = 0.0
        if connection.vendor == "postgresql":
            with connection.cursor() as cursor:
                cursor.execute("SELECT pg_backend_pid()")
                (pid,) = cursor.fetchone()
            server = _cpu_seconds(pid)
        return _cpu_seconds(), server

    def _commit_checks(self) -> None:
        """Run now the deferred foreign-key checks a commit would run (the runs here are rolled back)."""
        if connection.vendor == "postgresql":
            with connection.cursor() as cursor:
                cursor.execute("SET CONSTRAINTS ALL IMMEDIATE")

    def _since(self, before: tuple[float, float]) -> tuple[float, float]:
        now = self._cpu()
        return now[0] - before[0], now[1] - before[1]

    def _copy_floor(self, site: Site, rows: int) -> None:
        """COPY IN of as many reading rows, with the insert trigger and with it off (rolled back both times)."""
        ids = list(FittedCapacitor.objects.filter(motor__site=site).order_by("id").values_list("id", flat=True))
        now = timezone.now()
        base = now - dt.timedelta(days=700)
        lines = [
            f"{ids[n % len(ids)]}\t{(base + dt.timedelta(minutes=n)).isoformat()}\tmeter\t3.9\tsound\t\tf\timport\t"
            f"{hashlib.sha256(str(n).encode()).hexdigest()[:40]}\t{now.isoformat()}\n"
            for n in range(rows)
        ]
        best = {False: float("inf"), True: float("inf")}
        cpu = {}
        for trigger_off in (False, True) * 3:  # alternated, best of three: other work on the machine varies
            self._vacuum()
            with rolled_back(), connection.cursor() as cursor:
                if trigger_off:
                    cursor.execute("ALTER TABLE fleet_reading DISABLE TRIGGER fleet_reading_not_after_removal")
                started, before = time.perf_counter(), self._cpu()
                with cursor.copy(f"COPY fleet_reading ({READING_COPY_COLUMNS}) FROM STDIN") as copy:
                    for start in range(0, rows, 10_000):
                        copy.write("".join(lines[start : start + 10_000]))
                self._commit_checks()
                seconds = time.perf_counter() - started
                if seconds < best[trigger_off]:
                    best[trigger_off], cpu[trigger_off] = seconds, self._since(before)
        self._report("COPY IN floor (best of 3), insert trigger on", best[False], rows, cpu[False])
        self._report("COPY IN (best of 3), insert trigger off", best[True], rows, cpu[True])
        self.stdout.write(f"  the insert trigger's cost: {(best[False] - best[True]) / rows * 1e6:+.1f} us a row")

    def _readings(self, content: bytes, rows: int) -> None:
        for run in ("first", "again"):
            started, before = time.perf_counter(), self._cpu()
            outcome = check_file(kind=ImportJob.Kind.READINGS, filename="bench.csv", content=content)
            self._report(f"readings check (dry run, {run})", time.perf_counter() - started, rows, self._since(before))
        result = outcome.result
        self.stdout.write(
            f"  {len(result.good):,} good, {result.error_rows} with problems, {result.duplicates} already in"
        )
        self._vacuum()
        with rolled_back():
            started, before = time.perf_counter(), self._cpu()
            outcome = _import_all(ImportJob.Kind.READINGS, content)
            self._commit_checks()
            self._report(
                "readings import (check and write, before refits)",
                time.perf_counter() - started,
                rows,
                self._since(before),
            )
            self.stdout.write(f"  imported {outcome.imported:,}; refused: {outcome.refused or 'no'}")
        self._vacuum()
        with rolled_back():
            started, before = time.perf_counter(), self._cpu()
            insert_readings(result.good)
            self._commit_checks()
            self._report(
                "  of which the write (COPY, triggers on)",
                time.perf_counter() - started,
                len(result.good),
                self._since(before),
            )

    def _designs(self, designs: list[dict]) -> None:
        plates = [
            Nameplate(
                VOLTAGE_V,
                FREQUENCY_HZ,
                d["poles"],
                d["output_w"],
                d["full_load_current_a"],
                d["rated_speed_rpm"],
                d["motor_type"],
                d["run_uf"],
                d["start_uf"],
            )
            for d in designs
        ]
        started = time.perf_counter()
        estimates = estimate_designs(plates)
        seconds = time.perf_counter() - started
        worst = max(e.fit_error_pct for e in estimates)
        self.stdout.write(
            f"circuit estimate: {seconds:.2f} s for {len(plates)} designs solved together "
            f"({seconds / len(plates):.4f} s a design; worst fit error {worst:.2f} %)"
        )
        sample = plates[: min(len(plates), 10)]
        started = time.perf_counter()
        for plate in sample:
            estimate_parameters(plate)
        seconds = time.perf_counter() - started
        self.stdout.write(f"  one design at a time: {seconds / len(sample):.4f} s a design ({len(sample)} designs)")

    def _register(self, site: Site, motors: int, designs: list[dict]) -> None:
        ensure_bench_parts()
        content = register_file(site, motors, designs)
        with rolled_back():
            started = time.perf_counter()
            outcome = _import_all(ImportJob.Kind.REGISTER, content)
            written = time.perf_counter() - started
            motor_ids = list(Motor.objects.filter(asset_tag__startswith="REG").values_list("id", flat=True))
            started = time.perf_counter()
            estimated = estimate_circuits(motor_ids)
            estimating = time.perf_counter() - started
            self.stdout.write(
                f"register import: {written:.2f} s for {outcome.imported:,} motors "
                f"(refused: {outcome.refused or 'no'}); "
                f"circuit estimates {estimating:.2f} s for {estimated:,} motors of {len(designs)} designs; "
                f"total {written + estimating:.1f} s"
            )
