"""Imports: read (within limits), map, check (dry run), then import all or nothing or the good rows.

One implementation for the web page (an ImportJob moved along by worker tasks) and
for `manage.py import` (the same `import_file`, run in the command's process).
Every job ends in a final state: a job that meets an unexpected error is marked
failed with a message (the traceback goes to the log), never left checking.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import fcntl
import functools
import hashlib
import logging
import os
import tempfile
from collections import defaultdict
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from django.conf import settings
from django.core.exceptions import NON_FIELD_ERRORS, ValidationError
from django.db import DatabaseError, OperationalError, connection, transaction
from django.template.defaultfilters import pluralize
from django.utils import timezone

from fleet.exports import csv_bytes
from fleet.faults import database_busy
from fleet.imports import columns, files
from fleet.models import CapacitorPart, FittedCapacitor, ImportJob, Motor, Site, SiteDayOff
from fleet.services import import_checks

from .readings import enqueue_refit
from .shown_values import comparable, locked_now, moved_meanwhile, stored_values
from .workorders import close_read_again_orders, open_visits_on

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class FollowUp:
    """Work an import starts once it has committed (queue refits, refresh life data): its failure is
    reported beside the rows imported, never taken for the import's."""

    what: str  # "the life-data refresh", as a report names it
    step: Callable[[], None]
    retry: str  # what does it later, or how to do it by hand


@dataclass(frozen=True)
class Kind:
    """What one kind of file holds, how it is checked and how its good rows are written."""

    columns: dict[str, str]
    required: tuple[str, ...]
    check: Callable
    write: Callable  # (good rows, user) -> [FollowUp], inside the import's transaction
    max_lengths: dict[str, int]
    site_column: str = ""  # names a row's motor (asset_tag) or site (site): a limited user imports there only
    visits_on: Callable | None = None  # (good rows, user) -> the open visits on the days they make days off
    # (good rows, when the check began) -> CheckResult of them held again to what other writers stored since, inside the
    # import's transaction, before the write (readings: the form's and the API's, `readings_stored_meanwhile`)
    stored_meanwhile: Callable | None = None


def _max_lengths(model, fields: dict[str, str]) -> dict[str, int]:
    """Our column -> the database column's length limit, for the CharFields a kind writes."""
    return {column: model._meta.get_field(name).max_length for column, name in fields.items()}


def _refits(fitted_capacitor_ids) -> FollowUp:
    return FollowUp(
        "the refit of the capacitors imported",
        lambda: enqueue_refit(fitted_capacitor_ids),
        "the sweep every 15 minutes refits them",
    )


def _write_sites(good, user):
    import_checks.insert_sites(good)
    return []


def _write_parts(good, user):
    import_checks.insert_parts(good)
    return []


def _write_readings(good, user):
    touched = import_checks.insert_readings(good)
    close_read_again_orders(fitted_capacitor_ids=touched, user=user)
    return [
        _refits(touched),
        FollowUp(
            "the count of capacitors that left tolerance",
            _refresh_tolerance_lives_later,
            "the nightly life-data refresh counts them",
        ),
    ]


def _write_register(good, user):
    motor_ids = import_checks.insert_register(good)
    return [
        FollowUp(
            "the motors' circuit estimates",
            lambda: _estimate_later(motor_ids),
            "run manage.py estimate_circuits to estimate them",
        )
    ]


def _write_days_off(good, user):
    import_checks.insert_days_off(good)
    return []


def _visits_on_days_off(good, user) -> list[dict]:
    """The open visits on the days off of a file's good rows (`workorders.open_visits_on`, the days-off
    page's rule): the import reports them, for the planner to move."""
    days = [dt.date.fromisoformat(day[:10]) for day in good["day"]]
    site_ids = import_checks.site_ids_in_any_case(good["site"])  # the check found each, in any case
    return open_visits_on(zip(site_ids, days, strict=True), user=user)


def _write_history(good, user):
    return [
        _refits(import_checks.insert_history(good)),
        FollowUp("the life-data refresh", _refresh_life_data_later, "the nightly life-data refresh runs it again"),
    ]


KINDS = {
    ImportJob.Kind.SITES: Kind(
        columns.SITE_COLUMNS,
        columns.SITE_REQUIRED,
        import_checks.check_sites,
        _write_sites,
        _max_lengths(Site, {"code": "code", "name": "name", "time_zone": "time_zone"}),
    ),
    ImportJob.Kind.PARTS: Kind(
        columns.PART_COLUMNS,
        columns.PART_REQUIRED,
        import_checks.check_parts,
        _write_parts,
        _max_lengths(CapacitorPart, {"code": "code", "description": "description", "duty": "duty"}),
    ),
    ImportJob.Kind.REGISTER: Kind(
        columns.REGISTER_COLUMNS,
        columns.REGISTER_REQUIRED,
        import_checks.check_register,
        _write_register,
        _max_lengths(Motor, {"asset_tag": "asset_tag", "location": "location", "insulation_class": "insulation_class"})
        | _max_lengths(FittedCapacitor, {"run_serial": "serial", "start_serial": "serial"}),
        "site",
    ),
    ImportJob.Kind.HISTORY: Kind(
        columns.HISTORY_COLUMNS,
        columns.HISTORY_REQUIRED,
        import_checks.check_history,
        _write_history,
        _max_lengths(FittedCapacitor, {"serial": "serial"}),
        "asset_tag",
    ),
    ImportJob.Kind.DAYS_OFF: Kind(
        columns.DAY_OFF_COLUMNS,
        columns.DAY_OFF_REQUIRED,
        import_checks.check_days_off,
        _write_days_off,
        _max_lengths(SiteDayOff, {"name": "name"}),
        "site",
        _visits_on_days_off,
    ),
    ImportJob.Kind.READINGS: Kind(
        columns.READING_COLUMNS,
        columns.READING_REQUIRED,
        import_checks.check_readings,
        _write_readings,
        {},
        "asset_tag",
        stored_meanwhile=import_checks.readings_stored_meanwhile,
    ),
}


@dataclass
class Outcome:
    result: columns.CheckResult
    header: list[str]
    rows: list[list[str]]
    mapping: dict = field(default_factory=dict)
    imported: int = 0
    refused: str = ""  # why nothing was imported though the file was read
    failed_afterwards: list[str] = field(default_factory=list)  # follow-ups that failed once the import was in
    open_visits: list[dict] = field(default_factory=list)  # open visits on the good rows' days (days off)

    @property
    def afterwards(self) -> str:
        """The follow-ups that failed, in words, after the rows imported ("" when none did)."""
        if not self.failed_afterwards:
            return ""
        return (
            f"Imported {self.imported} row{pluralize(self.imported)}; they are saved. Afterwards "
            + "; ".join(self.failed_afterwards)
            + ". The details are in the server log."
        )

    @property
    def left_out(self) -> list[str]:
        return columns_left_out(self.header, self.mapping)


def columns_left_out(header, mapping) -> list[str]:
    """The file's columns no field was mapped to: their values are not imported (a misspelt
    optional heading would otherwise drop its column unseen)."""
    mapped = set((mapping or {}).values())
    return [column for column in header if column not in mapped]


def proposed_by_spelling(job: ImportJob) -> list[tuple[str, str]]:
    """(column, field) of the headings matched to a field only because they spell it all but a letter or two
    (`columns.near_misses`, as `_read` proposes them) and still matched so: a guess the page asks the user to
    look at."""
    ours = KINDS[job.kind].columns
    near = columns.near_misses(job.columns, columns.suggest_mapping(job.columns, ours), ours)
    return [(column, field) for column, field in near.items() if (job.mapping or {}).get(field) == column]


def check_file(
    *, kind: str, filename: str, content: bytes, mapping: dict | None = None, on_progress=None, user=None
) -> Outcome:
    """Read the file (limits first), map its columns and check every row; writes nothing.

    `mapping` (our field -> the file's column) defaults to matching the headings by
    name. `on_progress(done, total)` is called as rows are checked. Rows for motors or
    sites outside the sites `user` works at are refused (None: a command, every site).
    """
    spec = KINDS[kind]
    header, rows = files.read_table(content, filename)
    if not mapping:  # matched by name (not by hand on the import page): a misspelt heading refuses the file
        mapping = columns.suggest_mapping(header, spec.columns)
        misspelt = columns.near_misses(header, mapping, spec.columns)
        if misspelt:
            raise files.FileRefused(
                "No field of a "
                + kind.replace("_", " ")
                + " file has the heading "
                + "; nor ".join(f"{column} ({field}?)" for column, field in misspelt.items())
                + ": its values would be left out. Correct the heading, or take the column out of the file."
            )
    missing = [name for name in spec.required if mapping.get(name) not in header]
    if missing:
        raise files.FileRefused(
            columns.missing_required_words(
                missing, header, "name the headings as documented, or match the columns by hand on the import page"
            )
        )
    if on_progress:
        on_progress(0, len(rows))
    frame = columns.mapped_frame(header, rows, mapping, spec.columns)
    formulas = columns.unsaved_formulas(header, rows, mapping, spec.columns)
    unstorable = columns.text_problems(frame, spec.max_lengths, formulas)
    columns.older_heading_disagreements(frame, header, rows, mapping, unstorable)
    storable = frame[~unstorable.bad].reset_index(drop=True)
    elsewhere = import_checks.outside_sites(storable, user, spec.site_column)
    result = spec.check(
        storable[~elsewhere.bad].reset_index(drop=True),
        on_progress=(lambda done: on_progress(done, len(rows))) if on_progress else None,
    )
    result.errors = sorted(result.errors + unstorable.items + elsewhere.items)
    result.total = len(frame)
    visits = spec.visits_on(result.good, user) if spec.visits_on and len(result.good) else []
    return Outcome(result=result, header=header, rows=rows, mapping=mapping, open_visits=visits)


def import_file(
    *,
    kind: str,
    filename: str,
    content: bytes,
    mode: str,
    mapping: dict | None = None,
    dry_run: bool = False,
    user=None,
    on_progress=None,
    on_written=None,
    on_waiting=None,
) -> Outcome:
    """Check the file, then write its good rows in one transaction (nothing when `dry_run`).

    All or nothing: any bad row refuses the whole file. Good rows only: the bad rows
    stay out. Rows already in the database are skipped, so a second run adds
    nothing. `on_written(outcome)` runs inside the transaction (the job's own record).
    The kind's follow-ups run once the transaction has committed; one that fails is
    logged and named in `outcome.failed_afterwards`, and the rows stay imported.
    An import (not a dry run) is checked and written while no other import of its kind is
    (`one_import_at_a_time`; `on_waiting()` is called if it has to wait for one).
    """
    with contextlib.nullcontext() if dry_run else one_import_at_a_time(kind, on_waiting):
        checked_from = timezone.now()
        outcome = check_file(
            kind=kind, filename=filename, content=content, mapping=mapping, on_progress=on_progress, user=user
        )
        result = outcome.result
        if _refused_whole(outcome, mode) or dry_run:
            return outcome
        with transaction.atomic():
            spec = KINDS[kind]
            if spec.stored_meanwhile and len(result.good):
                meanwhile = spec.stored_meanwhile(result.good, checked_from)
                result.good, result.duplicates = meanwhile.good, result.duplicates + meanwhile.duplicates
                result.errors = sorted(result.errors + meanwhile.errors)
                if _refused_whole(outcome, mode):
                    return outcome
            if len(result.good):
                for follow_up in spec.write(result.good, user if user and user.is_authenticated else None):
                    transaction.on_commit(functools.partial(_follow, follow_up, outcome))
            outcome.imported = len(result.good)
            if on_written:
                on_written(outcome)
    return outcome


def _refused_whole(outcome: Outcome, mode: str) -> bool:
    """All or nothing: any bad row refuses the whole file, said on `outcome.refused`. Whether it did."""
    rows = outcome.result.error_rows
    if not rows or mode != ImportJob.Mode.ALL_OR_NOTHING:
        return False
    outcome.refused = (
        f"{rows} row{pluralize(rows)} {pluralize(rows, 'has,have')} problems, so nothing was imported (all or nothing)."
    )
    return True


@contextlib.contextmanager
def one_import_at_a_time(kind: str, on_waiting=None):
    """Hold off any other import of `kind` from this one's check to its commit. Two imports of one file at
    once (two uploads, the command beside the page) each checked their rows as new before either wrote: the
    second saved nothing (the readings' key) or saved past capacitors twice (history), and reported its rows
    imported. Waiting here, the second's check finds the first's rows already imported and says so.

    A lock of the kind held outside any transaction, so the check's progress, written as it goes, stays in
    sight of the page and `on_waiting()` can say, before waiting, that this import waits its turn: on
    PostgreSQL a session advisory lock; on SQLite a file lock beside the database (`_sqlite_lock_path`).
    SQLite's own one-writer transaction held from the check on made every other write wait for the whole
    import, and after its busy timeout (10 s) the second import failed on "database is locked"."""
    if connection.vendor == "postgresql":
        with _advisory_lock(kind, on_waiting):
            yield
        return
    with open(_sqlite_lock_path(kind), "a+b") as lock_file:
        try:
            fcntl.flock(lock_file, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            if on_waiting:
                on_waiting()
            fcntl.flock(lock_file, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(lock_file, fcntl.LOCK_UN)


def _sqlite_lock_path(kind: str) -> Path:
    """The file whose lock holds the imports of `kind` on SQLite: beside the database file (every process that
    opens it sees the same); for an in-memory database (the tests'), one of this process's own in the
    temporary directory, as no other process can open that database."""
    name = str(connection.settings_dict["NAME"])
    if not connection.is_in_memory_db():
        return Path(f"{name}-import-{kind}.lock")
    digest = hashlib.sha256(name.encode()).hexdigest()[:12]
    return Path(tempfile.gettempdir()) / f"fleet-import-{os.getpid()}-{digest}-{kind}.lock"


@contextlib.contextmanager
def _advisory_lock(kind: str, on_waiting=None):
    """PostgreSQL's session advisory lock on the kind; `on_waiting()` is called before waiting for it."""
    key = f"fleet import {kind}"
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_try_advisory_lock(hashtext(%s))", [key])
        if not cursor.fetchone()[0]:
            if on_waiting:
                on_waiting()
            cursor.execute("SELECT pg_advisory_lock(hashtext(%s))", [key])
    try:
        yield
    finally:
        try:
            with connection.cursor() as cursor:
                cursor.execute("SELECT pg_advisory_unlock(hashtext(%s))", [key])
        except DatabaseError:  # a lost connection (or a failed transaction): the session's locks end with it
            log.warning("import of %s: its lock could not be released; closing the connection", kind, exc_info=True)
            if not connection.in_atomic_block:
                connection.close()


def _follow(follow_up: FollowUp, outcome: Outcome) -> None:
    """Run one follow-up of a committed import; a failure is logged and named on the outcome, never raised."""
    try:
        follow_up.step()
    except Exception as error:  # noqa: BLE001 - the import is in: whatever fails after it must not undo its report
        log.exception("after importing %s: %s failed", outcome.imported, follow_up.what)
        outcome.failed_afterwards.append(f"{follow_up.what} failed ({type(error).__name__}): {follow_up.retry}")


def create_job(*, kind: str, filename: str, content: bytes, user) -> ImportJob:
    """Store the upload and queue the reading of its headings; nothing is parsed here. Each upload deletes the
    files of jobs idle longer than FLEET_IMPORT_FILE_DAYS (`delete_old_files`)."""
    delete_old_files()
    job = ImportJob.objects.create(
        kind=kind,
        filename=filename[:200],
        content=content,
        created_by=user if user and user.is_authenticated else None,
    )
    transaction.on_commit(lambda: _queue("read_import", job.pk))
    return job


def delete_old_files(now: dt.datetime | None = None) -> int:
    """Delete the uploaded files of the jobs not at work whose last change is more than FLEET_IMPORT_FILE_DAYS
    before `now` (0: keep them all); returns how many. A file of 50 MB a week is 2.6 GB a year in the database,
    read by nothing once its job is done; the job keeps its counts and problems, and says when its file went."""
    days = settings.FLEET_IMPORT_FILE_DAYS
    if days <= 0:
        return 0
    now = now or timezone.now()
    deleted = (
        ImportJob.objects.filter(file_deleted_at__isnull=True, updated_at__lt=now - dt.timedelta(days=days))
        .exclude(state__in=WORKING)
        .update(content=b"", file_deleted_at=now)
    )
    if deleted:
        log.info("deleted the uploaded files of %d import jobs idle for %d days", deleted, days)
    return deleted


def deleted_file_words(job: ImportJob) -> str:
    """What the job's page says of a file deleted by `delete_old_files`."""
    return (
        f"the uploaded file was deleted on {timezone.localdate(job.file_deleted_at):%Y-%m-%d}, "
        f"{settings.FLEET_IMPORT_FILE_DAYS} days after its import last changed; this report stays. "
        "To check or import it again, upload the file again."
    )


def _queue(task_name: str, job_id: int, *args) -> None:
    """Send a job's next step to the workers; a queue that cannot be reached fails the job, with a message."""
    from fleet import tasks

    try:
        getattr(tasks, task_name).delay(job_id, *args)
    except Exception as error:  # noqa: BLE001 - any broker failure: say so on the job instead of leaving it waiting
        log.warning("import job %s: %s not queued (%s)", job_id, task_name, error)  # one line, as a reading's refit
        _update(
            job_id,
            state=ImportJob.State.FAILED,
            message="The task queue could not be reached, so the file was not processed. Try again in a few minutes.",
        )


# What the import page shows of a job that its two forms send back (`shown_values`): the columns chosen, which the
# columns form starts from, and the check's counts, which the import buttons name.
CHECK_SHOWN = ("mapping",)
IMPORT_SHOWN = ("mapping", "good_rows", "error_rows")


def queue_check(job: ImportJob, mapping: dict, shown: dict | None = None) -> bool:
    """Queue a dry run unless one step of the job is under way (decided in the UPDATE itself, so
    the button pressed twice at once queues one). Whether this call queued it.

    `shown` is the job as the page showed it (`CHECK_SHOWN`): columns another check chose meanwhile are not
    undone by a form that started from the ones before; refused by field (ValidationError), nothing queued."""
    jobs = ImportJob.objects.exclude(state__in=WORKING).filter(file_deleted_at__isnull=True)
    with transaction.atomic():
        _refuse_checked_meanwhile(job, shown, CHECK_SHOWN, sent={"mapping": comparable(mapping)})
        claimed = _claim(jobs, job, mapping=mapping, state=ImportJob.State.CHECKING)
    if claimed:
        transaction.on_commit(lambda: _queue("check_import", job.pk))
    return claimed


def queue_import(job: ImportJob, mode: str, shown: dict | None = None) -> bool:
    """Queue the import of a checked job, once: the button pressed twice at once (or again while
    it runs) queues one run, so the job's record is not overwritten by a run that finds every
    row a duplicate. Whether this call queued it.

    `shown` is the job as the page showed it (`IMPORT_SHOWN`): a file checked again meanwhile, with other
    columns or other counts, is not imported by a page that showed the check before (ValidationError)."""
    with transaction.atomic():
        _refuse_checked_meanwhile(job, shown, IMPORT_SHOWN, sent={})
        claimed = _claim(
            ImportJob.objects.filter(state=ImportJob.State.CHECKED, file_deleted_at__isnull=True),
            job,
            mode=mode,
            state=ImportJob.State.IMPORTING,
        )
    if claimed:
        transaction.on_commit(lambda: _queue("run_import", job.pk, mode))
    return claimed


def _refuse_checked_meanwhile(job: ImportJob, shown: dict | None, names: tuple, sent: dict) -> None:
    """Refuse, naming what moved, where another check of the job changed `names` since the page showed them
    (the job's row locked until the caller's transaction ends); nothing for `shown` None (a caller that showed
    nothing, as `manage.py import`)."""
    stored = locked_now(job, names) if shown is not None else None
    if stored is None:
        return
    now = stored_values(stored, names)
    moved = moved_meanwhile(shown, now, sent)
    if not moved:
        return
    words, at_fields = [], {}
    if "mapping" in moved:
        was, new = shown.get("mapping"), now["mapping"]
        was = was if isinstance(was, dict) else {}
        for name in sorted(name for name in {*was, *new} if was.get(name) != new.get(name)):
            change = f"from {_column_words(new.get(name))} (was {_column_words(was.get(name))})"
            words.append(f"{name} {change}")
            at_fields[name] = f"Chosen meanwhile by another check: {change}."
    words += [f"{name.replace('_', ' ')} {now[name]} (was {shown.get(name)})" for name in moved if name != "mapping"]
    summary = (
        f"This file was checked again on another page while this one was open: {'; '.join(words)}. Nothing was "
        "done: look at the file's check as it is now, then choose again."
    )
    raise ValidationError({NON_FIELD_ERRORS: [summary], **at_fields})


def _column_words(column) -> str:
    return f"column {column!r}" if column else "no column"


def _claim(jobs, job: ImportJob, **values) -> bool:
    """Move the job to its next step if it is among `jobs` (one conditional UPDATE)."""
    return bool(jobs.filter(pk=job.pk).update(updated_at=timezone.now(), done_rows=0, **values))


def _update(job_id: int, **values) -> None:
    ImportJob.objects.filter(pk=job_id).update(updated_at=timezone.now(), **values)


WORKING = (ImportJob.State.RECEIVED, ImportJob.State.CHECKING, ImportJob.State.IMPORTING)


WAITING_NOTE_AFTER_S = 60  # a step with no progress this long is said to be waiting for a worker


def no_worker_words(job: ImportJob, now: dt.datetime | None = None) -> str:
    """What the page says of a step in progress with no news for WAITING_NOTE_AFTER_S: most likely no worker has
    taken it (an operator's walk watched "Reading the file. This page refreshes by itself." for half an hour with
    no worker running); "" while it moves."""
    if job.state not in WORKING:
        return ""
    quiet_s = ((now or timezone.now()) - job.updated_at).total_seconds()
    if quiet_s < WAITING_NOTE_AFTER_S:
        return ""
    minutes = int(quiet_s // 60)
    return (
        f"No progress for {minutes} minute{'s' if minutes != 1 else ''}: the step waits for a worker to take it. "
        "If it stays so, the workers may not be running (an administrator starts them: README, On PostgreSQL and "
        "Redis); the job ends as failed, nothing imported, once it has waited longer than a task may run."
    )


def end_stalled_jobs() -> int:
    """Jobs in progress with no news for longer than a task may run lost their worker: mark them failed.

    A worker killed mid-import leaves nothing half-in (the import is one transaction), so
    the job can simply be checked again.
    """
    cutoff = timezone.now() - dt.timedelta(seconds=settings.CELERY_TASK_TIME_LIMIT + 60)
    return ImportJob.objects.filter(state__in=WORKING, updated_at__lt=cutoff).update(
        state=ImportJob.State.FAILED,
        updated_at=timezone.now(),
        message="The worker stopped before finishing (no progress for longer than a task may run). "
        "Nothing was imported; check the file again.",
    )


def _progress(job_id: int):
    def report(done, total):
        _update(job_id, done_rows=done, total_rows=total)

    return report


def _summary(outcome: Outcome) -> dict:
    result = outcome.result
    return dict(
        total_rows=result.total,
        done_rows=result.total,
        good_rows=len(result.good),
        duplicate_rows=result.duplicates,
        error_rows=result.error_rows,
        errors=[list(e) for e in result.errors[: columns.MAX_REPORTED_ERRORS]],
        open_visits=[[v["site_code"], v["day"].isoformat(), v["orders"]] for v in outcome.open_visits],
    )


def _guarded(step: Callable[[ImportJob], None]) -> Callable[[int], ImportJob | None]:
    """Run one step of a job; a refused file ends it refused, any other error ends it failed."""

    def run(job_id: int, *args) -> ImportJob | None:
        job = ImportJob.objects.filter(pk=job_id).first()
        if job is None:
            return None
        try:
            step(job, *args)
        except files.FileRefused as error:
            _update(job.pk, state=ImportJob.State.REFUSED, message=str(error))
        except Exception as error:  # noqa: BLE001 - whatever happens, the job must not stay in progress
            log.exception("import job %s (%s, %s) failed", job.pk, job.kind, job.filename)
            _mark_failed(job.pk, error)
        return ImportJob.objects.defer("content").get(pk=job.pk)

    return functools.wraps(step)(run)


def busy_words(what: str) -> str:
    """What an import says when SQLite's write lock stayed taken past the busy timeout: nothing saved, try again."""
    seconds = settings.FLEET_WRITE_WAIT_MS // 1000
    return (
        f"The database stayed busy with another write (a backup, or another large save) for longer than {seconds} s, "
        f"so {what} gave up. Nothing was imported. Import again once that write is done: the rows already in are "
        "skipped."
    )


def _mark_failed(job_id: int, error: Exception) -> None:
    if database_busy(error):
        _update(job_id, state=ImportJob.State.FAILED, message=busy_words("the import"))
        return
    lost = isinstance(error, DatabaseError)
    cause = "the database connection was lost or refused a write" if lost else "an unexpected error"
    message = (
        f"The import stopped on {cause} ({type(error).__name__}). Nothing was imported; the details are in the "
        "server log. Try again, or ask an administrator."
    )
    if lost and not connection.in_atomic_block:
        connection.close()  # a broken connection is replaced by a fresh one for the record below
    _update(job_id, state=ImportJob.State.FAILED, message=message)


def _read(job: ImportJob) -> None:
    """Read the file within the limits; keep its headings and propose a mapping by name (a heading a letter or two
    from a field's name proposed for that field: the page shows the mapping before anything is checked)."""
    _update(job.pk, state=ImportJob.State.RECEIVED, message="")
    header, rows = files.read_table(bytes(job.content), job.filename)
    ours = KINDS[job.kind].columns
    mapping = columns.suggest_mapping(header, ours)
    mapping.update({field: column for column, field in columns.near_misses(header, mapping, ours).items()})
    _update(job.pk, state=ImportJob.State.UPLOADED, columns=header, mapping=mapping, total_rows=len(rows))


def _check(job: ImportJob) -> None:
    """Dry run: count good, duplicate and bad rows and keep the first problems; writes no data."""
    _update(job.pk, state=ImportJob.State.CHECKING, done_rows=0, message="")
    outcome = check_file(
        kind=job.kind,
        filename=job.filename,
        content=bytes(job.content),
        mapping=job.mapping,
        on_progress=_progress(job.pk),
        user=job.created_by,
    )
    _update(job.pk, state=ImportJob.State.CHECKED, message="", **_summary(outcome))


def _run(job: ImportJob, mode: str) -> None:
    """Import after a fresh check (the register may have changed since the dry run)."""
    _update(job.pk, state=ImportJob.State.IMPORTING, mode=mode, done_rows=0, message="")

    def record(outcome: Outcome) -> None:
        message = imported_meanwhile_words(job.duplicate_rows, outcome)
        _update(
            job.pk, state=ImportJob.State.DONE, imported_rows=outcome.imported, message=message, **_summary(outcome)
        )

    outcome = import_file(
        kind=job.kind,
        filename=job.filename,
        content=bytes(job.content),
        mode=mode,
        mapping=job.mapping,
        user=job.created_by,
        on_progress=_progress(job.pk),
        on_written=record,
        on_waiting=lambda: _say_waiting(job),
    )
    if outcome.refused:
        _update(job.pk, state=ImportJob.State.REFUSED, imported_rows=0, message=outcome.refused, **_summary(outcome))
    elif outcome.afterwards:
        _update(
            job.pk,
            message=" ".join(filter(None, [imported_meanwhile_words(job.duplicate_rows, outcome), outcome.afterwards])),
        )


def _say_waiting(job: ImportJob) -> None:
    """Put `waiting_words` on the job's page. On SQLite a write can itself wait on the other import's write past
    the busy timeout: the words are then left unsaid, and the import waits its turn all the same."""
    try:
        _update(job.pk, message=waiting_words(job.kind))
    except OperationalError as error:
        if not database_busy(error):
            raise
        log.info("import job %s waits for another import of %s; the database was too busy to say so", job.pk, job.kind)


def waiting_words(kind: str) -> str:
    """What an import says while another import of its kind runs (`one_import_at_a_time`)."""
    what = ImportJob.Kind(kind).label.lower()
    return f"Waiting for another import of {what} to finish; this one is checked again once it has."


def imported_meanwhile_words(already_at_check: int, outcome: Outcome) -> str:
    """The rows the dry run found new that were in by the time the import ran (another import saved them
    meanwhile, or this one waited for it; or the reading form or the API saved the same reading): counted as
    already imported and not saved again ("" when none)."""
    meanwhile = outcome.result.duplicates - already_at_check
    if meanwhile <= 0:
        return ""
    return (
        f"{meanwhile} row{pluralize(meanwhile)} the check found new {pluralize(meanwhile, 'was,were')} already "
        f"imported when this import ran (another import, the reading form or the API saved "
        f"{pluralize(meanwhile, 'it,them')} meanwhile): "
        f"counted as already imported, not saved again; this import saved {outcome.imported} "
        f"row{pluralize(outcome.imported)}."
    )


read_job = _guarded(_read)
check_job = _guarded(_check)
run_job = _guarded(_run)


def _estimate_later(motor_ids):
    from fleet.tasks import estimate_circuits

    estimate_circuits.delay(motor_ids)


def _refresh_life_data_later():
    """Past capacitors change every part's life data: refit the stored Weibull fits now rather than
    leave the life-data page on "no fit yet" until the nightly refresh. A broker that is down
    leaves it to that refresh."""
    from fleet.tasks import QueueUnreachable, refresh_life_fits, send

    try:
        send(refresh_life_fits.s())
    except QueueUnreachable as error:
        log.warning("life data refresh not queued (%s); the nightly refresh will do it", error)


def _refresh_tolerance_lives_later():
    """Readings move each part's count of capacitors that left tolerance (the life-data and capacitor pages): counted
    again now, not at the next night's refresh (a round-trip audit found a new installation's pages on the count its
    history import made before any reading was in). A broker that is down leaves it to that refresh."""
    from fleet.tasks import QueueUnreachable, refresh_tolerance_lives, send

    try:
        send(refresh_tolerance_lives.s())
    except QueueUnreachable as error:
        log.warning("leaving-tolerance count not queued (%s); the nightly refresh will do it", error)


def open_visits_shown(job: ImportJob) -> list[dict]:
    """The open visits a checked or imported days-off job found on its days, as stored with it (site code,
    day, open orders), for its page."""
    if job.state not in (ImportJob.State.CHECKED, ImportJob.State.DONE):
        return []
    return [
        {"site_code": code, "day": dt.date.fromisoformat(day), "orders": orders}
        for code, day, orders in job.open_visits
    ]


def rejected_rows_csv(job: ImportJob) -> bytes:
    """The bad rows as uploaded, with a last column saying what is wrong, field by field, after the row's number
    in the uploaded file ("row 7: ..."), which the messages ("the same ... as row 2") and the page cite. A
    readings file without a `confirmed` column gets an empty one, for the rows whose message asks to confirm a
    value as re-checked. A file refused (or a job that failed) before its rows were checked raises FileRefused."""
    if job.file_deleted_at:
        raise files.FileRefused(deleted_file_words(job))
    if job.state == ImportJob.State.FAILED and not job.error_rows:
        # The file failed the worker before any row was checked: it is not read again here, in the request.
        raise files.FileRefused(job.message or "the file could not be checked. Upload it again.")
    outcome = check_file(
        kind=job.kind, filename=job.filename, content=bytes(job.content), mapping=job.mapping, user=job.created_by
    )
    problems = defaultdict(list)
    for row, field_name, message in outcome.result.errors:
        problems[row].append(f"{field_name}: {message}")
    position = {int(number): i for i, number in enumerate(files.row_numbers(outcome.rows))}
    unconfirmable = job.kind == ImportJob.Kind.READINGS and not (outcome.mapping or {}).get("confirmed")
    confirm = ["confirmed"] if unconfirmable else []
    blank = [""] * len(confirm)
    picked = [
        outcome.rows[position[number]] + blank + [f"row {number}: " + "; ".join(problems[number])]
        for number in sorted(problems)
    ]
    return csv_bytes(outcome.header + confirm + ["problems"], picked)
