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
  const dates = [...document.querySelectorAll('.nowrap')].filter(e => e.checkVisibility()).map(td => {
    const range = document.createRange();
    range.selectNodeContents(td);
    // Lines, not boxes: a run of text in two fonts (the micro sign) is two boxes on one line.
    return new Set([...range.getClientRects()].filter(r => r.width > 0).map(r => Math.round(r.top))).size;
  });
  const boxes = [...document.querySelectorAll(".table-scroll")].map(b => b.scrollWidth > b.clientWidth);
  const labelled = [...document.querySelectorAll("table.stacked tbody td[data-label]")].map(td => {
    const box = td.getBoundingClientRect();
    return {label: getComputedStyle(td, "::before").content, inView: box.left >= 0 && box.right <= window.innerWidth};
  });
  const headings = [...document.querySelectorAll("table.stacked thead")].map(h => h.getBoundingClientRect().height);
  const page = document.documentElement.scrollWidth;
  return {charts, dates, boxes, labelled, headings, page, view: window.innerWidth};
}"""


def check_layout(page, phone: bool) -> None:
    page.wait_for_timeout(600)  # Plotly redraws on the window's resize event
    layout = page.evaluate(CHECK_LAYOUT)
    assert [c["id"] for c in layout["charts"]] == ["calibration-chart", "coverage-chart"]
    for chart in layout["charts"]:
        assert chart["box"] == chart["svg"] == chart["set"], chart  # drawn at the set height, never a strip
        assert chart["plot"] >= 0.4 * chart["set"], chart  # the legend and titles leave room to plot
    assert layout["dates"] and set(layout["dates"]) == {1}  # every date (and date-time) on one line
    assert layout["page"] <= layout["view"], layout  # no page-level sideways scroll
    assert not any(layout["boxes"]), layout["boxes"]  # no table scrolls inside its box, phone or desktop
    # Every table is stacked: on a phone each row a card, each cell in view under its heading, no heading row;
    # on a desktop the table as it was, its headings shown and no cell labelled.
    assert len(layout["headings"]) == 3 and layout["labelled"]
    assert all(cell["inView"] for cell in layout["labelled"])
    if phone:
        assert set(layout["headings"]) == {0} and all(cell["label"] not in ("none", "") for cell in layout["labelled"])
    else:
        assert all(height > 0 for height in layout["headings"])
        assert {cell["label"] for cell in layout["labelled"]} == {"none"}


def test_track_record_on_a_phone_and_a_desktop(phone):
    straight_line_fleet(parts=4)
    assert run_backtest(start_backtest(queue=False).id).state == Backtest.State.DONE
    sign_in(phone, make_user("reliability engineer"))
    phone.click("header >> text=More")  # on a phone the engineer's pages are under More
    phone.click("header >> text=Track record")
    phone.wait_for_url("**/forecast/track-record/")
    phone.wait_for_selector("#coverage-chart .main-svg")
    check_layout(phone, phone=True)
    phone.shot("track-record-390")

    phone.set_viewport_size({"width": 1366, "height": 900})
    check_layout(phone, phone=False)
    phone.screenshot(path=str(ARTIFACTS / "track-record-1366.png"), full_page=True)

    phone.set_viewport_size({"width": 390, "height": 844})
    check_layout(phone, phone=True)
    phone.shot("track-record-390-after-resize")
