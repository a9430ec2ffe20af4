"""The forecast track record page: stored back-tests only, bounded queries, who may start one.

The fleets here (`straight_line_fleet`) exist only so that a real back-test has
crossings to score; the tests check that the page shows what the back-test
stored, not the scores themselves.
"""

import json
import re

import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone
from kombu.exceptions import OperationalError

from fleet.charts import CHART_HEIGHT_PX, calibration_figure, coverage_figure
from fleet.models import Backtest, BandCalibration
from fleet.services.backtest import run_backtest, start_backtest
from fleet.templatetags.fleet_format import percent, signed_percent, thousands, times
from tests.factories import make_user, straight_line_fleet

pytestmark = pytest.mark.django_db
NBSP = "\u00a0"


def finished_backtest() -> Backtest:
    backtest = run_backtest(start_backtest(queue=False).id)
    assert backtest.state == Backtest.State.DONE, backtest.message
    return backtest


def json_script(body: str, element_id: str) -> dict:
    match = re.search(rf'<script id="{element_id}" type="application/json">(.*?)</script>', body, re.S)
    assert match, f"no {element_id} on the page"
    return json.loads(match.group(1))


def test_the_page_needs_a_login_and_the_permission_to_view_assessments(client):
    assert client.get(reverse("track_record")).status_code == 302
    from django.contrib.auth.models import User

    client.force_login(User.objects.create_user("nobody", password="a-long-test-password"))
    assert client.get(reverse("track_record")).status_code == 403


def test_with_no_back_test_the_page_says_so_and_offers_the_button_to_the_engineer(client, engineer, technician):
    client.force_login(engineer)
    body = client.get(reverse("track_record")).content.decode()
    assert "No back-test has run yet" in body
    assert "Run the back-test" in body and 'name="csrfmiddlewaretoken"' in body
    assert "Plotly.newPlot" not in body
    assert "within 365 days, replace now, due soon or watch" in body  # the risk levels counted as flagged
    client.force_login(technician)
    body = client.get(reverse("track_record")).content.decode()
    assert "No back-test has run yet" in body and "Run the back-test" not in body


def test_a_running_back_test_shows_its_progress_and_refreshes(client, engineer):
    Backtest.objects.create(cutoffs=["2025-01-01", "2025-04-01", "2025-07-01", "2025-10-01"], done_cutoffs=1)
    client.force_login(engineer)
    body = client.get(reverse("track_record")).content.decode()
    assert '<meta http-equiv="refresh"' in body
    assert 'aria-valuenow="25"' in body and "1 of 4 cut-offs done" in body
    assert "Plotly.newPlot" not in body  # nothing finished yet, so no figures


def test_while_a_new_run_goes_the_page_shows_the_last_finished_one(client, engineer):
    straight_line_fleet()
    done = finished_backtest()
    Backtest.objects.create(cutoffs=["2025-01-01", "2025-04-01"], done_cutoffs=0)
    client.force_login(engineer)
    body = client.get(reverse("track_record")).content.decode()
    assert '<meta http-equiv="refresh"' in body and "0 of 2 cut-offs done" in body
    assert (
        f'newest finished back-test, started <span class="nowrap">{timezone.localtime(done.started_at):%Y-%m-%d %H:%M}'
        in body
    )
    assert "coverage-data" in body


def test_a_finished_back_test_shows_its_stored_figures(client, engineer):
    straight_line_fleet()
    backtest = finished_backtest()
    results = backtest.results
    client.force_login(engineer)
    body = client.get(reverse("track_record")).content.decode()
    assert '<meta http-equiv="refresh"' not in body

    pooled = results["pooled"]["calibrated"]["all"]
    assert f"<b>{100 * pooled['inside_p10_p90']:.0f}{NBSP}%</b>" in body
    assert f"{pooled['capacitors']:,} forecasts" in body and f"{pooled['crossed']:,} observed crossings" in body
    # The headline figures read in words (a walk: 30 % before P10 against 10 % meant nothing on a phone).
    assert f"{100 * pooled['before_p10']:.0f}{NBSP}% crossed before their early date" in body
    # Beside each share, what exactly right forecasts would show given how long each capacitor was followed
    # (a walk: "where 1 in 10 should" was wrong wherever the follow-up ends inside the band).
    expected = f"right forecasts would show {100 * pooled['expected_before_p10']:.0f}{NBSP}% here"
    assert expected in body and "nominal 10" not in body
    assert f"about {pooled['expected_crossed']:.0f} crossings would have been seen ({pooled['crossed']:,} were)" in body

    coverage = json_script(body, "coverage-data")
    by_name = {trace["name"]: trace for trace in coverage["data"]}
    for variant in ("default", "calibrated"):
        shares = [cutoff[variant]["inside_p10_p90"] for cutoff in results["cutoffs"]]
        assert by_name[f"{variant} bands"]["y"] == [None if s is None else 100 * s for s in shares]
    expected = [cutoff["calibrated"]["expected_inside_p10_p90"] for cutoff in results["cutoffs"]]
    assert by_name["right forecasts would show"]["y"] == [None if s is None else 100 * s for s in expected]
    calibration = json_script(body, "calibration-data")
    observed = {trace["name"]: trace["y"] for trace in calibration["data"] if trace.get("name")}
    assert observed["calibrated bands"] == [
        None if q["observed"] is None else 100 * q["observed"] for q in pooled["calibration"]
    ]

    for cutoff in results["cutoffs"]:
        assert f'<td class="nowrap" data-label="Cut-off">{cutoff["cutoff"]}</td>' in body
        # Each count under the heading of what it counts: every capacitor in service with readings, and the
        # forecasts (those not yet past their limit); "Capacitors" headed the one and the command the other.
        assert f'data-label="In service">{thousands(cutoff["capacitors"])}</td>' in body
        assert f'data-label="Forecasts">{thousands(cutoff["default"]["capacitors"])}</td>' in body
    assert ">Capacitors</th>" not in body
    assert ">-</td>" in body  # later cut-offs saw no crossing: a dash, not "None"
    assert "None" not in body
    for code in results["pooled"]["calibrated"]["part"]:
        assert f">{code}</a>" in body
    assert "Metallised film (run)" in body and "Aluminium electrolytic (start)" in body

    for family, values in results["calibration"].items():
        stored = BandCalibration.objects.get(family=family)
        assert stored.residuals == values["residuals"]
        factor, spread = 1 + values["slope_bias"], 100 * values["slope_spread"]
        assert f"future slope \u00d7{NBSP}{factor:.2f} " in body and f"relative spread {spread:.0f}{NBSP}%" in body


def test_the_calibration_in_force_is_stated_term_by_term(client, engineer):
    """Every term the forecast applies (calibration.path_polynomials) is on the page, in % of rated a
    year [derived: 8766 hours a year]: a common extra slope of -1.33e-6 per hour is -1.16 % a year.
    Before, the page gave the slope factor and the relative spread only."""
    BandCalibration.objects.create(
        family="film",
        slope_bias=0.06,
        slope_spread=0.1,
        extra_slope_per_h=-1.3254e-6,
        extra_sd_per_h=2.2e-7,
        acceleration_per_h=3.1e-5,
        curvature_per_h2=-4e-12,
        capacitors=24,
        residuals=60,
    )
    client.force_login(engineer)
    body = client.get(reverse("track_record")).content.decode()
    year = 8766.0
    for words in (
        f"future slope \u00d7{NBSP}1.06 \u2212{100 * year * 1.3254e-6:.2f}{NBSP}% of rated a year",
        f"bending \u2212{100 * year * year * 4e-12:.2f}{NBSP}% of rated a year squared",
        f"common spread {100 * year * 2.2e-7:.2f}{NBSP}% of rated a year",
        f"acceleration {year * 3.1e-5:.2f} of the slope a year ahead",
        f"relative spread 10{NBSP}%",
        "from 60 later readings of 24 capacitors",
    ):
        assert words in body, words
    assert "\u22121.16" in body


def test_the_query_count_does_not_grow_with_the_number_of_parts(client, engineer):
    client.force_login(engineer)

    def queries() -> int:
        with CaptureQueriesContext(connection) as captured:
            assert client.get(reverse("track_record")).status_code == 200
        return len(captured)

    straight_line_fleet(parts=2)
    finished_backtest()
    few = queries()
    straight_line_fleet(parts=6)
    backtest = finished_backtest()
    assert len(backtest.results["pooled"]["calibrated"]["part"]) == 8
    assert queries() == few


# A request runs in autocommit, so a start queues (or, with no broker, runs) its back-test before the
# view answers; these tests commit for real to see that.
@pytest.mark.django_db(transaction=True)
def test_the_engineer_starts_a_back_test_and_sees_it_done(client, engineer):
    straight_line_fleet()
    client.force_login(engineer)
    response = client.post(reverse("track_record_run"))
    assert response.status_code == 302 and response["Location"] == reverse("track_record")
    backtest = Backtest.objects.get()
    assert backtest.state == Backtest.State.DONE and backtest.done_cutoffs == len(backtest.cutoffs) == 8
    assert BandCalibration.objects.filter(backtest=backtest).count() == 2
    body = client.get(reverse("track_record")).content.decode()
    assert "Back-test done" in body and "<b>done</b>" in body


@pytest.mark.parametrize("role", ["technician", "planner"])
def test_only_those_allowed_may_start_a_back_test(client, role):
    client.force_login(make_user(role))
    assert client.post(reverse("track_record_run")).status_code == 403
    assert not Backtest.objects.exists()


def test_starting_needs_a_post(client, engineer):
    client.force_login(engineer)
    assert client.get(reverse("track_record_run")).status_code == 405
    assert not Backtest.objects.exists()


@pytest.mark.django_db(transaction=True)
def test_a_queue_that_cannot_be_reached_ends_the_run_as_failed_with_the_reason(client, engineer, monkeypatch):
    from fleet import tasks

    def unreachable(*args, **kwargs):
        raise OperationalError("Error 111 connecting to 127.0.0.1:1. Connection refused.")

    monkeypatch.setattr(tasks.run_backtest, "delay", unreachable)
    client.force_login(engineer)
    response = client.post(reverse("track_record_run"), follow=True)
    assert response.status_code == 200
    backtest = Backtest.objects.get()
    assert backtest.state == Backtest.State.FAILED and "Could not be queued" in backtest.message
    assert "Connection refused" in response.content.decode()


@pytest.mark.django_db(transaction=True)
def test_a_run_that_fails_in_process_is_reported_not_a_server_error(client, engineer, monkeypatch):
    from fleet.services import backtest as service

    def broken(backtest):
        raise ValueError("no readings before the first cut-off")

    monkeypatch.setattr(service, "_run", broken)
    client.force_login(engineer)
    response = client.post(reverse("track_record_run"), follow=True)
    assert response.status_code == 200
    body = response.content.decode()
    assert "The back-test failed: ValueError: no readings before the first cut-off" in body
    assert Backtest.objects.get().state == Backtest.State.FAILED


def test_the_engineer_finds_the_page_from_the_menu_and_the_life_data(client, engineer):
    client.force_login(engineer)
    link = f'href="{reverse("track_record")}"'
    assert link in client.get(reverse("home")).content.decode()
    assert link in client.get(reverse("life_data")).content.decode()


# Formatting for people: common practice of the trade, no single source.
@pytest.mark.parametrize(
    "value,text",
    [(None, "-"), (0.0, f"0{NBSP}%"), (0.573, f"57{NBSP}%"), (1.0, f"100{NBSP}%")],
)
def test_shares_read_as_whole_percentages(value, text):
    assert percent(value) == text


def test_signs_counts_and_factors_read_plainly():
    assert signed_percent(0.23) == f"+23{NBSP}%"
    assert signed_percent(-0.4) == f"\u221240{NBSP}%"
    assert signed_percent(0.001) == f"0{NBSP}%"
    assert signed_percent(None) == "-"
    assert thousands(3637) == "3,637" and thousands(None) == "-"
    assert times(1.523) == f"\u00d7{NBSP}1.52"


def test_the_figures_have_a_fixed_height_and_the_nominal_references():
    calibration = calibration_figure(
        {
            "default bands": [
                {"nominal": 0.1, "observed": 0.3, "capacitors": 10},
                {"nominal": 0.5, "observed": None, "capacitors": 0},
                {"nominal": 0.9, "observed": 0.95, "capacitors": 10},
            ]
        }
    )
    assert calibration["layout"]["height"] == CHART_HEIGHT_PX
    diagonal, default = calibration["data"]
    assert list(diagonal["x"]) == list(diagonal["y"]) == [0, 100]  # [derived] calibrated = on the diagonal
    low, missing, high = default["y"]
    assert list(default["x"]) == [10, 50, 90] and missing is None  # no capacitor counted: a gap, not zero
    assert (low, high) == pytest.approx((30, 95))
    coverage = coverage_figure(["2025-01-01", "2025-04-01"], {"calibrated bands": [0.8, None]}, 0.8)
    assert coverage["layout"]["height"] == CHART_HEIGHT_PX
    assert coverage["layout"]["shapes"][0]["y0"] == coverage["layout"]["shapes"][0]["y1"] == 80
    assert list(coverage["data"][0]["y"]) == [80, None]


def test_the_command_heads_each_count_for_what_it_counts(db):
    """The command's "capacitors" counted the forecasts (capacitors not yet past their limit) while the page's
    counted every capacitor in service with readings: 325 against 345 a cut-off on the demo under one word.
    Now each is under its own heading, on every cut-off's line, as the page has them."""
    import io

    from django.core.management import call_command

    straight_line_fleet()
    output = io.StringIO()
    call_command("backtest", "--quarters", "4", stdout=output)
    text = output.getvalue()
    assert "capacitors" not in text.split("\n\ndefault bands")[1].split("\n")[1], "no column headed capacitors"
    results = Backtest.objects.get().results
    for variant in ("default", "calibrated"):
        table = text.split(f"\n{variant} bands (scores in %)\n")[1].split("\n")
        assert table[0].split()[:4] == ["cut-off", "in", "service", "forecasts"]
        for line, cutoff in zip(table[1:], results["cutoffs"], strict=False):
            cells = line.split()
            assert cells[:3] == [cutoff["cutoff"], str(cutoff["capacitors"]), str(cutoff[variant]["capacitors"])]


def test_the_plan_says_how_far_the_years_levels_held_in_the_newest_back_test(client, planner):
    """Ours: the plan's risk counts stood without a word on how often a flag had come true; beside them now, the
    newest finished back-test's pooled 365-day precision and recall (stored numbers read by two JSON keys), and
    before any back-test, that it is not known. A running back-test does not replace the finished one."""
    client.force_login(planner)
    assert "No back-test yet" in client.get(reverse("plan")).content.decode()
    scores = {"precision_365d": 0.4123, "recall_365d": 0.9051}
    done = Backtest.objects.create(
        cutoffs=["2025-01-01"],
        done_cutoffs=1,
        state=Backtest.State.DONE,
        finished_at=timezone.now(),
        results={"pooled": {"calibrated": {"all": scores}, "default": {"all": {"precision_365d": 0.1}}}},
    )
    Backtest.objects.create(cutoffs=["2025-01-01"], done_cutoffs=0)  # running, newer
    body = client.get(reverse("plan")).content.decode().replace("\xa0", " ")
    words = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", "", body))
    assert f"{percent(0.4123).replace(chr(160), ' ')} reached their limit within the year" in words
    assert f"they caught {percent(0.9051).replace(chr(160), ' ')} of those that did" in words
    assert f"the back-test of {timezone.localtime(done.finished_at):%Y-%m-%d}" in words
    assert "replace now, due soon or watch" in words
