"""Every chart page keeps its charts at their set height on a phone, a desktop and after a resize.

A responsive Plotly figure in a box with no height of its own shrank to a strip and drew over
the page below it on the capacitor and life-data pages; the chart's box now holds the height.
"""

import datetime as dt

import pytest
from django.utils import timezone

from fleet.models import FittedCapacitor
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.lifedata import refresh_life_fits
from tests.factories import make_fitted_capacitor, make_part, make_user, quarterly_readings

from .test_technician import sign_in

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]

CHART_SIZES = """() => [...document.querySelectorAll('.js-plotly-plot')].map(gd => ({
  id: gd.id,
  set: JSON.parse(document.getElementById(gd.id.replace('-chart', '-data')).textContent).layout.height,
  box: Math.round(gd.getBoundingClientRect().height),
  svg: Number(gd.querySelector('.main-svg').getAttribute('height')),
  page: document.documentElement.scrollWidth, view: window.innerWidth,
}))"""


# Each chart's legend against its plot area (Plotly's drag layer covers exactly the plot area).
LEGENDS_CLEAR = """() => [...document.querySelectorAll('.js-plotly-plot')].map(gd => {
  const legend = gd.querySelector('.legend'), plot = gd.querySelector('.nsewdrag');
  if (!legend || !plot) return {id: gd.id, overlap: 0};
  const a = legend.querySelector('.bg').getBoundingClientRect(), b = plot.getBoundingClientRect();
  const wide = Math.min(a.right, b.right) - Math.max(a.left, b.left);
  const tall = Math.min(a.bottom, b.bottom) - Math.max(a.top, b.top);
  return {id: gd.id, overlap: wide > 0 && tall > 0 ? Math.round(tall) : 0};
})"""


def _legends_clear(page):
    """No chart's legend lies over its plot (more than a pixel's rounding)."""
    for chart in page.evaluate(LEGENDS_CLEAR):
        assert chart["overlap"] <= 1, chart


def _charts_hold(page, expected_ids):
    for width in (390, 1366, 390):
        page.set_viewport_size({"width": width, "height": 900})
        page.wait_for_timeout(600)  # Plotly redraws on the window's resize event
        sizes = page.evaluate(CHART_SIZES)
        assert sorted(c["id"] for c in sizes) == sorted(expected_ids)
        for chart in sizes:
            assert chart["box"] == chart["svg"] == chart["set"], (width, chart)


def test_the_trend_chart_keeps_its_height(phone):
    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.97, 3.95, 3.92, 3.9])
    refit_fitted_capacitors([fitted_capacitor.id])
    sign_in(phone, make_user("reliability engineer"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/")
    phone.wait_for_selector("#trend-chart .main-svg")
    _charts_hold(phone, ["trend-chart"])
    phone.shot("trend-chart-after-resize")


def test_the_life_data_charts_keep_their_height(phone):
    part = make_part(code="LIFE-1")
    for years, reason in [(2.1, "failed"), (3.4, "failed"), (2.8, "failed"), (4.0, "planned"), (1.5, "failed")]:
        fitted_capacitor = make_fitted_capacitor(part=part, fitted_on=dt.date(2018, 1, 1))
        FittedCapacitor.objects.filter(id=fitted_capacitor.id).update(
            removed_on=dt.date(2018, 1, 1) + dt.timedelta(days=int(365.25 * years)), removal_reason=reason
        )
    refresh_life_fits()
    sign_in(phone, make_user("reliability engineer"))
    phone.goto("/life/?part=LIFE-1")
    phone.wait_for_selector("#cost-chart .main-svg")
    _charts_hold(phone, ["weibull-chart", "cost-chart"])
    phone.shot("life-data-after-resize")


def test_the_dashboard_charts_keep_their_height_and_the_page_its_width(phone):
    from ..test_dashboard import fleet

    fleet(per_site=4)
    sign_in(phone, make_user("planner"))
    phone.goto("/dashboard/")
    phone.wait_for_selector("#routes-chart .main-svg")
    _charts_hold(phone, ["workload-chart", "spares-chart", "stock-chart", "mix-chart", "routes-chart"])
    _legends_clear(phone)
    for width in (390, 1366):
        phone.set_viewport_size({"width": width, "height": 900})
        phone.wait_for_timeout(600)
        assert phone.evaluate("document.documentElement.scrollWidth") <= width
        # Back at a desktop width the legends wrapped for the phone must not stay over the bars.
        _legends_clear(phone)
        phone.shot(f"dashboard-{width}")


def test_the_motor_page_operating_point_charts_keep_their_height(phone):
    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.9, 3.8, 3.7, 3.6])
    refit_fitted_capacitors([fitted_capacitor.id])
    sign_in(phone, make_user("reliability engineer"))
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    phone.wait_for_selector(f"#sweep-{fitted_capacitor.id}-chart .main-svg")
    _charts_hold(phone, [f"{name}-{fitted_capacitor.id}-chart" for name in ("currents", "voltages", "sweep")])
    phone.shot("motor-operating-point-after-resize")
