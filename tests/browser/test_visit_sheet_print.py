"""A visit sheet printed to PDF by Chromium: whole rows, the table's heading, the visit and page number
on every page, the cautions."""

import datetime as dt

import pytest
from django.utils import timezone
from pypdf import PdfReader

from fleet.models import WorkOrder
from tests.browser.test_cautions import sign_in
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_site, make_user

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]


def _printed_pages(phone, path, tmp_path) -> list[str]:
    """The text of each printed A4 page of `path`, as a planner prints it (blank pages left out)."""
    sign_in(phone, make_user("planner"))
    phone.goto(path)
    pdf = tmp_path / "sheet.pdf"
    phone.pdf(path=str(pdf), format="A4")
    pages = [page.extract_text(extraction_mode="layout") for page in PdfReader(pdf).pages]
    return [page for page in pages if page.strip()]


def test_a_printed_visit_sheet_keeps_rows_whole_and_names_the_visit_and_page_on_every_page(phone, tmp_path):
    """[trade] A sheet handed to a technician is read page by page, perhaps loose: a row split over two
    pages lost its reason from its motor, and pages after the first carried no site, date or number."""
    site = make_site(code="PRN")
    day = timezone.localdate() + dt.timedelta(days=3)
    reason = "due soon: trend reaches the tolerance limit (28.50 µF) between 2027-01 and 2027-04 " * 2
    part = make_part(code="RUN-30U")
    for n in range(60):
        motor = make_motor(site=site, route_order=n, asset_tag=f"PRN-{n:03d}")
        fitted_capacitor = make_fitted_capacitor(motor=motor, part=part)
        WorkOrder.objects.create(
            motor=fitted_capacitor.motor,
            fitted_capacitor=fitted_capacitor,
            kind="replace_run",
            due_on=day,
            reason=f"{reason}end of order {n:03d}",
        )
    pages = _printed_pages(phone, f"/work-orders/PRN/{day.isoformat()}/", tmp_path)
    assert len(pages) > 2
    heading = f"Site visit PRN, {day.strftime('%a')} {day.isoformat()}"
    for number, page in enumerate(pages, start=1):
        assert heading in page and f"Page {number} of {len(pages)}" in page
        assert "lethal charge" in page  # the caution runs on every page
        assert "Move the whole visit" not in page  # the planner's controls stay on the screen, off the paper
    with_orders = [page for page in pages if "PRN-0" in page]
    assert len(with_orders) > 1
    for page in with_orders:
        assert "Motor" in page and "Why" in page, f"a page of orders has no table heading:\n{page[:400]}"
    for n in range(60):
        on = [i for i, page in enumerate(pages) if f"PRN-{n:03d}" in page]
        ends = [i for i, page in enumerate(pages) if f"end of order {n:03d}" in page]
        assert len(on) == 1 and on == ends, f"order {n} split over pages {on} and {ends}"


def test_a_printed_visit_sheet_is_dense_enough_to_hand_over(phone, tmp_path):
    """29 orders took 7 A4 pages: the narrow Work and Part columns wrapped "Replace / start / capacitor" one
    word a line. [trade] a visit's sheet is a few pages a technician carries; our figure: the 30 orders of a
    typical visit (start capacitors, reasons of the plan's length) on at most three A4 pages, rows whole."""
    site = make_site(code="DNS")
    day = timezone.localdate() + dt.timedelta(days=3)
    reason = "due soon: trend reaches the tolerance limit (129.99 µF) between 2027-01 and 2027-11 (likely 2027-03)"
    part = make_part(code="START-143U-330", rated_uf=143.0, rated_voltage_v=330.0)
    for n in range(30):
        motor = make_motor(site=site, route_order=n, asset_tag=f"DNS-{n:04d}", location=f"Condensing unit {n}")
        fitted_capacitor = make_fitted_capacitor(motor=motor, part=part, role="start")
        WorkOrder.objects.create(
            motor=motor, fitted_capacitor=fitted_capacitor, kind="replace_start", due_on=day, reason=reason
        )
    pages = _printed_pages(phone, f"/work-orders/DNS/{day.isoformat()}/", tmp_path)
    print(f"30 orders on {len(pages)} A4 pages")
    assert len(pages) <= 3, f"30 orders on {len(pages)} pages"
    for n in range(30):
        assert sum(f"DNS-{n:04d}" in page for page in pages) == 1
