"""Refit the fleet now, or only the stale capacitors, and print what was done."""

import time

from django.core.management.base import BaseCommand

from fleet.services.refits import start_fleet_refit, sweep_stale


class Command(BaseCommand):
    help = "Refit every capacitor in service (chunks across workers), or with --stale only those with newer readings."

    def add_arguments(self, parser):
        parser.add_argument(
            "--stale", action="store_true", help="Only capacitors whose newest reading is newer than their assessment."
        )

    def handle(self, *args, **options):
        started = time.perf_counter()
        if options["stale"]:
            count = sweep_stale()
            self.stdout.write(f"Refitted {count} stale capacitors in {time.perf_counter() - started:.1f} s.")
            return
        run = start_fleet_refit(kind="manual")
        run.refresh_from_db()
        self.stdout.write(
            f"Fleet refit {run.id}: {run.done} of {run.total} capacitors done ({run.get_state_display().lower()}), "
            f"{time.perf_counter() - started:.1f} s. With workers, progress shows on the Refits page."
        )
