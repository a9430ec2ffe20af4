"""Import a whole file from the command line, with the same checks and report as the web import."""

from pathlib import Path

from django.core.management.base import BaseCommand, CommandError
from django.db import OperationalError
from django.template.defaultfilters import pluralize
from django.urls import reverse

from fleet.faults import database_busy
from fleet.imports.files import FileRefused
from fleet.models import ImportJob
from fleet.services.import_jobs import KINDS, busy_words, import_file, waiting_words


class Command(BaseCommand):
    help = (
        "Import sites, parts, register, history, readings or days_off from a CSV or XLSX file with the documented "
        "headings. "
        "Every problem is listed by row and field. Exits non-zero when nothing was imported."
    )

    def add_arguments(self, parser):
        parser.add_argument("kind", choices=list(KINDS), help="what the file holds")
        parser.add_argument("file", type=Path)
        parser.add_argument("--dry-run", action="store_true", help="check every row and save nothing")
        parser.add_argument(
            "--good-rows-only",
            action="store_true",
            help="import the good rows and leave the bad ones out (default: any bad row refuses the whole file)",
        )

    def handle(self, *args, kind, file, dry_run, good_rows_only, **options):
        try:
            content = file.read_bytes()
        except OSError as error:
            raise CommandError(f"{file}: {error.strerror}") from error
        mode = ImportJob.Mode.GOOD_ROWS if good_rows_only else ImportJob.Mode.ALL_OR_NOTHING
        try:
            outcome = import_file(
                kind=kind,
                filename=file.name,
                content=content,
                mode=mode,
                dry_run=dry_run,
                on_waiting=lambda: self.stdout.write(waiting_words(kind)),
            )
        except FileRefused as error:
            raise CommandError(f"{file}: refused. {error}") from error
        except OperationalError as error:
            if not database_busy(error):
                raise
            raise CommandError(f"{file}: {busy_words('the command')}") from error
        result = outcome.result
        self.stdout.write(
            f"{file}: {result.total} row{pluralize(result.total)}: {len(result.good)} good, "
            f"{result.duplicates} already imported, {result.error_rows} with problems."
        )
        if outcome.left_out:
            self.stdout.write(
                f"Columns left out (no field of a {kind} file has these headings): {', '.join(outcome.left_out)}"
            )
        for row, field_name, message in result.errors:
            self.stdout.write(f"  row {row}, {field_name}: {message}")
        if outcome.refused:
            raise CommandError(outcome.refused)
        self._open_visits(outcome.open_visits, dry_run)
        if dry_run:
            if not len(result.good):
                raise CommandError("Dry run: nothing would be imported.")
            good = len(result.good)
            self.stdout.write(f"Dry run: nothing was saved; {good} row{pluralize(good)} would be imported.")
            return
        if not outcome.imported:
            raise CommandError("Nothing was imported.")
        if outcome.afterwards:
            self.stderr.write(self.style.WARNING(outcome.afterwards))
            return
        self.stdout.write(self.style.SUCCESS(f"Imported {outcome.imported} row{pluralize(outcome.imported)}."))

    def _open_visits(self, visits, dry_run):
        """Each open visit on a day the file makes a day off, for the planner to move (the days-off page warns
        the same way for a day added there)."""
        if not visits:
            return
        verb = "would be" if dry_run else "is now"
        self.stdout.write(
            f"{len(visits)} open visit{pluralize(len(visits))} on {pluralize(len(visits), 'a day,days')} "
            f"the file makes {pluralize(len(visits), 'a day,days')} off: move {pluralize(len(visits), 'it,them')} "
            "from the visit page (work orders, then the visit's sheet)."
        )
        for visit in visits:
            n, page = visit["orders"], reverse("visit_sheet", args=[visit["site_code"], visit["day"].isoformat()])
            self.stdout.write(
                f"  {visit['site_code']} {visit['day']:%a %Y-%m-%d} ({verb} a day off): a visit with {n} open work "
                f"order{pluralize(n)}, {page}"
            )
