"""Build the invented demo scenario, analyse it, and serve the site."""

import os
import time

from django.conf import settings
from django.core.management import call_command
from django.core.management.base import BaseCommand

from fleet.services.backtest import run_backtest, start_backtest
from fleet.services.demo import (
    build_assessment_history,
    build_demo,
    build_work_orders,
    ensure_users,
    work_orders_by_state,
)
from fleet.services.lifedata import refresh_life_fits
from fleet.services.refits import start_fleet_refit


class Command(BaseCommand):
    help = "Migrate, create one user per role, build the demo fleet, refit it, and serve on 127.0.0.1:8000."

    def add_arguments(self, parser):
        parser.add_argument("--no-serve", action="store_true", help="Build and analyse, then stop.")
        parser.add_argument("--address", default="127.0.0.1:8000", help="Where to serve (default 127.0.0.1:8000).")
        parser.add_argument("--scale", type=float, default=1.0, help="Fleet size multiplier (1.0 = 290 motors).")

    def handle(self, *args, **options):
        call_command("migrate", verbosity=0)
        logins = ensure_users()
        started = time.perf_counter()
        outcome = build_demo(scale=options["scale"])
        if outcome["created"]:
            self.stdout.write(
                f"Built the demo fleet: {outcome['motors']} motors, {outcome['readings']} readings "
                f"({time.perf_counter() - started:.1f} s)."
            )
            started = time.perf_counter()
            backtest = run_backtest(start_backtest(queue=False).id)
            self.stdout.write(
                f"Back-tested the forecast at {len(backtest.cutoffs)} past quarters and calibrated its bands "
                f"({time.perf_counter() - started:.1f} s)."
            )
            started = time.perf_counter()
            history = build_assessment_history()
            self.stdout.write(
                f"Kept {history} assessments of the past four weeks, each from the readings of its day "
                f"({time.perf_counter() - started:.1f} s)."
            )
            started = time.perf_counter()
            run = start_fleet_refit(kind="demo", in_process=True)  # whole before the work orders, broker or not
            run.refresh_from_db()
            self.stdout.write(
                f"Refitted {run.done} capacitors from {run.readings} readings ({time.perf_counter() - started:.1f} s)."
            )
            build_work_orders()
            # After the work orders: the replacement recorded on the visit under way changes the life data, and
            # estimated before it, the life page said at once that the register had changed since (a walk).
            fits = refresh_life_fits()
            # Counted once the demo is built: issuing a visit moves planned orders to issued, and the
            # replacement recorded on the visit under way closes one of them.
            orders = work_orders_by_state()
            self.stdout.write(
                f"Stored the life data of {fits} parts; work orders: {orders['done']} done, "
                f"{orders['issued']} issued, {orders['planned']} planned, one visit under way."
            )
        else:
            self.stdout.write("The demo fleet is already there; nothing added.")
        self.stdout.write("\nSign in with one of these (user / password / role):")
        for username, password, role in logins:
            self.stdout.write(f"  {username:<10} {password:<20} {role}")
        if not options["no_serve"]:
            if "DEBUG" not in os.environ:
                # The demo is for people to try: a missing page or a refusal shows the site's own page, not
                # Django's debugging page with the project's URL patterns (DEBUG=true to see those).
                settings.DEBUG = False
            self.stdout.write(f"\nServing on http://{options['address']}/ (Ctrl+C to stop)\n")
            call_command("runserver", options["address"], use_reloader=False)
