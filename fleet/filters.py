"""Query-string parameters of the API and the pages, parsed by django-filter: a bad value is
a message naming the parameter (JSON 400 from the API, a note on the page), never a 500."""

from __future__ import annotations

import datetime as dt
import functools
import re
from collections.abc import Callable

import django_filters
import numpy as np
from django import forms
from django.contrib import messages
from django.core.exceptions import ValidationError
from django.core.paginator import Page
from django.core.validators import MaxValueValidator, MinValueValidator
from django.http import HttpResponse

from .engineering.lifedata import MAX_REPLACEMENT_COST
from .engineering.planning import PLAN_DEFAULT_DAYS, PLAN_HORIZON_DAYS
from .engineering.rules import (
    ACCEPTED_DAYS_WORDS,
    FIRST_ACCEPTED_DAY,
    LAST_ACCEPTED_DAY,
    MSG_NOT_FINITE,
    NOT_FINITE_WORDS,
    parse_numbers,
)
from .forms import YearMonthDayField
from .models import Assessment, CapacitorPart, FittedCapacitor, Motor, Reading, Site
from .roles import scope_to_user


def _sites_of(request):
    """The sites a request may ask for: the requesting user's (every site for a command or a task)."""
    return scope_to_user(Site.objects.all(), request.user if request is not None else None)


# What a filter says of a value it does not know: the value, and where the valid ones are listed.
UNKNOWN_SITE_WORDS = (
    'No site "%(value)s" among the sites you work at (codes are exact, capitals and spaces included): the plan '
    "page, /plan/, lists them."
)
UNKNOWN_PART_WORDS = (
    'No part "%(value)s" in the catalogue (codes are exact, capitals and spaces included): the life-data page, '
    "/life/, lists them."
)
UNKNOWN_MOTOR_WORDS = (
    'No motor "%(value)s" at the sites you work at (tags are exact, capitals and spaces included): find it by part '
    "of its tag at /find/."
)
UNKNOWN_RISK_WORDS = '"%(value)s" is not a risk level: ' + ", ".join(Assessment.Risk.values) + "."


def _site_filter(field_name: str, method: str | None = None) -> django_filters.ModelChoiceFilter:
    """A site by its code, among the requesting user's sites: an unknown code, or a site the user
    does not work at, is a message naming the parameter and the code, not an empty answer. `method="keep"`: a
    page's parameter, read only (`_PageParameters`)."""
    return django_filters.ModelChoiceFilter(
        field_name=field_name,
        method=method,
        queryset=_sites_of,
        to_field_name="code",
        error_messages={"invalid_choice": UNKNOWN_SITE_WORDS},
    )


def _part_filter(field_name: str) -> django_filters.ModelChoiceFilter:
    """A catalogue part by its code: an unknown code is a message naming the parameter and the code, not an
    empty answer."""
    return django_filters.ModelChoiceFilter(
        field_name=field_name,
        queryset=CapacitorPart.objects.all(),
        to_field_name="code",
        error_messages={"invalid_choice": UNKNOWN_PART_WORDS},
    )


def _motors_of(request):
    return scope_to_user(Motor.objects.all(), request.user if request is not None else None)


# The days a date filter takes: the rulebook's accepted span.
FIRST_FILTER_DAY, LAST_FILTER_DAY = FIRST_ACCEPTED_DAY.astype(dt.date), LAST_ACCEPTED_DAY.astype(dt.date)
FILTER_DAY_WORDS = f"a date {ACCEPTED_DAYS_WORDS} (YYYY-MM-DD)"
# A text in the shape of a day: what the calendar does not hold (2027-02-30, 2026-13-01) is named as such.
DAY_SHAPE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}")


class DayField(YearMonthDayField):
    """A day typed or sent; one in the shape YYYY-MM-DD that no calendar holds is "not a day of the
    calendar", not the span's words (which read as if the date were out of range)."""

    def to_python(self, value):
        text = value.strip() if isinstance(value, str) else value
        if isinstance(text, str) and DAY_SHAPE.fullmatch(text):
            try:
                dt.date.fromisoformat(text)
            except ValueError:
                raise ValidationError(f"{text} is not a day of the calendar", code="invalid") from None
        return super().to_python(value)


class DayFilter(django_filters.DateFilter):
    """A whole day (YYYY-MM-DD) from FIRST_FILTER_DAY to LAST_FILTER_DAY; another is a message naming the parameter."""

    field_class = DayField

    def __init__(self, *args, **kwargs):
        bounds = [
            MinValueValidator(FIRST_FILTER_DAY, FILTER_DAY_WORDS),
            MaxValueValidator(LAST_FILTER_DAY, FILTER_DAY_WORDS),
        ]
        super().__init__(*args, validators=bounds, error_messages={"invalid": FILTER_DAY_WORDS}, **kwargs)


class AssessmentFilter(django_filters.FilterSet):
    """GET /api/assessments/?site=CST&risk=due+soon&replace_by_before=2027-03-31&fitted_against_advice=true"""

    site = _site_filter("site")  # the stored site (triggers, 0019)
    risk = django_filters.ChoiceFilter(
        field_name="risk", choices=Assessment.Risk.choices, error_messages={"invalid_choice": UNKNOWN_RISK_WORDS}
    )
    replace_by_before = DayFilter(field_name="replace_by", lookup_expr="lte")
    fitted_against_advice = django_filters.ChoiceFilter(
        choices=[("true", "true"), ("false", "false")],
        method="against_advice",
        error_messages={"invalid_choice": "%(value)s is not true or false"},
    )

    class Meta:
        model = Assessment
        fields = ["site", "risk", "replace_by_before", "fitted_against_advice"]

    def against_advice(self, queryset, name, value):
        """A capacitor fitted with a ticked override (`FittedCapacitor.substitute_override`), or not."""
        return queryset.filter(fitted_capacitor__substitute_override=value == "true")


class DaySpanForm(forms.Form):
    """A `since` later than its `until` is named at both (it would list nothing, unexplained)."""

    def clean(self):
        data = super().clean()
        since, until = data.get("since"), data.get("until")
        if since and until and since > until:
            words = f"since ({since}) is later than until ({until}): nothing lies between; swap them?"
            self.add_error("since", words)
            self.add_error("until", words)
        return data


class ReadingFilter(django_filters.FilterSet):
    """GET /api/readings/?site=CST&part=RUN-4U-450&motor=CST-0093&since=2026-01-01&until=2026-03-31
    (since and until are whole days, inclusive, in UTC)."""

    site = _site_filter("fitted_capacitor__motor__site")
    part = _part_filter("fitted_capacitor__part")
    # A motor by its tag, among the user's sites (an unknown tag, or one elsewhere, is named).
    motor = django_filters.ModelChoiceFilter(
        field_name="fitted_capacitor__motor",
        queryset=_motors_of,
        to_field_name="asset_tag",
        error_messages={"invalid_choice": UNKNOWN_MOTOR_WORDS},
    )
    since = DayFilter(method="taken_since")
    until = DayFilter(method="taken_until")

    class Meta:
        model = Reading
        fields = ["site", "part", "motor", "since", "until"]
        form = DaySpanForm

    def taken_since(self, queryset, name, value):
        return queryset.filter(taken_at__gte=utc_midnight(value))

    def taken_until(self, queryset, name, value):
        return queryset.filter(taken_at__lt=utc_midnight(value + dt.timedelta(days=1)))


def utc_midnight(day: dt.date) -> dt.datetime:
    """The start of `day` at UTC: where a filter's day, and the reading rule's quarter, begin."""
    return dt.datetime.combine(day, dt.time.min, tzinfo=dt.UTC)


class LifeDataFilter(django_filters.FilterSet):
    """The life-data page's part (and a site, for a narrower pull): ?part=RUN-4U-450&site=CST"""

    part = _part_filter("part")
    site = _site_filter("motor__site")

    class Meta:
        model = FittedCapacitor
        fields = ["part", "site"]


class RegisterFilter(django_filters.FilterSet):
    """The register export's site: ?site=CST"""

    site = _site_filter("site")

    class Meta:
        model = Motor
        fields = ["site"]


class BadFilter(ValueError):
    """Query-string values that cannot be read: `problems`, the messages by parameter (the API's shape of a 400,
    `{"site": ["..."]}`); its text names each ("site: ...; days: ...")."""

    def __init__(self, problems: dict[str, str | list[str]]):
        self.problems = {name: [words] if isinstance(words, str) else list(words) for name, words in problems.items()}
        super().__init__(problems_text({name: " ".join(words) for name, words in self.problems.items()}))


def query_value(query, name: str) -> str | None:
    """The value a query string gives `name`, None when it is left out or empty: the one rule of every
    page, export and API list (an HTML form sends `site=` for "all sites")."""
    return query.get(name) or None


def repeated_words(name: str, values: list[str]) -> str:
    """What the rulebook says of a single-valued parameter given more than once."""
    return f"Give {name} once (given {len(values)} times: {', '.join(values)})"


def repeated_parameters(query, names) -> dict[str, str]:
    """The message on each of `names` the query string gives more than once (`site=CST&site=PKH` would
    otherwise use one of them silently); a plain dict (a form's values) holds one value a name."""
    getlist = getattr(query, "getlist", None)
    if getlist is None:
        return {}
    return {name: repeated_words(name, getlist(name)) for name in names if len(getlist(name)) > 1}


def parameter_problems(query, known) -> dict[str, str]:
    """The one rule of the API's lists and the exports (and the dashboard's downloads) on the parameters of
    a query string: the message on each one not taken (a misspelt filter, `risks=watch`, would otherwise
    list everything), with the ones taken, and on each one given more than once. {} when every parameter
    is taken and given once. A parameter given empty is left out (`query_value`), a name not taken too."""
    takes = f"which takes: {', '.join(sorted(known))}" if known else "which takes none"
    getlist = getattr(query, "getlist", lambda name: [query[name]])
    problems = {
        name: f"Not a parameter of this list, {takes}."
        for name in query
        if name not in known and any(str(value).strip() for value in getlist(name))
    }
    for name, words in repeated_parameters(query, [name for name in query if name in known]).items():
        problems[name] = f"{words}; one value per call."
    return problems


def problems_text(problems: dict[str, str]) -> str:
    """Problems by parameter as one line: "site: ...; risk: ..."."""
    return "; ".join(f"{name}: {message}" for name, message in problems.items())


def refused_download(error: str) -> HttpResponse:
    """A download's answer to a query string it cannot use (an export's, the dashboard's tables'): a 400 in
    plain text naming each parameter."""
    return HttpResponse(f"Cannot read the filter: {error}", status=400, content_type="text/plain; charset=utf-8")


def filtered(filterset_class, query, queryset, request=None):
    """`queryset` filtered by the query string, or BadFilter naming each parameter that cannot be read, is
    not one of the filterset's, or is given twice."""
    problems = parameter_problems(query, set(filterset_class.base_filters))
    if problems:
        raise BadFilter(problems)
    parameters = filterset_class(query, queryset=queryset, request=request)
    if not parameters.is_valid():
        raise BadFilter(parameters.errors)
    return parameters.qs


def page_parameters(filterset_class, query, request=None) -> tuple[dict, dict[str, str]]:
    """(the values a page's query string gives, the message on each parameter that cannot be read or is
    given more than once): a page uses its default for a value missing, empty or unread, and says so when
    it was unread or repeated; it never answers a 500."""
    parameters = filterset_class(query, queryset=filterset_class._meta.model.objects.none(), request=request)
    refused = {} if parameters.is_valid() else {name: " ".join(errors) for name, errors in parameters.errors.items()}
    refused |= repeated_parameters(query, filterset_class.base_filters)
    data = parameters.form.cleaned_data
    return {k: v for k, v in data.items() if k not in refused and v not in (None, "")}, refused


def named_if_repeated(request, names) -> bool:
    """Whether the query string gives any of `names` more than once, each such named in a note on the page
    (for a page that reads a parameter without a filterset: the find box, the reading form's `corrects`)."""
    repeated = repeated_parameters(request.GET, names)
    for name, words in repeated.items():
        messages.warning(request, f"Ignored {name}: {words}")
    return bool(repeated)


def takes_parameters(*known: str):
    """A page view's decorator: each query-string parameter it does not take, given a value, is named in a note
    on the page (`/dashboard/?site=CST` would otherwise look filtered while it shows every site), by the rule
    of the lists and exports (`parameter_problems`); the page is shown as without it."""

    def decorator(view):
        @functools.wraps(view)
        def wrapped(request, *args, **kwargs):
            if request.method == "GET":
                for name, message in parameter_problems(request.GET, set(known)).items():
                    if name not in known:
                        page_words = message.replace("of this list", "of this page")
                        messages.warning(request, f"Ignored {name}: {page_words}")
            return view(request, *args, **kwargs)

        return wrapped

    return decorator


def page_values(filterset_class, request) -> dict:
    """The values of a page's query string; each parameter that cannot be read is named in a note on the page."""
    values, refused = page_parameters(filterset_class, request.GET, request)
    for name, message in refused.items():
        messages.warning(request, f"Ignored {name}: {message}")
    return values


class _PageParameters(django_filters.FilterSet):
    """Parameters a page reads (its list comes from a service): each filter keeps the queryset as it is."""

    def keep(self, queryset, name, value):
        return queryset


class PositiveNumberField(forms.CharField):
    """A number above zero in the rulebook's syntax: "60,5" is 60.5; "1.200,5" is refused, not guessed;
    `highest` (when given) is the most it takes."""

    def __init__(self, *args, highest: float | None = None, **kwargs):
        super().__init__(*args, **kwargs)
        self.highest = highest

    def clean(self, value):
        text = super().clean(value)
        if text in (None, ""):
            return None
        numbers, said = parse_numbers([text])
        number = float(numbers[0])
        typed_infinity = str(text).strip().lower() in NOT_FINITE_WORDS
        if said[0] == MSG_NOT_FINITE and self.highest is not None and not typed_infinity:
            number = np.inf  # 1e309 is a number, past any bound
        elif typed_infinity:
            raise ValidationError("must be a finite number above zero")  # "NaN" was told "at most 1,000,000"
        if not number > 0:
            raise ValidationError("must be a number above zero")
        if self.highest is not None and number > self.highest:
            raise ValidationError(f"must be at most {self.highest:,.0f}")
        return number


class PositiveNumberFilter(django_filters.Filter):
    field_class = PositiveNumberField


class LifeDataPage(_PageParameters):
    """The life-data page: ?part=RUN-4U-450&planned_cost=60&failure_cost=400 (the engineer's costs)."""

    part = django_filters.CharFilter(method="keep", max_length=40)
    planned_cost = PositiveNumberFilter(method="keep", highest=MAX_REPLACEMENT_COST)
    failure_cost = PositiveNumberFilter(method="keep", highest=MAX_REPLACEMENT_COST)

    class Meta:
        model = FittedCapacitor
        fields = ["part", "planned_cost", "failure_cost"]


class RoutePage(_PageParameters):
    """A site's route: ?show=due lists only the motors still to read this quarter."""

    show = django_filters.ChoiceFilter(
        method="keep",
        choices=[("due", "due"), ("all", "all")],
        error_messages={
            "invalid_choice": "%(value)s is not one of its values: due (the motors still to read this quarter) or "
            "all; showing all"
        },
    )

    class Meta:
        model = Site
        fields = ["show"]


class LabelsPage(_PageParameters):
    """A site's labels: ?tag=CST-0093 prints one motor's label."""

    tag = django_filters.CharFilter(method="keep", max_length=40)

    class Meta:
        model = Site
        fields = ["tag"]


SHORTEST_DAYS, LONGEST_DAYS = PLAN_HORIZON_DAYS
HORIZON_WORDS = f"type a whole number of days from {SHORTEST_DAYS} to {LONGEST_DAYS}, e.g. 90"


class BoundedNumberFilter(django_filters.NumberFilter):
    """A number whose bounds are its own validators' (the library's 1e+50 cap, in its words, left off)."""

    def get_max_validator(self):
        return None


class PlanParameters(_PageParameters):
    """The plan page's and its downloads' site and horizon (the plan itself comes from a service)."""

    site = _site_filter("site", method="keep")
    days = BoundedNumberFilter(
        method="keep",
        validators=[MinValueValidator(SHORTEST_DAYS, HORIZON_WORDS), MaxValueValidator(LONGEST_DAYS, HORIZON_WORDS)],
        label="Horizon (days)",
        error_messages={"invalid": HORIZON_WORDS},
    )

    class Meta:
        model = Assessment
        fields = ["site", "days"]


class WorkOrdersParameters(_PageParameters):
    """The work-orders page's site: its visits and cancelled orders at that site alone."""

    site = _site_filter("site", method="keep")

    class Meta:
        model = Site
        fields = ["site"]


def plan_parameters(
    query, default_days: int = PLAN_DEFAULT_DAYS, request=None
) -> tuple[Site | None, int, dict[str, str]]:
    """(site, horizon in days, the message on each parameter ignored) from a plan query string; a site
    the requesting user does not work at is ignored like an unknown one."""
    values, refused = page_parameters(PlanParameters, query, request)
    problems = {name: message.rstrip(".") for name, message in refused.items()}
    return values.get("site"), int(values.get("days") or default_days), problems


class WholeNumberFilter(BoundedNumberFilter):
    """A whole number ("2"; "1.5" and "abc" are refused by name); one past a list's end is the list's to name."""

    field_class = forms.IntegerField


PAGE_WORDS = "pages start at 1; showing page 1"


class ListPage(_PageParameters):
    """Which page of a long list: ?page=2 (a whole number from 1)."""

    page = WholeNumberFilter(
        method="keep",
        validators=[MinValueValidator(1, PAGE_WORDS)],
        error_messages={"invalid": f"pages are whole numbers; {PAGE_WORDS}"},
    )

    class Meta:
        model = Site
        fields = ["page"]


def list_page(request, page_of: Callable[[int], Page]) -> Page:
    """The page of a list the query string's `page` asks for, from `page_of` (a Paginator's get_page, or a
    service that pages): a number that cannot be read is named in a note and page 1 shown; one past the
    end is named too, and the last page shown. Never a silent fallback, never a 500."""
    asked = page_values(ListPage, request).get("page", 1)
    page = page_of(asked)
    if page.number != asked:
        last = page.paginator.num_pages
        messages.warning(
            request,
            f"Ignored page: there {'is' if last == 1 else 'are'} only {last} page{'' if last == 1 else 's'}; "
            f"showing page {page.number}, not {asked}.",
        )
    return page
