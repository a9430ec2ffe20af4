"""Reading times in imports: a time without an offset is the motor's site's local time; one with an
offset is taken as given, and offsets may change within a file (a daylight-saving change)."""

import datetime as dt
import re

import pyarrow as pa
import pyarrow.compute as pc
import pytest

from fleet.imports.columns import SPACE
from fleet.models import ImportJob, Reading
from fleet.services.import_jobs import check_job, create_job, run_job
from tests.factories import make_fitted_capacitor, make_motor, make_site

pytestmark = pytest.mark.django_db

UTC = dt.UTC


def capacitor_at(zone: str):
    return make_fitted_capacitor(motor=make_motor(site=make_site(time_zone=zone)), fitted_on=dt.date(2022, 1, 1))


def import_readings(times, tag, mode=ImportJob.Mode.GOOD_ROWS):
    rows = "".join(f"{tag},run,{taken_at},meter,{3.99 - 0.01 * i:.2f}\n" for i, taken_at in enumerate(times))
    content = ("asset_tag,role,taken_at,method,capacitance_uf\n" + rows).encode()
    return run_job(create_job(kind="readings", filename="times.csv", content=content, user=None).id, mode)


def stored_times(fitted_capacitor):
    """Stored times in the file's row order (each row's capacitance is lower than the one before)."""
    readings = Reading.objects.filter(fitted_capacitor=fitted_capacitor).order_by("-capacitance_uf")
    return [taken_at.astimezone(UTC) for taken_at in readings.values_list("taken_at", flat=True)]


def test_a_time_without_offset_is_site_time_brisbane_is_ten_hours_ahead_of_utc():
    # [pub] IANA time zone database: Australia/Brisbane is UTC+10:00 all year (Queensland keeps no daylight saving).
    fitted_capacitor = capacitor_at("Australia/Brisbane")
    job = import_readings(["2025-03-15 08:00"], fitted_capacitor.motor.asset_tag)
    assert job.state == ImportJob.State.DONE and job.errors == []
    assert stored_times(fitted_capacitor) == [dt.datetime(2025, 3, 14, 22, 0, tzinfo=UTC)]


def test_a_time_with_an_offset_is_used_as_given_whatever_the_sites_zone():
    fitted_capacitor = capacitor_at("Australia/Brisbane")
    job = import_readings(["2025-03-15T08:00+00:00", "2025-03-16T08:00Z"], fitted_capacitor.motor.asset_tag)
    assert job.errors == [] and job.imported_rows == 2
    assert stored_times(fitted_capacitor) == [
        dt.datetime(2025, 3, 15, 8, 0, tzinfo=UTC),
        dt.datetime(2025, 3, 16, 8, 0, tzinfo=UTC),
    ]


def test_offsets_that_change_within_a_file_across_daylight_saving_import_both():
    # [pub] EU Directive 2000/84/EC: summer time ends at 01:00 UTC on the last Sunday of October
    # (27 October 2024); Central European time is UTC+2 before, UTC+1 after.
    fitted_capacitor = capacitor_at("Europe/Berlin")
    times = ["2024-10-25T09:00+02:00", "2024-10-28T09:00+01:00", "2024-10-25 10:00", "2024-10-28 10:00"]
    job = import_readings(times, fitted_capacitor.motor.asset_tag, ImportJob.Mode.ALL_OR_NOTHING)
    assert job.state == ImportJob.State.DONE and job.errors == [] and job.imported_rows == 4
    assert stored_times(fitted_capacitor) == [
        dt.datetime(2024, 10, 25, 7, 0, tzinfo=UTC),
        dt.datetime(2024, 10, 28, 8, 0, tzinfo=UTC),
        dt.datetime(2024, 10, 25, 8, 0, tzinfo=UTC),  # site time, summer
        dt.datetime(2024, 10, 28, 9, 0, tzinfo=UTC),  # site time, winter
    ]


def test_a_bad_time_and_a_local_time_the_clocks_skip_are_named_by_row_and_field():
    # [pub] EU Directive 2000/84/EC: summer time begins at 01:00 UTC on the last Sunday of March
    # (31 March 2024), so 02:30 that night does not exist in Berlin.
    fitted_capacitor = capacitor_at("Europe/Berlin")
    content = (
        "asset_tag,role,taken_at,method,capacitance_uf\n"
        f"{fitted_capacitor.motor.asset_tag},run,2024-13-45 08:00,meter,3.99\n"
        f"{fitted_capacitor.motor.asset_tag},run,2024-03-31 02:30,meter,3.98\n"
        f"{fitted_capacitor.motor.asset_tag},run,2024-03-31 03:30,meter,3.97\n"
    ).encode()
    job = check_job(create_job(kind="readings", filename="bad.csv", content=content, user=None).id)
    assert job.state == ImportJob.State.CHECKED and job.good_rows == 1
    assert [error[:2] for error in job.errors] == [[2, "taken_at"], [3, "taken_at"]]
    assert job.errors[0][2] == "2024-13-45 is not a day of the calendar"  # named, not sent to the pattern
    assert "skipped or repeated in Europe/Berlin" in job.errors[1][2]
    assert not Reading.objects.exists()


def test_a_local_time_the_clocks_repeat_or_skip_is_asked_for_with_the_sites_own_offsets():
    # [pub] US Energy Policy Act of 2005, 15 U.S.C. 260a: daylight time ends at 02:00 local time on the
    # first Sunday of November (2 November 2025) and begins on the second Sunday of March (8 March 2026);
    # Central time is UTC-5 in summer, UTC-6 in winter. So 01:30 on 2 November 2025 happens twice
    # in Chicago, and 02:30 on 8 March 2026 not at all.
    fitted_capacitor = capacitor_at("America/Chicago")
    tag = fitted_capacitor.motor.asset_tag
    content = (
        "asset_tag,role,taken_at,method,capacitance_uf\n"
        f"{tag},run,2025-11-02 01:30,meter,3.99\n"
        f"{tag},run,2026-03-08 02:30,meter,3.98\n"
    ).encode()
    job = check_job(create_job(kind="readings", filename="dst.csv", content=content, user=None).id)
    assert [error[:2] for error in job.errors] == [[2, "taken_at"], [3, "taken_at"]]
    assert job.errors[0][2].endswith("add its offset, -05:00 or -06:00")
    assert job.errors[1][2].endswith("add its offset, -06:00 or -05:00")
    assert "+01:00" not in job.errors[0][2] + job.errors[1][2]


def test_space_is_pythons_white_space_in_python_and_in_pyarrow():
    # [pub] Python's re documentation: \s in a str pattern matches Unicode white space. The time patterns
    # spell it out as SPACE so pyarrow can run them: both engines must find exactly those characters.
    characters = [chr(code) for code in range(0x110000) if not 0xD800 <= code < 0xE000]  # no lone surrogates
    white = {c for c in characters if re.fullmatch(r"\s", c)}
    assert {c for c in characters if re.fullmatch(SPACE, c)} == white
    found = pc.match_substring_regex(pa.array(characters), f"^{SPACE}$").to_pylist()
    assert {c for c, hit in zip(characters, found, strict=True) if hit} == white
    # [pub] Unicode's White_Space property: no-break and ideographic spaces are white space, zero width space is not.
    assert {" ", "\t", "\x0b", "\x1f", "\xa0", "\u3000"} <= white and "\u200b" not in white
