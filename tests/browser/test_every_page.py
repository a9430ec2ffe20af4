"""Every page, as each role, on a phone (390 px) and a desktop (1366 px): the page itself never scrolls
sideways (wide tables scroll in their own box), no date or asset tag breaks over two lines, no markup in
the title, back links are 44 px tall targets, at 390 px every link, button and fold in the page is a 44 x 44 px
target (WCAG 2.1 SC 2.5.5 Target Size [pub]) and any two targets (links, buttons, folds) stand 8 px apart or
more ([trade] the usual spacing between touch targets), the menu keeps to one row at 1366 px, no script
error; a refused reading puts its summary of what to put right in view, above the cautions.

The pages are found as a user finds them: from the home page, following the links each role sees
(at most two addresses per kind of page), on the demo's own scenario at a twentieth of its size.
"""

import datetime as dt
import os
import re
from urllib.parse import urlsplit

import pytest
from django.urls import Resolver404, resolve

from fleet.models import FittedCapacitor, Reading, WorkOrder
from tests.factories import make_fitted_capacitor, make_user

from .conftest import ARTIFACTS, ROLES, demo_page
from .test_technician import sign_in

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]

# Not pages of ours to lay out: the register (Django's admin), the API, downloads, the sign-out.
NOT_PAGES = re.compile(r"^/(admin|api|assets|static)/|\.(csv|xlsx|parquet|json)$|/logout/")
PER_KIND = 2
# A full-page screenshot of the first page of each kind, at both widths, for people to look at
# (test-artifacts/pages/); FLEET_TEST_SCREENSHOTS=0 skips them where nobody will (CI: a third of the time).
SCREENSHOTS = os.environ.get("FLEET_TEST_SCREENSHOTS", "1") != "0"
EXPECTED_KINDS = {
    *("home", "find-tag", "motor", "fitted_capacitor", "reading_new", "replace", "route", "labels", "labels-tag"),
    *("plan", "work_orders", "visit_sheet", "work_order_cancel", "life_data", "life_data-part", "track_record"),
    "refits",
    *("imports", "import_detail", "site_stock", "site_days_off", "stand_in_parts"),
}

MEASURE = r"""() => {
  const view = window.innerWidth;
  const wrapped = [];
  const date = /\d{4}-\d{2}-\d{2}(?:[ T]\d{2}:\d{2}(?::\d{2})?)?/g;
  const tag = /\b[A-Z]{2,5}-\d{3,5}\b/g;  // an asset tag (site code, dash, number): never broken
  const walker = document.createTreeWalker(document.body, NodeFilter.SHOW_TEXT);
  while (walker.nextNode()) {
    const node = walker.currentNode;
    const parent = node.parentElement;
    if (!parent || parent.closest("script, style, [hidden], details:not([open]) > :not(summary)")) continue;
    for (const match of [...node.data.matchAll(date), ...node.data.matchAll(tag)]) {
      const range = document.createRange();
      range.setStart(node, match.index);
      range.setEnd(node, match.index + match[0].length);
      const lines = new Set([...range.getClientRects()].filter((r) => r.width > 0).map((r) => Math.round(r.top)));
      const where = " in <" + parent.tagName.toLowerCase() + "> " + node.data.trim().slice(0, 60);
      if (lines.size > 1) wrapped.push(match[0] + where);
    }
  }
  // Back links ("← ...") are targets for gloves: at least 44 px tall.
  const lowBacks = [...document.querySelectorAll("a")]
    .filter((a) => a.textContent.trim().startsWith("←") && a.getClientRects().length)
    .filter((a) => a.getBoundingClientRect().height < 44)
    .map((a) => a.textContent.trim() + " " + Math.round(a.getBoundingClientRect().height) + " px");
  // At phone width every target a gloved finger taps in the page (a link, a button, a fold) is at least
  // 44 x 44 px, and any two stand at least 8 px apart (a bar kept on screen over the page is not beside them).
  const smallTargets = [], closeTargets = [];
  if (view <= 640) {
    const shown = (e) => e.getClientRects().length
      && !e.closest("[hidden], .js-plotly-plot, .print-only, details:not([open]) > :not(summary)");
    const named = (e) => e.tagName.toLowerCase() + ' "' + e.textContent.trim().replace(/\s+/g, " ").slice(0, 40) + '"';
    const kept = (e) => {
      for (; e; e = e.parentElement) if (/sticky|fixed/.test(getComputedStyle(e).position)) return true;
      return false;
    };
    const targets = [...document.querySelectorAll("main a[href], main button, main summary, main input[type=submit]")]
      .filter(shown).map((e) => [e, (e.closest("label") || e).getBoundingClientRect()]);
    for (const [e, box] of targets)
      if (box.width < 44 || box.height < 44)
        smallTargets.push(`${named(e)} ${Math.round(box.width)}x${Math.round(box.height)} px`);
    for (let i = 0; i < targets.length; i++) for (let j = i + 1; j < targets.length; j++) {
      const [a, boxA] = targets[i], [b, boxB] = targets[j];
      if (kept(a) !== kept(b)) continue;
      const apart = Math.max(Math.max(boxA.left, boxB.left) - Math.min(boxA.right, boxB.right),
                             Math.max(boxA.top, boxB.top) - Math.min(boxA.bottom, boxB.bottom));
      if (apart < 8) closeTargets.push(`${named(a)} and ${named(b)} ${Math.round(apart)} px apart`);
    }
  }
  // The menu's rows: the vertical centres of the header's visible items.
  const items = [...document.querySelectorAll("header > *, header details.more > a")]
    .map((e) => e.getBoundingClientRect()).filter((r) => r.width > 0 && r.height > 0);
  const menuRows = new Set(items.map((r) => Math.round((r.top + r.bottom) / 20))).size;
  const wide = [...document.querySelectorAll("body *")]
    .filter((e) => e.getBoundingClientRect().right > view + 1 && !e.closest(".table-scroll"))
    .slice(0, 3).map((e) => e.tagName.toLowerCase() + "." + e.className);
  return {page: document.documentElement.scrollWidth, view, wrapped, wide, lowBacks, smallTargets, closeTargets,
          menuRows, title: document.title};
}"""


def _kind(path: str) -> str:
    """A page's kind: its URL name, with the query's parameter names (a plan filtered by site is another view)."""
    parts = urlsplit(path)
    try:
        name = resolve(parts.path).url_name
    except Resolver404:
        return path
    keys = sorted({pair.split("=")[0] for pair in parts.query.split("&") if pair})
    return "-".join([name, *keys])


def _links(page) -> list[str]:
    hrefs = page.eval_on_selector_all("a[href]", "links => links.map((a) => a.href)")
    origin = urlsplit(page.url)
    paths = []
    for href in hrefs:
        parts = urlsplit(href)
        if parts.netloc != origin.netloc or NOT_PAGES.search(parts.path):
            continue
        paths.append(parts.path + (f"?{parts.query}" if parts.query else ""))
    return paths


def _measure(page, path, width, problems, shot_name=None):
    found = page.evaluate(MEASURE)
    if found["page"] > found["view"]:
        problems.append(f"{width} px {path}: page {found['page']} px wide ({', '.join(found['wide'])})")
    for wrapped in found["wrapped"]:
        problems.append(f"{width} px {path}: date or tag over two lines: {wrapped}")
    for back in found["lowBacks"]:
        problems.append(f"{width} px {path}: back link under 44 px tall: {back}")
    for target in found["smallTargets"]:
        problems.append(f"{width} px {path}: target under 44 x 44 px: {target}")
    for pair in found["closeTargets"]:
        problems.append(f"{width} px {path}: targets under 8 px apart: {pair}")
    if re.search(r"<|&[a-z]+;|&#", found["title"]):  # the tab read `Visit CST <span class="nowrap">...`
        problems.append(f"{width} px {path}: markup in the title: {found['title']}")
    if width >= 1366 and found["menuRows"] > 1:
        problems.append(f"{width} px {path}: the menu takes {found['menuRows']} rows")
    if shot_name and SCREENSHOTS:
        page.screenshot(path=str(ARTIFACTS / "pages" / f"{shot_name}-{width}.png"), full_page=True)


def _load(page, path):
    response = page.goto(path)
    assert response.status == 200, (path, response.status)
    if page.locator("[data-figure]").count():
        page.wait_for_timeout(150)  # Plotly lays its charts out just after the load event


def _visit_every_page(page, seeds: list[str], username: str, problems: list[str]) -> list[str]:
    """Follow the links a signed-in user sees from the home page, measuring each page at phone width;
    then the same pages at desktop width. A screenshot of the first page of each kind, at both."""
    queue, seen, per_kind, shots = ["/", *seeds], [], {}, {}
    while queue:
        path = queue.pop(0)
        kind = _kind(path)
        if path in seen or per_kind.get(kind, 0) >= PER_KIND:
            continue
        seen.append(path)
        per_kind[kind] = per_kind.get(kind, 0) + 1
        shots.setdefault(kind, path)
        _load(page, path)
        _measure(page, path, 390, problems, f"{username}-{kind}" if shots[kind] == path else None)
        queue.extend(_links(page))
    page.set_viewport_size({"width": 1366, "height": 900})
    for path in seen:
        _load(page, path)
        kind = _kind(path)
        _measure(page, path, 1366, problems, f"{username}-{kind}" if shots[kind] == path else None)
    return sorted(per_kind)


def test_every_page_fits_a_phone_and_a_desktop_for_every_role(browser, live_server, demo_fleet):
    (ARTIFACTS / "pages").mkdir(parents=True, exist_ok=True)
    problems, script_errors, kinds_seen = [], [], set()
    for role, (username, password) in ROLES.items():
        context = browser.new_context(viewport={"width": 390, "height": 900}, base_url=live_server.url)
        page = context.new_page()
        page.on("pageerror", lambda error, role=role, page=page: script_errors.append(f"{role} {page.url}: {error}"))
        page.on(
            "console",
            lambda message, role=role: message.type == "error" and script_errors.append(f"{role} {message.text}"),
        )
        page.goto("/login/")
        page.fill("#id_username", username)
        page.fill("#id_password", password)
        page.click("button[type=submit]")
        page.wait_for_url("**/")
        kinds_seen |= set(_visit_every_page(page, ["/find/?tag=unit"], username, problems))
        context.close()
    (ARTIFACTS / "pages" / "problems.txt").write_text("\n".join(problems + script_errors) + "\n")
    assert not problems, "\n".join(problems)
    assert not script_errors, "\n".join(script_errors)
    # The crawl reached the pages each role works on (the test is only as good as what it visits).
    assert kinds_seen >= EXPECTED_KINDS, sorted(EXPECTED_KINDS - kinds_seen)


def test_a_refused_reading_shows_what_to_put_right_in_view_above_the_cautions(phone):
    fitted_capacitor = make_fitted_capacitor(fitted_on=dt.date(2024, 1, 10))
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/reading/")
    phone.fill("#id_capacitance_uf", "3,9,5")
    phone.fill("#id_taken_at", "2024-01-09T10:00")
    phone.click("#save")
    summary = phone.locator("#error-summary")
    summary.wait_for(timeout=15000)
    box, view = summary.bounding_box(), phone.viewport_size
    assert box["y"] >= 0 and box["y"] + min(box["height"], 200) <= view["height"], box  # on screen, not below
    text = summary.inner_text()
    assert "Not saved: 2 to put right" in text
    # The summary names the fields, each a link; each message stands once, at its field.
    assert "decimal separator" not in text and "Before this capacitor was fitted" not in text
    assert [a.inner_text() for a in summary.locator("a").all()] == ["Taken at", "Capacitance (µF)"]
    assert "decimal separator" in phone.locator("#wrap_capacitance_uf .errorlist").inner_text()
    assert "Before this capacitor was fitted on 2024-01-10" in phone.locator("#wrap_taken_at .errorlist").inner_text()
    cautions = phone.locator("details[data-cautions]")
    assert cautions.bounding_box()["y"] > box["y"] and cautions.get_attribute("open") is not None
    assert phone.evaluate("() => document.activeElement.id") == "error-summary"
    phone.shot("reading-refused-summary")
    # Folded once read, the cautions stay folded on the next page of the session, their heading still shown.
    phone.click("details[data-cautions] > summary")
    phone.goto(f"/motors/{fitted_capacitor.motor.asset_tag}/")
    assert phone.locator("details[data-cautions]").get_attribute("open") is None
    assert phone.is_visible("text=Caution: capacitors store a charge that can kill")
    assert not phone.is_visible("text=never a screwdriver")
    phone.shot("motor-cautions-folded")
    assert not Reading.objects.exists()


def test_a_draft_kept_on_the_phone_keeps_the_time_it_was_measured(phone):
    fitted_capacitor = make_fitted_capacitor()
    sign_in(phone, make_user("technician"))
    url = f"/fitted-capacitors/{fitted_capacitor.id}/reading/"
    phone.goto(url)
    phone.fill("#id_taken_at", "2026-01-05T09:30")  # as if the page had been open since the morning round
    phone.fill("#id_capacitance_uf", "3.95")
    phone.goto(url)  # the connection dropped; later, the page again
    assert phone.is_visible("#draft-note")
    assert phone.input_value("#id_taken_at") == "2026-01-05T09:30"
    assert phone.input_value("#id_capacitance_uf") == "3.95"
    phone.click("#save")
    phone.wait_for_url("**/motors/**")
    assert Reading.objects.get().taken_at == dt.datetime(2026, 1, 5, 9, 30, tzinfo=dt.UTC)  # the site keeps UTC
    assert FittedCapacitor.objects.count() == 1


IN_VIEW_ON_ONE_LINE = r"""(selector) => [...document.querySelectorAll(selector)].map((e) => {
  const range = document.createRange();
  range.selectNodeContents(e);
  const lines = new Set([...range.getClientRects()].filter((r) => r.width > 0).map((r) => Math.round(r.top)));
  const box = e.getBoundingClientRect();
  return {text: e.textContent.trim(), lines: lines.size, inView: box.left >= 0 && box.right <= window.innerWidth};
})"""


def test_on_a_phone_the_columns_that_matter_are_in_view_and_codes_stay_whole(browser, live_server, demo_fleet):
    """At 390 px: the stock page's quantities (its only editable column), the home page's replace-by dates
    and the visit sheet's part codes are on screen without scrolling the table, and no code breaks."""
    context, page = demo_page(browser, live_server, "planner", width=390, height=900)
    site = FittedCapacitor.objects.filter(removed_on__isnull=True).values_list("motor__site__code", flat=True)[0]
    visit = WorkOrder.objects.filter(
        state__in=[WorkOrder.State.PLANNED, WorkOrder.State.ISSUED], fitted_capacitor__motor__site__code=site
    ).first()
    checks = [
        (f"/sites/{site}/stock/", "tbody input[inputmode=numeric]"),
        (f"/sites/{site}/stock/", "tbody td:first-child"),
        ("/", "tbody .replace-by"),
        (f"/work-orders/{site}/{visit.due_on.isoformat()}/", "tbody .part-code"),
    ]
    for path, selector in checks:
        _load(page, path)
        found = page.evaluate(IN_VIEW_ON_ONE_LINE, selector)
        assert found, (path, selector)
        bad = [f for f in found if not f["inView"] or f["lines"] > 1]
        assert not bad, (path, selector, bad[:3])
    context.close()
