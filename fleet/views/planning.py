"""Planning: the plan, work orders and visit sheets, the dashboard, stand-in parts."""

from __future__ import annotations

import datetime as dt
from urllib.parse import urlencode

from django.contrib import messages
from django.core.exceptions import ValidationError
from django.core.paginator import Paginator
from django.http import Http404, StreamingHttpResponse
from django.shortcuts import get_object_or_404, redirect, render
from django.template.defaultfilters import pluralize
from django.urls import reverse
from django.utils import timezone
from django.utils.html import format_html
from django.views.decorators.http import require_POST

from fleet.engineering.planning import PLAN_DEFAULT_DAYS, PlanningSettings
from fleet.engineering.substitutes import SubstituteRules
from fleet.exports import Column, Table, stream_csv
from fleet.filters import (
    FIRST_FILTER_DAY,
    LAST_FILTER_DAY,
    WorkOrdersParameters,
    list_page,
    page_values,
    parameter_problems,
    plan_parameters,
    problems_text,
    refused_download,
    takes_parameters,
)
from fleet.forms import CancelOrderForm, DayOffForm, MoveVisitForm
from fleet.models import Site, WorkOrder
from fleet.roles import needs_permission, refused, scope_to_user, visible_site_ids
from fleet.services import pages
from fleet.services.bulk import storable_ids
from fleet.services.dashboard import TABLES as DASHBOARD_TABLES
from fleet.services.dashboard import dashboard, dashboard_table
from fleet.services.substitutes import fitted_against_advice, part_families, stop_gaps_in_service
from fleet.services.track_record import year_flags_record
from fleet.services.workorders import (
    CANCELLED_SHOWN_DAYS,
    OPEN,
    add_day_off,
    cancel_order,
    closed_visit,
    closed_words,
    days_off_by_site,
    issue_visit,
    move_choices,
    move_visit,
    open_orders,
    open_visit,
    open_visits_page,
    order_swap,
    plan_work_orders,
    recently_cancelled,
    remove_day_off,
    removed_before,
    replace_now_without_order,
    site_days_off,
    tightest_replace_by,
    visit_moved_to,
    visit_state_words,
    with_current_plan,
    with_parts_to_bring,
    with_plan_now,
    with_read_for,
)
from fleet.views.register import site_in_any_case

VISIT_SHEET_PAGE_SIZE = 100  # orders a visit sheet lists: a few printed pages


@needs_permission("fleet.view_assessment")
@takes_parameters("site", "days", "page")
def plan(request):
    site, horizon, problems = plan_parameters(request.GET, request=request)
    for name, problem in problems.items():
        messages.warning(request, f"Ignored {name}: {problem}")
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
        "year_flags": year_flags_record(),
        "stop_gaps": stop_gaps_in_service(request.user, site).count(),
    }
    worse, better, changes = pages.risk_changes(days=7, limit=PLAN_CHANGES_SHOWN, user=request.user, site=site)
    context["changes"] = changes
    fresh, fresh_count = pages.first_assessed_due(limit=PLAN_CHANGES_SHOWN, user=request.user, site=site)
    context["change_lists"] = [
        {"id": "risk-worse", "title": "Riskier", "rows": list(worse), "count": changes["worse"]},
        {"id": "risk-better", "title": "Less risky", "rows": list(better), "count": changes["better"]},
        {"id": "first-due", "title": "New, already due", "rows": fresh, "count": fresh_count},
    ]
    return render(request, "fleet/plan.html", context)


PLAN_CHANGES_SHOWN = 20  # the plan lists this many riskier and as many less risky capacitors of the week


@needs_permission("fleet.view_workorder")
@takes_parameters("page", "saved", "site")  # ?saved=<capacitor>: a reading's draft to drop (base.html)
def work_orders(request):
    """Open work orders by site visit; planners create them from the plan and issue visits."""
    if request.method == "POST":
        if not request.user.has_perm("fleet.add_workorder"):  # planning and issuing are the planner's
            raise refused(request.user, "fleet.add_workorder")
        action = request.POST.get("action")
        if action == "plan":
            _, horizon, problems = plan_parameters(request.POST.dict() | {"site": ""}, request=request)
            if problems:  # the page again, the box holding what was typed beside the message
                messages.error(request, f"No work orders planned: {problems_text(problems)}.")
                return _work_orders_page(request, plan_days=request.POST.get("days", ""), status=400)
            site = page_values(WorkOrdersParameters, request).get("site")  # the list's one site, or every site
            counts = plan_work_orders(horizon_days=horizon, user=request.user, site=site)
            messages.success(request, plan_message(counts))
        elif action == "issue":
            try:
                day = dt.date.fromisoformat(request.POST.get("day", ""))
                site_id = int(request.POST.get("site", ""))
            except ValueError:
                messages.error(request, "That visit could not be found: reload the page and try again.")
            else:
                issued = issue_visit(site_id=site_id, due_on=day, user=request.user)
                if issued:
                    code = Site.objects.filter(pk=site_id).values_list("code", flat=True).first()
                    messages.success(
                        request,
                        f"{issued} work order{pluralize(issued)} of the {code} visit on {day:%a %Y-%m-%d} "
                        "issued to the technicians.",
                    )
                    if request.POST.get("from_visit"):  # issued from the visit's own sheet: back to it
                        return redirect("visit_sheet", site_code=code, day=day.isoformat())
                else:
                    messages.error(request, "That visit has no planned work orders at your sites: reload the page.")
        return redirect(request.get_full_path())  # the list the planner was on: its site and page kept
    return _work_orders_page(request)


def _work_orders_page(request, plan_days: str = str(PLAN_DEFAULT_DAYS), status: int = 200):
    """The work-orders page; `plan_days`, what the plan's box shows (a refused value as it was typed)."""
    site = page_values(WorkOrdersParameters, request).get("site")
    page = list_page(request, lambda number: open_visits_page(number, user=request.user, site=site))
    return render(
        request,
        "fleet/work_orders.html",
        {
            "page": page,
            "visits": page.object_list,
            "today": timezone.localdate(),
            "cancelled": (
                recently_cancelled(request.user, site=site) if request.user.has_perm("fleet.add_workorder") else []
            ),
            "site": site,
            "sites": scope_to_user(Site.objects.all(), request.user),
            "all_sites_label": "All sites" if visible_site_ids(request.user) is None else "All your sites",
            "cancelled_days": CANCELLED_SHOWN_DAYS,
            "replace_now_unordered": replace_now_without_order(request.user, site=site),
            "plan_days": plan_days,
        },
        status=status,
    )


PLAN_VISITS_NAMED = 4  # the plan's message names this many of the visits it wrote to, soonest first


def plan_message(counts: dict) -> str:
    """What a plan did, in words that agree with the work-orders page: the visits its new and re-dated
    orders are in, then every open visit the page lists (at its one site, where it keeps to one); the
    planner's cancellations and moves it kept."""
    created, replanned, touched, listed = (counts[k] for k in ("created", "replanned", "visits", "open_visits"))
    if created or replanned:
        names = counts.get("visit_names", [])
        shown = ", ".join(names[:PLAN_VISITS_NAMED]) + (
            f" and {len(names) - PLAN_VISITS_NAMED} more" if len(names) > PLAN_VISITS_NAMED else ""
        )
        done = (
            f"{created} work order{pluralize(created)} created and {replanned} re-dated, "
            f"in {touched} site visit{pluralize(touched)}" + (f" ({shown})" if names else "")
        )
    else:
        done = "No work orders created or re-dated"
    where = "in all" if counts.get("site_code") is None else f"at {counts['site_code']}"
    words = [f"{done}; {listed} open site visit{pluralize(listed)} {where}."]
    if counts["kept_cancelled"]:
        n = counts["kept_cancelled"]
        words.append(f"{n} order{pluralize(n)} you cancelled not created again (the plan asks the same in that visit).")
    if counts["kept_moved"]:
        n = counts["kept_moved"]
        words.append(f"{n} order{pluralize(n)} kept on the day {pluralize(n, 'its,their')} visit was moved to.")
    return " ".join(words)


@needs_permission("fleet.view_workorder")
@site_in_any_case
@takes_parameters("page", "saved")
def visit_sheet(request, site, day):
    """A printable sheet for one site visit: the orders (a page at a time), the spares, the cautions; the
    planner moves the whole visit to another day from it (a public holiday: visits skip weekends only)."""
    try:
        day = dt.date.fromisoformat(day)
    except ValueError:
        raise Http404("No open work orders for that visit") from None
    if not FIRST_FILTER_DAY <= day <= LAST_FILTER_DAY:  # no visit is there, and its reach would overflow a date
        raise Http404("No work orders for that visit")
    move_form = MoveVisitForm(request.POST if request.method == "POST" else None)
    if request.method == "POST":
        if not request.user.has_perm("fleet.add_workorder"):  # planning is the planner's
            raise refused(request.user, "fleet.add_workorder")
        if move_form.is_valid():
            to_day = move_form.cleaned_data["to_day"]
            try:
                move = move_visit(site_id=site.id, due_on=day, to_day=to_day, user=request.user)
            except ValidationError as error:
                if "visit" in error.message_dict:
                    messages.error(request, " ".join(error.message_dict["visit"]))
                    moved = visit_moved_to(site.id, day, user=request.user)  # moved elsewhere meanwhile: its page
                    if moved is not None:
                        return redirect("visit_sheet", site_code=site.code, day=moved.to_day.isoformat())
                    return redirect(f"{reverse('work_orders')}?{urlencode({'site': site.code})}")
                move_form.add_error("to_day", error.message_dict["to_day"])
            else:
                if move.already:  # sent twice: the first one moved it
                    messages.info(
                        request,
                        f"The visit was moved from {day:%a %Y-%m-%d} to {to_day:%a %Y-%m-%d} already, by "
                        f"{move.by} on {move.at}: nothing moved again.",
                    )
                else:
                    joined = (
                        f" It joined the visit already on that day: {move.moved + move.joined} work orders in one."
                        if move.joined
                        else ""
                    )
                    messages.success(
                        request,
                        f"Visit moved from {day:%a %Y-%m-%d} to {to_day:%a %Y-%m-%d}: "
                        f"{move.moved} work order{pluralize(move.moved)}.{joined} A new plan keeps the move.",
                    )
                    if move.late:
                        messages.warning(request, late_move_words(to_day, move.late))
                return redirect("visit_sheet", site_code=site.code, day=to_day.isoformat())
    visit = open_visit(site.id, day, user=request.user)
    paginator = Paginator(visit["orders"], VISIT_SHEET_PAGE_SIZE)
    if not paginator.count:
        # A printed or bookmarked sheet of a visit the planner moved (once or more): on to the day it went to.
        moved = visit_moved_to(site.id, day, user=request.user)
        if moved is not None:
            messages.info(
                request,
                f"The visit of {day:%a %Y-%m-%d} was moved to {moved.to_day:%a %Y-%m-%d} by {moved.by} on {moved.at}.",
            )
            return redirect("visit_sheet", site_code=site.code, day=moved.to_day.isoformat())
        closed = closed_visit(site.id, day, user=request.user)
        if not closed["count"]:
            moved = visit_moved_to(site.id, day, user=request.user, closed_too=True)  # moved, then closed
            if moved is not None:
                messages.info(request, f"The visit of {day:%a %Y-%m-%d} was moved to {moved.to_day:%a %Y-%m-%d}.")
                return redirect("visit_sheet", site_code=site.code, day=moved.to_day.isoformat())
            raise Http404("No work orders for that visit")
        # Every order done or cancelled: the sheet says what became of each (a bookmark or a printed sheet).
        return render(request, "fleet/visit_closed.html", {"visit": closed, "site": site})
    page = list_page(request, paginator.get_page)
    # Read once for the orders (dated on the visit's day), the day's name and the days to move it to (from today).
    days_off = days_off_by_site([site.id], min(day, timezone.localdate()))
    page.object_list = with_parts_to_bring(
        with_read_for(with_plan_now(page.object_list, days_off=days_off), user=request.user)
    )
    planned = WorkOrder.objects.filter(site_id=site.id, due_on=day, state=WorkOrder.State.PLANNED).count()
    context = {
        "visit": visit,
        "site": site,
        "page": page,
        "move_form": move_form,
        "move_choices": move_choices(site.id, day, days_off=days_off),
        "day_off": days_off.get(site.id, {}).get(day),
        "closed": closed_visit(site.id, day, user=request.user),  # a "read for work order N" links to one of these
        # Orders still to issue: the planner issues the visit from its sheet as from the work-orders list; a
        # technician reads that the visit is not issued yet.
        "planned_orders": planned,
        "state": visit_state_words(planned, paginator.count - planned),
        # A move past the soonest replace-by date leaves that order late: the day buttons say which days are.
        "tightest": tightest_replace_by(site.id, day, user=request.user, today=timezone.localdate())
        if request.user.has_perm("fleet.add_workorder")
        else None,
    }
    return render(request, "fleet/visit_sheet.html", context, status=400 if move_form.errors else 200)


def late_move_words(to_day: dt.date, late) -> str:
    """The warning after a move that put orders past their replace-by date: which ones (tag, capacitor, date)."""
    listed = "; ".join(f"{o.asset_tag} {o.capacitor}, replace by {o.replace_by:%a %Y-%m-%d}" for o in late)
    n = len(late)
    return (
        f"{to_day:%a %Y-%m-%d} is after the replace-by date of {n} order{pluralize(n)} in this visit: {listed}. "
        f"{'It is' if n == 1 else 'They are'} late on the new day: move the visit earlier, or keep the day knowingly."
    )


@needs_permission("fleet.view_sitedayoff")
@site_in_any_case
@takes_parameters()
def site_days_off_page(request, site):
    """A site's days off (local public holidays, shutdowns): the plan dates no visit on them. The planner adds
    and removes them here."""
    form = DayOffForm(request.POST if request.method == "POST" and "remove" not in request.POST else None)
    if request.method == "POST":
        if "remove" in request.POST:
            if not request.user.has_perm("fleet.delete_sitedayoff"):
                raise refused(request.user, "fleet.delete_sitedayoff")
            sent = request.POST["remove"].strip()
            day_off_id = int(sent) if sent.isascii() and sent.isdigit() else 0
            removed = remove_day_off(site_id=site.id, day_off_id=day_off_id)
            if removed is None and removed_before(site_code=site.code, day_off_id=day_off_id):
                messages.info(request, "That day off was removed already: nothing changed.")
            elif removed is None:
                messages.error(
                    request, f"Not a day off of {site.code}: nothing changed. Reload the page and look again."
                )
            else:
                messages.success(
                    request,
                    f"{removed.day:%a %Y-%m-%d} ({removed.name}) is no longer a day off at {site.code}. "
                    "Plan again to let visits fall on it.",
                )
            return redirect("site_days_off", site_code=site.code)
        if not request.user.has_perm("fleet.add_sitedayoff"):
            raise refused(request.user, "fleet.add_sitedayoff")
        if form.is_valid():
            day = form.cleaned_data["day"]
            try:
                found = add_day_off(site_id=site.id, day=day, name=form.cleaned_data["name"])
            except ValidationError as error:
                for field, problems in error.message_dict.items():
                    form.add_error(field, problems)
            else:
                words = f"{day:%a %Y-%m-%d} is a day off at {site.code}: no plan dates a visit on it."
                if found["orders"]:
                    n = found["orders"]
                    messages.warning(
                        request,
                        format_html(
                            "{} A visit is on that day already ({} open work order{}): move it from <span "
                            'class="nowrap"><a class="glove" href="{}">its visit page</a>.</span>',
                            words,
                            n,
                            pluralize(n),
                            reverse("visit_sheet", args=[site.code, day.isoformat()]),
                        ),
                    )
                else:
                    messages.success(request, words)
                return redirect("site_days_off", site_code=site.code)
    context = {"site": site, "form": form, "days_off": site_days_off(site.id), "today": timezone.localdate()}
    return render(request, "fleet/days_off.html", context, status=400 if form.errors else 200)


@needs_permission("fleet.add_workorder")
def work_order_cancel(request, order_id):
    """The planner cancels one open work order, saying why (kept with the order; it is never deleted)."""
    order = get_object_or_404(
        scope_to_user(WorkOrder.objects.select_related("motor", "site", "closed_by"), request.user).filter(
            pk__in=storable_ids([order_id])
        )
    )
    if order.state not in OPEN:  # sent twice, or closed since the page was opened
        messages.info(request, f"That work order is not open: it was {closed_words(order)}. Nothing changed.")
        return redirect("visit_sheet", site_code=order.site.code, day=order.due_on.isoformat())  # its visit
    form = CancelOrderForm(request.POST or None)
    if request.method == "POST" and form.is_valid():
        try:
            cancel_order(order_id=order.id, reason=form.cleaned_data["reason"], user=request.user)
        except ValidationError as error:
            if "order" in error.message_dict:  # closed meanwhile (a reading, a replacement, another planner)
                messages.info(request, f"{' '.join(error.message_dict['order'])} Nothing changed.")
                return redirect("visit_sheet", site_code=order.site.code, day=order.due_on.isoformat())
            form.add_error("reason", error.message_dict["reason"])
        else:
            messages.success(request, f"Work order cancelled: {order.get_kind_display()} {order.motor.asset_tag}.")
            if open_orders(request.user).filter(site_id=order.site_id, due_on=order.due_on).exists():
                return redirect("visit_sheet", site_code=order.site.code, day=order.due_on.isoformat())
            return redirect("work_orders")
    order = with_plan_now(
        with_current_plan(
            WorkOrder.objects.filter(pk=order.pk).select_related("motor", "site", "fitted_capacitor__part")
        )
    )
    order = with_parts_to_bring(with_read_for(order, user=request.user))[0]
    context = {"order": order, "form": form}
    return render(request, "fleet/work_order_cancel.html", context, status=400 if form.errors else 200)


@needs_permission("fleet.view_fittedcapacitor")
@takes_parameters()
def stand_in_parts(request):
    """Fewer part numbers: per dielectric, how many motor designs each catalogue part would suit."""
    margin_pct = round((SubstituteRules().voltage_margin - 1) * 100)
    context = {
        "families": part_families(request.user),
        "voltage_margin_pct": margin_pct,
        "against_advice": fitted_against_advice(request.user),
    }
    return render(request, "fleet/stand_in_parts.html", context)


@require_POST
@needs_permission("fleet.add_workorder")
def stop_gap_swap(request, fitted_capacitor_id):
    """The planner orders a stop-gap swapped for its design part at its site's next visit (`order_swap`)."""
    try:
        swap = order_swap(fitted_capacitor_id=fitted_capacitor_id, user=request.user)
    except ValidationError as error:
        messages.error(request, " ".join(error.message_dict["capacitor"]))
        return redirect(reverse("stand_in_parts") + "#against-advice")
    order, stop_gap = swap.order, swap.stop_gap
    words = "Work order planned" if swap.planned_now else "A replacement order was open already"
    messages.success(
        request,
        format_html(
            '{}: {} at {}, the stop-gap {} out and the design part {} in, on <a class="glove" href="{}">the visit of '
            "{} {}</a>.",
            words,
            order.get_kind_display(),
            stop_gap.motor.asset_tag,
            stop_gap.part.code,
            swap.design.code,
            reverse("visit_sheet", args=[order.site.code, order.due_on.isoformat()]),
            order.site.code,
            f"{order.due_on:%a %Y-%m-%d}",
        ),
    )
    # Back at the stop-gap's own row, which now says "ordered, visit ...": on a phone the message at the top of
    # the page is out of view (a walk saw nothing happen).
    return redirect(reverse("stand_in_parts") + f"#stop-gap-{stop_gap.id}")


@needs_permission("fleet.view_assessment")
@takes_parameters()
def planner_dashboard(request):
    return render(request, "fleet/dashboard.html", dashboard(request.user))


@needs_permission("fleet.view_assessment")
def dashboard_csv(request, name):
    if name not in DASHBOARD_TABLES:
        raise Http404("No such table")
    problems = parameter_problems(request.GET, set())  # every site the user works at, no filter: none taken
    if problems:
        return refused_download(problems_text(problems))
    header, rows = dashboard_table(name, request.user)
    table = Table(name, [Column(heading) for heading in header], rows)
    response = StreamingHttpResponse(stream_csv(table), content_type="text/csv; charset=utf-8")
    response["Content-Disposition"] = f'attachment; filename="dashboard-{name}-{timezone.localdate():%Y-%m-%d}.csv"'
    return response


def after_sign_in(request):
    """Where sign-in lands: planners (who plan work orders) on their dashboard, everyone else home."""
    return redirect("dashboard" if request.user.has_perm("fleet.add_workorder") else "home")
