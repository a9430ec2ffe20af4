from django.core.management.base import BaseCommand

from fleet.services.backup import restore_backup, restored_words


class Command(BaseCommand):
    help = (
        "Load a backup written by `manage.py backup` into an empty, migrated database: exactly the file named "
        "(X.json or X.json.gz, whichever else is beside it). A database that already holds data is refused, "
        "always: restore into a new one. A backup that holds no records is refused unless --allow-empty."
    )

    def add_arguments(self, parser):
        parser.add_argument("file")
        parser.add_argument("--database", default="default")
        parser.add_argument(
            "--allow-empty",
            action="store_true",
            help="restore a backup that holds no records (nothing changes); without it such a backup is refused",
        )

    def handle(self, *args, file, database, allow_empty, **options):
        self.stdout.write(restored_words(restore_backup(file, database=database, allow_empty=allow_empty)))
