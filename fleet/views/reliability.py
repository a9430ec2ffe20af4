"""Reliability: life data, the forecast's track record, refits, exports."""

from __future__ import annotations

from django.conf import settings
from django.contrib import messages
from django.http import FileResponse, Http404, JsonResponse, StreamingHttpResponse
from django.shortcuts import redirect, render
from django.urls import reverse
from django.utils import timezone
from django.views.decorators.http import require_POST

from fleet.charts import cost_curve_figure, weibull_plot_figure
from fleet.exports import parquet_file, stream_csv, xlsx_file
from fleet.filters import BadFilter, LifeDataPage, page_parameters, refused_download, takes_parameters
from fleet.imports.columns import shown
from fleet.models import Backtest, CapacitorPart, RefitRun
from fleet.roles import needs_permission, refused
from fleet.services.exports import TABLES
from fleet.services.lifedata import part_life, tolerance_life
from fleet.services.refits import queue_fleet_refit, recent_runs, stale_count
from fleet.services.track_record import request_backtest
from fleet.services.track_record import track_record as track_record_figures
from fleet.tasks import QueueUnreachable

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
        raise refused(request.user, permission)
    return builder(request.GET, request.user, request=request)


def export(request, kind, file_format):
    """An export as CSV (streamed), XLSX or Parquet (written a chunk at a time to a temporary file)."""
    if file_format not in EXPORT_TYPES:
        raise Http404("Exports download as .csv, .xlsx or .parquet")
    try:
        table = _export_table(request, kind)
    except BadFilter as error:
        return refused_download(str(error))
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
    except BadFilter as error:  # as the API answers a 400: the messages by parameter
        return JsonResponse(error.problems, status=400, json_dumps_params={"ensure_ascii": False})
    return JsonResponse(table.describe(), json_dumps_params={"ensure_ascii": False})


def plan_export(request, file_format):
    """The replacement plan for the planner's own spreadsheet (the plan page's site and horizon)."""
    return export(request, "plan", file_format)


QUEUE_DOWN = (
    "The task queue is unreachable ({error}). {what} did not start; nothing is lost. Try again once the queue is back."
)


@needs_permission("fleet.view_refitrun")
@takes_parameters()
def refits(request):
    context = {
        "runs": recent_runs(10),
        "stale": stale_count(),
        "abandoned_minutes": round(settings.FLEET_REFIT_ABANDONED_AFTER_S / 60),
    }
    return render(request, "fleet/refits.html", context)


@require_POST
@needs_permission("fleet.add_refitrun")
def refit_start(request):
    try:
        run = queue_fleet_refit()
    except QueueUnreachable as error:
        messages.error(request, QUEUE_DOWN.format(error=error, what="The fleet refit"))
        return redirect("refits")
    run.refresh_from_db()  # without a broker the run has already happened
    if run.state == RefitRun.State.DONE:
        fitted = f"{run.readings} readings fitted" if run.readings else "all were up to date, nothing refitted"
        messages.success(request, f"Fleet refit done: {run.done} of {run.total} capacitors checked; {fitted}.")
    elif run.state == RefitRun.State.FAILED:
        messages.error(request, f"The fleet refit failed: {run.message}")
    else:
        messages.success(request, "Fleet refit queued. Progress shows below.")
    return redirect("refits")


LIFE_DATA_COSTS = {"planned_cost": 60.0, "failure_cost": 400.0}  # the page's defaults, the engineer's to change


@needs_permission("fleet.view_fittedcapacitor")
@takes_parameters("part", "planned_cost", "failure_cost")
def life_data(request):
    """Weibull analysis of one part's capacitors; costs are the engineer's to set."""
    parts = CapacitorPart.objects.order_by("dielectric", "rated_uf", "code")  # START-98 before START-143
    values, refused = page_parameters(LifeDataPage, request.GET, request)
    asked = values.get("part")
    part = parts.filter(code=asked).first() if asked else None
    if asked and part is None:
        messages.warning(request, f"No part with the code {asked}: showing the first part instead.")
    if "part" in refused:
        messages.warning(request, f"Ignored part: {refused['part']}")
    part = part or parts.first()
    costs = {}
    for name, default in LIFE_DATA_COSTS.items():
        costs[name] = values.get(name, default)
        if name in refused and len(request.GET.getlist(name)) > 1:
            messages.warning(request, f"Ignored {name}: {refused[name]}; {default:g} was used.")
        elif name in refused:
            label, text = name.replace("_", " "), request.GET[name]
            messages.warning(request, f"The {label} {refused[name]}; {shown(text)!r} was not used, {default:g} was.")
    planned_cost, failure_cost = costs["planned_cost"], costs["failure_cost"]
    context = {"parts": parts, "part": part, "planned_cost": planned_cost, "failure_cost": failure_cost}
    if part is not None:
        life = part_life(part.id, planned_cost, failure_cost)
        context["life"] = life
        context["tolerance"] = tolerance_life(part.id)
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


@needs_permission("fleet.view_assessment")
@takes_parameters()
def track_record(request):
    return render(request, "fleet/track_record.html", track_record_figures())


@require_POST
@needs_permission("fleet.add_backtest")
def track_record_run(request):
    backtest = request_backtest()
    backtest.refresh_from_db()
    if backtest.state == Backtest.State.FAILED:
        messages.error(request, f"The back-test failed: {backtest.message}")
    elif backtest.state == Backtest.State.DONE:
        messages.success(request, "Back-test done. The figures below are the new ones.")
    else:
        messages.success(request, "Back-test started. Progress shows below.")
    return redirect("track_record")
