"""Benchmark: fleet refit throughput, database to database, against a per-capacitor loop.

Generates (once, under its own site) a fleet of PSC fans with quarterly readings,
then times the chunked fleet refit (in-process without a broker, on the workers
with one) and the same refit called one capacitor at a time, as a naive loop
would. Prints figures; asserts nothing.
"""

import datetime as dt
import time

import numpy as np
from django.core.management.base import BaseCommand
from django.db import transaction
from django.utils import timezone

from fleet.models import CapacitorPart, FittedCapacitor, Motor, Reading, RefitRun, Site
from fleet.services.assessments import refit_installations
from fleet.services.demo import EXAMPLE_FAN_CIRCUIT, EXAMPLE_FAN_NAMEPLATE
from fleet.services.refits import start_fleet_refit


def generate_fleet(capacitors: int, readings_each: int, seed: int = 3) -> Site:
    code = f"BENCH{capacitors}"
    site = Site.objects.filter(code=code).first()
    if site:
        return site
    rng = np.random.default_rng(seed)
    today = timezone.localdate()
    with transaction.atomic():
        site = Site.objects.create(code=code, name=f"Benchmark fleet of {capacitors}")
        part, _ = CapacitorPart.objects.get_or_create(
            code="BENCH-RUN-4U0",
            defaults=dict(
                rated_uf=4.0,
                tolerance_minus_pct=5,
                tolerance_plus_pct=5,
                rated_voltage_v=450,
                dielectric=CapacitorPart.Dielectric.FILM,
                class_of_operation="B",
            ),
        )
        motors = Motor.objects.bulk_create(
            [
                Motor(
                    asset_tag=f"{code}-{i:06d}",
                    site=site,
                    route_order=i,
                    **EXAMPLE_FAN_NAMEPLATE,
                    **EXAMPLE_FAN_CIRCUIT,
                )
                for i in range(capacitors)
            ],
            batch_size=2000,
        )
        fitted_on = today - dt.timedelta(days=91 * (readings_each + 1))
        FittedCapacitor.objects.bulk_create(
            [FittedCapacitor(motor=m, role=FittedCapacitor.Role.RUN, part=part, fitted_on=fitted_on) for m in motors],
            batch_size=2000,
        )
        ids = list(FittedCapacitor.objects.filter(motor__site=site).order_by("id").values_list("id", flat=True))
        slope = -np.abs(rng.normal(1.2e-6, 4e-7, len(ids)))  # per calendar hour
        start = timezone.make_aware(dt.datetime.combine(fitted_on, dt.time(10)))
        batch = []
        for k in range(readings_each):
            taken = start + dt.timedelta(days=91 * (k + 1))
            hours = 91 * (k + 1) * 24.0
            values = 4.0 * (1.0 + slope * hours) * (1 + rng.normal(0, 0.006, len(ids)))
            batch += [
                Reading(
                    installation_id=i,
                    taken_at=taken,
                    method=Reading.Method.METER,
                    capacitance_uf=float(v),
                    case_temperature_c=35.0,
                    source="demo",
                )
                for i, v in zip(ids, values, strict=True)
            ]
            if len(batch) >= 50_000:
                Reading.objects.bulk_create(batch, batch_size=5000)
                batch = []
        Reading.objects.bulk_create(batch, batch_size=5000)
    return site


class Command(BaseCommand):
    help = "Print fleet-refit throughput (readings per second, end to end) beside a per-capacitor loop."

    def add_arguments(self, parser):
        parser.add_argument("--capacitors", type=int, default=20_000)
        parser.add_argument("--readings-each", type=int, default=12)
        parser.add_argument(
            "--loop-sample", type=int, default=200, help="Capacitors refitted one at a time (extrapolated)."
        )

    def handle(self, *args, **options):
        started = time.perf_counter()
        site = generate_fleet(options["capacitors"], options["readings_each"])
        self.stdout.write(f"fleet ready in {time.perf_counter() - started:.1f} s")
        ids = list(FittedCapacitor.objects.filter(motor__site=site).order_by("id").values_list("id", flat=True))
        readings = Reading.objects.filter(installation__motor__site=site).count()
        self.stdout.write(f"capacitors: {len(ids)}, readings: {readings} (the whole database is refitted)")

        started = time.perf_counter()
        run = start_fleet_refit(kind="bench", force=True)
        while RefitRun.objects.get(pk=run.pk).state == RefitRun.State.RUNNING:
            time.sleep(0.5)
        run.refresh_from_db()
        fleet_s = time.perf_counter() - started
        self.stdout.write(
            f"fleet refit: {fleet_s:.1f} s for {run.total} capacitors and {run.readings} readings "
            f"({run.readings / fleet_s:,.0f} readings/s, {run.total / fleet_s:,.0f} capacitors/s)"
        )

        sample = ids[: options["loop_sample"]]
        started = time.perf_counter()
        for installation_id in sample:
            refit_installations([installation_id], force=True)
        per_capacitor_s = (time.perf_counter() - started) / len(sample)
        per_reading = readings / len(ids)
        self.stdout.write(
            f"per-capacitor loop: {per_capacitor_s * 1e3:.1f} ms a capacitor "
            f"({per_reading / per_capacitor_s:,.0f} readings/s); "
            f"{per_capacitor_s * len(ids):.0f} s for this fleet (extrapolated from {len(sample)}); "
            f"speed-up {per_capacitor_s * len(ids) / fleet_s:.0f}x"
        )
