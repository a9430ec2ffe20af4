"""`field__any_of`: the same rows as `field__in`, with the whole list as one parameter."""

import numpy as np
import pytest

from fleet.lookups import SEPARATOR
from fleet.models import FittedCapacitor, Motor

from .conftest import make_installation, make_motor


@pytest.fixture
def three_motors(db):
    return [make_installation(motor=make_motor(asset_tag=f"ANY-{n}")) for n in range(3)]


@pytest.mark.parametrize(
    "lookup,values",
    [
        ("asset_tag", ["ANY-0", "ANY-2", "NOT-THERE"]),
        ("asset_tag", ["ANY-1", f"ANY-0{SEPARATOR}ANY-2"]),  # a value holding the separator goes as an array
        ("asset_tag", []),
    ],
)
def test_text_values_find_what_in_finds(three_motors, lookup, values):
    expected = set(Motor.objects.filter(**{f"{lookup}__in": values}).values_list("id", flat=True))
    found = set(
        Motor.objects.filter(**{f"{lookup}__any_of": np.array(values, dtype=object)}).values_list("id", flat=True)
    )
    assert found == expected
    assert len(found) == sum(value.startswith("ANY-") and SEPARATOR not in value for value in values)


def test_numbers_and_foreign_keys_find_what_in_finds(three_motors):
    motor_ids = [installation.motor_id for installation in three_motors[:2]]
    by_key = FittedCapacitor.objects.filter(motor_id__any_of=np.array(motor_ids, np.int64))
    by_join = FittedCapacitor.objects.filter(motor__any_of=np.array(motor_ids, np.int64))
    assert set(by_key) == set(by_join) == set(FittedCapacitor.objects.filter(motor_id__in=motor_ids))
    assert by_key.count() == 2
    assert Motor.objects.filter(id__any_of=np.array([], np.int64)).count() == 0
