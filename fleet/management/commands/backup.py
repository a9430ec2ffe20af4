from django.core.management.base import BaseCommand

from fleet.services.backup import write_backup


class Command(BaseCommand):
    help = "Write the whole database to FILE (.json, or .json.gz gzipped) for `manage.py restore`."

    def add_arguments(self, parser):
        parser.add_argument("file")
        parser.add_argument("--database", default="default")
        parser.add_argument("--replace", action="store_true", help="Write over a file of that name (an older backup).")

    def handle(self, *args, file, database, replace, **options):
        write_backup(file, database=database, replace=replace)
        self.stdout.write(f"Backup written to {file}.")
