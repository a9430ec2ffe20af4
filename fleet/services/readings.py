"""Writes of field work: a reading, a correction, a capacitor replaced on the spot."""

from __future__ import annotations

import datetime as dt
import logging

from django.conf import settings
from django.core.exceptions import ValidationError
from django.db import transaction
from django.utils import timezone

from fleet.audit import audited_update
from fleet.engineering.capacitor import capacitance_from_current, short_circuit_suspected
from fleet.engineering.plausibility import capacitance_unit_slip, current_unit_slip, off_trend
from fleet.models import Assessment, FittedCapacitor, Reading, WorkOrder

log = logging.getLogger(__name__)


SHORT_CIRCUIT_ADVICE = (
    "Current flows with almost no voltage across the capacitor: a short circuit is suspected. "
    "Isolate and lock out, discharge, check the capacitor with a meter, and record a replacement if it is shorted."
)


class NeedsConfirmation(ValidationError):
    """The reading is far off the capacitor's trend: confirm it or re-measure."""


def enqueue_refit(installation_ids: list[int]) -> None:
    """Queue refits in chunks (one bulk refit per chunk, not one task per capacitor).

    Capacitors whose refit already waits in the queue are left out (claim_refits
    merges repeated readings of one capacitor). A broker that is down must not
    lose a reading nor hold the request: enqueueing gives up within about a
    second, logs, and the stale sweep picks the capacitors up later.
    """
    from fleet.tasks import QUEUE_ERRORS, QueueUnreachable, claim_refits, refit_capacitors, release_refits

    try:
        installation_ids = claim_refits(installation_ids)
    except QueueUnreachable as error:
        log.warning(
            "refit of %d capacitors not queued (%s); the stale sweep will pick them up", len(installation_ids), error
        )
        return
    size = settings.FLEET_REFIT_CHUNK_SIZE
    for start in range(0, len(installation_ids), size):
        chunk = list(installation_ids[start : start + size])
        try:
            refit_capacitors.delay(chunk)
        except QUEUE_ERRORS as error:
            release_refits(chunk)
            log.warning("refit of %d capacitors not queued (%s); the stale sweep will pick them up", len(chunk), error)


def check_reading(installation: FittedCapacitor, values: dict, *, confirmed: bool) -> dict:
    """Validate and complete one reading's values; raises ValidationError by field.

    In-circuit readings get their capacitance from current and voltage. Values
    that only fit another unit are refused with the unit named; a value far
    off the trend raises NeedsConfirmation unless `confirmed`.
    """
    values = dict(values)
    part = installation.part
    frequency_hz = installation.motor.frequency_hz
    errors: dict[str, str] = {}
    if values.get("method") == Reading.Method.IN_CIRCUIT:
        current, voltage = values.get("capacitor_current_a"), values.get("capacitor_voltage_v")
        if current is None:
            errors["capacitor_current_a"] = "In-circuit reading: enter the capacitor current in A."
        if voltage is None:
            errors["capacitor_voltage_v"] = "In-circuit reading: enter the voltage across the capacitor in V."
        if current is not None and voltage is not None:
            slip = current_unit_slip(current, voltage, part.rated_uf, frequency_hz)[0]
            if slip:
                errors["capacitor_current_a"] = slip
            elif short_circuit_suspected(current, voltage, installation.motor.rated_voltage_v):
                errors["capacitor_voltage_v"] = SHORT_CIRCUIT_ADVICE
            elif voltage <= 0:
                errors["capacitor_voltage_v"] = "The capacitor voltage must be above zero."
            else:
                values["capacitance_uf"] = round(capacitance_from_current(current, voltage, frequency_hz), 3)
    capacitance = values.get("capacitance_uf")
    if capacitance is None and "capacitor_current_a" not in errors and "capacitor_voltage_v" not in errors:
        errors["capacitance_uf"] = "Enter the capacitance in uF."
    elif capacitance is not None and capacitance <= 0:
        errors["capacitance_uf"] = "Capacitance must be above zero (an open capacitor reads near zero: enter 0.01)."
    elif capacitance is not None:
        slip = capacitance_unit_slip(capacitance, part.rated_uf)[0]
        if slip:
            errors["capacitance_uf"] = slip
    taken_at = values.get("taken_at") or timezone.now()
    if taken_at > timezone.now() + dt.timedelta(minutes=10):
        errors["taken_at"] = "The reading time is in the future."
    if installation.removed_on is not None:
        errors["installation"] = (
            f"This capacitor was removed on {installation.removed_on}; log the reading on the one fitted now."
        )
    if errors:
        raise ValidationError(errors)
    values["taken_at"] = taken_at
    current = Assessment.objects.filter(installation=installation, is_current=True).first()
    if current and not confirmed and off_trend(capacitance, current.capacitance_now_uf, part.rated_uf):
        raise NeedsConfirmation(
            {
                "capacitance_uf": (
                    f"{capacitance:g} uF is far from this capacitor's trend ({current.capacitance_now_uf:.2f} uF). "
                    "Re-measure, or confirm the value if it is right."
                )
            }
        )
    return values


def record_reading(
    *,
    installation: FittedCapacitor,
    values: dict,
    user=None,
    supersedes: Reading | None = None,
    confirmed: bool = False,
    source: str = Reading.Source.FORM,
) -> Reading:
    """Save one reading (append-only) and queue its capacitor's refit on commit."""
    values = check_reading(installation, values, confirmed=confirmed)
    if supersedes is not None and supersedes.installation_id != installation.id:
        raise ValidationError({"supersedes": "A correction must be for the same capacitor."})
    with transaction.atomic():
        reading = Reading.objects.create(
            installation=installation,
            taken_by=user if user is not None and user.is_authenticated else None,
            supersedes=supersedes,
            outlier_confirmed=confirmed,
            source=source,
            **{k: v for k, v in values.items() if k in {f.name for f in Reading._meta.fields}},
        )
        transaction.on_commit(lambda: enqueue_refit([installation.id]))
    return reading


def replace_capacitor(
    *,
    installation: FittedCapacitor,
    part,
    removed_on: dt.date,
    reason: str,
    user=None,
    serial: str = "",
    notes: str = "",
) -> FittedCapacitor:
    """Remove a fitted capacitor and fit its successor; close its open work orders.

    The old capacitor's life ends at `removed_on` as a failure or a suspension
    (by `reason`); the new one's history starts the same day.
    """
    if installation.removed_on is not None:
        raise ValidationError({"installation": f"This capacitor was already removed on {installation.removed_on}."})
    if removed_on < installation.fitted_on:
        raise ValidationError({"removed_on": f"Removal date is before the fitting date {installation.fitted_on}."})
    if removed_on > timezone.localdate():
        raise ValidationError({"removed_on": "The removal date is in the future."})
    if reason not in FittedCapacitor.RemovalReason.values:
        raise ValidationError({"removal_reason": "Choose why the capacitor was removed."})
    with transaction.atomic():
        locked = FittedCapacitor.objects.select_for_update().get(pk=installation.pk)
        if locked.removed_on is not None:
            raise ValidationError({"installation": f"This capacitor was already removed on {locked.removed_on}."})
        locked.removed_on, locked.removal_reason = removed_on, reason
        locked.save(update_fields=["removed_on", "removal_reason"])
        successor = FittedCapacitor.objects.create(
            motor=locked.motor, role=locked.role, part=part, serial=serial, fitted_on=removed_on, notes=notes
        )
        audited_update(
            WorkOrder.objects.filter(installation=locked, state__in=[WorkOrder.State.PLANNED, WorkOrder.State.ISSUED]),
            state=WorkOrder.State.DONE,
            closed_at=timezone.now(),
            closed_by=user if user and user.is_authenticated else None,
        )
    installation.refresh_from_db()
    return successor
