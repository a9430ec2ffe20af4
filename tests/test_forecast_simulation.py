"""The capacitor-life forecast against an independent simulated fleet, end to end.

The fleet (tests/simulation/fleet.py) was written from the physics and the trade
without reading the fitter: accelerating loss, seasonal case temperatures, the
dielectric's temperature coefficient in every measured value, capacitor voltage
and current in circuit, meter noise, unit slips, stray values, replacements
after crossings. Each cut-off is loaded into an empty database through the
documented import command (sites, parts, register, history, readings as known on
that day), circuits are estimated from the nameplates, the fleet is refitted as
of that day, the stored assessments are read through the API, and the forecast
is scored in calendar dates against the truth.

Targets (issue 8): P10-P90 coverage 80 +/- 7 points with neither tail above 15 %;
for capacitors not yet below their limit, 365-day risk recall >= 85 % and
precision >= 60 %. Run with -s -n 0 to see the figures.
"""

from __future__ import annotations

import datetime as dt
import os

import numpy as np
import pytest
from django.core.management import call_command

from fleet.models import FittedCapacitor, Reading
from fleet.services.assessments import refit_fitted_capacitors, refresh_part_priors
from fleet.services.backtest import run_backtest, start_backtest
from tests.forecast_harness import assessments_through_the_api, issue_target_misses
from tests.simulation import fleet as simulated
from tests.simulation import scoring

# FLEET_SIMULATION_SEED picks another simulated fleet (the targets are tracked on the default one).
SEED = int(os.environ.get("FLEET_SIMULATION_SEED", "20261202"))
CUTOFFS = (dt.date(2024, 1, 1), dt.date(2025, 1, 1))

pytestmark = [pytest.mark.simulation, pytest.mark.django_db]


@pytest.fixture(scope="module")
def fleet():
    return simulated.simulate(np.random.default_rng(SEED))


def _import(files: dict, directory) -> None:
    paths = simulated.write_files(files, directory)
    for kind in simulated.KINDS:
        # Readings with a unit slip are refused by the import's checks: the good rows go in.
        options = {"good_rows_only": True} if kind == "readings" else {}
        call_command("import", kind, paths[kind], **options)


_RESULTS: dict[dt.date, dict] = {}


def _forecast_scores(fleet, cutoff, tmp_path) -> dict:
    """Import what was known at the cut-off, back-test and calibrate, refit as of the cut-off,
    read the assessments through the API, and score them against the truth."""
    if cutoff in _RESULTS:
        return _RESULTS[cutoff]
    files = simulated.cut(fleet, cutoff)
    _import(files, tmp_path)
    truth = simulated.truth(fleet)
    known = truth[truth["fitted_on"] < np.datetime64(cutoff)]
    assert FittedCapacitor.objects.count() == len(known), "every capacitor fitted before the cut-off is imported"
    assert Reading.objects.count() >= 0.95 * len(files["readings"]), "the import kept the good readings"

    # Motors imported from a register have no circuit: estimate them from their
    # nameplates, as the README's commands do, so the operating-point limits count.
    call_command("estimate_circuits")
    # As the product runs: the weekly back-test calibrates the bands, then the fleet refit.
    backtest = run_backtest(start_backtest(queue=False).id)
    assert backtest.state == "done", backtest.message
    for family, values in backtest.results["calibration"].items():
        errors = ", ".join(
            f"{row['form']} {row['shape']} {row['rms_error'] or 0:.4f}"
            for row in backtest.results["path_models"][family]
        )
        z = backtest.results["straight_z"][family]
        print(f"\nback-test paths {family}: {values['trend_model']} {values['path_shape']} (rms error {errors}; z {z})")
    refresh_part_priors()
    ids = list(
        FittedCapacitor.objects.filter(removed_on__isnull=True, readings__isnull=False)
        .distinct()
        .values_list("id", flat=True)
    )
    refit_fitted_capacitors(ids, now=dt.datetime.combine(cutoff, dt.time(0), tzinfo=dt.UTC), force=True)
    forecasts = scoring.forecasts_from_api(assessments_through_the_api())
    results = scoring.score_by(truth, cutoff, forecasts)
    print(f"\nforecast against the simulated fleet, seed {SEED}, cut-off {cutoff}")
    print(scoring.table(results))
    _RESULTS[cutoff] = results
    return results


@pytest.mark.parametrize("cutoff", CUTOFFS, ids=[str(c) for c in CUTOFFS])
def test_forecast_holds_what_it_has_won_on_an_independent_fleet(fleet, cutoff, tmp_path):
    """The ground gained on issue 8, held. Before the back-test calibration the band held 29 %
    and 14 % of crossings (66 % and 85 % before P10), the median P50 came 2.3 and 3.0 times
    the remaining life late, and the 365-day recall was 70 % and 43 %. With straight paths
    (before the curvature) the median P50 was still 36 % and 75 % late; now within 30 % (11 % early and
    27 % late; 15 % early and 11 % late before film bends were conditioned on their own slope)."""
    overall = _forecast_scores(fleet, cutoff, tmp_path)["all"]
    assert overall["band_scored"] >= 50, "enough capacitors cross after the cut-off to score the band"
    assert overall["inside"] >= 0.73, f"P10-P90 coverage {overall['inside']:.0%}"
    assert overall["below_p10"] <= 0.20, f"{overall['below_p10']:.0%} crossed before P10"
    assert overall["above_p90"] <= 0.15, f"{overall['above_p90']:.0%} crossed after P90"
    assert abs(overall["p50_error_median"]) <= 0.3, f"median P50 error {overall['p50_error_median']:+.0%} of life"
    assert overall["recall"] >= 0.85, f"365-day recall {overall['recall']:.0%}"
    # A band made wider holds more crossings and flags more: the bounds above cannot see it (a review doubled the
    # band's spread in the calibration and every one passed: coverage 97-100 %). Today 82 % and 92 % inside
    # (seeds 7 and 11: 89-94 %), a median width of 2.6 and 2.9 years, precision 29 % and 32 % (29-43 %).
    assert overall["inside"] <= 0.96, f"P10-P90 coverage {overall['inside']:.0%}: a band this wide says little"
    assert overall["band_width_median_y"] <= 4.0, f"median band {overall['band_width_median_y']:.1f} years wide"
    assert overall["precision"] >= 0.24, f"365-day precision {overall['precision']:.0%}"


@pytest.mark.xfail(
    strict=True,
    reason="issue 8 targets not all met yet: the 365-day precision is 29 % and 32 % at the two cut-offs "
    "(recall 98 % and 95 %; 29-43 % at seeds 7 and 11; film 28 % and 25 %, with film bends conditioned on their "
    "own slope: even the best quantile as the risk rule's level catches 85 % of the year's crossings at only 57 % "
    "and 40 % precision, so the point forecast itself must sharpen further, docs/engineering.md section 7; the "
    "120-V fan design's starting-torque limit at 98 % of rated, from a nameplate-only circuit, is now a finding, "
    "not a flag), and the band holds 82 % and 92 % of crossings; a forecaster knowing the simulation's own "
    "forms, priors, stress and noise reaches 69 % and 67 % (tests/simulation/bound.py)",
)
@pytest.mark.parametrize("cutoff", CUTOFFS, ids=[str(c) for c in CUTOFFS])
def test_forecast_meets_the_issue_targets_on_an_independent_fleet(fleet, cutoff, tmp_path):
    """Issue 8: P10-P90 coverage 80 +/- 7 points, neither tail above 15 %; for capacitors
    not yet below their limit, 365-day risk recall >= 85 % and precision >= 60 %."""
    overall = _forecast_scores(fleet, cutoff, tmp_path)["all"]
    misses = issue_target_misses(
        band=overall["inside"],
        before_p10=overall["below_p10"],
        after_p90=overall["above_p90"],
        recall=overall["recall"],
        precision=overall["precision"],
    )
    assert not misses, "; ".join(misses)
