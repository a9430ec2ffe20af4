"""Fleet refits at scale: a chunk gives the numbers its capacitors give one at a time, and a
chunk's memory does not grow with the fleet around it. The fleets are the benchmark's
invented ones (fleet/services/bench_fleet.py), small."""

import datetime as dt
import json
import tracemalloc

import numpy as np
import pytest
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, Reading
from fleet.services.assessments import fit_frames, refit_fitted_capacitors, refresh_part_priors, stored_forms
from fleet.services.bench_fleet import FleetSize, build_bench_fleet
from fleet.services.operating_pictures import with_operating_figures
from fleet.services.pages import stress_hours_of_readings
from fleet.services.selectors import fitted_capacitors_frame, readings_frame

pytestmark = pytest.mark.django_db
NOW = timezone.make_aware(dt.datetime(2026, 6, 1, 12))
TODAY = NOW.date()

COMPARED = [
    "fitted_capacitor_id",
    "fitted_through",
    "newest_reading_id",
    "max_reading_id",
    "readings_used",
    "readings_flagged",
    "flagged_reading_ids",
    "trend_model",
    "slope_pct_per_1000h",
    "slope_sd_pct_per_1000h",
    "low_confidence",
    "capacitance_now_uf",
    "latest_verdict",
    "limit_fraction",
    "limit_source",
    "p10_on",
    "p50_on",
    "p90_on",
    "risk",
    "replace_by",
    "reason",
    "limits",
    "set_aside",
    "trend_intercept",
    "trend_slope_per_hour",
    "trend_var_intercept",
    "trend_cov_intercept_slope",
    "trend_var_slope",
    "trend_noise_sd",
    "stress_hours_now",
    "stress_rate",
    "tempco_ppm_per_k",
]


def quiet(_text):
    pass


def in_service_ids():
    return list(
        FittedCapacitor.objects.filter(removed_on__isnull=True, readings__isnull=False)
        .distinct()
        .order_by("id")
        .values_list("id", flat=True)
    )


def rounded(value):
    """Floats to 10 significant digits, through lists and dicts: the same computation in a
    different batch may differ in the last bits of a sum, not in a stored figure."""
    if isinstance(value, float):
        return float(f"{value:.10g}")
    if isinstance(value, list):
        return [rounded(v) for v in value]
    if isinstance(value, dict):
        return {k: rounded(v) for k, v in value.items()}
    return value


def current_rows():
    return {
        row["fitted_capacitor_id"]: rounded(row) for row in Assessment.objects.filter(is_current=True).values(*COMPARED)
    }


def test_a_chunk_refit_equals_its_capacitors_refitted_one_at_a_time():
    # [derived] With the part priors stored, each capacitor's fit, limits and plan depend on its
    # own readings and motor only, so the batch it is refitted in must not change a number.
    build_bench_fleet(FleetSize(motors=16, capacitors=24, readings=300), today=TODAY, progress=quiet)
    refresh_part_priors()
    ids = in_service_ids()
    assert len(ids) >= 15
    refit_fitted_capacitors(ids, now=NOW, force=True)
    chunk = current_rows()
    for fitted_capacitor_id in ids:
        refit_fitted_capacitors([fitted_capacitor_id], now=NOW, force=True)
    single = current_rows()
    assert sorted(chunk) == ids
    assert {row["risk"] for row in chunk.values()} != {""}
    assert any(len(row["limits"]) > 1 for row in chunk.values())  # the motors' circuits were used
    for fitted_capacitor_id in ids:
        assert chunk[fitted_capacitor_id] == single[fitted_capacitor_id], fitted_capacitor_id


def test_a_chunk_refitted_in_parts_writes_what_its_parts_write_refitted_alone():
    # [derived] In parts, each part is judged on a second thread while the next is read and the
    # one before written: the same batches, so the same numbers to the last bit, each capacitor
    # written once. The second thread reads nothing (here it could not see the test's rows).
    build_bench_fleet(FleetSize(motors=16, capacitors=24, readings=300), today=TODAY, progress=quiet)
    refresh_part_priors()
    ids = in_service_ids()
    assert len(ids) >= 15
    for start in range(0, len(ids), 4):
        refit_fitted_capacitors(ids[start : start + 4], now=NOW, force=True)
    alone = {row["fitted_capacitor_id"]: row for row in Assessment.objects.filter(is_current=True).values(*COMPARED)}
    assessments_before = Assessment.objects.count()
    outcome = refit_fitted_capacitors(ids, now=NOW, force=True, part_size=4)
    assert (outcome.written, outcome.skipped) == (len(ids), 0)
    assert outcome.readings == Reading.objects.filter(fitted_capacitor_id__in=ids).count()
    assert Assessment.objects.count() == assessments_before + len(ids)
    in_parts = {row["fitted_capacitor_id"]: row for row in Assessment.objects.filter(is_current=True).values(*COMPARED)}
    assert in_parts == alone
    again = refit_fitted_capacitors(ids, now=NOW, part_size=4)  # nothing newer, judged today: nothing to write
    assert (again.written, again.skipped, again.readings) == (0, len(ids), 0)


def test_the_stored_limits_and_the_figures_worked_out_are_json_the_api_can_send():
    build_bench_fleet(FleetSize(motors=6, capacitors=9, readings=90), today=TODAY, progress=quiet)
    refit_fitted_capacitors(in_service_ids(), now=NOW, force=True)
    for assessment in with_operating_figures(Assessment.objects.filter(is_current=True)):
        limits = assessment.limits
        assert limits[0]["name"] == "tolerance" and set(limits[0]) >= {"used", "note", "p10_on", "p90_on"}
        for figures in (assessment.figures_new, assessment.figures_now):
            assert figures and json.loads(json.dumps(figures, allow_nan=False)) == figures


def test_the_capacitor_page_recomputes_the_stress_hours_the_fit_used():
    # [derived] The page draws the stored path against each reading at the stress hours the fit
    # gave it; they are recomputed, not stored, so they must be the fit's own.
    build_bench_fleet(FleetSize(motors=6, capacitors=9, readings=120), today=TODAY, progress=quiet)
    ids = in_service_ids()
    inst = fitted_capacitors_frame(ids).set_index("fitted_capacitor_id", drop=False)
    readings = readings_frame(ids)
    fit = fit_frames(inst, readings, None, np.sort(inst["part_id"].unique()), stored_forms())
    checked = 0
    for fitted_capacitor in FittedCapacitor.objects.filter(id__in=ids).select_related("part"):
        mine = readings[readings["fitted_capacitor_id"] == fitted_capacitor.id].sort_values(["taken_at", "id"])
        page = stress_hours_of_readings(
            fitted_capacitor,
            Reading.objects.filter(fitted_capacitor=fitted_capacitor)
            .order_by("taken_at", "id")
            .values("taken_at", "case_temperature_c", "capacitor_voltage_v"),
        )
        np.testing.assert_allclose(page, fit.stress_hours[mine.index.to_numpy()], rtol=1e-9)
        checked += len(page) > 1
    assert checked >= 5


def chunk_peak_bytes(ids) -> int:
    peaks = []
    for _ in range(2):
        tracemalloc.start()
        refit_fitted_capacitors(ids, now=NOW, force=True)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
    return min(peaks)


def test_a_chunk_refit_memory_stays_bounded_as_the_fleet_doubles():
    # [derived] A worker reads only its chunk's capacitors: the same chunk costs the same memory
    # in a fleet twice the size. Measured with tracemalloc (Python allocations, numpy's included).
    size = FleetSize(motors=700, capacitors=1000, readings=12_000)
    build_bench_fleet(size, today=TODAY, progress=quiet)
    chunk = in_service_ids()[:20]
    refit_fitted_capacitors(chunk, now=NOW, force=True)  # part priors stored, designs' limits known
    at_n = chunk_peak_bytes(chunk)
    build_bench_fleet(size, today=TODAY, prefix="BFLEETB-", seed=12, progress=quiet)
    assert Reading.objects.count() >= 2 * size.readings - 100
    at_2n = chunk_peak_bytes(chunk)
    assert at_2n < 1.25 * at_n, (at_n, at_2n)


@pytest.mark.django_db(transaction=True)
def test_the_migration_keeps_a_stored_path_in_its_columns(fan_fitted_capacitor):
    from django.db import connection
    from django.db.migrations.executor import MigrationExecutor

    before, after = [("fleet", "0012_vocabulary_choices")], [("fleet", "0013_assessment_trend_columns")]
    executor = MigrationExecutor(connection)
    executor.migrate(before)
    old_apps = executor.loader.project_state(before).apps
    old_apps.get_model("fleet", "Assessment").objects.create(
        installation_id=fan_fitted_capacitor.id,  # the field's name in that migration's state
        model_version="trend-2",
        fitted_through=NOW,
        readings_used=4,
        trend_model="linear",
        slope_pct_per_1000h=-1.0,
        slope_sd_pct_per_1000h=0.1,
        capacitance_now_uf=3.9,
        latest_verdict="within tolerance",
        limit_fraction=0.95,
        limit_source="tolerance",
        risk="watch",
        trend={
            "model": "linear",
            "intercept": 1.01,
            "slope_per_hour": -2e-6,
            "covariance": [1e-4, -1e-9, 1e-13],
            "noise_sd": 0.004,
            "stress_hours_now": 9000.0,
            "stress_rate": 1.2,
            "tempco_ppm_per_k": -150.0,
            "rated_uf": 4.0,
            "points": [[1, 100.0]],
        },
    )
    executor = MigrationExecutor(connection)
    executor.migrate(after)
    executor.loader.build_graph()
    executor.migrate(executor.loader.graph.leaf_nodes())
    moved = Assessment.objects.get(fitted_capacitor=fan_fitted_capacitor)
    assert (moved.trend_intercept, moved.trend_slope_per_hour, moved.trend_noise_sd) == (1.01, -2e-6, 0.004)
    assert (moved.trend_var_intercept, moved.trend_cov_intercept_slope, moved.trend_var_slope) == (1e-4, -1e-9, 1e-13)
    assert (moved.stress_hours_now, moved.stress_rate, moved.tempco_ppm_per_k) == (9000.0, 1.2, -150.0)


def test_refits_of_the_same_readings_at_any_hour_of_a_day_date_each_crossing_alike():
    # [derived] A crossing is an instant fixed by the readings; the refit's moment only sets the offset it is
    # counted in. Dated as today plus the offset's whole days, a crossing 0.6 days after a refit at 18:00 was
    # today's at 18:00 and tomorrow's at 06:00 (a rerun after a killed worker differed by a day). Dated by the
    # instant's own day, both refits of one day store the same dates, at every limit; replace-by dates are
    # whole days of the plan from today, the same on one day too.
    build_bench_fleet(FleetSize(motors=16, capacitors=24, readings=300), today=TODAY, progress=quiet)
    refresh_part_priors()
    ids = in_service_ids()
    dated = ["fitted_capacitor_id", "p10_on", "p50_on", "p90_on", "replace_by", "limits", "reason"]
    runs = []
    for hour, minute in ((0, 30), (23, 30)):
        now = dt.datetime.combine(TODAY, dt.time(hour, minute), tzinfo=dt.UTC)
        refit_fitted_capacitors(ids, now=now, force=True)
        runs.append(
            {row["fitted_capacitor_id"]: row for row in Assessment.objects.filter(is_current=True).values(*dated)}
        )
    early, late = runs
    assert sum(row["p50_on"] is not None for row in early.values()) >= 10  # dates to compare
    assert {(k, f) for k in early for f in dated if early[k][f] != late[k][f]} == set()


def test_the_part_priors_sample_a_fixed_number_of_capacitors_with_readings_a_part(settings, monkeypatch):
    # [derived] A population of paths is statistics: past FLEET_PRIOR_MAX_CAPACITORS_PER_PART capacitors of a part,
    # a fixed random sample of those with readings is fitted; a part with fewer gives all of its own. The sample
    # is found without joining every capacitor to every reading, batch by batch in one fixed shuffle.
    from fleet.services.assessments import _prior_sample
    from tests.factories import make_fitted_capacitor, make_part, quarterly_readings

    settings.FLEET_PRIOR_MAX_CAPACITORS_PER_PART = 3
    big, small = make_part(code="BIG-4U"), make_part(code="SMALL-4U")
    read_big = []
    for k in range(10):
        fitted = make_fitted_capacitor(part=big)
        if k % 3:  # a third of them never read
            quarterly_readings(fitted, NOW - dt.timedelta(days=400), [4.0, 3.99])
            read_big.append(fitted.id)
    read_small = []
    for k in range(3):
        fitted = make_fitted_capacitor(part=small)
        if k:
            quarterly_readings(fitted, NOW - dt.timedelta(days=400), [4.0])
            read_small.append(fitted.id)
    sample = _prior_sample(None, 3)
    assert sample == sorted(sample) and sample == _prior_sample(None, 3)  # in id order, and fixed
    chosen_big = [i for i in sample if i in read_big]
    assert len(chosen_big) == 3 and set(sample) - set(read_big) == set(read_small)
    assert sorted(_prior_sample(None, 100)) == sorted(read_big + read_small)  # every capacitor with readings
    assert _prior_sample([small.id], 3) == sorted(read_small)
    from fleet.services import assessments

    # Rows come from the database in no set order (a table rewritten, a row moved): the sample is the same.
    for read in ("select_frame", "select_packed"):
        as_stored = getattr(assessments, read)
        monkeypatch.setattr(assessments, read, lambda *args, as_stored=as_stored: as_stored(*args).iloc[::-1])
    assert _prior_sample(None, 3) == sample
