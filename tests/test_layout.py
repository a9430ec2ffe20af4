"""The layout's promises: one name for a fitted capacitor (old addresses still reach its pages, a
phone's unsent draft keeps its key), page parameters read by django-filter (a bad value is named,
never a 500), and import parsing that needs no database."""

import datetime as dt
import subprocess
import sys
from pathlib import Path

import pytest
from django.urls import reverse
from django.utils import timezone
from rest_framework.test import APIClient

from fleet.models import Assessment, WorkOrder
from fleet.services.workorders import plan_work_orders
from tests.factories import make_fitted_capacitor, stored_assessment

pytestmark = pytest.mark.django_db
ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("tail", ["", "reading/", "replace/"])
def test_the_old_addresses_of_a_fitted_capacitor_redirect_for_good(client, technician, tail):
    """Printed labels, QR codes and bookmarks carry /capacitors/<id>/...: they must keep working."""
    fitted = make_fitted_capacitor()
    client.force_login(technician)
    response = client.get(f"/capacitors/{fitted.id}/{tail}?corrects=7")
    assert response.status_code == 301
    assert response["Location"] == f"/fitted-capacitors/{fitted.id}/{tail}?corrects=7"


@pytest.mark.parametrize("old", [False, True])
def test_the_api_of_a_fitted_capacitor_answers_at_its_name_and_at_its_old_address(technician, old):
    """A script posting readings to /api/capacitors/<id>/readings/ keeps working: the same view, no redirect
    (a client following a 301 may turn a POST into a GET)."""
    from rest_framework.test import APIClient

    fitted = make_fitted_capacitor()
    api = APIClient()
    api.force_authenticate(technician)
    url = (
        f"/api/capacitors/{fitted.id}/readings/" if old else reverse("api_fitted_capacitor_readings", args=[fitted.id])
    )
    assert url.startswith("/api/capacitors/" if old else "/api/fitted-capacitors/")
    posted = api.post(url, {"method": "meter", "capacitance_uf": 3.9}, format="json")
    assert posted.status_code == 201, posted.content[:300]
    listed = api.get(url).json()
    readings = listed["results"] if isinstance(listed, dict) else listed
    assert [r["capacitance_uf"] for r in readings] == [3.9]


def test_the_fitted_capacitor_page_lives_under_its_own_name(client, engineer):
    fitted = make_fitted_capacitor()
    client.force_login(engineer)
    assert reverse("fitted_capacitor", args=[fitted.id]) == f"/fitted-capacitors/{fitted.id}/"
    page = client.get(reverse("fitted_capacitor", args=[fitted.id])).content.decode()
    assert f"fitted {fitted.get_role_display().lower()} capacitor {fitted.part.code}" in page


def test_the_reading_form_keeps_the_key_of_a_draft_saved_before_the_rename(client, technician):
    """A technician's unsent draft sits in the phone under "reading-draft-<id>": the key must not change."""
    fitted = make_fitted_capacitor()
    client.force_login(technician)
    page = client.get(reverse("reading_new", args=[fitted.id])).content.decode()
    assert f'data-fitted-capacitor="{fitted.id}"' in page
    assert '"reading-draft-" + form.dataset.fittedCapacitor' in page


@pytest.mark.parametrize(
    "url,parameter",
    [
        ("/sites/{site}/route/?show=everything", "show"),
        ("/sites/{site}/labels/?tag=" + "X" * 41, "tag"),
        ("/life/?part=" + "P" * 41, "part"),
        ("/life/?planned_cost=1.200,5", "planned cost"),
    ],
)
def test_a_page_parameter_it_cannot_read_is_named_on_the_page(client, administrator, url, parameter):
    fitted = make_fitted_capacitor()
    client.force_login(administrator)
    response = client.get(url.format(site=fitted.motor.site.code), follow=True)
    assert response.status_code == 200
    notes = [str(m) for m in response.context["messages"]]
    assert any(parameter in note for note in notes), notes


def test_a_route_parameter_it_reads_still_filters(client, administrator):
    fitted = make_fitted_capacitor()
    client.force_login(administrator)
    response = client.get(f"/sites/{fitted.motor.site.code}/route/?show=due")
    assert response.status_code == 200 and response.context["only_due"] is True
    assert not list(response.context["messages"])


@pytest.fixture
def one_visit(db):
    """One capacitor to replace now, planned into one site visit: every paged list has one page."""
    fitted = make_fitted_capacitor()
    stored_assessment(fitted, Assessment.Risk.REPLACE_NOW, timezone.localdate() + dt.timedelta(days=5))
    plan_work_orders(horizon_days=90)
    return WorkOrder.objects.get()


PAGED_LISTS = [
    "/plan/?days=30",
    "/work-orders/",
    "/work-orders/{site}/{day}/",
    "/sites/{site}/route/",
    "/sites/{site}/labels/",
]


@pytest.mark.parametrize("url", PAGED_LISTS)
@pytest.mark.parametrize(
    "page,says", [("abc", "whole number"), ("-1", "pages start at 1; showing page 1"), ("99999", "only 1 page")]
)
def test_a_page_number_it_cannot_use_is_named_on_the_page(client, administrator, one_visit, url, page, says):
    """A page that is not a number, below 1 or past the end was answered with the first or last page
    without a word; the note names `page` and says why, and the list still shows."""
    client.force_login(administrator)
    address = url.format(site=one_visit.site.code, day=one_visit.due_on.isoformat())
    response = client.get(address + ("&" if "?" in address else "?") + f"page={page}")
    assert response.status_code == 200
    notes = [str(m) for m in response.context["messages"]]
    assert any(note.startswith("Ignored page") and says in note for note in notes), notes
    assert response.context["page"].number == 1


def test_a_huge_page_or_horizon_is_named_in_the_pages_own_words(client, administrator, one_visit):
    """A 60-digit page or horizon drew the filter library's "less than or equal to 1e+50"."""
    client.force_login(administrator)
    huge = "9" * 60
    response = client.get("/plan/", {"days": huge, "page": huge})
    notes = [str(m) for m in response.context["messages"]]
    assert response.status_code == 200 and not any("1e+50" in note for note in notes), notes
    assert any(note.startswith("Ignored days: type a whole number of days from") for note in notes), notes
    assert any(note.startswith("Ignored page: there is only 1 page") for note in notes), notes


@pytest.mark.parametrize("url", PAGED_LISTS)
def test_a_page_number_it_can_use_brings_no_note(client, administrator, one_visit, url):
    client.force_login(administrator)
    address = url.format(site=one_visit.site.code, day=one_visit.due_on.isoformat())
    response = client.get(address + ("&" if "?" in address else "?") + "page=1")
    assert response.status_code == 200 and not list(response.context["messages"])


@pytest.mark.parametrize("page", ["abc", "-1", "0", "99999"])
def test_the_api_refuses_a_page_it_cannot_use_by_name(administrator, one_visit, page):
    """As with page_size and the filters: a 400 naming the parameter (it was a 404 for the whole address)."""
    api = APIClient()
    api.force_authenticate(administrator)
    for url in ("/api/assessments/", f"/api/fitted-capacitors/{one_visit.fitted_capacitor_id}/readings/"):
        response = api.get(url, {"page": page})
        assert response.status_code == 400 and "page" in response.json(), (url, response.content)
    assert api.get("/api/assessments/", {"page": 1}).status_code == 200


def test_the_api_refuses_a_cursor_it_did_not_give_by_name(administrator, one_visit):
    api = APIClient()
    api.force_authenticate(administrator)
    response = api.get("/api/readings/", {"cursor": "not-a-cursor"})
    assert response.status_code == 400 and "cursor" in response.json(), response.content


def test_import_parsing_and_column_rules_load_without_the_database_layer():
    """fleet/imports/ holds no ORM access: importing it must not load django.db."""
    code = (
        "import os, sys; os.environ['DJANGO_SETTINGS_MODULE'] = 'config.settings'; "
        "import fleet.imports.files, fleet.imports.columns; "
        "loaded = [m for m in sys.modules if m == 'django.db' or m.startswith('django.db.')]; "
        "print(loaded); sys.exit(1 if loaded else 0)"
    )
    result = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert result.returncode == 0, result.stdout + result.stderr


def test_no_template_comment_spans_lines():
    """Django's {# ... #} comment holds on one line only: one over two lines was printed, as text, at the top of
    every form's error summary. [Django documentation, "The Django template language": comments] A comment
    over several lines is {% comment %}."""
    spanning = [
        f"{path.name}:{number}"
        for path in (Path(__file__).resolve().parent.parent / "templates").rglob("*.html")
        for number, line in enumerate(path.read_text().splitlines(), start=1)
        if "{#" in line and "#}" not in line[line.index("{#") :]
    ]
    assert not spanning, spanning
