"""The readings table's indexes: one per way it is read, none that only costs writes."""

import pytest
from django.db import connection

pytestmark = pytest.mark.django_db


def _indexes_of(table: str) -> dict[str, list[str]]:
    with connection.cursor() as cursor:
        constraints = connection.introspection.get_constraints(cursor, table)
    return {name: facts["columns"] for name, facts in constraints.items() if facts["index"] and not facts["unique"]}


def test_readings_by_capacitor_have_one_index_in_date_order():
    """A capacitor's readings are read in date order (its page, the refit, the import's checks):
    the index on (capacitor, taken_at) serves them, and one on the capacitor alone would only be
    written, never needed (common practice: a composite index serves its leading column)."""
    indexes = _indexes_of("fleet_reading")
    assert ["fitted_capacitor_id", "taken_at"] in indexes.values()
    assert ["fitted_capacitor_id"] not in indexes.values(), indexes
