"""Imports: upload, map columns, check, import, the rows to fix."""

from __future__ import annotations

from django.contrib import messages
from django.contrib.auth.decorators import permission_required
from django.http import Http404, HttpResponse
from django.shortcuts import get_object_or_404, redirect, render

from fleet.forms import ColumnMappingForm, ImportUploadForm
from fleet.imports.files import FileRefused
from fleet.models import ImportJob
from fleet.roles import scope_to_user
from fleet.services.import_jobs import (
    KINDS,
    WORKING,
    create_job,
    end_stalled_jobs,
    queue_check,
    queue_import,
    rejected_rows_csv,
)

IMPORT_PERMISSION = {
    ImportJob.Kind.READINGS: "fleet.add_reading",
    ImportJob.Kind.REGISTER: "fleet.add_motor",
    ImportJob.Kind.SITES: "fleet.add_site",
    ImportJob.Kind.PARTS: "fleet.add_capacitorpart",
    ImportJob.Kind.HISTORY: "fleet.add_motor",
}


def _may_import(user, kind) -> bool:
    return user.has_perm(IMPORT_PERMISSION[kind])


@permission_required("fleet.add_reading", raise_exception=True)
def imports_home(request):
    form = ImportUploadForm(request.POST or None, request.FILES or None)
    if request.method == "POST" and form.is_valid():
        kind = form.cleaned_data["kind"]
        if not _may_import(request.user, kind):
            label = ImportJob.Kind(kind).label.lower()
            form.add_error("kind", f"Your role cannot import {label}; ask an administrator.")
        else:
            upload = form.cleaned_data["file"]
            job = create_job(kind=kind, filename=upload.name, content=upload.read(), user=request.user)
            return redirect("import_detail", job_id=job.id)
    end_stalled_jobs()
    jobs = scope_to_user(ImportJob.objects.defer("content"), request.user).order_by("-created_at")[:15]
    context = {"form": form, "jobs": jobs, "kinds": [(ImportJob.Kind(k).label, v.columns) for k, v in KINDS.items()]}
    return render(request, "fleet/imports.html", context)


@permission_required("fleet.add_reading", raise_exception=True)
def import_detail(request, job_id):
    end_stalled_jobs()
    job = get_object_or_404(scope_to_user(ImportJob.objects.defer("content"), request.user), pk=job_id)
    if not _may_import(request.user, job.kind):
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
        if action == "check" and form.is_valid() and job.state not in WORKING:
            queue_check(job, form.mapping())
            return redirect("import_detail", job_id=job.pk)
        if action in {ImportJob.Mode.ALL_OR_NOTHING, ImportJob.Mode.GOOD_ROWS} and job.state == ImportJob.State.CHECKED:
            queue_import(job, action)
            return redirect("import_detail", job_id=job.pk)
    context = {
        "job": job,
        "form": form,
        "working": job.state in WORKING,
        "can_map": bool(job.columns) and job.state not in {*WORKING, ImportJob.State.DONE},
        "errors": job.errors[:200],
    }
    return render(request, "fleet/import_detail.html", context)


@permission_required("fleet.add_reading", raise_exception=True)
def import_rejected(request, job_id):
    job = get_object_or_404(scope_to_user(ImportJob.objects.all(), request.user), pk=job_id)
    if not _may_import(request.user, job.kind):
        raise Http404("No such import")
    try:
        content = rejected_rows_csv(job)
    except FileRefused as error:  # the file itself was refused: there are no rows to hand back
        messages.error(request, f"There are no rows to download: {error}")
        return redirect("import_detail", job_id=job.pk)
    response = HttpResponse(content, content_type="text/csv; charset=utf-8")
    stem = job.filename.rsplit(".", 1)[0]
    response["Content-Disposition"] = f'attachment; filename="{stem}-rows-to-fix.csv"'
    return response
