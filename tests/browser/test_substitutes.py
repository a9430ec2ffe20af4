"""The replacement screen on a phone (390 px): suitable parts first, the override recorded."""

import pytest

from fleet.models import FittedCapacitor, SiteStock
from tests.factories import make_fitted_capacitor, make_part, make_user

from .test_technician import sign_in

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]


def test_replacement_screen_lists_suitable_parts_first_and_records_an_override(phone):
    """[derived] on the example fan (4 uF 450 V film run): a second 4 uF part is suitable, 4.8 uF (outside the
    +/-10 % run band, [trade]) and a 4 uF 400 V part (below the original's rating, [trade]) unsuitable; the
    unsuitable one nearer the design value is still listed after the suitable ones."""
    fitted_capacitor = make_fitted_capacitor()
    suitable = make_part(code="FILM-4U0-B", rated_uf=4.0)
    big = make_part(code="FILM-4U8", rated_uf=4.8)
    make_part(code="FILM-4U0-400V", rated_uf=4.0, rated_voltage_v=400)  # the design value, but a lower rating
    SiteStock.objects.create(site=fitted_capacitor.motor.site, part=suitable, quantity=2)
    sign_in(phone, make_user("technician"))
    phone.goto(f"/fitted-capacitors/{fitted_capacitor.id}/replace/")
    choices = phone.locator("label.part-choice")
    assert choices.first.get_attribute("data-verdict") == "suitable"
    verdicts = [choices.nth(i).get_attribute("data-verdict") for i in range(choices.count())]
    assert verdicts == sorted(verdicts, key=["suitable", "marginal", "unsuitable"].index)
    assert phone.is_visible("text=never a screwdriver")
    assert phone.is_visible("text=2 on site")
    width = phone.evaluate("() => document.documentElement.scrollWidth")
    assert width <= 390, f"the page scrolls sideways ({width} px)"
    phone.check("input[value=failed]")
    phone.check(f"input[name=part][value='{big.id}']")
    phone.click("text=Save replacement")
    phone.wait_for_selector("text=Tick the override and give a reason")
    phone.shot("substitutes-01-override-needed")
    phone.check("#id_substitute_override")
    phone.fill("#id_override_reason", "only part in the van; order the 4 uF")
    phone.click("text=Save replacement")
    phone.wait_for_selector("text=Replacement recorded", timeout=15000)
    successor = FittedCapacitor.objects.get(motor=fitted_capacitor.motor, removed_on__isnull=True)
    assert successor.part == big and successor.substitute_override
    assert successor.override_reason == "only part in the van; order the 4 uF"
    phone.goto(f"/fitted-capacitors/{successor.id}/")
    assert phone.is_visible("text=Fitted against the substitute advice")
    phone.shot("substitutes-02-capacitor-override")


def test_the_stand_in_parts_keep_each_part_code_on_one_line_on_a_phone(phone):
    """At 390 px "RUN-30U-450" broke at its hyphens over two lines, as an asset tag never does."""
    make_fitted_capacitor(part=make_part(code="RUN-30U-450"))
    sign_in(phone, make_user("planner"))
    phone.goto("/parts/stand-in/")
    lines = phone.evaluate(
        """() => [...document.querySelectorAll("main table tbody tr td:first-child")].map((cell) => {
          const range = document.createRange(); range.selectNodeContents(cell);
          return new Set([...range.getClientRects()].map((r) => Math.round(r.top))).size; })"""
    )
    assert lines and max(lines) == 1, lines
