"""Factories for tests: plain functions that build register rows, readings and users (the fixtures
are in conftest.py). The example fan's nameplate and circuit come from here too."""

from __future__ import annotations

import datetime as dt
import itertools
import re

from django.contrib.auth.models import Group, User
from django.utils import timezone

from fleet.models import Assessment, CapacitorPart, FittedCapacitor, Motor, Reading, Site
from fleet.roles import ADMINISTRATOR
from fleet.services.demo import EXAMPLE_FAN_CIRCUIT, EXAMPLE_FAN_NAMEPLATE

_serial = itertools.count(1)


def make_site(code=None, **kwargs) -> Site:
    code = code or f"S{next(_serial):03d}"
    return Site.objects.create(code=code, name=kwargs.pop("name", f"Site {code}"), **kwargs)


def make_part(**kwargs) -> CapacitorPart:
    values = dict(
        code=f"P-{next(_serial)}",
        rated_uf=4.0,
        tolerance_minus_pct=5,
        tolerance_plus_pct=5,
        rated_voltage_v=450,
        frequency_hz=50,
        dielectric="film",
        class_of_operation="B",
        safety_class="S2",
        unit_cost=6,
    )
    values.update(kwargs)
    return CapacitorPart.objects.create(**values)


def motor_values(site=None, with_circuit=True, **kwargs) -> dict:
    """A motor's fields: the example fan at `site` (a new site if none), with its circuit unless not."""
    values = dict(
        asset_tag=f"M-{next(_serial):05d}",
        site=site or make_site(),
        location="Cold room 1",
        **EXAMPLE_FAN_NAMEPLATE,
    )
    if with_circuit:
        values.update(EXAMPLE_FAN_CIRCUIT)
    values.update(kwargs)
    return values


def make_motor(site=None, with_circuit=True, **kwargs) -> Motor:
    return Motor.objects.create(**motor_values(site, with_circuit, **kwargs))


def make_fitted_capacitor(
    motor=None, part=None, role="run", fitted_on=dt.date(2022, 1, 1), **kwargs
) -> FittedCapacitor:
    return FittedCapacitor.objects.create(
        motor=motor or make_motor(), part=part or make_part(), role=role, fitted_on=fitted_on, **kwargs
    )


def make_reading(fitted_capacitor, taken_at=None, capacitance_uf=4.0, **kwargs) -> Reading:
    taken_at = taken_at or timezone.now() - dt.timedelta(days=1)
    values = dict(method="meter", case_temperature_c=25.0, source="demo")
    values.update(kwargs)
    return Reading.objects.create(
        fitted_capacitor=fitted_capacitor, taken_at=taken_at, capacitance_uf=capacitance_uf, **values
    )


def quarterly_readings(fitted_capacitor, start: dt.datetime, values_uf, **kwargs) -> list[Reading]:
    return [
        make_reading(fitted_capacitor, taken_at=start + dt.timedelta(days=91 * i), capacitance_uf=value, **kwargs)
        for i, value in enumerate(values_uf)
    ]


def straight_line_fleet(parts: int = 2, per_part: int = 6) -> None:
    """Our own noise-free fleet for back-tests: straight-line losses at different rates, 13 quarterly
    readings each ending about now; odd-numbered parts are electrolytic start capacitors."""
    start = timezone.now() - dt.timedelta(days=91 * 12)
    site = make_site()
    for p in range(parts):
        electrolytic = p % 2 == 1
        part = make_part(
            rated_uf=(100.0 if electrolytic else 4.0) + 2 * p,
            dielectric="electrolytic" if electrolytic else "film",
            rated_voltage_v=330 if electrolytic else 450,
            tolerance_minus_pct=5,
        )
        for k in range(per_part):
            fitted_capacitor = make_fitted_capacitor(
                motor=make_motor(site=site, with_circuit=False),
                part=part,
                role="start" if electrolytic else "run",
                fitted_on=start.date() - dt.timedelta(days=30),
            )
            loss_per_quarter = 0.003 + 0.003 * k
            quarterly_readings(
                fitted_capacitor, start, [round(part.rated_uf * (1 - loss_per_quarter * i), 3) for i in range(13)]
            )


PASSWORD = "a-long-test-password"  # every user make_user makes signs in with it


def make_user(role: str, username: str | None = None) -> User:
    user = User.objects.create_user(username=username or f"{role.split()[0]}{next(_serial)}", password=PASSWORD)
    user.groups.add(Group.objects.get(name=role))
    if role == ADMINISTRATOR:
        user.is_staff = True
        user.save()
    return user


def stored_assessment(
    fitted_capacitor,
    risk,
    replace_by,
    created_at=None,
    limit_source="tolerance",
    reason="because",
    capacitance_now_uf=3.9,
):
    """A current assessment as a refit stores it, for pages that only read them: the risk history
    carried from the assessment it replaces as the refit carries it (`_carry_risk_history`)."""
    current = Assessment.objects.filter(fitted_capacitor=fitted_capacitor, is_current=True)
    before = current.values("risk", "risk_was", "risk_changed_at", "limit_source", "limit_was").first()
    when = created_at or timezone.now()
    if before is not None and before["risk"] == risk:
        risk_was, limit_was = before["risk_was"], before["limit_was"]
        risk_changed_at = before["risk_changed_at"] or when
    else:
        risk_was, risk_changed_at = ("" if before is None else before["risk"]), when
        limit_was = "" if before is None else before["limit_source"]
    current.update(is_current=False)
    assessment = Assessment.objects.create(
        fitted_capacitor=fitted_capacitor,
        model_version="test",
        fitted_through=timezone.now(),
        readings_used=4,
        trend_model="linear",
        slope_pct_per_1000h=-0.1,
        slope_sd_pct_per_1000h=0.01,
        capacitance_now_uf=capacitance_now_uf,
        latest_verdict="within tolerance",
        limit_fraction=0.95,
        limit_source=limit_source,
        risk=risk,
        replace_by=replace_by,
        reason=reason,
        risk_was=risk_was,
        limit_was=limit_was,
        risk_changed_at=risk_changed_at,
    )
    if created_at is not None:
        Assessment.objects.filter(id=assessment.id).update(created_at=created_at)
    return assessment


def confirmation_of(response) -> dict:
    """What the reading form's "Value is right: save it" sends on the page `response` drew: the confirmation and
    the digest of the values that page asked about (`asked_about`), which the confirmation counts for."""
    found = re.search(r'name="asked_about" value="([0-9a-f]+)"', response.content.decode())
    assert found, "the page asked nothing to confirm"
    return {"confirmed": "on", "asked_about": found.group(1)}
