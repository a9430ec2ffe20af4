"""The planner's dashboard and the numbers behind each of its charts."""

from __future__ import annotations

from django.contrib.auth.decorators import permission_required
from django.http import Http404, StreamingHttpResponse
from django.shortcuts import redirect, render
from django.utils import timezone

from .exports import Column, Table, stream_csv
from .services.dashboard import TABLES, dashboard, dashboard_table


@permission_required("fleet.view_assessment", raise_exception=True)
def planner_dashboard(request):
    return render(request, "fleet/dashboard.html", dashboard(request.user))


@permission_required("fleet.view_assessment", raise_exception=True)
def dashboard_csv(request, name):
    if name not in TABLES:
        raise Http404("No such table")
    header, rows = dashboard_table(name, request.user)
    table = Table(name, [Column(heading) for heading in header], rows)
    response = StreamingHttpResponse(stream_csv(table), content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="dashboard-{name}-{timezone.localdate():%Y-%m-%d}.csv"'
    return response


def after_sign_in(request):
    """Where sign-in lands: planners (who plan work orders) on their dashboard, everyone else home."""
    return redirect("dashboard" if request.user.has_perm("fleet.add_workorder") else "home")
