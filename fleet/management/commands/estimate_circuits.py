"""Fill motors' equivalent circuits: nameplate estimates, then commissioning readings."""

from django.core.management.base import BaseCommand

from fleet.services.circuits import estimate_circuits, fit_circuits_from_readings
from fleet.services.refits import start_fleet_refit


class Command(BaseCommand):
    help = (
        "Estimate circuits for motors that have none (one solve per design), refine them from the earliest "
        "reading with both winding currents, and optionally refit the fleet."
    )

    def add_arguments(self, parser):
        parser.add_argument("--refit", action="store_true", help="Refit every capacitor afterwards (forced).")

    def handle(self, *args, **options):
        estimated = estimate_circuits()
        outcome = fit_circuits_from_readings()
        self.stdout.write(
            f"{estimated} motors estimated from their nameplate; {outcome['fitted']} refined from readings, "
            f"{outcome['kept']} kept their nameplate estimate (readings not reproduced within 10 %)."
        )
        if options["refit"]:
            run = start_fleet_refit(kind="circuits", force=True)
            run.refresh_from_db()
            self.stdout.write(f"Refit {run.done} of {run.total} capacitors.")
