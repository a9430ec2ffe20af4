"""Planning: the plan, work orders and visit sheets, the dashboard, stand-in parts."""

from __future__ import annotations

import datetime as dt

from django.contrib import messages
from django.contrib.auth.decorators import permission_required
from django.core.exceptions import PermissionDenied
from django.core.paginator import Paginator
from django.http import Http404, StreamingHttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.template.defaultfilters import pluralize
from django.utils import timezone

from fleet.engineering.planning import PlanningSettings
from fleet.engineering.substitutes import SubstituteRules
from fleet.exports import Column, Table, stream_csv
from fleet.filters import list_page, plan_parameters
from fleet.models import Site
from fleet.roles import scope_to_user, visible_site_ids
from fleet.services import pages
from fleet.services.dashboard import TABLES as DASHBOARD_TABLES
from fleet.services.dashboard import dashboard, dashboard_table
from fleet.services.substitutes import part_families
from fleet.services.workorders import issue_visit, open_visit, open_visits_page, plan_work_orders, with_plan_now

VISIT_SHEET_PAGE_SIZE = 100  # orders a visit sheet lists: a few printed pages


@permission_required("fleet.view_assessment", raise_exception=True)
def plan(request):
    site, horizon, problems = plan_parameters(request.GET, request=request)
    for problem in problems:
        messages.warning(request, f"Ignored {problem}")
    page = list_page(request, Paginator(pages.replacement_plan(horizon, site, request.user), 50).get_page)
    sites = list(scope_to_user(Site.objects.all(), request.user))
    context = {
        "page": page,
        "horizon": horizon,
        "until": pages.replace_by_until(horizon),
        "site": site,
        "sites": sites,
        "where": pages.counted_where(site, sites, request.user),
        "all_sites_label": "All sites" if visible_site_ids(request.user) is None else "All your sites",
        "spares": pages.spares_needed(horizon, site, request.user),
        "risks": pages.risk_summary(request.user, site),
        "rules": PlanningSettings(),
        "alert_levels": pages.alert_level_words(),
    }
    context["worse"], context["better"], context["changes"] = pages.risk_changes(days=7, user=request.user, site=site)
    return render(request, "fleet/plan.html", context)


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
            created, replanned, visits = counts["created"], counts["replanned"], counts["visits"]
            messages.success(
                request,
                f"{created} work order{pluralize(created)} created, {replanned} re-dated, "
                f"in {visits} site visit{pluralize(visits)}.",
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
                    messages.success(request, f"{issued} work order{pluralize(issued)} issued to the technicians.")
                else:
                    messages.error(request, "That visit has no planned work orders at your sites: reload the page.")
        return redirect("work_orders")
    page = list_page(request, lambda number: open_visits_page(number, user=request.user))
    return render(
        request,
        "fleet/work_orders.html",
        {"page": page, "visits": page.object_list, "today": timezone.localdate()},
    )


@permission_required("fleet.view_workorder", raise_exception=True)
def visit_sheet(request, site_code, day):
    """A printable sheet for one site visit: the orders (a page at a time), the spares, the cautions."""
    site = get_object_or_404(scope_to_user(Site.objects.all(), request.user), code=site_code)
    try:
        visit = open_visit(site.id, dt.date.fromisoformat(day), user=request.user)
    except ValueError:
        raise Http404("No open work orders for that visit") from None
    paginator = Paginator(visit["orders"], VISIT_SHEET_PAGE_SIZE)
    if not paginator.count:
        raise Http404("No open work orders for that visit")
    page = list_page(request, paginator.get_page)
    page.object_list = with_plan_now(page.object_list)
    return render(request, "fleet/visit_sheet.html", {"visit": visit, "site": site, "page": page})


@permission_required("fleet.view_fittedcapacitor", raise_exception=True)
def stand_in_parts(request):
    """Fewer part numbers: per dielectric, how many motor designs each catalogue part would suit."""
    margin_pct = round((SubstituteRules().voltage_margin - 1) * 100)
    context = {"families": part_families(request.user), "voltage_margin_pct": margin_pct}
    return render(request, "fleet/stand_in_parts.html", context)


@permission_required("fleet.view_assessment", raise_exception=True)
def planner_dashboard(request):
    return render(request, "fleet/dashboard.html", dashboard(request.user))


@permission_required("fleet.view_assessment", raise_exception=True)
def dashboard_csv(request, name):
    if name not in DASHBOARD_TABLES:
        raise Http404("No such table")
    header, rows = dashboard_table(name, request.user)
    table = Table(name, [Column(heading) for heading in header], rows)
    response = StreamingHttpResponse(stream_csv(table), content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="dashboard-{name}-{timezone.localdate():%Y-%m-%d}.csv"'
    return response


def after_sign_in(request):
    """Where sign-in lands: planners (who plan work orders) on their dashboard, everyone else home."""
    return redirect("dashboard" if request.user.has_perm("fleet.add_workorder") else "home")
