"""Import jobs: upload, map, check (dry run), then import all-or-nothing or good rows."""

from __future__ import annotations

from collections import defaultdict

from django.db import transaction
from django.db.models import F

from fleet import imports
from fleet.exports import csv_bytes
from fleet.models import ImportJob

from .readings import enqueue_refit

SPECS = {
    ImportJob.Kind.READINGS: (imports.READING_COLUMNS, imports.check_readings),
    ImportJob.Kind.REGISTER: (imports.REGISTER_COLUMNS, imports.check_register),
}


def create_job(*, kind: str, filename: str, content: bytes, user) -> ImportJob:
    """Store the upload and propose a column mapping; a file that cannot be read is refused."""
    header, _ = imports.read_table(content, filename)
    ours = SPECS[kind][0]
    return ImportJob.objects.create(
        kind=kind,
        filename=filename[:200],
        content=content,
        columns=header,
        mapping=imports.suggest_mapping(header, ours),
        created_by=user if user and user.is_authenticated else None,
    )


def _check(job: ImportJob, track: bool):
    ours, checker = SPECS[job.kind]
    header, rows = imports.read_table(bytes(job.content), job.filename)
    frame = imports.mapped_frame(header, rows, job.mapping, ours)

    def progress(done):
        if track:
            ImportJob.objects.filter(pk=job.pk).update(done_rows=done)

    return checker(frame, on_progress=progress), header, rows


def check_job(job_id: int) -> ImportJob | None:
    """Dry run: count good, duplicate and bad rows and keep the first problems; writes no data."""
    job = ImportJob.objects.filter(pk=job_id).first()
    if job is None:
        return None
    ImportJob.objects.filter(pk=job.pk).update(state=ImportJob.State.CHECKING, done_rows=0)
    try:
        result, _, rows = _check(job, track=True)
    except imports.FileRefused as error:
        ImportJob.objects.filter(pk=job.pk).update(state=ImportJob.State.REFUSED, message=str(error))
        return ImportJob.objects.get(pk=job.pk)
    ImportJob.objects.filter(pk=job.pk).update(
        state=ImportJob.State.CHECKED,
        total_rows=result.total,
        done_rows=result.total,
        good_rows=len(result.good),
        duplicate_rows=result.duplicates,
        error_rows=result.error_rows,
        errors=[list(e) for e in result.errors[: imports.MAX_REPORTED_ERRORS]],
        message="",
    )
    return ImportJob.objects.get(pk=job.pk)


def run_job(job_id: int, mode: str) -> ImportJob | None:
    """Import after a fresh check (the register may have changed since the dry run).

    All or nothing: any bad row refuses the whole file. Good rows only: the bad
    rows stay out and can be downloaded to fix. Either way the good rows go in
    one transaction; rows already imported are skipped, so a second run adds nothing.
    """
    job = ImportJob.objects.filter(pk=job_id).first()
    if job is None:
        return None
    ImportJob.objects.filter(pk=job.pk).update(state=ImportJob.State.IMPORTING, mode=mode, done_rows=0)
    try:
        result, _, _ = _check(job, track=True)
    except imports.FileRefused as error:
        ImportJob.objects.filter(pk=job.pk).update(state=ImportJob.State.REFUSED, message=str(error))
        return ImportJob.objects.get(pk=job.pk)
    summary = dict(
        total_rows=result.total,
        good_rows=len(result.good),
        duplicate_rows=result.duplicates,
        error_rows=result.error_rows,
        errors=[list(e) for e in result.errors[: imports.MAX_REPORTED_ERRORS]],
    )
    if result.errors and mode == ImportJob.Mode.ALL_OR_NOTHING:
        ImportJob.objects.filter(pk=job.pk).update(
            state=ImportJob.State.REFUSED,
            imported_rows=0,
            message=f"{result.error_rows} rows have problems, so nothing was imported (all or nothing).",
            **summary,
        )
        return ImportJob.objects.get(pk=job.pk)
    with transaction.atomic():
        if job.kind == ImportJob.Kind.READINGS:
            touched = imports.insert_readings(result.good, job.created_by)
            transaction.on_commit(lambda: enqueue_refit(touched))
        else:
            motor_ids = imports.insert_register(result.good)
            transaction.on_commit(lambda: _estimate_later(motor_ids))
        ImportJob.objects.filter(pk=job.pk).update(
            state=ImportJob.State.DONE, imported_rows=len(result.good), done_rows=F("total_rows"), message="", **summary
        )
    return ImportJob.objects.get(pk=job.pk)


def _estimate_later(motor_ids):
    from fleet.tasks import estimate_circuits

    estimate_circuits.delay(motor_ids)


def rejected_rows_csv(job: ImportJob) -> bytes:
    """The bad rows as uploaded, with a last column saying what is wrong, field by field."""
    result, header, rows = _check(job, track=False)
    problems = defaultdict(list)
    for row, field_name, message in result.errors:
        problems[row].append(f"{field_name}: {message}")
    picked = [rows[number - 2] + ["; ".join(problems[number])] for number in sorted(problems)]
    return csv_bytes(header + ["problems"], picked)
