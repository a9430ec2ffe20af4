"""Every address of ours, read with hostile path values and query strings, as each role: never a server error.

The addresses come from the URL configuration itself (a page added later is read too); each path value is
tried as a real one from the demo and as values no register holds (ids past a 64-bit integer, a day the
calendar does not have, a code of 200 letters); each query string carries every parameter name any page
or the API reads, all at once, with one hostile value. [trade] "a server error is a bug": bad input is
answered at the field (a 4xx, or the page with a note naming the parameter), never a 500 (common practice
of the trade, no single source).
"""

import re
from urllib.parse import quote

import pytest
from django.core.management import call_command
from django.urls import URLPattern, URLResolver, get_resolver

from fleet import filters
from fleet.models import FittedCapacitor, ImportJob, Motor, WorkOrder
from fleet.services.import_jobs import create_job
from tests.factories import make_user

pytestmark = pytest.mark.django_db

# Parameter names read outside the filter sets (by name in views and the API's paging and format).
OTHER_PARAMETERS = {"tag", "corrects", "parts", "page", "page_size", "format", "ordering", "cursor", "q", "next"}
HOSTILE_VALUES = [
    "",
    "abc",
    "-1",
    "0",
    "1.5",
    "1,5",
    "1.200,5",
    "1e400",
    "nan",
    "-inf",
    "99999999999999999999999999",
    "9223372036854775808",
    "2027-02-30",
    "0000-00-00",
    "99999-01-01",
    "\x00",
    "%",
    "'; --",
    "<script>alert(1)</script>",
    "é" * 60,
    "a" * 3000,
    "ZZZ",
]
HOSTILE_PATH_VALUES = {
    "int": ["0", "2147483648", "9223372036854775808", "99999999999999999999999999"],
    "code": ["ZZZ", "X" * 200, "a-b-c"],
    "str": ["2027-02-30", "9999-12-31", "0001-01-01", "2027-13-01", "x", "é" * 50, "1" * 300],
    "slug": ["nope", "a" * 200],
}
# Addresses that are not read with GET by a person or a program (posted forms answer 405 to GET).
NOT_READ = re.compile(r"^(admin/|logout/|\^api/)")


def _addresses(resolvers, prefix=""):
    """(route, name) of every address of ours, from the URL configuration."""
    for entry in resolvers:
        if isinstance(entry, URLResolver):
            yield from _addresses(entry.url_patterns, prefix + str(entry.pattern))
        elif isinstance(entry, URLPattern):
            yield prefix + str(entry.pattern), entry.name


def _parameter_names() -> set[str]:
    """Every query parameter a page or the API reads through the rulebook's filter sets, and the rest."""
    names = set(OTHER_PARAMETERS)
    for value in vars(filters).values():
        if isinstance(value, type) and hasattr(value, "base_filters"):
            names |= set(value.base_filters)
    return names


def _real_values() -> dict[str, str]:
    """One real value of each path parameter, from the demo."""
    capacitor = FittedCapacitor.objects.filter(removed_on__isnull=True).order_by("id").first()
    order = WorkOrder.objects.select_related("site").filter(state__in=WorkOrder.OPEN_STATES).order_by("id").first()
    job = ImportJob.objects.order_by("-id").first()
    return {
        "asset_tag": Motor.objects.order_by("id").first().asset_tag,
        "fitted_capacitor_id": str(capacitor.id),
        "pk": str(capacitor.id),
        "site_code": order.site.code,
        "order_id": str(order.id),
        "day": str(order.due_on),
        "job_id": str(job.id),
        "name": "workload",
        "file_format": "csv",
        "kind": "readings",
    }


def _paths(route: str, real: dict[str, str]) -> list[str]:
    """The route with every parameter real, then with each parameter hostile in turn (the others real)."""
    parameters = re.findall(r"<(\w+):(\w+)>", route)

    def fill(values):
        path = route
        for converter, name in parameters:
            path = path.replace(f"<{converter}:{name}>", quote(values[name], safe=""))
        return "/" + path

    paths = [fill(real)]
    for converter, name in parameters:
        for hostile in HOSTILE_PATH_VALUES[converter]:
            paths.append(fill({**real, name: hostile}))
    return paths


@pytest.fixture
def small_demo(transactional_db):
    call_command("demo", "--no-serve", "--scale", "0.05")


def _signed_in(client, role: str) -> None:
    """Signed in as a new user of `role`, with an import of theirs waiting (its pages are theirs to read)."""
    client.raise_request_exception = False
    user = make_user(role)
    client.force_login(user)
    create_job(
        kind=ImportJob.Kind.READINGS,
        filename="route.csv",
        content=b"asset_tag,role,taken_at,capacitance_uf\nNONE-0001,run,2026-01-05 09:00,3.9\n",
        user=user,
    )


@pytest.mark.parametrize("role", ["technician", "administrator"])
def test_no_address_answers_a_server_error_whatever_its_path_and_query(client, small_demo, role):
    _signed_in(client, role)
    real, names = _real_values(), sorted(_parameter_names())
    routes = [(route, name) for route, name in _addresses(get_resolver().url_patterns) if not NOT_READ.match(route)]
    assert len(routes) >= 30, "the URL configuration was read"  # the crawl is only as good as what it reads
    failures, answered, real_answers = [], 0, {}
    for route, _name in routes:
        real_path, *hostile_paths = _paths(route, real)
        # Hostile query strings on the real address, hostile path values with no query string.
        asked = [(real_path, value) for value in [None, *HOSTILE_VALUES]] + [(path, None) for path in hostile_paths]
        for path, value in asked:
            query = None if value is None else {name: value for name in names}
            response = client.get(path, query, HTTP_ACCEPT="text/html,application/json")
            answered += 1
            if path == real_path and value is None:
                real_answers[route] = response.status_code
            if response.status_code >= 500:
                failures.append(f"{response.status_code} {path} {'' if value is None else repr(value[:20])}")
    assert answered > 800
    # The real addresses were read as pages (a wrong "real" value would hide every page behind a 404).
    assert [route for route, status in real_answers.items() if status >= 400 and status != 405] == (
        ["work-orders/<int:order_id>/cancel/"] if role == "technician" else []
    ), real_answers
    assert not failures, f"{len(failures)} server errors:\n" + "\n".join(failures[:60])


FORM = re.compile(r"<form\b([^>]*)>(.*?)</form>", re.S)
FIELD = re.compile(r"<(?:input|select|textarea|button)\b[^>]*\bname=\"([^\"]+)\"")


def _posted_forms(html: str, page_path: str) -> list[tuple[str, list[str]]]:
    """(action, field names) of each form a page posts, the sign-out and the CSRF token left out."""
    found = []
    for attributes, body in FORM.findall(html):
        if not re.search(r'method="post"', attributes, re.I) or "data-sign-out" in attributes:
            continue
        action = re.search(r'action="([^"]*)"', attributes)
        names = sorted({name for name in FIELD.findall(body) if name != "csrfmiddlewaretoken"})
        found.append(((action.group(1).replace("&amp;", "&") if action else "") or page_path, names))
    return found


@pytest.mark.parametrize("role", ["technician", "administrator"])
def test_no_form_answers_a_server_error_whatever_is_typed_in_it(client, small_demo, role):
    """Each form the pages of ours post (found in the pages themselves), every field filled with one
    hostile value at a time: a message at the field or a refusal, never a 500."""
    _signed_in(client, role)
    real = _real_values()
    routes = [route for route, _name in _addresses(get_resolver().url_patterns) if not NOT_READ.match(route)]
    forms = {}
    for route in routes:
        path = _paths(route, real)[0]
        response = client.get(path)
        if response.status_code == 200 and response["Content-Type"].startswith("text/html"):
            for action, names in _posted_forms(response.content.decode(), path):
                forms.setdefault((action, tuple(names)), path)
    assert len(forms) >= (6 if role == "technician" else 10), sorted(forms)
    failures = []
    for action, names in forms:
        # A form with no field to type in (a button: run the back-test, start a refit) is posted once:
        # every hostile value would post the same empty form, and each post runs its whole job.
        for value in HOSTILE_VALUES if names else HOSTILE_VALUES[:1]:
            response = client.post(action, {name: value for name in names})
            if response.status_code >= 500:
                failures.append(f"{response.status_code} {action} {list(names)} {value[:20]!r}")
    assert not failures, f"{len(failures)} server errors:\n" + "\n".join(failures[:60])
