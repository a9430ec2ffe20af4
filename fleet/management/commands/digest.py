"""Send the planners' daily digest now (beat sends it every morning)."""

from django.core.management.base import BaseCommand, CommandError

from fleet.services.alerts import DigestNotSent, send_daily_digest


class Command(BaseCommand):
    help = "Email the planners what entered the top risk level or fell overdue since the last digest."

    def handle(self, *args, **options):
        try:
            sent = send_daily_digest()
        except DigestNotSent as error:
            raise CommandError(str(error)) from error
        self.stdout.write(f"{sent['new']} new conditions, {sent['ended']} ended; {sent['emails']} emails sent.")
