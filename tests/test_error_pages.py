"""Refused and missing pages keep the menu and a way back, not a bare status line."""

import pytest
from django.test import override_settings
from django.urls import reverse

from tests.conftest import make_installation, make_user


@pytest.mark.django_db
@override_settings(DEBUG=False)
def test_a_refused_page_says_why_and_leads_back(client):
    installation = make_installation()
    client.force_login(make_user("planner"))
    response = client.get(reverse("replace", args=[installation.id]))
    assert response.status_code == 403
    body = response.content.decode()
    assert "Not allowed for your role" in body and reverse("home") in body


@pytest.mark.django_db
@override_settings(DEBUG=False)
def test_a_missing_page_offers_the_motor_search(client):
    client.force_login(make_user("technician"))
    response = client.get("/motors/NO-SUCH-TAG/")
    assert response.status_code == 404
    assert reverse("find") in response.content.decode()
