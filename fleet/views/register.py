"""Pages of the register: home, find a motor, a motor, a fitted capacitor."""

from __future__ import annotations

import functools
import re
from urllib.parse import urlencode, urlsplit

from django.http import Http404
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse
from django.utils import timezone
from django.utils.http import url_has_allowed_host_and_scheme

from fleet.engineering.capacitor import stored_energy_j
from fleet.engineering.planning import PlanningSettings
from fleet.engineering.rules import reading_time_text
from fleet.filters import named_if_repeated, query_value, takes_parameters
from fleet.forms import FindMotorForm
from fleet.models import FittedCapacitor, Motor, Site, site_zone
from fleet.roles import needs_permission, scope_to_user
from fleet.services import pages
from fleet.services.lifedata import DAYS_PER_YEAR, tolerance_life
from fleet.services.operating_pictures import motor_pictures, no_figures_now, with_operating_figures
from fleet.services.readings import measured_words
from fleet.services.selectors import successor_of
from fleet.services.workorders import open_orders_by_capacitor


@takes_parameters()
def home(request):
    context = {"find_form": FindMotorForm(), "sites": scope_to_user(Site.objects.all(), request.user)}
    if request.user.has_perm("fleet.view_assessment"):
        context["risks"] = pages.risk_summary(request.user)
        due = pages.replacement_plan(horizon_days=30, user=request.user)
        context["plan"], context["plan_total"] = due[:15], due.count()
        context["run"] = pages.latest_refit_run()
    return render(request, "fleet/home.html", context)


@needs_permission("fleet.view_motor")
@takes_parameters("tag")
def find_motor(request):
    # An empty or repeated tag is not a search: the empty box, as on a first visit.
    repeated = named_if_repeated(request, ["tag"])
    form = FindMotorForm(None if repeated or query_value(request.GET, "tag") is None else request.GET)
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


# The pages field work goes back to once recorded (`?next=`): a visit sheet or the work-orders list, and a site's
# reading route with its filter and page (`/sites/CST/route/?show=due`). Paths on this server only.
WORK_ORDER_PAGES = "/work-orders/"  # the work-orders list and its visit sheets
RETURN_PAGES = re.compile(r"^/(?:work-orders/|sites/[^/?#\\]+/route/(?:\?[^#]*)?$)")
ROUTE_PAGE = re.compile(r"^/sites/([^/?#\\]+)/route/")


def page_to_return_to(request) -> str | None:
    """The page a technician came from (`?next=`, on the links of a visit sheet's or the work-orders list's
    orders, and of a route's motors), to go back to once the work is recorded; any other address is ignored."""
    back = request.GET.get("next", "")
    if RETURN_PAGES.match(back) and url_has_allowed_host_and_scheme(back, allowed_hosts=None):
        return back
    return None


def route_to_return_to(request, site: Site) -> str | None:
    """`page_to_return_to` when it is `site`'s reading route (its filter and page kept), else None."""
    back = page_to_return_to(request)
    route = back and ROUTE_PAGE.match(urlsplit(back).path)
    return back if route and route.group(1).casefold() == site.code.casefold() else None


def with_next(address: str, back: str | None) -> str:
    """`address` with `?next=<back>` when there is a page to go back to."""
    return f"{address}?{urlencode({'next': back})}" if back else address


@needs_permission("fleet.view_motor")
@takes_parameters("saved", "next")  # ?saved=<capacitor>: the reading form's draft to drop; ?next=: the route
def motor_detail(request, asset_tag):
    try:
        motor = pages.motor_with_capacitors(asset_tag)
    except Motor.DoesNotExist as error:
        raise Http404(f"No motor {asset_tag}") from error
    if not scope_to_user(Motor.objects.filter(pk=motor.pk), request.user).exists():
        raise Http404(f"No motor {asset_tag}")
    in_service = [c for c in motor.fitted if c.removed_on is None]
    removed = [c for c in motor.fitted if c.removed_on is not None]
    orders = open_orders_by_capacitor(c.id for c in in_service)
    for capacitor in in_service:
        capacitor.assessment = capacitor.current[0] if capacitor.current else None
        capacitor.recent = pages.recent_readings(capacitor, 4)
        capacitor.open_orders = orders.get(capacitor.id, [])
        capacitor.reassessing = reassessing_words(capacitor, capacitor.assessment, capacitor.recent)
    pictures = motor_pictures(in_service) if motor.has_circuit else {}
    for capacitor in in_service:
        capacitor.no_figures_now = no_figures_now(capacitor.assessment)
        capacitor.charts = [
            {"id": f"{name}-{capacitor.id}", "data_id": f"{name}-{capacitor.id}-data", "figure": figure}
            for name, figure in pictures.get(capacitor.id, {}).items()
        ]
    energy = max((worst_case_energy_j(c.part) for c in in_service), default=None)
    route = route_to_return_to(request, motor.site)
    context = {
        "motor": motor,
        # Back to the route as it was left (its filter, its page, at this motor's row); the field work links
        # carry it on, so the reading saved comes back here with it.
        "route_back": f"{route or reverse('route', args=[motor.site.code])}#motor-{motor.asset_tag}",
        "next_query": f"?{urlencode({'next': route})}" if route else "",
        "in_service": in_service,
        "removed": removed,
        "energy_j": energy,
        "energy_of": "The largest capacitor on this motor" if len(in_service) > 1 else "",
        "pictures": pictures,
    }
    with timezone.override(site_zone(motor.site.time_zone)):  # readings in the site's time, as the form takes them
        return render(request, "fleet/motor.html", context)


def worst_case_energy_j(part) -> float:
    """Worst-case stored energy: the part charged to the peak of its rated voltage."""
    return float(stored_energy_j(part.rated_uf, part.rated_voltage_v))


def site_in_any_case(view):
    """A page of one site (`site_code` in its address) gets the site itself: found by its code in any case
    among the user's sites (codes are unique in any case), else a 404; a GET that spells the code in
    another case than the register's goes to the register's spelling, its query string kept, as a motor's
    page finds its tag in any case. The API keeps codes exact."""

    @functools.wraps(view)
    def with_site(request, site_code, **kwargs):
        site = get_object_or_404(scope_to_user(Site.objects.all(), request.user), code__iexact=site_code)
        if site.code != site_code and request.method in ("GET", "HEAD"):
            address = reverse(request.resolver_match.view_name, kwargs={**kwargs, "site_code": site.code})
            query = request.GET.urlencode()
            return redirect(f"{address}?{query}" if query else address)
        return view(request, site, **kwargs)

    return with_site


def reassessing_words(fitted_capacitor, assessment, readings) -> dict | None:
    """What the page says while a reading saved after the assessment waits for its refit
    (`pages.reading_not_assessed`): `verdict`, the reading's own as measured (the page's "Latest" is that reading),
    and `words`, that the risk and dates are from the readings before it; None where none waits."""
    reading = pages.reading_not_assessed(assessment, readings)
    if reading is None:
        return None
    when = reading_time_text(timezone.localtime(reading.taken_at, site_zone(fitted_capacitor.motor.site.time_zone)))
    measured = measured_words(reading, fitted_capacitor.part)
    return {
        "verdict": measured.split(", ", 1)[1],
        "words": f"Being reassessed: the reading of {when} ({measured}) is not in the risk and dates shown yet, "
        "which are from the readings before it. Reload in a minute (with the task queue down, the refit comes within "
        "15 minutes).",
    }


def fitted_capacitor_or_404(request, fitted_capacitor_id) -> FittedCapacitor:
    """A fitted capacitor at one of the user's sites, or 404."""
    capacitors = scope_to_user(FittedCapacitor.objects.select_related("motor__site", "part"), request.user)
    return get_object_or_404(capacitors, pk=fitted_capacitor_id)


@needs_permission("fleet.view_fittedcapacitor")
@takes_parameters("saved")  # ?saved=<capacitor>: a correction's draft to drop
def fitted_capacitor_detail(request, fitted_capacitor_id):
    fitted_capacitor = fitted_capacitor_or_404(request, fitted_capacitor_id)
    assessment = fitted_capacitor.assessments.filter(is_current=True).first()
    if assessment is not None:
        with_operating_figures([assessment])  # the figures as new and now, worked out for the page
    successor = successor_of(fitted_capacitor)
    readings = pages.recent_readings(fitted_capacitor, 40)
    context = {
        "reassessing": reassessing_words(fitted_capacitor, assessment, readings),
        "successor": successor,
        "fitted_capacitor": fitted_capacitor,
        "motor": fitted_capacitor.motor,
        "assessment": assessment,
        "chart": pages.trend_chart(fitted_capacitor, assessment),
        "readings": readings,
        "over_rating": pages.highest_voltage_over_rating(fitted_capacitor, readings),
        "energy_j": worst_case_energy_j(fitted_capacitor.part),
        "alert": pages.alert_level_basis(fitted_capacitor.part.dielectric),
        "rules": PlanningSettings(),
        "tolerance_life": tolerance_life(fitted_capacitor.part_id),
        "age_years": (timezone.localdate() - fitted_capacitor.fitted_on).days / DAYS_PER_YEAR,
        "open_orders": open_orders_by_capacitor([fitted_capacitor.id]).get(fitted_capacitor.id, []),
    }
    with timezone.override(site_zone(fitted_capacitor.motor.site.time_zone)):  # as the reading form shows them
        return render(request, "fleet/capacitor.html", context)
