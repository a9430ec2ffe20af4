"""Query-string parameters of the API and the pages, parsed by django-filter: a bad value is
a message naming the parameter (JSON 400 from the API, a note on the page), never a 500."""

from __future__ import annotations

import django_filters
from django.core.validators import MaxValueValidator, MinValueValidator

from .models import Assessment, Site
from .roles import scope_to_user


class AssessmentFilter(django_filters.FilterSet):
    """GET /api/assessments/?site=CST&risk=due+soon&replace_by_before=2027-03-31"""

    site = django_filters.CharFilter(field_name="installation__motor__site__code", max_length=20)
    risk = django_filters.ChoiceFilter(field_name="risk", choices=Assessment.Risk.choices)
    replace_by_before = django_filters.DateFilter(field_name="replace_by", lookup_expr="lte")

    class Meta:
        model = Assessment
        fields = ["site", "risk", "replace_by_before"]


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
