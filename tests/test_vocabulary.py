"""Fixed vocabularies: the models' choices are the core's names, and what a refit stores is one of them."""

import datetime as dt

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.engineering.capacitor import VERDICT_NAMES
from fleet.engineering.drift import LIMIT_NAMES, ROLE_RUN, ROLE_START
from fleet.engineering.planning import DISSIPATION_LIMIT, RISK_ORDER, TOLERANCE_LIMIT
from fleet.engineering.rules import CONDITIONS, METHODS
from fleet.engineering.trends import MODEL_LINEAR, MODEL_LOG
from fleet.models import Assessment, FittedCapacitor, Reading, TrendModel
from fleet.services.assessments import refit_fitted_capacitors
from tests.factories import quarterly_readings

from .test_api import client_for


def test_choices_are_the_cores_names_in_the_cores_order():
    """[derived] one vocabulary: the database's choices are built from the core's constants."""
    assert tuple(Assessment.Risk.values) == RISK_ORDER
    assert Assessment.Verdict.values == list(VERDICT_NAMES.values())
    assert Assessment.LimitSource.values == [TOLERANCE_LIMIT, *LIMIT_NAMES, DISSIPATION_LIMIT]
    assert TrendModel.values == [MODEL_LINEAR, MODEL_LOG]
    assert set(FittedCapacitor.Role.values) == {ROLE_RUN, ROLE_START}
    assert tuple(Reading.Method.values) == METHODS
    assert tuple(Reading.Condition.values) == CONDITIONS


@pytest.mark.django_db
def test_a_refit_stores_only_values_of_the_vocabularies(fan_fitted_capacitor):
    """[derived] a stored assessment passes its own field choices (full_clean checks them)."""
    quarterly_readings(fan_fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.9, 3.8, 3.7])
    refit_fitted_capacitors([fan_fitted_capacitor.id])
    assessment = Assessment.objects.get(fitted_capacitor=fan_fitted_capacitor, is_current=True)
    assessment.full_clean(exclude=["fitted_capacitor", "newest_reading"])
    assert assessment.get_risk_display() == assessment.risk.capitalize()


@pytest.mark.django_db
def test_an_unknown_risk_in_the_api_query_is_a_400_naming_it(engineer):
    client = client_for(engineer)
    response = client.get(reverse("api_assessments"), {"risk": "dangerous"})
    assert response.status_code == 400
    assert "risk" in response.json()
    assert client.get(reverse("api_assessments"), {"risk": Assessment.Risk.DUE_SOON}).status_code == 200
