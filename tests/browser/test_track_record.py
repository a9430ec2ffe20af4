"""The reliability engineer's forecast track record, on a phone and a desktop, and after a resize."""

import pytest

from fleet.models import Backtest
from fleet.services.backtest import run_backtest, start_backtest
from tests.factories import make_user, straight_line_fleet

from .conftest import ARTIFACTS
from .test_technician import sign_in

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]

CHECK_LAYOUT = """() => {
  const charts = [...document.querySelectorAll('.js-plotly-plot')].map(gd => {
    const set = JSON.parse(document.getElementById(gd.id.replace('-chart', '-data')).textContent).layout.height;
    return {id: gd.id, set, box: gd.getBoundingClientRect().height,
            svg: Number(gd.querySelector('.main-svg').getAttribute('height')), plot: gd._fullLayout._size.h};
  });
  const dates = [...document.querySelectorAll('.nowrap')].map(td => {
    const range = document.createRange();
    range.selectNodeContents(td);
    // Lines, not boxes: a run of text in two fonts (the micro sign) is two boxes on one line.
    return new Set([...range.getClientRects()].filter(r => r.width > 0).map(r => Math.round(r.top))).size;
  });
  const boxes = [...document.querySelectorAll(".table-scroll")].map(b => b.scrollWidth > b.clientWidth);
  return {charts, dates, boxes, page: document.documentElement.scrollWidth, view: window.innerWidth};
}"""


def check_layout(page, expect_scrolling_boxes: bool) -> None:
    page.wait_for_timeout(600)  # Plotly redraws on the window's resize event
    layout = page.evaluate(CHECK_LAYOUT)
    assert [c["id"] for c in layout["charts"]] == ["calibration-chart", "coverage-chart"]
    for chart in layout["charts"]:
        assert chart["box"] == chart["svg"] == chart["set"], chart  # drawn at the set height, never a strip
        assert chart["plot"] >= 0.4 * chart["set"], chart  # the legend and titles leave room to plot
    assert layout["dates"] and set(layout["dates"]) == {1}  # every date (and date-time) on one line
    assert layout["page"] <= layout["view"], layout  # no page-level sideways scroll
    assert any(layout["boxes"]) == expect_scrolling_boxes  # wide tables scroll inside their own box


def test_track_record_on_a_phone_and_a_desktop(phone):
    straight_line_fleet(parts=4)
    assert run_backtest(start_backtest(queue=False).id).state == Backtest.State.DONE
    sign_in(phone, make_user("reliability engineer"))
    phone.click("header >> text=Track record")
    phone.wait_for_url("**/forecast/track-record/")
    phone.wait_for_selector("#coverage-chart .main-svg")
    check_layout(phone, expect_scrolling_boxes=True)
    phone.shot("track-record-390")

    phone.set_viewport_size({"width": 1366, "height": 900})
    check_layout(phone, expect_scrolling_boxes=False)
    phone.screenshot(path=str(ARTIFACTS / "track-record-1366.png"), full_page=True)

    phone.set_viewport_size({"width": 390, "height": 844})
    check_layout(phone, expect_scrolling_boxes=True)
    phone.shot("track-record-390-after-resize")
