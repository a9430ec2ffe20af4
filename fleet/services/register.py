"""Writes to the register that are not readings: the planner's walking order."""

from __future__ import annotations

from django.core.exceptions import ValidationError
from django.db import transaction

from fleet.audit import audited_bulk_update
from fleet.models import Motor, Site


def set_route_order(*, site: Site, positions: dict[int, str]) -> int:
    """Set each motor's place on the site's reading route from form text.

    Every position must be a whole number from 0 to 99999; one bad entry refuses
    them all, naming the motor. Returns the number of motors updated.
    """
    motors = {m.id: m for m in Motor.objects.filter(site=site, id__in=list(positions))}
    errors = {}
    for motor_id, text in positions.items():
        motor = motors.get(motor_id)
        if motor is None:
            errors[f"motor {motor_id}"] = "is not on this site's route."
            continue
        try:
            value = int(str(text).strip())
        except ValueError:
            value = -1
        if not 0 <= value <= 99999:
            errors[motor.asset_tag] = f"{text!r} is not a whole number from 0 to 99999."
        else:
            motor.route_order = value
    if errors:
        raise ValidationError(errors)
    with transaction.atomic():
        audited_bulk_update(list(motors.values()), ["route_order"])
    return len(motors)
