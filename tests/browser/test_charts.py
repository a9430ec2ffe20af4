"""Every chart page keeps its charts at their set height on a phone, a desktop and after a resize.

A responsive Plotly figure in a box with no height of its own shrank to a strip and drew over
the page below it on the capacitor and life-data pages; the chart's box now holds the height.
On a phone no mode bar covers a legend or a note; the Weibull plot's age axis reads in whole numbers.
"""

import datetime as dt
import math

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


def _life_data_part(first_failure_years: float = 2.1):
    """A part LIFE-1 with four failures and one planned replacement, its life-data fit stored."""
    part = make_part(code="LIFE-1")
    ages = [(first_failure_years, "failed"), (3.4, "failed"), (2.8, "failed"), (4.0, "planned"), (1.5, "failed")]
    for years, reason in ages:
        fitted_capacitor = make_fitted_capacitor(part=part, fitted_on=dt.date(2018, 1, 1))
        FittedCapacitor.objects.filter(id=fitted_capacitor.id).update(
            removed_on=dt.date(2018, 1, 1) + dt.timedelta(days=int(365.25 * years)), removal_reason=reason
        )
    refresh_life_fits()


def test_the_life_data_charts_keep_their_height(phone):
    _life_data_part()
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


# The mode bar of each chart once touched, against what it could hide: the legend's entries, the notes
# on the plot and the chart's buttons. None where no mode bar shows.
MODE_BAR_OVER = r"""(id) => {
  const chart = document.getElementById(id), bar = chart.querySelector(".modebar");
  if (!bar || !bar.getClientRects().length || getComputedStyle(bar).opacity === "0") return null;
  const a = bar.getBoundingClientRect();
  return [...chart.querySelectorAll(".legend .traces, .annotation, .updatemenu-button")].filter((e) => {
    const b = e.getBoundingClientRect();
    const wide = Math.min(a.right, b.right) - Math.max(a.left, b.left);
    return wide > 0 && Math.min(a.bottom, b.bottom) > Math.max(a.top, b.top);
  }).map((e) => e.textContent.trim());
}"""


def _mode_bars(page):
    found = {}
    for chart in page.eval_on_selector_all(".js-plotly-plot", "charts => charts.map((c) => c.id)"):
        page.locator(f"#{chart}").scroll_into_view_if_needed()
        box = page.locator(f"#{chart}").bounding_box()
        page.mouse.move(box["x"] + box["width"] / 2, box["y"] + box["height"] / 2)  # a tap hovers as well
        page.wait_for_timeout(150)
        found[chart] = page.evaluate(MODE_BAR_OVER, chart)
    assert found, page.url
    return found


def test_chart_mode_bars_leave_legends_and_notes_in_view_on_a_phone(phone):
    """At 390 px the mode bar of a touched chart covered the motor page's "as new / now" legend, the life
    page's "best" age and the dashboard's legends; hidden under 641 px, it stays on a desktop."""
    from ..test_dashboard import fleet

    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.9, 3.8, 3.7, 3.6])
    refit_fitted_capacitors([fitted_capacitor.id])
    _life_data_part()
    fleet(per_site=2)
    sign_in(phone, make_user("administrator"))
    pages = [f"/motors/{fitted_capacitor.motor.asset_tag}/", f"/fitted-capacitors/{fitted_capacitor.id}/"]
    pages += ["/life/?part=LIFE-1", "/dashboard/"]
    for path in pages:
        phone.goto(path)
        phone.wait_for_selector(".js-plotly-plot .main-svg")
        phone.wait_for_timeout(300)
        for width in (390, 1366, 390, 1366):
            phone.set_viewport_size({"width": width, "height": 900})
            phone.wait_for_timeout(600)  # the charts are drawn again after a resize
            bars = _mode_bars(phone)
            if width < 600:
                covered = {chart: over for chart, over in bars.items() if over}
                assert not covered, (path, covered)
            else:
                assert all(over is not None for over in bars.values()), (path, bars)  # the tools stay on a desktop


def test_the_weibull_plot_labels_its_age_axis_in_whole_numbers(phone):
    """The age axis read "5 0.1 2 5 1 2 5 10" (Plotly's shorthand for the minor steps of each decade);
    each label is now a number in full, 1, 2 or 5 times a power of ten, rising left to right."""
    _life_data_part(first_failure_years=0.3)  # ages over more than a decade
    sign_in(phone, make_user("reliability engineer"))
    phone.goto("/life/?part=LIFE-1")
    phone.wait_for_selector("#weibull-chart .xtick")
    labels = phone.eval_on_selector_all("#weibull-chart .xtick text", "ts => ts.map((t) => t.textContent)")
    values = [float(label) for label in labels]
    assert values == sorted(set(values)) and len(values) >= 3, labels
    for value in values:
        mantissa = value / 10 ** math.floor(math.log10(value) + 1e-9)
        assert round(mantissa, 6) in (1, 2, 5), labels
    phone.shot("phone-weibull-ticks")


# Every point along each drawn curve (a trace's line, sampled every 2 px) and each marker, against the box
# of each word on the chart (annotations, axis tick numbers of the polar charts, the legend): a name or a
# number laid over the data is counted with the first point it covers.
WORDS_OVER_DATA = """(id) => {
  const gd = document.getElementById(id);
  const boxes = [...gd.querySelectorAll('.annotation-text-g, .legend .bg, .polarlayer .radial-axis .tick text')]
    .map((e) => [e.textContent || 'legend', e.getBoundingClientRect()]);
  const points = [];
  gd.querySelectorAll('.scatterlayer .js-line, .scatterlayer path.js-line').forEach((path) => {
    const length = path.getTotalLength(), matrix = path.getScreenCTM();
    for (let s = 0; s <= length; s += 2) {
      const p = path.getPointAtLength(s);
      points.push([matrix.a * p.x + matrix.c * p.y + matrix.e, matrix.b * p.x + matrix.d * p.y + matrix.f]);
    }
  });
  gd.querySelectorAll('.scatterlayer .point').forEach((marker) => {
    const r = marker.getBoundingClientRect();
    points.push([r.left + r.width / 2, r.top + r.height / 2]);
  });
  const over = [];
  for (const [text, box] of boxes)
    for (const [x, y] of points)
      if (x > box.left + 1 && x < box.right - 1 && y > box.top + 1 && y < box.bottom - 1) {
        over.push(`${text.trim().slice(0, 30)} at ${Math.round(x)},${Math.round(y)}`); break;
      }
  return over;
}"""


def test_the_motor_page_charts_keep_their_words_off_the_curves_on_a_phone_and_after_a_resize(phone):
    """Ours: at 390 px the sweep's crossing names ran down the top panel across the torque curve, a limit's
    name lay over the main current's curve, and the phasors' radial numbers stood at a fixed angle whatever
    pointed there. Loaded at 390, and loaded at 1366 then narrowed to 390, no word lies on a curve or a
    marker."""
    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.9, 3.8, 3.7, 3.6])
    refit_fitted_capacitors([fitted_capacitor.id])
    sign_in(phone, make_user("reliability engineer"))
    charts = [f"{name}-{fitted_capacitor.id}-chart" for name in ("currents", "voltages", "sweep")]
    for first_width in (390, 1366):
        phone.set_viewport_size({"width": first_width, "height": 900})
        phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
        phone.wait_for_selector(f"#sweep-{fitted_capacitor.id}-chart .main-svg")
        phone.set_viewport_size({"width": 390, "height": 900})
        phone.wait_for_timeout(800)  # page.js draws the charts again once the width has settled
        for chart in charts:
            assert phone.evaluate(WORDS_OVER_DATA, chart) == [], (first_width, chart)
        phone.shot(f"motor-charts-words-clear-from-{first_width}")
