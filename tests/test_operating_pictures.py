"""The motor page's operating-point pictures: drawn from the stored circuit and assessment, the
same numbers the refit stored, a bounded number of queries, nothing without a circuit."""

import datetime as dt
import json

import numpy as np
import pytest
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone

from fleet.models import Assessment
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.operating_pictures import SWEEP_FRACTIONS, motor_pictures, with_operating_figures
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_reading, quarterly_readings

pytestmark = pytest.mark.django_db


def _assessed_fan(values_uf=(4.0, 3.9, 3.8, 3.7, 3.6)):
    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), list(values_uf))
    refit_fitted_capacitors([fitted_capacitor.id])
    fitted_capacitor.assessment = Assessment.objects.get(fitted_capacitor=fitted_capacitor, is_current=True)
    return fitted_capacitor


def _trace(figure, name):
    return [t for t in figure["data"] if t.get("name") == name]


def test_the_pictures_carry_the_as_new_and_now_figures_the_capacitor_page_shows():
    """[derived] the motor page's points are the operating figures the capacitor page and the API show
    (`with_operating_figures`): the magnitudes of the main, auxiliary and line currents and the capacitor
    voltage, as new and now."""
    fitted_capacitor = _assessed_fan()
    (assessment,) = with_operating_figures([fitted_capacitor.assessment])
    pictures = motor_pictures([fitted_capacitor])[fitted_capacitor.id]
    for state, stored in (("as new", assessment.figures_new), ("now", assessment.figures_now)):
        currents = {
            t["name"]: t["r"][1]
            for t in pictures["currents"]["data"]
            if t["line"]["dash"] == ("dash" if state == "as new" else "solid")
        }
        assert currents["main winding"] == pytest.approx(stored["i_main_a"], rel=1e-3)
        assert currents["auxiliary winding"] == pytest.approx(stored["i_aux_a"], rel=1e-3)
        assert currents["line current"] == pytest.approx(stored["i_line_a"], rel=1e-3)
        point = _trace(pictures["sweep"], state)
        assert point[1]["y"][0] == pytest.approx(stored["v_capacitor_v"], rel=1e-3)  # panel 2: capacitor voltage
        assert point[2]["y"][0] == pytest.approx(stored["i_main_a"], rel=1e-3)
    now_x = _trace(pictures["sweep"], "now")[0]["x"][0]
    assert now_x == pytest.approx(100 * assessment.capacitance_now_uf / 4.0, abs=0.01)


def test_the_sweep_spans_half_to_110_percent_with_the_limit_levels():
    fitted_capacitor = _assessed_fan()
    figure = motor_pictures([fitted_capacitor])[fitted_capacitor.id]["sweep"]
    curve = figure["data"][0]
    assert curve["x"][0] == 50.0 and curve["x"][-1] == 110.0 and len(curve["x"]) == len(SWEEP_FRACTIONS)
    levels = sorted(shape["y0"] for shape in figure["layout"]["shapes"] if shape.get("y0") == shape.get("y1"))
    motor = fitted_capacitor.motor
    assert pytest.approx(1.15 * motor.full_load_current_a) in levels  # [trade] service factor, as DriftLimits
    assert pytest.approx(450.0) in levels  # the part's rated voltage
    crossings = [a["text"] for a in figure["layout"]["annotations"] if a.get("yref") == "paper"]  # above the plot
    assert "tolerance" in crossings


def test_no_assessment_draws_only_as_new_and_no_circuit_draws_nothing():
    fitted_capacitor = make_fitted_capacitor()
    fitted_capacitor.assessment = None
    pictures = motor_pictures([fitted_capacitor])[fitted_capacitor.id]
    assert not _trace(pictures["sweep"], "now") and _trace(pictures["sweep"], "as new")
    bare = make_fitted_capacitor(motor=make_motor(with_circuit=False))
    bare.assessment = None
    assert motor_pictures([bare]) == {}


def test_a_two_value_motor_gets_pictures_for_both_capacitors_in_a_bounded_number_of_queries():
    motor = make_motor(motor_type="two_value", load_type="constant")
    run = make_fitted_capacitor(motor=motor)
    start = make_fitted_capacitor(
        motor=motor, role="start", part=make_part(rated_uf=60, dielectric="electrolytic", rated_voltage_v=250)
    )
    run.assessment = start.assessment = None
    with CaptureQueriesContext(connection) as queries:
        pictures = motor_pictures([run, start])
    assert len(queries) <= 2
    assert set(pictures) == {run.id, start.id}
    start_voltage = _trace(pictures[start.id]["sweep"], "as new")[1]["y"][0]
    assert np.isfinite(start_voltage) and start_voltage > 0
    assert "at standstill" in pictures[start.id]["currents"]["layout"]["legend"]["title"]["text"]


def test_the_motor_page_embeds_the_charts_as_json(client, engineer):
    fitted_capacitor = _assessed_fan()
    client.force_login(engineer)
    body = client.get(reverse("motor", args=[fitted_capacitor.motor.asset_tag])).content.decode()
    for name in ("currents", "voltages", "sweep"):
        assert f'id="{name}-{fitted_capacitor.id}-chart"' in body
        start = body.index(f'id="{name}-{fitted_capacitor.id}-data"')
        payload = body[body.index(">", start) + 1 : body.index("</script>", start)]
        json.loads(payload)  # valid JSON: no NaN reaches the page
    assert "plotly/plotly.min" in body


def test_the_figures_are_valid_plotly():
    """The figures are plain dicts (fast to build): Plotly's own validator must accept every property."""
    import plotly.graph_objects as go

    fitted_capacitor = _assessed_fan()
    for figure in motor_pictures([fitted_capacitor])[fitted_capacitor.id].values():
        go.Figure(figure)  # raises on any property Plotly does not know


def _assessed_two_value_motor():
    """A two-value motor with its run and start capacitors read for a year and refitted."""
    motor = make_motor(motor_type="two_value", load_type="constant")
    run = make_fitted_capacitor(motor=motor)
    start = make_fitted_capacitor(
        motor=motor, role="start", part=make_part(rated_uf=60, dielectric="electrolytic", rated_voltage_v=250)
    )
    when = timezone.make_aware(dt.datetime(2024, 1, 8, 9))
    quarterly_readings(run, when, [4.0, 3.95, 3.9, 3.85, 3.8])
    quarterly_readings(start, when, [60.0, 58.0, 56.0, 54.0, 52.0])
    refit_fitted_capacitors([run.id, start.id])
    return motor, run, start


def test_the_capacitor_page_shows_a_start_capacitor_at_standstill_only(client, engineer):
    """[derived] a start capacitor is out of circuit when running: its page says so in one line and
    lists the standstill figures (which do change) instead of running figures equal as new and now."""
    motor, run, start = _assessed_two_value_motor()
    (stored,) = with_operating_figures([Assessment.objects.get(fitted_capacitor=start, is_current=True)])
    assert stored.figures_new["i_main_a"] == pytest.approx(stored.figures_now["i_main_a"], rel=1e-12)
    assert stored.figures_new["starting_torque_nm"] != pytest.approx(stored.figures_now["starting_torque_nm"], rel=1e-3)
    client.force_login(engineer)
    start_page = client.get(reverse("fitted_capacitor", args=[start.id])).content.decode()
    assert "out of circuit once the motor runs" in start_page
    assert "Running speed" not in start_page and "Starting torque" in start_page
    assert "Start capacitor voltage at standstill" in start_page
    run_page = client.get(reverse("fitted_capacitor", args=[run.id])).content.decode()
    assert "Running speed" in run_page and "out of circuit once the motor runs" not in run_page


def test_the_sweeps_crossing_names_that_would_meet_go_on_rows_of_their_own():
    """Ours: two crossings 2 % of rated apart would print their names over each other above the plot; the
    second goes a row higher, and the top margin makes room for it. A limit's name goes on the side of its
    level away from the curve."""
    from fleet.charts import SWEEP_LINE_PX, SWEEP_MARGIN_PX, capacitance_sweep_figure

    x = [50.0 + k for k in range(61)]
    values = {
        "starting_torque_nm": [0.01 * v for v in x],
        "capacitor_voltage_v": [400.0 + v for v in x],
        "main_current_a": [1.15 - 0.01 * (v - 50.0) for v in x],
    }
    levels = {"starting_torque_nm": 0.4, "capacitor_voltage_v": 450.0, "main_current_a": 1.1}
    crossings = [
        {"name": "tolerance", "percent_of_rated": 95.0},
        {"name": "capacitor voltage", "percent_of_rated": 93.0},
    ]
    figure = capacitance_sweep_figure(x, 4.0, values, levels, {}, crossings)
    names = {a["text"]: a for a in figure["layout"]["annotations"] if a.get("yref") == "paper"}
    assert sorted(a["yshift"] for a in names.values()) == [0, SWEEP_LINE_PX]
    assert figure["layout"]["margin"]["t"] == SWEEP_MARGIN_PX["t"] + 2 * SWEEP_LINE_PX
    apart = capacitance_sweep_figure(
        x, 4.0, values, levels, {}, [crossings[0], {**crossings[1], "percent_of_rated": 55.0}]
    )
    assert [a["yshift"] for a in apart["layout"]["annotations"] if a.get("yref") == "paper"] == [0, 0]
    level_names = {a["text"]: a for a in figure["layout"]["annotations"] if a.get("yref") != "paper"}
    # Main current falls from 1.15 to 0.55 A, crossing its 1.1 A level at 55 %: the name (on one line, most of
    # the plot's width on a phone: on two) goes on the right, above the line, where the curve runs below it.
    current = level_names["most: full-load current<br>\u00d7 service factor"]
    assert (current["x"], current["xanchor"], current["yanchor"]) == (1, "right", "bottom")


def test_the_figures_follow_the_motor_as_it_stands_not_as_it_stood_at_the_refit():
    """A demo check: a start capacitor's stored figures kept the run capacitor its motor had when it was refitted,
    after that run capacitor was replaced by a stop-gap of another rating. Worked out on reading, both capacitors of
    the motor show the running point with the run capacitor fitted now. [derived] the running point of a
    two-value motor does not depend on its start capacitor (out of circuit once running)."""
    motor, run, start = _assessed_two_value_motor()
    (before,) = with_operating_figures([Assessment.objects.get(fitted_capacitor=start, is_current=True)])

    run.removed_on, run.removal_reason = dt.date(2025, 3, 1), "failed"
    run.save()
    stop_gap = make_fitted_capacitor(
        motor=motor,
        part=make_part(rated_uf=5.0),
        fitted_on=dt.date(2025, 3, 1),
        substitute_override=True,
        override_reason="the design part was out of stock",
    )
    quarterly_readings(stop_gap, timezone.make_aware(dt.datetime(2025, 3, 8, 9)), [5.0, 4.98])
    refit_fitted_capacitors([stop_gap.id])  # the start capacitor is not refitted: nothing new was read of it
    after, fitted_now = with_operating_figures(
        Assessment.objects.filter(fitted_capacitor__in=[start, stop_gap], is_current=True).order_by("id")
    )
    assert after.fitted_capacitor_id == start.id
    assert after.figures_new["i_aux_a"] == pytest.approx(fitted_now.figures_new["i_aux_a"], rel=1e-9)
    assert after.figures_new["i_aux_a"] != pytest.approx(before.figures_new["i_aux_a"], rel=1e-3)


@pytest.mark.parametrize("read_uf", [0.0, 0.2])
def test_a_capacitor_read_open_or_shorted_has_no_figures_now_and_the_pages_say_why(client, planner, read_uf):
    """A walk: a run capacitor read at 0 uF (open circuit suspected, replace now) kept its motor's figures "now"
    at the trend's 3.6 uF, starting as new. [derived] an open or shorted capacitor is not in the circuit as its
    trend says; the motor model is not solved for a motor without it, so no figures now are shown, and why."""
    fitted_capacitor = _assessed_fan()
    make_reading(fitted_capacitor, capacitance_uf=read_uf, outlier_confirmed=True)
    refit_fitted_capacitors([fitted_capacitor.id])
    fitted_capacitor.assessment = Assessment.objects.get(fitted_capacitor=fitted_capacitor, is_current=True)
    verdict = fitted_capacitor.assessment.latest_verdict
    assert verdict in ("open circuit suspected", "short circuit suspected")
    (assessment,) = with_operating_figures([fitted_capacitor.assessment])
    assert assessment.figures_new and assessment.figures_now == {}
    pictures = motor_pictures([fitted_capacitor])[fitted_capacitor.id]
    assert _trace(pictures["sweep"], "as new") and not _trace(pictures["sweep"], "now")

    client.force_login(planner)
    words = f"its newest reading says {verdict}: the capacitor is not working as its trend"
    for page in (
        reverse("fitted_capacitor", args=[fitted_capacitor.id]),
        reverse("motor", args=[fitted_capacitor.motor.asset_tag]),
    ):
        assert words in client.get(page).content.decode()
