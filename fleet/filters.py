"""Query-string parameters of the API and the pages, parsed by django-filter: a bad value is
a message naming the parameter (JSON 400 from the API, a note on the page), never a 500."""

from __future__ import annotations

import datetime as dt

import django_filters
from django.core.validators import MaxValueValidator, MinValueValidator

from .models import Assessment, FittedCapacitor, Reading, Site
from .roles import scope_to_user


class AssessmentFilter(django_filters.FilterSet):
    """GET /api/assessments/?site=CST&risk=due+soon&replace_by_before=2027-03-31"""

    site = django_filters.CharFilter(field_name="site__code", max_length=20)  # the stored site (triggers, 0019)
    risk = django_filters.ChoiceFilter(field_name="risk", choices=Assessment.Risk.choices)
    replace_by_before = django_filters.DateFilter(field_name="replace_by", lookup_expr="lte")

    class Meta:
        model = Assessment
        fields = ["site", "risk", "replace_by_before"]


class ReadingFilter(django_filters.FilterSet):
    """GET /api/readings/?site=CST&part=RUN-4U-450&motor=CST-0093&since=2026-01-01&until=2026-03-31
    (since and until are whole days, inclusive, in UTC)."""

    site = django_filters.CharFilter(field_name="installation__motor__site__code", max_length=20)
    part = django_filters.CharFilter(field_name="installation__part__code", max_length=40)
    motor = django_filters.CharFilter(field_name="installation__motor__asset_tag", max_length=40)
    since = django_filters.DateFilter(method="taken_since")
    until = django_filters.DateFilter(method="taken_until")

    class Meta:
        model = Reading
        fields = ["site", "part", "motor", "since", "until"]

    def taken_since(self, queryset, name, value):
        return queryset.filter(taken_at__gte=_utc_midnight(value))

    def taken_until(self, queryset, name, value):
        return queryset.filter(taken_at__lt=_utc_midnight(value + dt.timedelta(days=1)))


def _utc_midnight(day: dt.date) -> dt.datetime:
    return dt.datetime.combine(day, dt.time.min, tzinfo=dt.UTC)


class LifeDataFilter(django_filters.FilterSet):
    """The life-data page's part (and a site, for a narrower pull): ?part=RUN-4U-450&site=CST"""

    part = django_filters.CharFilter(field_name="part__code", max_length=40)
    site = django_filters.CharFilter(field_name="motor__site__code", max_length=20)

    class Meta:
        model = FittedCapacitor
        fields = ["part", "site"]


class BadFilter(ValueError):
    """A query-string value that cannot be read; the message names the parameter."""


def filtered(filterset_class, query, queryset, request=None):
    """`queryset` filtered by the query string, or BadFilter naming each parameter that cannot be read."""
    parameters = filterset_class(query, queryset=queryset, request=request)
    if not parameters.is_valid():
        raise BadFilter("; ".join(f"{name}: {' '.join(errors)}" for name, errors in parameters.errors.items()))
    return parameters.qs


def _sites_of(request):
    """The sites a plan may be asked for: the requesting user's."""
    return scope_to_user(Site.objects.all(), request.user if request is not None else None)


class PlanParameters(django_filters.FilterSet):
    """The plan page's and its downloads' site and horizon (the plan itself comes from a service)."""

    site = django_filters.ModelChoiceFilter(queryset=_sites_of, to_field_name="code", method="keep")
    days = django_filters.NumberFilter(
        method="keep", validators=[MinValueValidator(7), MaxValueValidator(730)], label="Horizon (days)"
    )

    class Meta:
        model = Assessment
        fields = ["site", "days"]

    def keep(self, queryset, name, value):
        return queryset


def plan_parameters(query, default_days: int = 90, request=None) -> tuple[Site | None, int, list[str]]:
    """(site, horizon in days, messages on what was ignored) from a plan query string; a site
    the requesting user does not work at is ignored like an unknown one."""
    parameters = PlanParameters(query, queryset=Assessment.objects.none(), request=request)
    if parameters.is_valid():
        data = parameters.form.cleaned_data
        return data.get("site"), int(data.get("days") or default_days), []
    problems = [f"{name}: {' '.join(errors)}" for name, errors in parameters.errors.items()]
    data = {k: v for k, v in parameters.form.cleaned_data.items() if k not in parameters.errors}
    return data.get("site"), int(data.get("days") or default_days), problems
