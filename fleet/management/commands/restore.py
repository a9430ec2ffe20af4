from django.core.management.base import BaseCommand

from fleet.services.backup import restore_backup


class Command(BaseCommand):
    help = (
        "Load a backup written by `manage.py backup` into an empty, migrated database. "
        "A database that already holds data is refused, always: restore into a new one."
    )

    def add_arguments(self, parser):
        parser.add_argument("file")
        parser.add_argument("--database", default="default")

    def handle(self, *args, file, database, **options):
        restore_backup(file, database=database)
        self.stdout.write(f"Restored {file}.")
