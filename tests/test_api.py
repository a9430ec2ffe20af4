"""The JSON API: token auth, role permissions, the form's checks on writes."""

import datetime as dt

import pytest
from django.urls import reverse
from django.utils import timezone
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from fleet.models import Reading
from fleet.services.assessments import refit_fitted_capacitors
from tests.factories import make_fitted_capacitor, quarterly_readings

pytestmark = pytest.mark.django_db


def client_for(user) -> APIClient:
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=user).key}")
    return client


def test_no_token_no_data(fan_fitted_capacitor):
    response = APIClient().get(reverse("api_assessments"))
    assert response.status_code == 401


def test_engineer_reads_current_assessments_filtered_by_site(engineer, fan_fitted_capacitor):
    quarterly_readings(fan_fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.98, 3.96])
    refit_fitted_capacitors([fan_fitted_capacitor.id])
    client = client_for(engineer)
    body = client.get(reverse("api_assessments"), {"site": fan_fitted_capacitor.motor.site.code}).json()
    assert body["count"] == 1
    row = body["results"][0]
    assert row["asset_tag"] == fan_fitted_capacitor.motor.asset_tag and row["rated_uf"] == 4.0
    assert row["risk"] in {"replace now", "due soon", "watch", "sound"}
    unknown = client.get(reverse("api_assessments"), {"site": "ELSEWHERE"})
    assert unknown.status_code == 400 and "site" in unknown.json(), "an unknown site is named, not an empty answer"


def test_a_browser_opening_the_api_gets_json(engineer, fan_fitted_capacitor, client):
    """The API answers JSON to a browser too (a browser asks for HTML first): no framework page,
    whose filter form needed templates the project does not install and answered 500."""
    client.force_login(engineer)
    for url in (reverse("api_assessments"), reverse("api_readings")):
        response = client.get(url, {"site": fan_fitted_capacitor.motor.site.code}, HTTP_ACCEPT="text/html,*/*;q=0.8")
        assert response.status_code == 200, url
        assert response["Content-Type"].startswith("application/json")


def test_the_assessments_take_a_page_size_and_name_one_they_cannot_use(engineer):
    """page_size was ignored on the assessments (100 a page whatever was asked) while `next` echoed it."""
    for n in range(3):
        capacitor = make_fitted_capacitor()
        quarterly_readings(capacitor, dt.datetime(2024, 1, 8, 9, tzinfo=dt.UTC), [4.0, 3.95 - 0.01 * n, 3.9])
        refit_fitted_capacitors([capacitor.id])
    client = client_for(engineer)
    body = client.get(reverse("api_assessments"), {"page_size": 2}).json()
    assert body["count"] == 3 and len(body["results"]) == 2 and "page_size=2" in body["next"]
    assert len(client.get(body["next"]).json()["results"]) == 1
    for bad in ("0", "1001", "two"):
        response = client.get(reverse("api_assessments"), {"page_size": bad})
        assert response.status_code == 400 and response.json()["page_size"] == ["A whole number from 1 to 1000."]


@pytest.mark.parametrize("page_size", ["abc", "0", "-1", "999999", "１０"])
def test_a_readings_page_size_that_cannot_be_used_is_named(engineer, fan_fitted_capacitor, page_size):
    """page_size takes a whole number from 1 to 5000; anything else answers 400 naming it (full-width
    digits are not ASCII digits)."""
    response = client_for(engineer).get(reverse("api_readings"), {"page_size": page_size})
    assert response.status_code == 400 and "page_size" in response.json()


def test_a_site_the_user_does_not_work_at_is_named_like_an_unknown_one(engineer, fan_fitted_capacitor):
    from fleet.models import Site, SiteMembership

    other = Site.objects.create(code="ELSE", name="Elsewhere", time_zone="UTC")
    SiteMembership.objects.create(user=engineer, site=fan_fitted_capacitor.motor.site)
    client = client_for(engineer)
    assert client.get(reverse("api_readings"), {"site": fan_fitted_capacitor.motor.site.code}).status_code == 200
    refused = client.get(reverse("api_readings"), {"site": other.code})
    assert refused.status_code == 400 and "site" in refused.json()


def test_technician_posts_a_reading_with_the_forms_checks(technician, fan_fitted_capacitor):
    client = client_for(technician)
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    bad = client.post(url, {"method": "meter", "capacitance_uf": 3950}, format="json")
    assert bad.status_code == 400 and "nanofarads" in bad.json()["capacitance_uf"][0]
    good = client.post(
        url, {"method": "in_circuit", "capacitor_current_a": 0.5, "capacitor_voltage_v": 400}, format="json"
    )
    assert good.status_code == 201 and good.json()["capacitance_uf"] == pytest.approx(3.979, abs=0.001)
    assert Reading.objects.get().taken_by == technician
    assert len(client.get(url).json()["results"]) == 1


def test_an_off_trend_value_over_the_api_needs_confirmation(technician, fan_fitted_capacitor):
    quarterly_readings(fan_fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.98, 3.97])
    refit_fitted_capacitors([fan_fitted_capacitor.id])
    client = client_for(technician)
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    assert client.post(url, {"method": "meter", "capacitance_uf": 3.2}, format="json").status_code == 409
    assert (
        client.post(url, {"method": "meter", "capacitance_uf": 3.2, "confirmed": True}, format="json").status_code
        == 201
    )


def test_a_reading_without_its_method_or_as_malformed_json_is_refused_naming_why(technician, fan_fitted_capacitor):
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    client = client_for(technician)
    missing = client.post(url, {"capacitance_uf": 3.9}, format="json")
    assert missing.status_code == 400 and "method" in missing.json()
    malformed = client.post(url, '{"method": "meter", "capacitance_uf": 3.9,', content_type="application/json")
    assert malformed.status_code == 400 and "JSON parse error" in malformed.json()["detail"]
    assert not Reading.objects.exists()


def test_a_planner_cannot_post_readings(planner, fan_fitted_capacitor):
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    assert client_for(planner).post(url, {"method": "meter", "capacitance_uf": 3.9}, format="json").status_code == 403


def test_a_fitted_capacitor_that_is_not_there_is_named_in_plain_words(engineer):
    client = client_for(engineer)
    for address in (
        "/api/fitted-capacitors/987654/readings/",
        "/api/fitted-capacitors/987654/substitutes/",
        "/api/fitted-capacitors/99999999999999999999999/readings/",  # past any row id: no overflow
    ):
        response = client.get(address)
        assert response.status_code == 404 and response["Content-Type"] == "application/json", address
        number = address.split("/")[3]
        assert response.json()["detail"] == f"No fitted capacitor {number} at the sites you work at.", address
        assert "FittedCapacitor" not in response.content.decode()


@pytest.mark.parametrize("address", ["/api/", "/api/nope/", "/api/fitted-capacitors/abc/readings/"])
@pytest.mark.parametrize("signed_in", [True, False])
@pytest.mark.parametrize("debug", [False, True])
def test_every_api_address_answers_json_even_one_that_names_nothing(engineer, address, signed_in, debug, settings):
    """The README: the API answers JSON only. A 404 under /api/ was Django's HTML page, and with DEBUG
    on (the embedded default) its debug page."""
    settings.DEBUG = debug
    client = client_for(engineer) if signed_in else APIClient()
    response = client.get(address)
    assert response.status_code == 404
    assert response["Content-Type"] == "application/json"
    body = response.json()
    assert body["detail"] == f"No API address {address}." and "/api/assessments/" in body["addresses"]


def test_a_capacitor_fitted_against_the_advice_is_marked_in_the_api_and_listed_for_the_engineer(
    engineer, fan_fitted_capacitor, client
):
    """A fresh-eyes walk: a stop-gap fitted with a ticked override showed its reason on its own page only; the
    plan, the dashboard and the API said nothing, so the engineer could not find the positions to put right.
    The API marks it (and filters on it), and the stand-in parts page lists every one in service."""
    from fleet.services.readings import replace_capacitor
    from tests.factories import make_part

    quarterly_readings(fan_fitted_capacitor, dt.datetime(2024, 1, 8, 9, tzinfo=dt.UTC), [4.0, 3.98, 3.96])
    other = make_fitted_capacitor()
    stopgap = make_part(code="RUN-3-450", rated_uf=3.0, rated_voltage_v=450)
    fitted = replace_capacitor(
        fitted_capacitor=other,
        part=stopgap,
        removed_on=timezone.localdate(),
        reason="failed",
        substitute_override=True,
        override_reason="the only film part on the shelf",
    )
    quarterly_readings(fitted, timezone.now() - dt.timedelta(days=2), [3.0])
    refit_fitted_capacitors([fan_fitted_capacitor.id, fitted.id], force=True)
    api = client_for(engineer)
    rows = {row["fitted_capacitor_id"]: row for row in api.get(reverse("api_assessments")).json()["results"]}
    assert rows[fitted.id]["fitted_against_advice"] is True
    assert rows[fitted.id]["override_reason"] == "the only film part on the shelf"
    assert rows[fan_fitted_capacitor.id]["fitted_against_advice"] is False
    only = api.get(reverse("api_assessments"), {"fitted_against_advice": "true"}).json()
    assert [row["fitted_capacitor_id"] for row in only["results"]] == [fitted.id]
    # Counted as listed (a second walk: the count was every assessment's, and `next` led to empty pages).
    assert only["count"] == 1 and only["next"] is None
    rest = api.get(reverse("api_assessments"), {"fitted_against_advice": "false", "page_size": 1}).json()
    assert rest["count"] == 1 and rest["next"] is None
    refused = api.get(reverse("api_assessments"), {"fitted_against_advice": "perhaps"})
    assert refused.status_code == 400 and "perhaps is not true or false" in refused.json()["fitted_against_advice"][0]

    client.force_login(engineer)
    page = client.get(reverse("stand_in_parts")).content.decode()
    listed = page[page.index('id="against-advice"') :]
    assert "RUN-3-450" in listed and "the only film part on the shelf" in listed
    assert other.part.code in listed  # the design part, the one to bring
    assert fan_fitted_capacitor.motor.asset_tag not in listed
    # The plan names them too, with the way to the list (one count, from the partial index).
    plan = client.get(reverse("plan")).content.decode()
    said = plan[plan.index('id="stop-gaps"') :].split("</p>")[0]
    assert "1 capacitor in service was fitted against the advice as a stop-gap" in said
    assert f'href="{reverse("stand_in_parts")}#against-advice"' in said
