"""The life-data page's counts without a stored fit are the life table's: one rule for which capacitors count."""

import datetime as dt

import pytest
from django.utils import timezone

from fleet.models import FittedCapacitor
from fleet.services.lifedata import life_table, part_life
from tests.factories import make_fitted_capacitor, make_motor, make_part

pytestmark = pytest.mark.django_db


def test_counts_without_a_fit_are_the_life_tables():
    """A capacitor fitted today has no age yet: the life table leaves it out, and so do the counts
    the page shows before a part has a fit (a unit of age nought is neither a failure nor a suspension:
    common practice of life-data analysis, no single source)."""
    part = make_part()
    today = timezone.localdate()
    make_fitted_capacitor(
        motor=make_motor(),
        part=part,
        fitted_on=dt.date(2022, 1, 1),
        removed_on=dt.date(2024, 6, 1),
        removal_reason=FittedCapacitor.RemovalReason.FAILED,
    )
    make_fitted_capacitor(motor=make_motor(), part=part, fitted_on=dt.date(2023, 1, 1))
    make_fitted_capacitor(motor=make_motor(), part=part, fitted_on=today)
    table = life_table(part.id)
    life = part_life(part.id, planned_cost=60.0, failure_cost=400.0)
    assert life["fit"] is None
    assert (life["failures"], life["suspensions"]) == (int(table["failed"].sum()), int((~table["failed"]).sum()))
    assert (life["failures"], life["suspensions"]) == (1, 1)
