"""fleet.services.bulk: `insert_frame` stores what the ORM would, `field__any_of` finds what `field__in` finds,
`select_frame` reads back what the ORM reads, `side_by_side` reads what this connection would.

[derived] the ORM's own reads are the reference: a row written in bulk must read back as the
values given, and a filter must return the rows `__in` returns.
"""

import datetime as dt
import threading
import time

import numpy as np
import pandas as pd
import pytest
from django.db import IntegrityError, connection, transaction

from fleet.models import FittedCapacitor, Motor, Reading
from fleet.services.bulk import (
    SEPARATOR,
    insert_frame,
    on_postgresql,
    select_frame,
    side_by_side,
)
from fleet.services.selectors import READING_COLUMNS, readings_frame
from tests.factories import make_fitted_capacitor, make_motor


@pytest.fixture
def three_motors(db):
    return [make_fitted_capacitor(motor=make_motor(asset_tag=f"ANY-{n}")) for n in range(3)]


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
    motor_ids = [fitted_capacitor.motor_id for fitted_capacitor in three_motors[:2]]
    by_key = FittedCapacitor.objects.filter(motor_id__any_of=np.array(motor_ids, np.int64))
    by_join = FittedCapacitor.objects.filter(motor__any_of=np.array(motor_ids, np.int64))
    assert set(by_key) == set(by_join) == set(FittedCapacitor.objects.filter(motor_id__in=motor_ids))
    assert by_key.count() == 2
    assert Motor.objects.filter(id__any_of=np.array([], np.int64)).count() == 0


def _readings(fitted_capacitor, keys, capacitance_uf=3.9):
    return pd.DataFrame(
        {
            "fitted_capacitor_id": fitted_capacitor.id,
            "taken_at": pd.to_datetime(
                ["2024-03-14 09:30:00", "2024-06-14 10:15:00.250000"][: len(keys)], utc=True, format="ISO8601"
            ),
            "method": "meter",
            "capacitance_uf": capacitance_uf,
            "esr_ohm": [0.02, np.nan][: len(keys)],
            "notes": ["", "dusty guard"][: len(keys)],
            "client_key": [None, "tablet-7"][: len(keys)],
            "source": "import",
            "import_key": keys,
        }
    )


def test_rows_written_in_bulk_read_back_as_given(three_motors):
    fitted_capacitor = three_motors[0]
    assert insert_frame(Reading, _readings(fitted_capacitor, ["k-1", "k-2"])) == 2
    first, second = Reading.objects.order_by("taken_at")
    assert first.taken_at == dt.datetime(2024, 3, 14, 9, 30, tzinfo=dt.UTC)
    assert second.taken_at == dt.datetime(2024, 6, 14, 10, 15, 0, 250000, tzinfo=dt.UTC)
    assert Reading.objects.filter(taken_at=dt.datetime(2024, 3, 14, 9, 30, tzinfo=dt.UTC)).get() == first
    assert (first.esr_ohm, second.esr_ohm) == (0.02, None)
    assert (first.notes, second.notes) == ("", "dusty guard")  # empty text is not NULL, and back
    assert (first.client_key, second.client_key) == (None, "tablet-7")
    assert first.condition == Reading._meta.get_field("condition").default and first.outlier_confirmed is False
    assert first.created_at is not None and first.fitted_capacitor == fitted_capacitor


def test_a_time_in_another_zone_is_stored_as_the_same_instant(three_motors):
    """COPY gets each time as UTC text with its offset, whatever zone the frame's column is in."""
    madrid = _readings(three_motors[0], ["k-1", "k-2"]).assign(
        taken_at=pd.to_datetime(["2024-03-31 01:59:59.999999", "2024-03-31 03:00:00.000001"]).tz_localize(
            "Europe/Madrid"
        )
    )
    insert_frame(Reading, madrid)
    assert list(Reading.objects.order_by("taken_at").values_list("taken_at", flat=True)) == [
        dt.datetime(2024, 3, 31, 0, 59, 59, 999999, tzinfo=dt.UTC),  # before the clocks went forward (UTC+1)
        dt.datetime(2024, 3, 31, 1, 0, 0, 1, tzinfo=dt.UTC),  # after (UTC+2)
    ]


def test_skipping_conflicts_skips_only_the_clashing_rows(three_motors):
    fitted_capacitor = three_motors[0]
    with transaction.atomic():
        insert_frame(
            Reading, _readings(fitted_capacitor, ["k-2"]).assign(taken_at=pd.Timestamp("2024-06-14", tz="UTC"))
        )
    with transaction.atomic():
        written = insert_frame(Reading, _readings(fitted_capacitor, ["k-1", "k-2"]), skip_conflicts_on="import_key")
    assert written == 1
    assert sorted(Reading.objects.values_list("import_key", flat=True)) == ["k-1", "k-2"]
    assert Reading.objects.get(import_key="k-2").taken_at == dt.datetime(2024, 6, 14, tzinfo=dt.UTC)  # not overwritten
    with pytest.raises(IntegrityError), transaction.atomic():
        insert_frame(Reading, _readings(fitted_capacitor, ["k-3"]))
        insert_frame(Reading, _readings(fitted_capacitor, ["k-3"]))  # without the option a clash refuses


def test_skipping_conflicts_still_refuses_a_row_that_breaks_a_rule(three_motors):
    with pytest.raises(IntegrityError), transaction.atomic():
        insert_frame(Reading, _readings(three_motors[0], ["k-1"], capacitance_uf=-1.0), skip_conflicts_on="import_key")
    assert not Reading.objects.exists()


AWKWARD_NOTES = ["", "a, b", 'said "open"', "C:\\motors\\(fan)", "two\nlines", "  spaced  ", "NULL", "\u00b5F"]


def test_selected_rows_read_back_as_the_orm_reads_them(three_motors):
    # Text that CSV or a row's text form must quote (commas, quotes, backslashes, parentheses, line
    # breaks, edge spaces), empty text apart from NULL, numbers exact to the last digit.
    fitted_capacitor = three_motors[0]
    frame = pd.DataFrame(
        {
            "fitted_capacitor_id": fitted_capacitor.id,
            "taken_at": pd.date_range("2024-01-01", periods=len(AWKWARD_NOTES), freq="D", tz="UTC"),
            "method": "meter",
            "capacitance_uf": 3.9 + np.arange(len(AWKWARD_NOTES)) / 3,
            "esr_ohm": [0.1 / 3, np.nan] * (len(AWKWARD_NOTES) // 2),
            "notes": AWKWARD_NOTES,
            "client_key": [None if n % 2 == 0 else f"k,{n}" for n in range(len(AWKWARD_NOTES))],
            "source": "import",
        }
    )
    insert_frame(Reading, frame)
    columns = ["id", "notes", "client_key", "capacitance_uf", "esr_ohm", "supersedes_id"]
    read = select_frame(
        "SELECT id, notes, client_key, capacitance_uf, esr_ohm, supersedes_id FROM fleet_reading"
        " WHERE fitted_capacitor_id = %s",
        [fitted_capacitor.id],
        columns,
    ).sort_values("id")
    expected = list(Reading.objects.filter(fitted_capacitor=fitted_capacitor).order_by("id").values_list(*columns))
    assert len(read) == len(expected) == len(AWKWARD_NOTES)
    for row, want in zip(read.itertuples(index=False), expected, strict=True):
        assert row.id == want[0] and row.notes == want[1] and row.capacitance_uf == want[3]
        assert row.client_key == want[2] if want[2] is not None else pd.isna(row.client_key)
        assert row.esr_ohm == want[4] if want[4] is not None else pd.isna(row.esr_ohm)
        assert pd.isna(row.supersedes_id) and want[5] is None
    assert select_frame("SELECT id FROM fleet_reading WHERE id < 0", [], ["id"]).empty


def _orm_readings(fitted_capacitor_ids) -> pd.DataFrame:
    rows = Reading.objects.filter(fitted_capacitor_id__in=fitted_capacitor_ids).order_by("id")
    return pd.DataFrame.from_records(list(rows.values_list(*READING_COLUMNS)), columns=READING_COLUMNS)


def _assert_reads_as_the_orm(read: pd.DataFrame, fitted_capacitor_ids) -> None:
    expected = _orm_readings(fitted_capacitor_ids)
    read = read.sort_values("id").reset_index(drop=True)
    assert len(read) == len(expected) > 0
    assert read["id"].tolist() == expected["id"].tolist()
    assert read["fitted_capacitor_id"].tolist() == expected["fitted_capacitor_id"].tolist()
    assert [t.to_pydatetime() for t in read["taken_at"]] == expected["taken_at"].tolist()
    for column in ("capacitance_uf", "case_temperature_c", "capacitor_voltage_v", "esr_ohm", "supersedes_id"):
        want = expected[column].astype(float).to_numpy()
        assert np.array_equal(read[column].to_numpy(float), want, equal_nan=True), column  # exact to the last digit
    assert read["condition"].tolist() == expected["condition"].tolist()


def test_the_refits_read_of_readings_gives_what_the_orm_reads(three_motors):
    """[derived] `readings_frame` (on PostgreSQL each value in its binary form, NULL as a stand-in, the
    condition as its place among the choices) against the ORM's own read: times to the microsecond, before
    and after 2000-01-01 (PostgreSQL's epoch), empty values apart, every condition, a correction's link, and
    a condition that is none of the choices (read as it stands, by the ORM)."""
    first, second, _ = three_motors
    conditions = [value for value, _ in Reading.Condition.choices]
    frame = pd.DataFrame(
        {
            "fitted_capacitor_id": [first.id] * len(conditions) + [second.id],
            "taken_at": pd.to_datetime(
                ["1999-12-31 23:59:59.999999", "2000-01-01 00:00:00.000001", "2024-02-29 12:00:00.123456"]
                + ["2026-07-01 06:30:00"] * (len(conditions) - 2),
                utc=True,
                format="ISO8601",
            )[: len(conditions) + 1],
            "method": "meter",
            "capacitance_uf": [3.9 + n / 3 for n in range(len(conditions))] + [0.1 + 0.2],
            "case_temperature_c": [41.5, np.nan] * (len(conditions) // 2) + [np.nan] * (len(conditions) % 2 + 1),
            "capacitor_voltage_v": [np.nan] * len(conditions) + [371.25],
            "esr_ohm": [np.nan] * (len(conditions) - 1) + [1e-5, 0.0],
            "condition": conditions + [conditions[0]],
            "notes": "",
            "source": "import",
        }
    )
    insert_frame(Reading, frame)
    original = Reading.objects.filter(fitted_capacitor=second).get()
    Reading.objects.create(
        fitted_capacitor=second, taken_at=original.taken_at, method="meter", capacitance_uf=0.3, supersedes=original
    )
    ids = [first.id, second.id]
    read = readings_frame(ids)
    _assert_reads_as_the_orm(read, ids)
    assert read.set_index("id")["superseded"].to_dict() == {r: r == original.id for r in read["id"]}
    odd = frame.iloc[[0]].assign(condition="charred", taken_at=pd.Timestamp("2026-08-01", tz="UTC"))
    insert_frame(Reading, odd)  # no choice is checked by the database: a value written around the forms
    _assert_reads_as_the_orm(readings_frame(ids), ids)


def test_a_bulk_insert_holding_one_reading_after_its_capacitors_removal_writes_nothing(three_motors):
    """The database's rule, per row on SQLite and per statement on PostgreSQL (migrations 0021, 0032): one
    reading dated after the removal refuses the whole insert with the same message; the removal day itself
    is still allowed, to its end in the last zone to finish it (UTC-12: 12:00 UTC the next day)."""
    removed = three_motors[1]

    def readings(fitted_capacitor, keys):
        return _readings(fitted_capacitor, keys).drop(columns="client_key")

    FittedCapacitor.objects.filter(pk=removed.pk).update(removed_on=dt.date(2024, 6, 12), removal_reason="failed")
    with pytest.raises(IntegrityError, match="reading taken after its capacitor was removed"), transaction.atomic():
        insert_frame(Reading, pd.concat([readings(three_motors[0], ["a-1", "a-2"]), readings(removed, ["r-1", "r-2"])]))
    assert not Reading.objects.exists()
    FittedCapacitor.objects.filter(pk=removed.pk).update(removed_on=dt.date(2024, 6, 13))
    late = readings(removed, ["r-1", "r-2"]).assign(
        taken_at=pd.to_datetime(["2024-06-14 11:59:59", "2024-06-14 12:00:00"], utc=True)
    )
    with pytest.raises(IntegrityError, match="after its capacitor was removed"), transaction.atomic():
        insert_frame(Reading, pd.concat([readings(three_motors[2], ["c-1"]), late]))
    assert not Reading.objects.exists()
    assert insert_frame(Reading, pd.concat([readings(three_motors[0], ["a-1", "a-2"]), late.iloc[:1]])) == 3


def test_reads_side_by_side_within_a_transaction_see_its_rows(three_motors):
    # [derived] Inside a transaction (here the test's) another connection would not see the rows
    # written in it: every read runs on this connection, one after the other.
    tags = ["ANY-0", "ANY-1", "ANY-2"]
    counts = side_by_side(*(lambda tag=tag: Motor.objects.filter(asset_tag=tag).count() for tag in tags))
    assert counts == [1, 1, 1]


def _backend_pid() -> int:
    with connection.cursor() as cursor:
        cursor.execute("SELECT pg_backend_pid()")
        return cursor.fetchone()[0]


@pytest.mark.django_db(transaction=True)
@pytest.mark.skipif(not on_postgresql(), reason="reads run side by side on PostgreSQL only")
def test_outside_a_transaction_reads_run_at_once_each_on_a_connection_of_its_own():
    # [derived] Each read waits at a barrier until the other arrives: run one after the other, the
    # first would wait alone and the barrier break. The other read's connection is closed after.
    arrived = threading.Barrier(2, timeout=10)

    def backend_once_both_arrived():
        arrived.wait()
        return _backend_pid()

    mine, other = side_by_side(backend_once_both_arrived, backend_once_both_arrived)
    assert mine == _backend_pid() and other != mine

    def other_still_connected() -> bool:
        with connection.cursor() as cursor:
            cursor.execute("SELECT count(*) FROM pg_stat_activity WHERE pid = %s", [other])
            return cursor.fetchone()[0] > 0

    deadline = time.monotonic() + 5
    while other_still_connected() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not other_still_connected()
