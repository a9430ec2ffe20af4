"""Send the planners' daily digest now (beat sends it every morning)."""

from django.core.management.base import BaseCommand

from fleet.services.alerts import send_daily_digest


class Command(BaseCommand):
    help = "Email the planners what entered the top risk level or fell overdue since the last digest."

    def handle(self, *args, **options):
        sent = send_daily_digest()
        self.stdout.write(f"{sent['new']} new conditions, {sent['ended']} ended; {sent['emails']} emails sent.")
