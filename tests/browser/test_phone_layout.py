"""Pages a technician or planner works from on a phone (390 x 844 px), measured with getBoundingClientRect:
every table cell readable (nothing cut off by its box, no word broken), targets a gloved finger can hit
(44 px tall: the WCAG 2.2 enhanced target size [pub] the menu and back links keep), the visit sheet's
links and its tick boxes kept for paper. At 1366 px the desktop tables keep their compact rows.
"""

import datetime as dt
import math
from itertools import pairwise

import pytest
from django.utils import timezone

from fleet.models import FittedCapacitor, Motor, PartLifeFit, Reading, WorkOrder
from fleet.services.assessments import refit_fitted_capacitors
from tests.factories import (
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_site,
    make_user,
    quarterly_readings,
    stored_assessment,
)

from .conftest import ARTIFACTS, demo_page
from .test_every_page import _load
from .test_technician import motor_with_history, sign_in  # noqa: F401 - the fixture is used by name

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]

GLOVE_PX = 44

# Each visible table cell under `selector`: inside its scrolling box and the window, each word on one line.
CELLS_UNREADABLE = r"""(selector) => {
  const problems = [];
  for (const cell of document.querySelectorAll(selector)) {
    if (!cell.getClientRects().length) continue;
    const frame = cell.closest(".table-scroll");
    const edges = frame ? frame.getBoundingClientRect() : {left: 0, right: window.innerWidth};
    const left = Math.max(edges.left, 0) - 1, right = Math.min(edges.right, window.innerWidth) + 1;
    const box = cell.getBoundingClientRect();
    const text = cell.textContent.trim().replace(/\s+/g, " ").slice(0, 40);
    if (box.left < left || box.right > right)
      problems.push(`cut off: "${text}" at ${Math.round(box.left)}-${Math.round(box.right)} px`);
    const walker = document.createTreeWalker(cell, NodeFilter.SHOW_TEXT);
    while (walker.nextNode()) {
      const node = walker.currentNode;
      for (const word of node.data.matchAll(/[^\s/_-]+/g)) {  // a break after a hyphen is no cut
        const range = document.createRange();
        range.setStart(node, word.index);
        range.setEnd(node, word.index + word[0].length);
        const rects = [...range.getClientRects()].filter((r) => r.width > 0);
        if (new Set(rects.map((r) => Math.round(r.top))).size > 1) problems.push(`word broken: "${word[0]}"`);
      }
    }
  }
  return problems;
}"""

# The box a finger can hit for each visible element: a control wrapped in its label takes the label's box.
TARGETS = r"""([selector, text]) => [...document.querySelectorAll(selector)]
  .filter((e) => e.getClientRects().length && (!text || e.textContent.trim() === text))
  .map((e) => {
    const box = (e.closest("label") || e).getBoundingClientRect();
    return {what: e.outerHTML.slice(0, 80), height: Math.round(box.height * 10) / 10};
  })"""


ONE_LINE_LINK_HEIGHTS = """(selector) => [...document.querySelectorAll(selector)]
  .filter((a) => a.getClientRects().length === 1).map((a) => a.getBoundingClientRect().height)"""


def _small_targets(page, selector, text=None):
    found = page.evaluate(TARGETS, [selector, text])
    assert found, f"nothing matches {selector} {text or ''} on {page.url}"
    return [f for f in found if f["height"] < GLOVE_PX]


def test_every_cell_of_the_route_the_last_readings_and_the_imports_is_readable(browser, live_server, demo_fleet):
    """At 390 px the route's Status column showed "t r", the reading form's How column was off-screen, the
    imports' "Imported" heading read "Importe" and their headings tables cut descriptions: the boxes
    scrolled with no sign of it. Every cell is now inside its box at 390 px, and still at 1366 px and
    after resizing 1366 -> 390 -> 1366."""
    site = FittedCapacitor.objects.filter(removed_on__isnull=True).values_list("motor__site__code", flat=True)[0]
    fitted_capacitor = FittedCapacitor.objects.filter(removed_on__isnull=True, readings__isnull=False).first()
    paths = [f"/sites/{site}/route/", f"/fitted-capacitors/{fitted_capacitor.id}/reading/", "/imports/"]
    context, page = demo_page(browser, live_server, "administrator", width=1366, height=900)
    problems = []
    for path in paths:
        _load(page, path)
        for width in (1366, 390, 1366, 390):
            page.set_viewport_size({"width": width, "height": 844 if width < 600 else 900})
            assert page.locator("main td").count(), path
            problems += [(width, path, problem) for problem in page.evaluate(CELLS_UNREADABLE, "main td, main th")]
            if page.evaluate("document.documentElement.scrollWidth") > width:
                problems.append((width, path, "the page scrolls sideways"))
        page.screenshot(path=str(ARTIFACTS / f"phone-cells-{path.strip('/').split('/')[-1]}.png"), full_page=True)
    assert not problems, "\n".join(str(p) for p in problems[::3])
    # The last readings take a few lines each, not a tall column of wrapped words.
    _load(page, paths[1])
    heights = page.eval_on_selector_all("main tbody tr", "rows => rows.map((r) => r.getBoundingClientRect().height)")
    assert heights and max(heights) < 95, heights
    context.close()


def test_links_in_the_lists_are_glove_sized_on_a_phone_and_compact_on_a_desktop(browser, live_server, demo_fleet):
    """The motor-tag and part links of the home, plan, work-order and motor pages were 20 px tall lines of
    text at 390 px, and so were the download links (CSV, XLSX) and the links in the dashboard's lists. At
    1366 px they stay lines of text, so the desktop tables keep their rows."""
    removed = FittedCapacitor.objects.filter(removed_on__isnull=False).select_related("motor").first()
    site = FittedCapacitor.objects.filter(removed_on__isnull=True).values_list("motor__site__code", flat=True)[0]
    visit = WorkOrder.objects.filter(
        state__in=[WorkOrder.State.PLANNED, WorkOrder.State.ISSUED], fitted_capacitor__motor__site__code=site
    ).first()
    paths = ["/", "/plan/", "/work-orders/", f"/motors/{removed.motor.asset_tag}/", "/dashboard/"]
    paths.append(f"/work-orders/{site}/{visit.due_on.isoformat()}/")
    context, page = demo_page(browser, live_server, "planner")
    small = []
    for path in paths:
        _load(page, path)
        small += [(path, target) for target in _small_targets(page, "main td a, main li > a, a.glove")[:2]]
    assert not small, small
    page.set_viewport_size({"width": 1366, "height": 900})
    for path in paths[:2]:
        _load(page, path)
        one_line = page.evaluate(ONE_LINE_LINK_HEIGHTS, "main td a")
        assert one_line and max(one_line) < GLOVE_PX, (path, one_line)
    context.close()


def test_the_replacement_and_import_forms_have_glove_sized_controls(phone):
    """At 390 px: "Why the old one came out" rows 36 px (radios 26 px), the override checkbox 26 px,
    "Pairs that make up the value" 25 px, the import's file picker 21 px."""
    fitted_capacitor = make_fitted_capacitor()
    make_part(code="FILM-2U0", rated_uf=2.0)  # two in parallel make the fan's 4 uF: a pair is listed
    sign_in(phone, make_user("administrator"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/replace/")
    assert phone.locator("details.pairs").count()
    small = [_small_targets(phone, s) for s in ("input[name=removal_reason]", "#id_substitute_override")]
    small.append(_small_targets(phone, "details.pairs > summary"))
    phone.shot("phone-replace-targets")
    phone.goto("/imports/")
    small += [_small_targets(phone, "input[type=file]"), _small_targets(phone, "input[name=kind]")]
    phone.shot("phone-import-targets")
    assert not any(small), small
    phone.go_back()
    phone.click("text=Fit this part against the advice")  # the label's text ticks the box
    assert phone.is_checked("#id_substitute_override")
    phone.click("details.pairs > summary")
    assert phone.locator("details.pairs").get_attribute("open") is not None


def test_a_reading_far_from_its_trend_is_confirmed_with_a_button_in_the_summary(phone):
    """ "Confirm it" in the summary was a line of text linking down the page; it is a button that saves."""
    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.02, 4.0, 3.99, 3.97])
    refit_fitted_capacitors([fitted_capacitor.id])
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_capacitance_uf", "3.3")
    phone.click("#save")
    phone.wait_for_selector("text=far from this capacitor's trend", timeout=15000)
    assert not _small_targets(phone, "#error-summary button")
    phone.shot("phone-confirm-in-summary")
    # Below the form the two saves stood 16 px apart, stacked: one saves the value unconfirmed, the other
    # keeps the value the form questioned, and a gloved tap meant for Save could land on it (a walk on a
    # phone). The confirm stands apart under its own words, at least a finger's width (44 px) below Save.
    save, confirm = phone.locator("#save").bounding_box(), phone.locator("#confirm").bounding_box()
    assert min(save["width"], save["height"], confirm["width"], confirm["height"]) >= GLOVE_PX, (save, confirm)
    apart = confirm["y"] - (save["y"] + save["height"])
    assert apart >= GLOVE_PX, (save, confirm)
    assert "measured again" in phone.locator(".confirm-apart").inner_text()
    phone.click("#error-summary button")
    phone.wait_for_url("**/motors/**")
    assert Reading.objects.filter(capacitance_uf=3.3, outlier_confirmed=True).count() == 1


# Each dashboard figure's label and its number: on one line when the number's box meets the label's first line.
KPI_LINES = r"""() => [...document.querySelectorAll(".kpis > .kpi")].map((kpi) => {
  const number = kpi.querySelector("b").getBoundingClientRect();
  const range = document.createRange();
  range.setStartBefore(kpi.firstChild);
  range.setEndBefore(kpi.querySelector("b"));
  const first = [...range.getClientRects()].filter((r) => r.width > 0)[0];
  return {text: kpi.textContent.trim().slice(0, 40), together: number.top < first.bottom && number.bottom > first.top};
})"""

# Each entry of "Riskier, and why": the text between its motor's tag and its capacitor's link, and their lines.
RISKIER_HEADS = r"""() => [...document.querySelectorAll("#riskier-list > li")].map((li) => {
  const [tag, capacitor] = li.querySelectorAll("a");
  const range = document.createRange();
  range.setStartAfter(tag);
  range.setEndBefore(capacitor);
  const top = (e) => Math.round(e.getBoundingClientRect().top);
  return {between: range.toString(), sameLine: top(tag) === top(capacitor)};
})"""


def test_the_dashboards_figures_keep_label_and_number_together_and_its_riskier_list_reads_on_a_phone(
    browser, live_server, demo_fleet
):
    """At 390 px "Replacements, next 26 weeks" wrapped in its half-width card and left its number alone on
    the next line; under "Riskier, and why" each motor's tag had a comma after it and the capacitor's link,
    a 44 px target too wide to follow it, went to the next line. Each figure now takes the width, its label
    and number on one line, and an entry's tag and capacitor share a line, with no stray comma."""
    context, page = demo_page(browser, live_server, "planner")
    _load(page, "/dashboard/")
    figures = page.evaluate(KPI_LINES)
    assert len(figures) == 4 and all(f["together"] for f in figures), figures
    heads = page.evaluate(RISKIER_HEADS)
    assert heads, "no riskier capacitor on the demo's dashboard"
    assert all(h["between"].strip() == "" and h["sameLine"] for h in heads), heads
    page.screenshot(path=str(ARTIFACTS / "phone-dashboard-figures.png"))
    context.close()


def test_the_dashboard_switch_is_glove_sized_and_switches(phone):
    """The workload chart's "by risk level" and "by site" were Plotly's 33 px in-chart buttons."""
    from ..test_dashboard import fleet

    fleet(per_site=2)  # two sites
    sign_in(phone, make_user("planner"))
    phone.goto("/dashboard/")
    phone.wait_for_selector("#workload-chart .main-svg")
    for label in ("by risk level", "by site"):
        assert not _small_targets(phone, "button, .updatemenu-button", label), label
    phone.get_by_role("button", name="by site").click()
    shown = "() => document.getElementById('workload-chart').data.filter((t) => t.visible !== false).map((t) => t.name)"
    for width in (390, 1366, 390):  # the group shown stays through a redraw for another width
        phone.set_viewport_size({"width": width, "height": 900})
        phone.wait_for_timeout(600)
        names = phone.evaluate(shown)
        assert "replace now" not in names and "site visits" in names and len(names) == 3, (width, names)
    assert phone.get_by_role("button", name="by site").get_attribute("aria-pressed") == "true"
    phone.shot("phone-dashboard-switch")


def test_the_visit_sheet_links_its_motors_and_parts_and_keeps_tick_boxes_for_paper(browser, live_server, demo_fleet):
    """On screen each row's "Done" box looked tappable and did nothing, and the motor tags were plain text. A
    fresh-eyes walk: a replacement order's only way in was its part code, explained in the footer, and from 768 px
    up (a tablet showing the sheet as a table) "Record the reading" and the like were 21 px lines of text."""
    order = (
        WorkOrder.objects.filter(state__in=[WorkOrder.State.PLANNED, WorkOrder.State.ISSUED])
        .select_related("motor", "fitted_capacitor")
        .first()
    )
    sheet = f"/work-orders/{order.motor.site.code}/{order.due_on.isoformat()}/"
    replace = f"main td a[href^='/fitted-capacitors/{order.fitted_capacitor_id}/replace/?next=/work-orders/']"
    record = "main td a.record-replacement"
    field_work = """() => [...document.querySelectorAll("main a.field-work")].filter((a) => a.getClientRects().length)
      .map((a) => a.getBoundingClientRect().height)"""
    boxes = """() => [...document.querySelectorAll("main td, main th")]
      .filter((c) => c.textContent.includes("\u2610") && c.getClientRects().length).length"""
    context, page = demo_page(browser, live_server, "planner")  # who cannot record a replacement: no part link
    _load(page, sheet)
    assert page.locator(f"main td a[href='/motors/{order.motor.asset_tag}/']").count() == 1
    assert page.locator(replace).count() == 0 and page.locator(record).count() == 0
    context.close()
    context, page = demo_page(browser, live_server, "technician")
    _load(page, sheet)
    for width in (390, 768, 1366):
        page.set_viewport_size({"width": width, "height": 900})
        assert page.evaluate(boxes) == 0, width
        assert page.locator(f"main td a[href='/motors/{order.motor.asset_tag}/']").count() == 1
        assert page.locator(replace + ".part-code").count() == 1
        if not order.reads_again:
            assert page.locator(replace + ".record-replacement").count() == 1
        heights = page.evaluate(field_work)
        assert heights and min(heights) >= GLOVE_PX, (width, heights)
        page.screenshot(path=str(ARTIFACTS / f"visit-sheet-screen-{width}.png"), full_page=True)
    page.emulate_media(media="print")
    rows = page.locator("main table.visit-orders tbody tr").count()  # the orders, not the spares
    assert page.evaluate(boxes) == rows, rows
    page.screenshot(path=str(ARTIFACTS / "visit-sheet-print.png"), full_page=True)
    context.close()


def test_a_refused_walking_order_keeps_what_was_typed_in_view_with_the_save_button_in_reach(phone):
    """On a phone the route's "Save walking order" was 16,000 px down the page; a refused save came back
    with every box at its stored place and its message below the first screen. The save button now stays
    at the foot of the screen; a refused save opens on what to put right, the boxes as typed."""
    site = make_site("WLK")
    motors = [make_motor(site=site, route_order=n + 1) for n in range(40)]
    sign_in(phone, make_user("planner"))
    phone.goto(f"/sites/{site.code}/route/")
    save = phone.locator("button", has_text="Save walking order")
    view = phone.viewport_size

    def on_screen(locator):
        box = locator.bounding_box()
        return box is not None and box["y"] >= 0 and box["y"] + box["height"] <= view["height"]

    assert phone.evaluate("document.documentElement.scrollHeight") > 4 * view["height"]

    def type_into(motor, text):  # as a planner does: the row scrolled to mid-screen, its box tapped
        box = phone.locator(f"#place-{motor.asset_tag}")
        box.evaluate("(e) => e.scrollIntoView({block: 'center'})")
        box.fill(text)
        assert on_screen(save) and box.bounding_box()["y"] + box.bounding_box()["height"] < save.bounding_box()["y"]

    type_into(motors[0], "2")
    type_into(motors[20], "-1")
    save.click()
    summary = phone.locator("#error-summary")
    summary.wait_for(timeout=15000)
    assert on_screen(summary) and "Walking order not saved: 1 to put right" in summary.inner_text()
    assert phone.input_value(f"#place-{motors[0].asset_tag}") == "2"
    assert phone.input_value(f"#place-{motors[20].asset_tag}") == "-1"
    message = phone.locator(f"#place-{motors[20].asset_tag}-error")
    assert "'-1' is not a whole number" in message.inner_text()
    assert phone.evaluate("document.documentElement.scrollWidth") <= view["width"]
    phone.screenshot(path=str(ARTIFACTS / "route-order-refused-screen.png"))  # what the planner sees first
    phone.shot("route-order-refused")
    summary.locator("a").click()  # to the box, clear of the bar at the foot of the screen
    box = phone.locator(f"#place-{motors[20].asset_tag}")
    phone.screenshot(path=str(ARTIFACTS / "route-order-refused-box.png"))
    assert on_screen(box) and box.bounding_box()["y"] + box.bounding_box()["height"] < save.bounding_box()["y"]
    phone.fill(f"#place-{motors[20].asset_tag}", "4")
    save.click()
    saved = phone.locator("text=Walking order saved.")
    saved.wait_for(timeout=15000)
    assert on_screen(saved)  # the page opens at its top again, not at the box the summary linked
    assert dict(Motor.objects.filter(id__in=[motors[0].id, motors[20].id]).values_list("id", "route_order")) == {
        motors[0].id: 2,
        motors[20].id: 4,
    }
    phone.set_viewport_size({"width": 1366, "height": 900})
    view = phone.viewport_size
    type_into(motors[30], "31")
    phone.screenshot(path=str(ARTIFACTS / "route-order-1366.png"))


def test_the_move_visit_box_says_its_day_in_words_and_a_working_day_is_one_tap(phone):
    """Ours: the date box shows the browser's order of day, month and year (12/28/2026 here) while the page
    writes days as weekday and year-month-day. The day chosen is said beside the box in words, whether typed
    or picked from the working days offered next to the visit (glove-sized, shown pressed)."""
    site = make_site(code="MOVE")
    day = timezone.localdate() + dt.timedelta(days=20)
    WorkOrder.objects.create(motor=make_motor(site=site), kind="read_again", due_on=day, reason="read it again")
    sign_in(phone, make_user("planner"))
    phone.goto(f"/work-orders/MOVE/{day.isoformat()}/")
    words = phone.locator("#to-day-words")
    assert words.inner_text() == ""
    choices = phone.locator("button[data-fills=id_to_day]")
    assert choices.count() == 5 and not _small_targets(phone, "button[data-fills]")
    third = choices.nth(2)
    third.click()
    picked = dt.date.fromisoformat(third.get_attribute("value"))
    assert phone.input_value("#id_to_day") == picked.isoformat()
    assert words.inner_text() == f"{picked:%A} {picked.isoformat()}"
    assert third.get_attribute("aria-pressed") == "true" and choices.nth(0).get_attribute("aria-pressed") == "false"
    saturday = day + dt.timedelta(days=(5 - day.weekday()) % 7)
    phone.fill("#id_to_day", saturday.isoformat())
    assert words.inner_text() == f"Saturday {saturday.isoformat()}"
    assert third.get_attribute("aria-pressed") == "false"
    phone.locator("#move-visit").scroll_into_view_if_needed()
    phone.shot("move-visit-day-in-words")
    phone.click("#move-visit button[type=submit]")
    phone.locator("#error-summary").wait_for(timeout=15000)
    assert "is a Saturday" in phone.locator("#wrap_to_day .errorlist").inner_text()
    assert phone.locator("#to-day-words").inner_text() == f"Saturday {saturday.isoformat()}"
    assert phone.evaluate("document.documentElement.scrollWidth") <= 390


def test_the_admin_motor_page_with_its_capacitors_fits_a_desktop_screen(phone):
    """Ours: the fitted capacitors' inline (six boxes, the serial box 610 px wide) pushed the admin's motor
    page to 1513 px at 1366. It fits; the removal is read on the row and edited on the capacitor's page."""
    fitted_capacitor = make_fitted_capacitor(serial="2002-55408")
    make_fitted_capacitor(motor=fitted_capacitor.motor, role="start", part=make_part(code="START-1"))
    sign_in(phone, make_user("administrator"))
    for width in (1366, 390):
        phone.set_viewport_size({"width": width, "height": 900})
        phone.goto(f"/admin/fleet/motor/{fitted_capacitor.motor.id}/change/")
        phone.locator(".inline-group").scroll_into_view_if_needed()
        assert phone.evaluate("document.documentElement.scrollWidth") <= width
        assert phone.input_value("#id_capacitors-0-serial") == "2002-55408"
        phone.screenshot(path=str(ARTIFACTS / f"admin-motor-{width}.png"))


def test_a_capacitor_rows_message_on_the_admin_motor_page_reads_on_a_phone(phone):
    """The fitted capacitors' rows scroll sideways at 390 px; a row's "someone else saved this fitted capacitor"
    spanned the whole 1,000 px row on one line, cut at the screen's edge (seen on a walk). It wraps in view."""
    fitted_capacitor = make_fitted_capacitor(serial="2002-55408")
    sign_in(phone, make_user("administrator"))
    phone.goto(f"/admin/fleet/motor/{fitted_capacitor.motor.id}/change/")
    FittedCapacitor.objects.filter(id=fitted_capacitor.id).update(serial="2002-55409")  # another person's save
    phone.fill("#id_capacitors-0-serial", "2002-55410")
    phone.locator("[name=_continue]").click()
    message = phone.locator(".inline-group tr.row-form-errors .errorlist")
    message.wait_for(timeout=15000)
    assert "Someone else saved this fitted capacitor" in message.inner_text()
    message.scroll_into_view_if_needed()
    box = message.bounding_box()
    assert box["x"] >= 0 and box["x"] + box["width"] <= 390, box
    assert phone.input_value("#id_capacitors-0-serial") == "2002-55410"
    phone.screenshot(path=str(ARTIFACTS / "admin-motor-capacitor-conflict-390.png"))


def test_a_typed_stock_rows_message_in_the_admin_list_reads_on_a_phone(phone):
    """The stock list's typed quantities: a row's "someone else saved this site stock" ran past the screen's edge
    at 390 px as the capacitor rows' did (seen on the same walk)."""
    from fleet.models import SiteStock

    fitted_capacitor = make_fitted_capacitor()
    stock = SiteStock.objects.create(site=fitted_capacitor.motor.site, part=fitted_capacitor.part, quantity=3)
    sign_in(phone, make_user("administrator"))
    phone.goto("/admin/fleet/sitestock/")
    SiteStock.objects.filter(id=stock.id).update(quantity=5)  # another person's save
    phone.fill("[name='form-0-quantity']", "4")
    phone.locator("[name=_save]").click()
    message = phone.locator("#result_list td[colspan] > .errorlist")
    message.wait_for(timeout=15000)
    assert "Someone else saved this site stock" in message.inner_text()
    box = message.bounding_box()
    assert box["x"] >= 0 and box["x"] + box["width"] <= 390, box
    assert phone.input_value("[name='form-0-quantity']") == "4"


def test_the_reading_time_is_said_in_words_beside_its_box(phone):
    """The time box shows the browser's order of day and month (12/04/2026, 01:12 PM is 12 April to many at
    an Irish site, a walk found): the day and time it holds are said beside it, as the pages write days."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_taken_at", "2026-03-14T09:30")
    assert phone.locator("#taken-day-words").inner_text() == "Saturday 2026-03-14 09:30"


def test_the_button_that_discards_a_kept_draft_is_glove_sized(phone):
    """A walk: "discard it" beside a draft the phone kept was 40 px tall, the one target of the reading form
    under a gloved finger's 44 px."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{fitted_capacitor.id}/reading/"
    phone.goto(url)
    phone.fill("#id_capacitance_uf", "3.94")
    phone.goto("/")  # left unsaved: the phone keeps the draft
    phone.goto(url)
    assert phone.is_visible("#draft-note")
    assert not _small_targets(phone, "#draft-discard")


def test_a_temperature_below_zero_can_be_typed_on_a_phones_decimal_keypad(phone):
    """A walk at the cool store: the temperature boxes open the decimal keypad, which on many phones has no minus
    sign, and the demo's cold rooms read down to -9 °C ambient. A glove-sized button beside each temperature box
    puts the sign in or takes it out; the reading keeps it."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_capacitance_uf", "3.95")
    phone.fill("#id_case_temperature_c", "0.5")
    phone.click("#wrap_case_temperature_c .sign-toggle")
    assert phone.input_value("#id_case_temperature_c") == "-0.5"
    phone.click("#wrap_case_temperature_c .sign-toggle")
    assert phone.input_value("#id_case_temperature_c") == "0.5"
    phone.click("#wrap_case_temperature_c .sign-toggle")
    phone.click("text=More readings")
    phone.click("#wrap_ambient_temperature_c .sign-toggle")
    phone.keyboard.type("9.1")  # typing goes on after the sign
    assert phone.input_value("#id_ambient_temperature_c") == "-9.1"
    assert not _small_targets(phone, ".sign-toggle")
    assert phone.locator("#wrap_capacitance_uf .sign-toggle").count() == 0  # a capacitance is never below zero
    phone.click("#save")
    phone.wait_for_url("**/motors/**")
    reading = Reading.objects.get(fitted_capacitor=fitted_capacitor, capacitance_uf=3.95)
    assert (reading.case_temperature_c, reading.ambient_temperature_c) == (-0.5, -9.1)


def test_the_sign_button_turns_a_plus_sign_into_a_minus(phone):
    """A walk: a temperature typed "+5" (a keypad that has the plus sign) became "-+5" with the +/- button, no
    number, refused on Save. [ours] the button puts the minus in the plus sign's place, and takes it out again."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_case_temperature_c", "+5")
    phone.click("#wrap_case_temperature_c .sign-toggle")
    assert phone.input_value("#id_case_temperature_c") == "-5"
    phone.click("#wrap_case_temperature_c .sign-toggle")
    assert phone.input_value("#id_case_temperature_c") == "5"


def test_the_replacement_day_is_said_in_words_beside_its_box(phone):
    """A walk: "Replaced on" showed 12/04/2026 in the browser's order of day and month, read as 12 April beside
    the ISO days of every other page, with nothing in words as the reading form and a visit's move say."""
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/replace/")
    phone.fill("#id_removed_on", "2026-03-14")
    assert phone.locator("#replaced-day-words").inner_text() == "Saturday 2026-03-14"


def test_who_is_signed_in_is_said_on_a_phone_too(phone):
    """A walk: at 390 px the header hid the user's name (no room), so a shared tablet never said who was signed
    in. On a phone the "More" menu says it; on a wide screen the header does, once."""
    user = make_user("technician")
    sign_in(phone, user)
    phone.set_viewport_size({"width": 390, "height": 800})
    phone.goto("/")
    assert not phone.locator("header .who").is_visible()
    phone.locator("header details.more > summary").click()
    said = phone.locator("header .who-in-menu")
    assert said.is_visible() and said.inner_text().startswith(f"Signed in as {user.username}")
    assert phone.evaluate("document.documentElement.scrollWidth") <= 390
    phone.set_viewport_size({"width": 1366, "height": 800})
    assert phone.locator("header .who").is_visible() and not said.is_visible()


# Each item of the error summary as laid out: where its link starts and how tall it is, where the li's text starts,
# and the tops of the lines its text takes (every text node's rects, the link's included), in px.
SUMMARY_ITEMS = r"""() => [...document.querySelectorAll("#error-summary li")].map((li) => {
  const link = li.querySelector("a"), item = li.getBoundingClientRect(), box = link.getBoundingClientRect();
  const range = document.createRange();
  range.selectNodeContents(li);
  const tops = [...new Set([...range.getClientRects()].filter((r) => r.width > 0).map((r) => Math.round(r.top)))];
  const name = document.createRange();
  name.selectNodeContents(link);
  return {text: li.innerText, itemLeft: item.left, linkLeft: box.left, linkHeight: box.height, linkTop: box.top,
          linkBottom: box.bottom,
          nameLines: new Set([...name.getClientRects()].filter((r) => r.width > 0).map((r) => Math.round(r.top))).size,
          tops: tops.sort((a, b) => a - b), lineHeight: parseFloat(getComputedStyle(li).lineHeight)};
})"""


def test_the_error_summary_reads_as_plain_left_aligned_sentences_on_a_phone(phone, motor_with_history):  # noqa: F811
    """A walk at 390 px: in "Not saved" the field names stood centred, "Capacitor case temperature (°C)" wrapped
    in its box; in "Check before saving" the message broke off after "61 µF is far", a blank gap, then the rest.
    Each item now starts at the left with the field's name, its message after it on the same line and wrapping
    at the line's height; the name is still a 44 px tall target for a glove."""
    fitted_capacitor = motor_with_history
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_capacitance_uf", "abc")
    phone.fill("#id_case_temperature_c", "2x")
    phone.click("#save")
    phone.locator("#error-summary").wait_for(timeout=15000)
    refused = phone.evaluate(SUMMARY_ITEMS)
    phone.shot("summary-not-saved")
    assert [item["text"] for item in refused] == ["Capacitance (µF)", "Capacitor case temperature (°C)"]
    for item in refused:
        assert abs(item["linkLeft"] - item["itemLeft"]) <= 1 and item["nameLines"] == 1, item
        assert item["linkHeight"] >= GLOVE_PX, item
    assert refused[1]["linkTop"] - refused[0]["linkBottom"] >= 8, refused  # targets apart, as on every page
    phone.evaluate("localStorage.clear()")
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_capacitance_uf", "3.3")
    phone.click("#save")
    phone.locator("#error-summary").wait_for(timeout=15000)
    (asked,) = phone.evaluate(SUMMARY_ITEMS)
    phone.shot("summary-check-before-saving")
    assert asked["text"].startswith("Capacitance (µF): 3.3 µF is far from this capacitor's trend"), asked
    assert abs(asked["linkLeft"] - asked["itemLeft"]) <= 1 and asked["linkHeight"] >= GLOVE_PX, asked
    assert len(asked["tops"]) >= 2, asked  # the message wraps at 390 px ...
    gaps = [b - a for a, b in pairwise(asked["tops"])]
    assert max(gaps) <= 1.1 * asked["lineHeight"], asked  # ... line under line, no blank line between


# The download links of one paragraph (_export_links.html) as laid out: the paragraph's text as read, and each
# link's box; and how far the link "forecast track record" stands from its full stop.
DOWNLOAD_ROW = r"""(selector) => {
  const p = document.querySelector(selector);
  const links = [...p.querySelectorAll("a")].map((a) => {
    const box = a.getBoundingClientRect();
    return {text: a.textContent, left: box.left, right: box.right, top: box.top, bottom: box.bottom};
  });
  const record = document.querySelector("a.in-text[href*='track']"), stop = record.nextSibling;
  const words = document.createRange(), mark = document.createRange();
  words.selectNodeContents(record);
  mark.setStart(stop, 0);
  mark.setEnd(stop, 1);
  return {text: p.innerText, links, stopGap: mark.getClientRects()[0].left - [...words.getClientRects()].pop().right};
}"""


def test_the_download_links_stand_as_a_row_of_targets_on_a_phone_and_in_a_sentence_on_a_desktop(phone):
    """A walk at 390 px on the life-data page: "CSV , XLSX , Parquet" and "( columns and units )", and
    "forecast track record ." with a gap: each link was a 44 px box centred round its word with 4 px margins,
    and the commas and brackets stood apart. On a phone the downloads are now a row of glove targets (44 x 44 px,
    8 px apart, the rule of every page) without the commas and brackets; on a desktop they read as a sentence;
    a link ending a sentence keeps its full stop beside it."""
    part = make_part(code="LIFE-9")
    points = [[age, 1.0 - math.exp(-((age / 5.5) ** 1.48))] for age in (0.8, 1.6, 2.4, 3.5, 4.7)]
    PartLifeFit.objects.create(part=part, beta=1.48, eta_years=5.5, failures=12, suspensions=40, plot_points=points)
    sign_in(phone, make_user("reliability engineer"))
    phone.goto("/life/?part=LIFE-9")
    row = phone.evaluate(DOWNLOAD_ROW, "p:has(a[href*='life-data'])")
    phone.shot("life-download-row")
    assert [link["text"] for link in row["links"]] == ["CSV", "XLSX", "Parquet", "columns and units"]
    downloads = row["text"].rsplit(":", 1)[1]
    assert "," not in downloads and "(" not in downloads and ")" not in downloads, row["text"]
    for link in row["links"]:
        assert link["right"] - link["left"] >= GLOVE_PX and link["bottom"] - link["top"] >= GLOVE_PX, link
    for one, two in pairwise(row["links"]):
        apart = max(two["left"] - one["right"], two["top"] - one["bottom"])
        assert GLOVE_PX / 6 <= apart <= 12, (one, two)
    assert abs(row["stopGap"]) <= 1, row["stopGap"]
    phone.set_viewport_size({"width": 1366, "height": 900})
    row = phone.evaluate(DOWNLOAD_ROW, "p:has(a[href*='life-data'])")
    assert row["text"].endswith(": CSV, XLSX, Parquet (columns and units)"), row["text"]


def test_every_card_of_the_plans_riskier_list_puts_was_under_the_capacitor(phone):
    """A walk at 390 px: in one card of "Riskier" (a short part code), "Was sound" floated up beside the
    capacitor's link, in the others it stood under it. The capacitor takes its own line in every card."""
    site = make_site("CRD")
    for code in ("R-1", "RUN-CAPACITOR-WITH-A-LONG-CODE-450"):
        capacitor = make_fitted_capacitor(motor=make_motor(site=site), part=make_part(code=code))
        stored_assessment(capacitor, "sound", None, created_at=timezone.now() - dt.timedelta(days=20))
        stored_assessment(capacitor, "watch", timezone.localdate() + dt.timedelta(days=300))
    sign_in(phone, make_user("planner"))
    phone.goto("/plan/")
    cards = phone.evaluate("""() => [...document.querySelectorAll("h3[id$='-heading'] + .table-scroll tbody tr")]
      .map((row) => [row.querySelector("td[data-label=Capacitor]").getBoundingClientRect(),
                     row.querySelector("td[data-label=Was]").getBoundingClientRect()])
      .map(([capacitor, was]) => ({below: was.top >= capacitor.bottom - 1, left: Math.round(was.left)}))""")
    phone.shot("plan-riskier-cards")
    assert len(cards) == 2 and all(card["below"] for card in cards), cards
    assert len({card["left"] for card in cards}) == 1, cards
