"""Imports: upload, map columns, check, import, the rows to fix."""

from __future__ import annotations

import json
from functools import wraps

from django.contrib import messages
from django.core.exceptions import NON_FIELD_ERRORS, ValidationError
from django.http import Http404, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.utils.http import content_disposition_header

from fleet.filters import takes_parameters
from fleet.forms import ColumnMappingForm, ImportUploadForm
from fleet.imports.files import FileRefused
from fleet.models import ImportJob
from fleet.roles import importable_kinds, may_import, refused, scope_to_user
from fleet.services.import_jobs import (
    IMPORT_SHOWN,
    KINDS,
    WORKING,
    columns_left_out,
    create_job,
    deleted_file_words,
    end_stalled_jobs,
    no_worker_words,
    open_visits_shown,
    proposed_by_spelling,
    queue_check,
    queue_import,
    rejected_rows_csv,
)
from fleet.services.shown_values import SHOWN_VALUES, read_shown, stored_values


def _may_import_something(view):
    """The import pages are open to anyone who may import at least one kind of file."""

    @wraps(view)
    def guarded(request, *args, **kwargs):
        if not importable_kinds(request.user):
            raise refused(request.user, "fleet.import_readings")
        return view(request, *args, **kwargs)

    return guarded


@_may_import_something
@takes_parameters()
def imports_home(request):
    kinds = importable_kinds(request.user)
    form = ImportUploadForm(request.POST or None, request.FILES or None, kinds=kinds)
    if request.method == "POST" and form.is_valid():
        upload = form.cleaned_data["file"]
        job = create_job(kind=form.cleaned_data["kind"], filename=upload.name, content=upload.read(), user=request.user)
        return redirect("import_detail", job_id=job.id)
    end_stalled_jobs()
    jobs = scope_to_user(ImportJob.objects.defer("content"), request.user).order_by("-created_at")[:15]
    context = {
        "form": form,
        "jobs": jobs,
        "kinds": [(ImportJob.Kind(k).label, v.columns) for k, v in KINDS.items() if k in kinds],
    }
    return render(request, "fleet/imports.html", context)


@_may_import_something
def import_detail(request, job_id):
    end_stalled_jobs()
    job = get_object_or_404(scope_to_user(ImportJob.objects.defer("content"), request.user), pk=job_id)
    if not may_import(request.user, job.kind):
        raise Http404("No such import")
    kind = KINDS[job.kind]
    form = ColumnMappingForm(
        request.POST if request.POST.get("action") == "check" else None,
        ours=kind.columns,
        columns=job.columns,
        initial_mapping=job.mapping,
        required=kind.required,
    )
    if request.method == "POST":
        action = request.POST.get("action")
        # shown_values: the job's columns and counts as the page showed them (`import_jobs.IMPORT_SHOWN`)
        shown = read_shown(request.POST.get(SHOWN_VALUES)) if SHOWN_VALUES in request.POST else None
        try:
            if action == "check" and form.is_valid() and job.state not in WORKING:
                queue_check(job, form.mapping(), shown=shown)
                return redirect("import_detail", job_id=job.pk)
            importing = action in {ImportJob.Mode.ALL_OR_NOTHING, ImportJob.Mode.GOOD_ROWS}
            if importing and job.state == ImportJob.State.CHECKED:
                queue_import(job, action, shown=shown)
                return redirect("import_detail", job_id=job.pk)
        except ValidationError as error:
            if action != "check":  # the check as it is now is on the page
                messages.error(request, " ".join(error.message_dict[NON_FIELD_ERRORS]))
                return redirect("import_detail", job_id=job.pk)
            form.add_error(None, error)  # the columns as typed, each moved one and the top saying what moved
            job.refresh_from_db()
    context = {
        "job": job,
        "form": form,
        "working": job.state in WORKING,
        "waiting": no_worker_words(job),
        "can_map": bool(job.columns) and job.state not in {*WORKING, ImportJob.State.DONE} and not job.file_deleted_at,
        "file_deleted": deleted_file_words(job) if job.file_deleted_at else "",
        "errors": job.errors[:200],
        "left_out": columns_left_out(job.columns, job.mapping) if job.mapping else [],
        "spelt_near": proposed_by_spelling(job),
        "open_visits": open_visits_shown(job),
        "shown_values": json.dumps(stored_values(job, IMPORT_SHOWN)),
        # A required field no column holds, said at the top: before a check is asked, of the headings matched; after
        # one, of the columns chosen (in the summary, under the fields it lists).
        "missing": form.missing_words(form.cleaned_data if form.is_bound else job.mapping or {}),
    }
    return render(request, "fleet/import_detail.html", context)


@_may_import_something
def import_rejected(request, job_id):
    job = get_object_or_404(scope_to_user(ImportJob.objects.all(), request.user), pk=job_id)
    if not may_import(request.user, job.kind):
        raise Http404("No such import")
    try:
        content = rejected_rows_csv(job)
    except FileRefused as error:  # the file itself was refused: there are no rows to hand back
        messages.error(request, f"There are no rows to download: {error}")
        return redirect("import_detail", job_id=job.pk)
    response = HttpResponse(content, content_type="text/csv; charset=utf-8")
    stem = job.filename.rsplit(".", 1)[0]
    # The uploaded name may hold quotes or other scripts: Django writes the header by RFC 6266 (filename*).
    response["Content-Disposition"] = content_disposition_header(True, f"{stem}-rows-to-fix.csv")
    return response
