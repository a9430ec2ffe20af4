"""The charts and the print button still work under the Content-Security-Policy."""

import datetime as dt

import pytest
from django.utils import timezone

from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.lifedata import refresh_life_fits
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_site, make_user, quarterly_readings

from .test_technician import sign_in

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]


@pytest.fixture
def part_with_history(transactional_db):
    """Capacitors of one part: some failed after a while, one still in service with a trend."""
    part, site = make_part(), make_site()
    for years in (2, 3, 4, 5, 6):
        fitted = dt.date(2015, 1, 1)
        motor = make_motor(site=site)
        make_fitted_capacitor(
            motor=motor,
            part=part,
            fitted_on=fitted,
            removed_on=fitted + dt.timedelta(days=365 * years),
            removal_reason="failed",
        )
    live = make_fitted_capacitor(part=part, motor=make_motor(site=site))
    quarterly_readings(live, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.02, 4.0, 3.99, 3.97])
    refit_fitted_capacitors([live.id])
    refresh_life_fits()
    return part, live


def test_charts_draw_and_nothing_is_blocked(phone, part_with_history):
    part, live = part_with_history
    blocked = []
    phone.on(
        "console", lambda message: blocked.append(message.text) if "Content Security Policy" in message.text else None
    )
    sign_in(phone, make_user("reliability engineer"))
    phone.goto(f"/fitted-capacitors/{live.id}/")
    phone.wait_for_selector("#trend-chart .main-svg")
    phone.goto(f"/life/?part={part.code}")
    phone.wait_for_selector("#weibull-chart .main-svg")
    phone.wait_for_selector("#cost-chart .main-svg")
    phone.goto(f"/sites/{live.motor.site.code}/labels/")
    phone.evaluate("() => { window.printed = 0; window.print = () => { window.printed += 1; }; }")
    phone.click("button[data-print]")
    assert phone.evaluate("() => window.printed") == 1
    assert blocked == []
