"""Pages. Each view checks the role's permission, calls a service, renders."""

from __future__ import annotations

import datetime as dt
import io
import uuid

import segno
from django.conf import settings
from django.contrib import messages
from django.contrib.auth.decorators import permission_required
from django.core.exceptions import PermissionDenied, ValidationError
from django.core.paginator import Paginator
from django.http import FileResponse, Http404, HttpResponse, JsonResponse, StreamingHttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.utils import timezone
from django.views.decorators.http import require_POST

from .charts import cost_curve_figure, weibull_plot_figure
from .engineering.capacitor import stored_energy_j
from .engineering.rules import RULES, parse_numbers
from .exports import parquet_file, stream_csv, xlsx_file
from .filters import BadFilter, plan_parameters
from .forms import LOCAL_MINUTE, ColumnMappingForm, FindMotorForm, ImportUploadForm, ReadingForm, ReplacementForm
from .imports import FileRefused
from .models import CapacitorPart, FittedCapacitor, ImportJob, Motor, Site
from .roles import scope_to_user
from .services import pages
from .services.exports import TABLES
from .services.import_jobs import (
    KINDS,
    WORKING,
    create_job,
    end_stalled_jobs,
    queue_check,
    queue_import,
    rejected_rows_csv,
)
from .services.lifedata import part_life
from .services.operating_pictures import motor_pictures
from .services.readings import NeedsConfirmation, reading_to_correct, record_reading, replace_capacitor
from .services.refits import queue_fleet_refit, recent_runs, stale_count
from .services.register import set_route_order, set_site_stock
from .services.substitutes import design_part, part_families, substitutes_for
from .services.workorders import issue_visit, open_visits, open_visits_page, plan_work_orders
from .tasks import QueueUnreachable


def home(request):
    context = {"find_form": FindMotorForm(), "sites": scope_to_user(Site.objects.all(), request.user)}
    if request.user.has_perm("fleet.view_assessment"):
        context["risks"] = pages.risk_summary(request.user)
        due = pages.replacement_plan(horizon_days=30, user=request.user)
        context["plan"], context["plan_total"] = due[:15], due.count()
        context["run"] = pages.latest_refit_run()
    return render(request, "fleet/home.html", context)


@permission_required("fleet.view_motor", raise_exception=True)
def find_motor(request):
    form = FindMotorForm(request.GET or None)
    matches, more = [], False
    if form.is_valid():
        text = form.cleaned_data["tag"]
        motor, matches, count = pages.find_motors(text, request.user)
        if motor is not None:
            return redirect("motor", asset_tag=motor.asset_tag)
        more = count > len(matches)
        if not matches:
            form.add_error(
                "tag", f"No motor's tag, place or site matches {text.strip()!r}. Check the label, or go by site below."
            )
    sites = scope_to_user(Site.objects.all(), request.user)
    return render(request, "fleet/find.html", {"find_form": form, "sites": sites, "matches": matches, "more": more})


@permission_required("fleet.view_motor", raise_exception=True)
def motor_detail(request, asset_tag):
    try:
        motor = pages.motor_with_capacitors(asset_tag)
    except Motor.DoesNotExist as error:
        raise Http404(f"No motor {asset_tag}") from error
    if not scope_to_user(Motor.objects.filter(pk=motor.pk), request.user).exists():
        raise Http404(f"No motor {asset_tag}")
    in_service = [c for c in motor.fitted if c.removed_on is None]
    removed = [c for c in motor.fitted if c.removed_on is not None]
    for capacitor in in_service:
        capacitor.assessment = capacitor.current[0] if capacitor.current else None
        capacitor.recent = pages.recent_readings(capacitor, 4)
    pictures = motor_pictures(in_service) if motor.has_circuit else {}
    for capacitor in in_service:
        capacitor.charts = [
            {"id": f"{name}-{capacitor.id}", "data_id": f"{name}-{capacitor.id}-data", "figure": figure}
            for name, figure in pictures.get(capacitor.id, {}).items()
        ]
    energy = max((_energy_j(c.part) for c in in_service), default=None)
    context = {"motor": motor, "in_service": in_service, "removed": removed, "energy_j": energy, "pictures": pictures}
    return render(request, "fleet/motor.html", context)


def _energy_j(part) -> float:
    """Worst-case stored energy: the part charged to the peak of its rated voltage."""
    return float(stored_energy_j(part.rated_uf, part.rated_voltage_v))


def _installation(request, installation_id) -> FittedCapacitor:
    """A fitted capacitor at one of the user's sites, or 404."""
    capacitors = scope_to_user(FittedCapacitor.objects.select_related("motor__site", "part"), request.user)
    return get_object_or_404(capacitors, pk=installation_id)


def _successor(installation) -> FittedCapacitor | None:
    """The capacitor fitted now in a removed capacitor's position (None while it is in service)."""
    if not installation.removed_on:
        return None
    return (
        FittedCapacitor.objects.filter(motor_id=installation.motor_id, role=installation.role, removed_on__isnull=True)
        .only("id", "fitted_on")
        .first()
    )


@permission_required("fleet.view_fittedcapacitor", raise_exception=True)
def capacitor_detail(request, installation_id):
    installation = _installation(request, installation_id)
    assessment = installation.assessments.filter(is_current=True).first()
    successor = _successor(installation)
    context = {
        "successor": successor,
        "installation": installation,
        "motor": installation.motor,
        "assessment": assessment,
        "chart": pages.trend_chart(installation, assessment),
        "readings": pages.recent_readings(installation, 40),
    }
    return render(request, "fleet/capacitor.html", context)


@permission_required("fleet.add_reading", raise_exception=True)
def reading_new(request, installation_id):
    installation = _installation(request, installation_id)
    needs_confirmation = False
    zone = installation.motor.site.time_zone
    if request.method == "POST":
        form = ReadingForm(request.POST, time_zone=zone)
        if form.is_valid():
            try:
                reading = record_reading(
                    installation=installation,
                    values=form.measured_values(),
                    user=request.user,
                    confirmed=form.cleaned_data["confirmed"],
                    client_key=form.cleaned_data["client_key"],
                    supersedes_id=form.cleaned_data["supersedes"],
                )
            except NeedsConfirmation as error:
                needs_confirmation = True
                form.add_error(None, error)
            except ValidationError as error:
                _add_errors(form, error)
                if "client_key" in error.message_dict:  # a page saved before, sent with new values: a new key
                    form.data = form.data.copy()
                    form.data["client_key"] = uuid.uuid4().hex
            else:
                saved = "was already saved (sent twice)" if reading.replayed else "saved"
                messages.success(
                    request,
                    f"Reading {saved} for {installation.motor.asset_tag} "
                    f"({installation.get_role_display().lower()} capacitor).",
                )
                # ?saved= tells the page to drop the draft the phone kept of this form.
                return redirect(f"{reverse('motor', args=[installation.motor.asset_tag])}?saved={installation.id}")
    else:
        form = ReadingForm(initial={"supersedes": request.GET.get("corrects")}, time_zone=zone)
    correcting, correction_problem = None, ""
    try:
        correcting = reading_to_correct(installation, form["supersedes"].value())
    except ValidationError as error:
        correction_problem = " ".join(error.messages)
    if correcting and not form.is_bound:  # a correction is taken when the reading it corrects was
        form.initial["taken_at"] = timezone.localtime(correcting.taken_at, form.zone).strftime(LOCAL_MINUTE)
    assessment = installation.assessments.filter(is_current=True).first()
    successor = _successor(installation)
    context = {
        "successor": successor,
        "installation": installation,
        "motor": installation.motor,
        "part": installation.part,
        "form": form,
        "needs_confirmation": needs_confirmation,
        "correcting": correcting,
        "correction_problem": correction_problem,
        "assessment": assessment,
        "recent": pages.recent_readings(installation),
        "energy_j": _energy_j(installation.part),
        "rules": RULES.as_dict(),
    }
    with timezone.override(form.zone):  # the last readings in the site's time, as the form takes it
        return render(request, "fleet/reading_form.html", context)


def _add_errors(form, error: ValidationError) -> None:
    """Attach a service's errors to the form's fields (unknown and hidden fields to the top)."""
    for field, field_messages in error.message_dict.items():
        shown = field in form.fields and not form.fields[field].widget.is_hidden
        form.add_error(field if shown else None, field_messages)


def _stock_message(request, successor) -> None:
    site = successor.motor.site.code
    if successor.from_stock:
        messages.info(request, f"Stock at {site}: {successor.stock_left} of {successor.part.code} left.")
    else:
        messages.warning(
            request, f"No {successor.part.code} was in stock at {site}: the replacement is recorded, the stock shows 0."
        )


@permission_required("fleet.add_fittedcapacitor", raise_exception=True)
def replace(request, installation_id):
    installation = _installation(request, installation_id)
    if installation.removed_on and request.method != "POST":  # a POST is refused by the service, with the form
        context = {"installation": installation, "motor": installation.motor, "successor": _successor(installation)}
        return render(request, "fleet/replace.html", context)
    design = design_part(installation)
    form = ReplacementForm(request.POST or None, installation=installation, design=design)
    if request.method == "POST" and form.is_valid():
        try:
            successor = replace_capacitor(
                installation=installation,
                part=form.cleaned_data["part"],
                removed_on=form.cleaned_data["removed_on"],
                reason=form.cleaned_data["removal_reason"],
                user=request.user,
                serial=form.cleaned_data["serial"],
                notes=form.cleaned_data["notes"],
                substitute_override=form.cleaned_data["substitute_override"],
                override_reason=form.cleaned_data["override_reason"],
            )
        except ValidationError as error:
            _add_errors(form, error)
        else:
            if successor.replayed:
                messages.success(
                    request,
                    "This replacement was already recorded (sent twice). Log the new capacitor's first reading now.",
                )
            else:
                messages.success(request, "Replacement recorded. Log the new capacitor's first reading now.")
                _stock_message(request, successor)
            return redirect("reading_new", installation_id=successor.id)
    advice = substitutes_for(installation)
    choosable = set(form.fields["part"].queryset.values_list("id", flat=True))
    chosen = str(form["part"].value() or "")
    context = {
        "installation": installation,
        "motor": installation.motor,
        "form": form,
        "energy_j": _energy_j(installation.part),
        "advice": advice,
        "singles": [i for i in advice["items"] if i["arrangement"] == "single" and i["part_ids"][0] in choosable],
        "pairs": [i for i in advice["items"] if i["arrangement"] != "single" and i["verdict"] != "unsuitable"],
        "chosen": chosen,
        "design": design,
    }
    return render(request, "fleet/replace.html", context)


ROUTE_PAGE_SIZE = 100  # motors a route page lists
LABELS_PAGE_SIZE = 24  # labels a page prints: one sheet of 3 x 8


@permission_required("fleet.view_motor", raise_exception=True)
def site_route(request, site_code):
    site = get_object_or_404(scope_to_user(Site.objects.all(), request.user), code=site_code)
    order_errors = {}
    if request.method == "POST":
        if not request.user.has_perm("fleet.change_motor"):
            raise PermissionDenied
        positions = {
            int(k.removeprefix("order-")): v
            for k, v in request.POST.items()
            if k.startswith("order-") and k[6:].isdigit()
        }
        try:
            set_route_order(site=site, positions=positions)
        except ValidationError as error:
            order_errors = error.message_dict
        else:
            messages.success(request, "Walking order saved.")
            return redirect(f"{reverse('route', args=[site.code])}?{request.GET.urlencode()}")
    only_due = request.GET.get("show") == "due"
    motors, counts, quarter_start = pages.route_for_site(site, only_due=only_due)
    context = {
        "site": site,
        "page": Paginator(motors, ROUTE_PAGE_SIZE).get_page(request.GET.get("page")),
        "total": counts["total"],
        "due": counts["due"],
        "only_due": only_due,
        "quarter_start": quarter_start,
        "order_errors": order_errors,
    }
    return render(request, "fleet/route.html", context)


def _qr_svg(request, motor: Motor) -> str:
    url = request.build_absolute_uri(reverse("motor", kwargs={"asset_tag": motor.asset_tag}))
    buffer = io.BytesIO()
    segno.make(url, error="m").save(buffer, kind="svg", scale=4, border=1, xmldecl=False, svgns=True)
    return buffer.getvalue().decode()


@permission_required("fleet.view_motor", raise_exception=True)
def labels(request, site_code):
    site = get_object_or_404(scope_to_user(Site.objects.all(), request.user), code=site_code)
    motors = Motor.objects.filter(site=site).order_by("route_order", "asset_tag")
    tag = request.GET.get("tag")
    if tag:
        motors = motors.filter(asset_tag=tag)
    page = Paginator(motors, LABELS_PAGE_SIZE).get_page(request.GET.get("page"))
    labels_ = [{"motor": m, "qr": _qr_svg(request, m)} for m in page.object_list]
    return render(request, "fleet/labels.html", {"site": site, "labels": labels_, "page": page, "tag": tag})


EXPORT_TYPES = {
    "csv": "text/csv; charset=utf-8",
    "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet",
    "parquet": "application/vnd.apache.parquet",
}


def _export_table(request, kind):
    """The table of an export the user may download, filtered by the query string (404, 403 or 400)."""
    if kind not in TABLES:
        raise Http404("No such export")
    builder, permission = TABLES[kind]
    if not request.user.has_perm(permission):
        raise PermissionDenied
    return builder(request.GET, request.user, request=request)


def export(request, kind, file_format):
    """An export as CSV (streamed), XLSX or Parquet (written a chunk at a time to a temporary file)."""
    if file_format not in EXPORT_TYPES:
        raise Http404("Exports download as .csv, .xlsx or .parquet")
    try:
        table = _export_table(request, kind)
    except BadFilter as error:
        return HttpResponse(f"Cannot read the filter: {error}", status=400, content_type="text/plain; charset=utf-8")
    name = f"{kind}-{timezone.localdate():%Y-%m-%d}.{file_format}"
    if file_format == "csv":
        response = StreamingHttpResponse(stream_csv(table), content_type=EXPORT_TYPES["csv"])
        response["Content-Disposition"] = f'attachment; filename="{name}"'
    else:
        handle = xlsx_file(table) if file_format == "xlsx" else parquet_file(table)
        response = FileResponse(handle, as_attachment=True, filename=name, content_type=EXPORT_TYPES[file_format])
    about = reverse("export_about", args=[kind])
    query = request.GET.urlencode()
    response["Link"] = f'<{about}{"?" + query if query else ""}>; rel="describedby"'
    return response


def export_about(request, kind):
    """The sidecar of an export: each column's type, unit and meaning, the model version, the filters."""
    try:
        table = _export_table(request, kind)
    except BadFilter as error:
        return JsonResponse({"error": str(error)}, status=400)
    return JsonResponse(table.describe(), json_dumps_params={"ensure_ascii": False})


def plan_export(request, file_format):
    """The replacement plan for the planner's own spreadsheet (the plan page's site and horizon)."""
    return export(request, "plan", file_format)


@permission_required("fleet.view_assessment", raise_exception=True)
def plan(request):
    site, horizon, problems = plan_parameters(request.GET, request=request)
    for problem in problems:
        messages.warning(request, f"Ignored {problem}")
    paginator = Paginator(pages.replacement_plan(horizon, site, request.user), 50)
    page = paginator.get_page(request.GET.get("page"))
    context = {
        "page": page,
        "horizon": horizon,
        "site": site,
        "sites": scope_to_user(Site.objects.all(), request.user),
        "spares": pages.spares_needed(horizon, site, request.user),
        "risks": pages.risk_summary(request.user),
    }
    context["worse"], context["better"], context["changes"] = pages.risk_changes(days=7, user=request.user)
    return render(request, "fleet/plan.html", context)


QUEUE_DOWN = (
    "The task queue is unreachable ({error}). {what} did not start; nothing is lost. Try again once the queue is back."
)


@permission_required("fleet.view_refitrun", raise_exception=True)
def refits(request):
    context = {
        "runs": recent_runs(10),
        "stale": stale_count(),
        "abandoned_minutes": round(settings.FLEET_REFIT_ABANDONED_AFTER_S / 60),
    }
    return render(request, "fleet/refits.html", context)


@require_POST
@permission_required("fleet.add_refitrun", raise_exception=True)
def refit_start(request):
    try:
        queue_fleet_refit()
    except QueueUnreachable as error:
        messages.error(request, QUEUE_DOWN.format(error=error, what="The fleet refit"))
    else:
        messages.success(request, "Fleet refit queued. Progress shows below.")
    return redirect("refits")


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


@permission_required("fleet.view_fittedcapacitor", raise_exception=True)
def life_data(request):
    """Weibull analysis of one part's capacitors; costs are the engineer's to set."""
    parts = CapacitorPart.objects.order_by("dielectric", "code")
    asked = request.GET.get("part")
    part = parts.filter(code=asked).first() if asked else None
    if asked and part is None:
        messages.warning(request, f"No part with the code {asked}: showing the first part instead.")
    part = part or parts.first()
    planned_cost = _float_param(request, "planned_cost", 60.0)
    failure_cost = _float_param(request, "failure_cost", 400.0)
    context = {"parts": parts, "part": part, "planned_cost": planned_cost, "failure_cost": failure_cost}
    if part is not None:
        life = part_life(part.id, planned_cost, failure_cost)
        context["life"] = life
        if life["fit"] is not None:
            plot_t, plot_f = life["plot_points"]
            context["weibull_chart"] = weibull_plot_figure(plot_t, plot_f, life["fit"].beta, life["fit"].eta)
            replacement = life["replacement"]
            context["cost_chart"] = cost_curve_figure(
                replacement.ages,
                replacement.cost_per_time,
                replacement.run_to_failure_cost_per_time,
                replacement.optimum_age,
            )
    return render(request, "fleet/life_data.html", context)


def _float_param(request, name, default) -> float:
    """A positive, finite number from the query string; anything else gives the default, and says so."""
    text = request.GET.get(name)
    if text is None or text == "":
        return default
    value = float(parse_numbers([text])[0][0])  # the rulebook's number syntax: "60,5" is 60.5
    if value > 0:
        return value
    label = name.replace("_", " ")
    messages.warning(request, f"The {label} must be a number above zero; {text!r} was not used, {default:g} was.")
    return default


@permission_required("fleet.view_workorder", raise_exception=True)
def work_orders(request):
    """Open work orders by site visit; planners create them from the plan and issue visits."""
    if request.method == "POST":
        if not request.user.has_perm("fleet.add_workorder"):  # planning and issuing are the planner's
            raise PermissionDenied
        action = request.POST.get("action")
        if action == "plan":
            _, horizon, problems = plan_parameters(request.POST.dict() | {"site": ""}, request=request)
            if problems:
                messages.error(request, f"No work orders planned: {'; '.join(problems)}.")
                return redirect("work_orders")
            counts = plan_work_orders(horizon_days=horizon, user=request.user)
            messages.success(
                request,
                f"{counts['created']} work orders created, {counts['replanned']} re-dated, "
                f"in {counts['visits']} site visits.",
            )
        elif action == "issue":
            try:
                day = dt.date.fromisoformat(request.POST.get("day", ""))
                site_id = int(request.POST.get("site", ""))
            except ValueError:
                messages.error(request, "That visit could not be found: reload the page and try again.")
            else:
                issued = issue_visit(site_id=site_id, due_on=day, user=request.user)
                if issued:
                    messages.success(request, f"{issued} work orders issued to the technicians.")
                else:
                    messages.error(request, "That visit has no planned work orders at your sites: reload the page.")
        return redirect("work_orders")
    page = open_visits_page(request.GET.get("page"), user=request.user)
    return render(request, "fleet/work_orders.html", {"page": page, "visits": page.object_list})


@permission_required("fleet.view_workorder", raise_exception=True)
def visit_sheet(request, site_code, day):
    """A printable sheet for one site visit: the orders, the spares, the cautions."""
    site = get_object_or_404(scope_to_user(Site.objects.all(), request.user), code=site_code)
    try:
        visits = open_visits(site.id, dt.date.fromisoformat(day), user=request.user)
    except ValueError:
        visits = []
    if not visits:
        raise Http404("No open work orders for that visit")
    return render(request, "fleet/visit_sheet.html", {"visit": visits[0], "site": site})


@permission_required("fleet.view_sitestock", raise_exception=True)
def site_stock(request, site_code):
    """The spare capacitors held at a site; the planner sets the quantities, replacements take from them."""
    site = get_object_or_404(scope_to_user(Site.objects.all(), request.user), code=site_code)
    errors, typed = {}, {}
    if request.method == "POST":
        if not request.user.has_perm("fleet.change_sitestock"):
            raise PermissionDenied
        # qty-<part id>: the quantity typed; was-<part id>: the quantity the page showed
        quantities, shown = (
            {int(k[4:]): v for k, v in request.POST.items() if k[:4] == prefix and k[4:].isdigit()}
            for prefix in ("qty-", "was-")
        )
        try:
            set_site_stock(site=site, quantities=quantities, shown=shown)
        except ValidationError as error:
            errors = error.message_dict
            typed = {i: text for i, text in quantities.items() if text.strip() != shown.get(i, "").strip()}
        else:
            messages.success(request, "Stock saved.")
            return redirect("site_stock", site_code=site.code)
    held = dict(site.stock.values_list("part_id", "quantity"))
    # Each row: the part, the quantity in its box (as typed when the save was refused), the quantity held now
    # (sent back as what the page showed, so a replacement meanwhile is not undone).
    rows = [
        (part, typed.get(part.id, held.get(part.id, 0)), held.get(part.id, 0))
        for part in CapacitorPart.objects.order_by("dielectric", "rated_uf", "code")
    ]
    return render(request, "fleet/stock.html", {"site": site, "rows": rows, "errors": errors})


@permission_required("fleet.view_fittedcapacitor", raise_exception=True)
def stand_in_parts(request):
    """Fewer part numbers: per dielectric, how many motor designs each catalogue part would suit."""
    return render(request, "fleet/stand_in_parts.html", {"families": part_families(request.user)})
