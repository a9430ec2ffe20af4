"""Superseded assessments are kept FLEET_ASSESSMENT_HISTORY_DAYS, then deleted when a fleet refit finishes;
a capacitor's current assessment never is."""

import datetime as dt

import pytest
from django.utils import timezone

from fleet.models import Assessment
from fleet.services.refits import prune_assessment_history, start_fleet_refit
from tests.factories import make_fitted_capacitor, quarterly_readings, stored_assessment

pytestmark = pytest.mark.django_db

NOW = timezone.now()


def days_ago(days: int) -> dt.datetime:
    return NOW - dt.timedelta(days=days)


@pytest.fixture
def histories():
    """A capacitor in service assessed 100, 40 and 10 days ago and now; a removed one whose only (current)
    assessment was made 200 days ago."""
    in_service = make_fitted_capacitor()
    made = {days: stored_assessment(in_service, "sound", None, created_at=days_ago(days)).id for days in (100, 40, 10)}
    made[0] = stored_assessment(in_service, "watch", None).id
    removed = make_fitted_capacitor(removed_on=days_ago(150).date(), removal_reason="failed")
    made["removed"] = stored_assessment(removed, "replace now", None, created_at=days_ago(200)).id
    return made


def test_superseded_assessments_older_than_the_history_go_and_current_ones_stay(histories, settings):
    settings.FLEET_ASSESSMENT_HISTORY_DAYS = 35

    assert prune_assessment_history(NOW) == 2

    kept = set(Assessment.objects.values_list("id", flat=True))
    assert kept == {histories[10], histories[0], histories["removed"]}
    assert set(Assessment.objects.filter(is_current=True).values_list("id", flat=True)) == {
        histories[0],
        histories["removed"],
    }


def test_a_history_of_zero_days_keeps_every_assessment(histories, settings):
    settings.FLEET_ASSESSMENT_HISTORY_DAYS = 0

    assert prune_assessment_history(NOW) == 0
    assert Assessment.objects.count() == 5


def test_a_finished_fleet_refit_deletes_the_old_history(settings, django_capture_on_commit_callbacks):
    settings.FLEET_ASSESSMENT_HISTORY_DAYS = 35
    fitted_capacitor = make_fitted_capacitor(fitted_on=days_ago(800).date())
    quarterly_readings(fitted_capacitor, days_ago(700), [4.0, 3.99, 3.98, 3.97, 3.96, 3.95])
    old = stored_assessment(fitted_capacitor, "sound", None, created_at=days_ago(60)).id
    recent = stored_assessment(fitted_capacitor, "sound", None, created_at=days_ago(5)).id

    with django_capture_on_commit_callbacks(execute=True):  # the chunks are dispatched on commit, run in-process
        start_fleet_refit(force=True)

    ids = set(Assessment.objects.filter(fitted_capacitor=fitted_capacitor).values_list("id", flat=True))
    assert old not in ids
    assert recent in ids
    assert Assessment.objects.filter(fitted_capacitor=fitted_capacitor, is_current=True).exclude(id=recent).count() == 1
