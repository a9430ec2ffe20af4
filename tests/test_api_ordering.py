"""The assessments API lists the soonest replacement first, on SQLite as on PostgreSQL."""

import datetime as dt

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.models import Assessment
from fleet.services.assessments import refit_fitted_capacitors
from tests.factories import make_fitted_capacitor, quarterly_readings

from .test_api import client_for

pytestmark = pytest.mark.django_db


def test_capacitors_without_a_replacement_date_come_last(engineer):
    """[derived] SQL puts NULL first on SQLite and last on PostgreSQL unless told: the API tells."""
    start = timezone.make_aware(dt.datetime(2024, 1, 8, 9))
    fitted_capacitors = [make_fitted_capacitor() for _ in range(3)]
    for fitted_capacitor in fitted_capacitors:
        quarterly_readings(fitted_capacitor, start, [4.0, 3.98, 3.96])
    refit_fitted_capacitors([i.id for i in fitted_capacitors])
    undated, late, soon = fitted_capacitors
    Assessment.objects.filter(fitted_capacitor=undated).update(replace_by=None)
    Assessment.objects.filter(fitted_capacitor=late).update(replace_by=dt.date(2030, 1, 1))
    Assessment.objects.filter(fitted_capacitor=soon).update(replace_by=dt.date(2027, 1, 1))
    client = client_for(engineer)
    rows = client.get(reverse("api_assessments")).json()["results"]
    assert [row["replace_by"] for row in rows] == ["2027-01-01", "2030-01-01", None]
