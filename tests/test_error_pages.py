"""Refused and missing pages keep the menu and a way back, not a bare status line."""

import html
import json

import pytest
from django.test import override_settings
from django.urls import reverse

from tests.factories import make_fitted_capacitor, make_user


@pytest.mark.django_db
@override_settings(DEBUG=False)
def test_a_refused_page_says_why_and_leads_back(client):
    fitted_capacitor = make_fitted_capacitor()
    client.force_login(make_user("planner"))
    response = client.get(reverse("replace", args=[fitted_capacitor.id]))
    assert response.status_code == 403
    body = response.content.decode()
    # The page names who may, as the API does ("Not allowed for your role" said nothing of whom to ask for what).
    assert "needs the technician role (or administrator); your roles: planner." in body, body
    assert "ask an administrator to add the role" in body and reverse("home") in body
    # A planner refused one reading is pointed to the way the role brings readings in (a walk looked for it).
    refused = client.get(reverse("reading_new", args=[fitted_capacitor.id])).content.decode()
    assert "Your role brings readings in by file: Import, in the menu." in refused


@pytest.mark.django_db
@override_settings(DEBUG=False)
def test_a_missing_page_offers_the_motor_search(client):
    client.force_login(make_user("technician"))
    response = client.get("/motors/NO-SUCH-TAG/")
    assert response.status_code == 404
    assert reverse("find") in response.content.decode()


@pytest.mark.django_db
def test_a_removed_capacitor_points_to_the_one_fitted_now(client, technician):
    import datetime as dt

    from fleet.services.readings import replace_capacitor

    fitted_capacitor = make_fitted_capacitor()
    successor = replace_capacitor(
        fitted_capacitor=fitted_capacitor, part=fitted_capacitor.part, removed_on=dt.date(2025, 6, 1), reason="planned"
    )
    client.force_login(technician)
    body = client.get(reverse("fitted_capacitor", args=[fitted_capacitor.id])).content.decode()
    assert "out of service" in body and reverse("fitted_capacitor", args=[successor.id]) in body
    assert "Replace by" not in body


@pytest.mark.django_db
def test_a_cost_that_is_not_a_number_is_named_not_silently_replaced(client, engineer):
    client.force_login(engineer)
    response = client.get(reverse("life_data") + "?planned_cost=abc&failure_cost=-1", follow=True)
    text = response.content.decode()
    assert "The planned cost must be a number above zero; &#x27;abc&#x27; was not used" in text
    assert "The failure cost must be a number above zero" in text
    # A walk: NaN was told "must be at most 1,000,000" (taken as a number past the bound, as 1e309 rightly is).
    text = client.get(reverse("life_data") + "?planned_cost=NaN&failure_cost=inf", follow=True).content.decode()
    assert "The planned cost must be a finite number above zero; &#x27;NaN&#x27; was not used" in text
    assert "The failure cost must be a finite number above zero; &#x27;inf&#x27; was not used" in text


@pytest.mark.django_db
def test_rows_to_fix_of_a_refused_file_is_a_message_not_a_server_error(client, technician):
    from fleet.models import ImportJob

    job = ImportJob.objects.create(
        kind="readings", filename="cut.csv", content=b'asset_tag,role,taken_at\n"M-1,run', created_by=technician
    )
    client.force_login(technician)
    response = client.get(reverse("import_rejected", args=[job.id]), follow=True)
    assert response.status_code == 200
    assert "There are no rows to download" in response.content.decode()


@pytest.mark.django_db
@override_settings(DEBUG=False)
def test_a_form_with_a_stale_sign_in_is_refused_plainly_with_a_way_back():
    """A form posted without a valid CSRF token (signed out and in again in another tab) answers
    403 with the product's page, not Django's "CSRF verification failed", and leads back to the
    page it came from when that is on this site, else to the start page."""
    from django.test import Client

    fitted_capacitor = make_fitted_capacitor()
    client = Client(enforce_csrf_checks=True)
    client.force_login(make_user("technician"))
    form_page = reverse("reading_new", args=[fitted_capacitor.id])
    response = client.post(form_page, {"capacitance_uf": "4.1"}, HTTP_REFERER=f"http://testserver{form_page}")
    assert response.status_code == 403
    body = response.content.decode()
    assert "CSRF verification failed" not in body
    assert "Your sign-in changed since this page was opened, so it was not saved." in body
    assert "A reading you were typing is kept on this device: open the form again." in body
    assert f'href="http://testserver{form_page}"' in body
    assert fitted_capacitor.readings.count() == 0

    elsewhere = client.post(form_page, {"capacitance_uf": "4.1"}, HTTP_REFERER="https://elsewhere.example/page")
    assert elsewhere.status_code == 403
    assert "elsewhere.example" not in elsewhere.content.decode()
    assert f'href="{reverse("home")}">Back to the start page</a>' in elsewhere.content.decode()


@pytest.mark.django_db
def test_a_refused_page_is_logged_in_one_line_without_a_traceback(client, caplog):
    """[trade] a log that fills with tracebacks of people opening pages not theirs hides the faults: a 403
    is logged as one line naming the page, with no traceback (a 500 keeps its own)."""
    import logging

    fitted_capacitor = make_fitted_capacitor()
    client.force_login(make_user("planner"))
    with caplog.at_level(logging.WARNING, logger="django.request"):
        response = client.get(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    assert response.status_code == 403
    records = [r for r in caplog.records if r.name == "django.request"]
    assert records and all(r.exc_info is None for r in records)
    assert "/reading/" in records[0].getMessage()


@pytest.mark.django_db
def test_a_body_the_server_cannot_read_is_a_400_logged_in_one_line(client, caplog):
    """A fuzz: a form posted as multipart with no boundary got Django's 400, and the log a traceback, as if the
    server had failed. [ours] the sender's fault, logged in one line naming the page, as a refusal is."""
    import logging

    with caplog.at_level(logging.WARNING, logger="django.request"):
        response = client.generic("POST", reverse("login"), b"--x\r\n", content_type="multipart/form-data")
    assert response.status_code == 400
    records = [r for r in caplog.records if r.name == "django.request"]
    assert records and all(r.exc_info is None for r in records)
    assert "/login/" in records[0].getMessage()


def test_a_request_the_database_could_not_answer_is_logged_in_one_line_with_the_drivers_words():
    """An operator's walk: six requests while the database was down logged 584 lines of tracebacks, each answered
    503 by the site's own handler. [ours] one line each, naming the page, the 503 and the driver's words; any
    other server error keeps its traceback."""
    import logging
    import sys

    from django.db import OperationalError

    from fleet.log_filters import RefusalsInOneLine

    def record_of(error):
        try:
            raise error
        except (OperationalError, ValueError):
            exc_info = sys.exc_info()
        record = logging.LogRecord(
            "django.request", logging.ERROR, "", 0, "Internal Server Error: %s", ("/plan/",), exc_info
        )
        record.status_code = 500
        RefusalsInOneLine().filter(record)
        return record

    down = record_of(OperationalError('connection to server at "db-host" failed: Connection refused'))
    assert down.exc_info is None and down.getMessage() == (
        'Internal Server Error: /plan/: database unavailable, answered 503: connection to server at "db-host" '
        "failed: Connection refused"
    )
    assert record_of(ValueError("a fault of ours")).exc_info is not None


def test_a_database_busy_past_its_timeout_is_said_as_busy_not_unreachable():
    """A helper's walk on the embedded default: a reading saved while a large import wrote on SQLite waited past
    the busy timeout and the page said the database "cannot be reached". [derived] a 503 that says the database is
    busy with another long write and nothing was saved; an unreachable database is still said so."""
    from django.db import OperationalError
    from django.test import RequestFactory

    from fleet import faults

    def answer(path: str, message: str):
        try:
            raise OperationalError(message)
        except OperationalError:
            return faults.server_error(RequestFactory().post(path))

    page = answer("/fitted-capacitors/1/reading/", "database is locked")
    assert page.status_code == 503 and "busy with another long write" in page.content.decode()
    api = answer("/api/fitted-capacitors/1/readings/", "database is locked")
    assert api.status_code == 503 and "nothing was saved" in json.loads(api.content)["detail"]
    unreachable = answer("/plan/", "connection refused")
    assert "cannot be reached" in unreachable.content.decode() and "busy" not in unreachable.content.decode()


def test_a_form_sent_while_the_database_was_busy_leads_back_to_its_page_with_what_was_typed():
    """The reading form came back filled in when the database was busy, but every other form (a replacement, a
    route's places, a work order) got a page that only said to try again, and what was typed was gone. [ours] a
    form's 503 says nothing was saved, holds what was typed on the device (page.js, as after a sign-in that had
    ended) and leads back to the page the form was on; a page asked for (GET) gets no such notice."""
    from django.db import OperationalError
    from django.test import RequestFactory

    from fleet import faults

    def answer(request):
        try:
            raise OperationalError("database is locked")
        except OperationalError:
            return faults.server_error(request)

    form_page = "/fitted-capacitors/7/replace/?next=/work-orders/"
    sent = answer(RequestFactory().post("/fitted-capacitors/7/replace/", HTTP_REFERER=f"http://testserver{form_page}"))
    body = html.unescape(sent.content.decode())
    assert sent.status_code == 503 and 'id="not-saved"' in body and 'data-why="busy"' in body
    assert f'href="{form_page}">Back to the form</a>' in body and f"; url={form_page}" in body
    assert "fleet/page.js" in body and "not saved" in body
    elsewhere = answer(RequestFactory().post("/plan/", HTTP_REFERER="https://elsewhere.example/x"))
    assert 'href="/plan/">Back to the form</a>' in elsewhere.content.decode()  # never a page of another site
    asked = answer(RequestFactory().get("/plan/")).content.decode()
    assert 'id="not-saved"' not in asked and "page.js" not in asked and "cannot be shown" in asked
