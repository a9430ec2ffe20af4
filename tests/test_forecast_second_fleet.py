"""The capacitor-life forecast against a second, independent simulated fleet, end to end.

The fleet (tests/simulation_second/fleet.py) was written without reading the fitter or the first
simulated fleet: film run capacitors losing capacitance in self-healing steps that come faster as
they erode (a possible runaway), corrosion at a humid site, electrolytic start capacitors drying out
to a knee and venting, seasonal temperatures, each site's own reading habit (monthly to yearly),
unit slips and strays, replacements. Each cut-off is loaded into an empty database through the import
command only (no ORM writes), circuits are estimated from the nameplates, the weekly back-test
calibrates the bands, the fleet is refitted as of that day, the assessments are read through the
API, and the forecast is scored in calendar dates against the truth. Run with -s -n 0 for the figures.
"""

from __future__ import annotations

import datetime as dt
import io

import pandas as pd
import pytest
from django.core.management import call_command

from fleet.models import FittedCapacitor, Reading
from fleet.services.assessments import refit_fitted_capacitors, refresh_part_priors
from fleet.services.backtest import run_backtest, start_backtest
from tests.forecast_harness import assessments_through_the_api, issue_target_misses
from tests.simulation_second import files, scoring
from tests.simulation_second import fleet as simulated

CUTOFFS = (dt.date(2024, 1, 1), dt.date(2025, 1, 1))

pytestmark = [pytest.mark.simulation, pytest.mark.django_db]


@pytest.fixture(scope="module")
def world():
    return simulated.simulate(simulated.SEED, simulated.N_MOTORS)


_RESULTS: dict[dt.date, pd.DataFrame] = {}


def _forecast_scores(world, cutoff, tmp_path) -> pd.DataFrame:
    """Import what was known at the cut-off, back-test, refit as of the cut-off, read the API, score."""
    if cutoff in _RESULTS:
        return _RESULTS[cutoff]
    known_files = files.cut(world, cutoff)
    paths = files.write_files(known_files, tmp_path)
    for kind in files.KINDS:
        # Readings with a unit slip or a stray value are refused by the import's checks: the good rows go in.
        options = {"good_rows_only": True} if kind == "readings" else {}
        report = io.StringIO()
        call_command("import", kind, paths[kind], stdout=report, stderr=report, **options)
        print(f"\n{kind}: {report.getvalue().strip().splitlines()[-1]}", end="")
    caps = world["caps"]
    known = caps[caps.fitted < pd.Timestamp(cutoff)]
    imported = FittedCapacitor.objects.values_list("motor__asset_tag", "role", "fitted_on")
    assert sorted(imported) == sorted(zip(known.asset_tag, known.role, known.fitted.dt.date, strict=True)), (
        "every capacitor fitted before the cut-off is imported on its own fitting day (start_fitted_on in the register)"
    )
    assert Reading.objects.count() >= 0.95 * len(known_files["readings"]), "the import kept the good readings"

    call_command("estimate_circuits", stdout=io.StringIO())  # register motors have no circuit: from their nameplates
    backtest = run_backtest(start_backtest(queue=False).id)
    assert backtest.state == "done", backtest.message
    refresh_part_priors()
    ids = list(
        FittedCapacitor.objects.filter(removed_on__isnull=True, readings__isnull=False)
        .distinct()
        .values_list("id", flat=True)
    )
    refit_fitted_capacitors(ids, now=dt.datetime.combine(cutoff, dt.time(0), tzinfo=dt.UTC), force=True)
    scores, counts = scoring.score(world, cutoff, scoring.forecasts_from_api(assessments_through_the_api()))
    print(f"\nforecast against the second simulated fleet, seed {simulated.SEED}, cut-off {cutoff}")
    print(scoring.table(scores, counts))
    _RESULTS[cutoff] = scores
    return scores


@pytest.mark.parametrize("cutoff", CUTOFFS, ids=[str(c) for c in CUTOFFS])
def test_forecast_holds_its_ground_on_a_second_independent_fleet(world, cutoff, tmp_path):
    """Guard bounds, below today's figures with a margin, that a real regression would break."""
    scores = _forecast_scores(world, cutoff, tmp_path)
    overall, electrolytic = scores.loc["all"], scores.loc["electrolytic"]
    # 136 and 78 today; with fewer, one capacitor moves the shares below by more than two points.
    assert overall["n_cross"] >= 50, f"only {overall['n_cross']} crossings to score"
    # 75 % and 77 % today (one crossing is 1.3 points at 2025); the uncalibrated bands of the first fleet held 14-29 %.
    assert overall["band"] >= 0.65, f"P10-P90 coverage {overall['band']:.0%}"
    # 81 % and 88 % today (48 and 26 crossings): the dry-out knee is the shape a fitter most easily misses.
    assert electrolytic["band"] >= 0.75, f"electrolytic P10-P90 coverage {electrolytic['band']:.0%}"
    # 0 % today; a band turned late (the runaway film steps, the knee) is the costly miss: a capacitor left in.
    assert overall["after_p90"] <= 0.15, f"{overall['after_p90']:.0%} crossed after P90"
    # 25 % and 23 % today (above the 15 % target, see the expected failure below): no worse than a third.
    assert overall["before_p10"] <= 0.35, f"{overall['before_p10']:.0%} crossed before P10"
    # 91 % and 92 % today (57 and 39 capacitors truly cross within the year): the issue's own target.
    assert overall["recall_365"] >= 0.85, f"365-day recall {overall['recall_365']:.0%}"
    # A band made wider holds more and flags more: the bounds above cannot see it (a review doubled the band's spread
    # in the calibration and every one passed, at 86-87 % inside). 75 % and 77 % inside today, the issue's ceiling 87 %.
    assert overall["band"] <= 0.87, f"P10-P90 coverage {overall['band']:.0%}: wider than the issue's 80 +/- 7"
    # 8.3 and 8.6 years today (a date past the 30-year horizon counted at it).
    assert overall["band_width_median_y"] <= 11.0, f"median band {overall['band_width_median_y']:.1f} years wide"
    # 36 % and 27 % today.
    assert overall["precision_365"] >= 0.22, f"365-day precision {overall['precision_365']:.0%}"


@pytest.mark.xfail(
    strict=True,
    reason="issue 8 targets not all met on the second fleet: before P10 25 % and 23 % of crossings at the two "
    "cut-offs (at most 15 %; exactly right forecasts of the same width, followed as long, would show 23 % and 27 %, "
    "docs/engineering.md section 7), 365-day precision 36 % and 27 % (at least 60 %); met: band 75 % and 77 % "
    "(film 72 % and 71 %, electrolytic 81 % and 88 %), after P90 0 %, recall 91 % and 92 % (95 % before readings "
    "without a case temperature were referred at their capacitor's usual one)",
)
@pytest.mark.parametrize("cutoff", CUTOFFS, ids=[str(c) for c in CUTOFFS])
def test_forecast_meets_the_issue_targets_on_a_second_independent_fleet(world, cutoff, tmp_path):
    """Issue 8: P10-P90 coverage 80 +/- 7 points, neither tail above 15 %; for capacitors not yet below
    their limit, 365-day risk recall >= 85 % and precision >= 60 %."""
    overall = _forecast_scores(world, cutoff, tmp_path).loc["all"]
    misses = issue_target_misses(
        band=overall["band"],
        before_p10=overall["before_p10"],
        after_p90=overall["after_p90"],
        recall=overall["recall_365"],
        precision=overall["precision_365"],
    )
    assert not misses, "; ".join(misses)
