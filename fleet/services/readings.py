"""Writes of field work: a reading, a correction, a capacitor replaced on the spot."""

from __future__ import annotations

import datetime as dt
import hashlib
import logging

import numpy as np
from django.conf import settings
from django.core.exceptions import ValidationError
from django.db import IntegrityError, connection, transaction
from django.urls import reverse
from django.utils import timezone

from fleet.audit import audited_update
from fleet.engineering.capacitor import VERDICT_NAMES, tolerance_verdict
from fleet.engineering.rules import (
    AFTER_REMOVAL,
    check_readings,
    microfarad_text,
    parse_numbers,
    reading_time_text,
    trend_slope_uf_per_hour,
    trend_value_held_to,
)
from fleet.engineering.substitutes import SUITABLE
from fleet.imports.columns import local_days
from fleet.models import (
    Assessment,
    AuditEntry,
    FittedCapacitor,
    Reading,
    SiteStock,
    WorkOrder,
    constraint_errors,
    site_zone,
)
from fleet.services.bulk import storable_ids
from fleet.services.selectors import successor_of
from fleet.services.shown_values import comparable, moved_meanwhile, stored_values
from fleet.services.substitutes import design_part, verdict_of_part
from fleet.services.workorders import close_read_again_orders

log = logging.getLogger(__name__)


def measured_words(reading: Reading, part) -> str:
    """A saved reading's capacitance and its verdict against the part's marking, as measured ("3.95 µF, within
    tolerance"): `capacitor.tolerance_verdict` in the words the assessment's `latest_verdict` uses, for the
    message that says the reading was saved (its refit, and the risk level, come after)."""
    verdict = tolerance_verdict(
        reading.capacitance_uf, part.rated_uf, part.tolerance_minus_pct, part.tolerance_plus_pct
    )
    return f"{microfarad_text(reading.capacitance_uf)} µF, {VERDICT_NAMES[int(verdict.code[0])]}"


class NeedsConfirmation(ValidationError):
    """The reading is far off the capacitor's trend, or a voltage far above the motor's: confirm or re-measure."""


class RefusedWithQuestions(ValidationError):
    """A reading refused at some fields (the rulebook's refusals, a time taken already) whose other values the
    rulebook asks to confirm: the refusals by field, and the questions (`to_confirm`, by field) said with them,
    so every problem of the reading is named at once. Confirming waits until nothing is refused."""

    def __init__(self, errors: dict[str, str], to_confirm: dict[str, str]):
        super().__init__(errors)
        self.to_confirm = to_confirm


def enqueue_refit(fitted_capacitor_ids: list[int]) -> None:
    """Queue refits in chunks (one bulk refit per chunk, not one task per capacitor).

    Capacitors whose refit already waits in the queue are left out (claim_refits
    merges repeated readings of one capacitor). A broker that is down must not
    lose a reading nor hold the request: enqueueing gives up within about a
    second, logs, and the stale sweep picks the capacitors up later.
    """
    from fleet.tasks import QUEUE_ERRORS, QueueUnreachable, claim_refits, refit_capacitors, release_refits

    try:
        fitted_capacitor_ids = claim_refits(fitted_capacitor_ids)
    except QueueUnreachable as error:
        log.warning(
            "refit of %d capacitors not queued (%s); the stale sweep will pick them up",
            len(fitted_capacitor_ids),
            error,
        )
        return
    size = settings.FLEET_REFIT_CHUNK_SIZE
    for start in range(0, len(fitted_capacitor_ids), size):
        chunk = list(fitted_capacitor_ids[start : start + size])
        try:
            refit_capacitors.delay(chunk)
        except QUEUE_ERRORS as error:
            release_refits(chunk)
            log.warning("refit of %d capacitors not queued (%s); the stale sweep will pick them up", len(chunk), error)


def _utc64(moment) -> np.datetime64:
    """An aware datetime as numpy UTC seconds; NaT if it cannot be represented."""
    try:
        return np.datetime64(moment.astimezone(dt.UTC).replace(tzinfo=None), "s")
    except (AttributeError, OverflowError, ValueError):
        return np.datetime64("NaT", "s")


def _sentence(message: str) -> str:
    return message[:1].upper() + message[1:]


def check_reading(fitted_capacitor: FittedCapacitor, values: dict, *, confirmed: bool, supersedes=None) -> dict:
    """Validate and complete one reading's values with the rulebook; raises ValidationError by field.

    Values come as typed or sent (text, numbers or None). In-circuit readings get their
    capacitance from current and voltage; a value far off the trend or a voltage far above
    the motor's raises NeedsConfirmation unless `confirmed`; the database's constraints
    are checked last, so they too come back by field.
    """
    part, motor = fitted_capacitor.part, fitted_capacitor.motor
    now = timezone.now()
    taken_at = values.get("taken_at") or now
    zone = site_zone(motor.site.time_zone)
    assessment = Assessment.objects.filter(fitted_capacitor=fitted_capacitor, is_current=True).first()
    result = check_readings(
        {name: [values.get(name)] for name in Reading.MEASURED_FIELDS},
        method=[values.get("method")],
        condition=[values.get("condition") or Reading.Condition.SOUND],
        notes=[values.get("notes") or ""],
        rated_uf=part.rated_uf,
        frequency_hz=motor.frequency_hz,
        motor_voltage_v=motor.rated_voltage_v,
        full_load_current_a=motor.full_load_current_a,
        fitted_on=np.datetime64(fitted_capacitor.fitted_on, "D"),
        removed_on=np.datetime64(fitted_capacitor.removed_on or "NaT", "D"),
        taken_at=_utc64(taken_at),
        taken_on=local_days([_utc64(taken_at)], [zone.key]),
        time_zone=zone.key,
        now=_utc64(now),
        predicted_uf=trend_value_at(assessment, part.rated_uf, taken_at),
        max_case_temperature_c=part.max_case_temperature_c,
        tolerance_plus_pct=part.tolerance_plus_pct,
        tolerance_minus_pct=part.tolerance_minus_pct,
        confirmed=confirmed,
    )
    errors = {name: _sentence(message) for name, message in result.row(0).items()}
    if result.errors["taken_at"][0].startswith(AFTER_REMOVAL):
        errors["taken_at"] += ". " + _fitted_now(fitted_capacitor)
    if values.get("taken_at") and "taken_at" not in errors:  # a time given (a reading without one is taken now)
        clash = _second_reading_at_one_time(fitted_capacitor, taken_at, str(result.values["method"][0]), supersedes)
        if clash:
            errors["taken_at"] = clash
    # Every problem at once: a time taken already is said with the rulebook's refusals and questions, never
    # alone until it is put right (a value typed in farads was asked only once the time was changed).
    confirm = {name: _sentence(message) for name, message in result.row(0, "confirm").items() if name not in errors}
    if errors and confirm:
        raise RefusedWithQuestions(errors, confirm)
    if errors:
        raise ValidationError(errors)
    if confirm:
        raise NeedsConfirmation(confirm)
    checked = {
        name: (None if np.isnan(result.values[name][0]) else float(result.values[name][0]))
        for name in Reading.MEASURED_FIELDS
    }
    checked.update(
        method=str(result.values["method"][0]),
        condition=str(result.values["condition"][0]),
        notes=str(result.values["notes"][0]),
        taken_at=taken_at,
        # Marked only where a confirmation was asked and given: the engineer looks at these (capacitor page).
        outlier_confirmed=bool(confirmed and result.asked[0]),
    )
    broken = constraint_errors(Reading(fitted_capacitor=fitted_capacitor, **checked))
    if broken:
        raise ValidationError(broken)
    if supersedes is not None and _corrects_nothing(checked, supersedes):
        raise ValidationError(
            {
                "supersedes": f"This correction gives the reading of {_reading_words(supersedes, zone)} again as it "
                "is: change what was wrong in it, or leave that reading as it is."
            }
        )
    return checked


def _corrects_nothing(checked: dict, supersedes: Reading) -> bool:
    """A correction that stores every value of the reading it corrects as it was (a walk saved one: a second
    record of the same reading, its first marked corrected for nothing)."""
    fields = ("taken_at", "method", "condition", "notes", *Reading.MEASURED_FIELDS)
    return all(checked[name] == getattr(supersedes, name) for name in fields)


def _second_reading_at_one_time(fitted_capacitor: FittedCapacitor, taken_at, method: str, supersedes) -> str:
    """A reading of this capacitor by this method at the same second as one in its trend (not corrected, and not
    the one this corrects) is refused at `taken_at`, naming it (this message; "" if none): the same values are
    that reading sent again (the import skips such a row), other values a mistake to correct from it, never a
    second point at one instant."""
    second = taken_at.replace(microsecond=0)
    stored = (
        Reading.objects.filter(
            fitted_capacitor=fitted_capacitor,
            method=method,
            taken_at__gte=second,
            taken_at__lt=second + dt.timedelta(seconds=1),
            superseded_by__isnull=True,
        )
        .exclude(pk=getattr(supersedes, "pk", None))
        .first()
    )
    if stored is None:
        return ""
    zone = site_zone(fitted_capacitor.motor.site.time_zone)
    return (
        f"This capacitor has a reading at this time already, reading {stored.id} of "
        f"{_reading_words(stored, zone)}: nothing saved. If it is wrong, correct it (both are kept, "
        "the trend uses the correction); if it is another measurement, give its own time."
    )


def _fitted_now(fitted_capacitor: FittedCapacitor) -> str:
    """Where a reading refused on a removed capacitor goes: the capacitor fitted now in its position."""
    successor = successor_of(fitted_capacitor)
    if successor is None:
        return "No capacitor is recorded in this position now: see the motor's page."
    address = reverse("reading_new", args=[successor.id])
    return f"Log a later reading on the capacitor fitted now (fitted on {successor.fitted_on}): {address}"


def stored_client_key(user, key: str) -> str:
    """The stored form of a client's one-time key: scoped to the user, fixed length."""
    owner = user.pk if user is not None and user.is_authenticated else 0
    return hashlib.sha256(f"{owner}|{key}".encode()).hexdigest()[:40]


# How many of a user's newest keyed readings of one capacitor its reading form lists (a capacitor is read
# quarterly: years of readings; ours).
SAVED_KEYS_LISTED = 100


def saved_client_keys(fitted_capacitor: FittedCapacitor, user) -> list[str]:
    """The stored one-time keys (`stored_client_key`) of this user's newest readings of this capacitor: the
    reading form drops a draft kept on the phone whose page was saved, though the answer never reached it."""
    if user is None or not user.is_authenticated:
        return []
    keyed = Reading.objects.filter(fitted_capacitor=fitted_capacitor, taken_by=user, client_key__isnull=False)
    return list(keyed.order_by("-id").values_list("client_key", flat=True)[:SAVED_KEYS_LISTED])


def reading_to_correct(fitted_capacitor: FittedCapacitor, reading_id: int | str | None) -> Reading | None:
    """The reading a correction replaces: one of this capacitor's, not corrected already.

    A reading corrected before is refused naming its correction (time and value), so a chain of
    corrections always replaces its newest link and no reading is corrected twice.
    """
    if reading_id is None or reading_id == "":
        return None
    try:
        reading_id = int(reading_id)
    except ValueError:
        raise ValidationError({"supersedes": f"{str(reading_id)[:20]!r} is not a reading number."}) from None
    if not storable_ids([reading_id]):  # no row has such an id (SQLite cannot even look one up)
        raise ValidationError({"supersedes": f"Reading {str(reading_id)[:24]} is not a reading of this capacitor."})
    reading = (
        Reading.objects.filter(fitted_capacitor=fitted_capacitor, pk=reading_id).select_related("superseded_by").first()
    )
    if reading is None:
        raise ValidationError({"supersedes": f"Reading {reading_id} is not a reading of this capacitor."})
    later = getattr(reading, "superseded_by", None)
    if later is not None:
        zone = site_zone(fitted_capacitor.motor.site.time_zone)
        raise ValidationError(
            {
                "supersedes": f"The reading of {_reading_words(reading, zone)} was already corrected by the reading "
                f"of {_reading_words(later, zone)}: correct that one instead."
            }
        )
    return reading


def newest_correction(fitted_capacitor: FittedCapacitor, reading_id) -> Reading | None:
    """The last link of the chain of corrections that starts at this capacitor's reading `reading_id`
    (None where there is no such reading or it was never corrected): the one a correction may replace."""
    if not (isinstance(reading_id, int) or str(reading_id).isdigit()) or not storable_ids([int(reading_id)]):
        return None
    reading = Reading.objects.filter(fitted_capacitor=fitted_capacitor, pk=int(reading_id)).first()
    newest = None
    while reading is not None:
        reading = Reading.objects.filter(supersedes=reading).first()
        newest = reading or newest
    return newest


def _reading_words(reading: Reading, zone) -> str:
    """A reading as a technician knows it, as the readings tables show it: when it was taken at the site and its
    value ("2026-11-02 09:15 (143.00 µF)", "2026-11-02 09:15:40 (143.00 µF)")."""
    taken = reading_time_text(timezone.localtime(reading.taken_at, zone))
    return f"{taken} ({microfarad_text(reading.capacitance_uf)} µF)"


def trend_value_at(assessment, rated_uf: float, taken_at: dt.datetime) -> np.ndarray:
    """The trend value a reading taken at `taken_at` is held to (`rules.trend_value_held_to`) from its capacitor's
    current assessment (None: nan, no trend to be far from): the form's check on saving and its live hint."""
    if assessment is None:
        return np.array([np.nan])
    return trend_value_held_to(
        assessment.capacitance_now_uf,
        _utc64(assessment.fitted_through),
        _utc64(taken_at),
        trend_slope_uf_per_hour(assessment.slope_pct_per_1000h, assessment.stress_rate, rated_uf),
    )


def record_reading(
    *,
    fitted_capacitor: FittedCapacitor,
    values: dict,
    user=None,
    supersedes_id: int | str | None = None,
    confirmed: bool = False,
    source: str = Reading.Source.FORM,
    client_key: str = "",
    shown_values: dict | None = None,
    removal_seen: str = "",
) -> Reading:
    """Save one reading (append-only) and queue its capacitor's refit on commit.

    `shown_values` (the reading form's: the capacitor as the form was drawn, `capacitor_as_shown`) refuses a new
    reading typed on a form drawn while the capacitor was in service and saved after its replacement
    (`ReplacedMeanwhile`), unless `removal_seen` sends its removal date as stored now: the technician chose the
    removed capacitor, having been told. A correction goes with the reading it corrects and is not held to it.

    `client_key` (the form's one-time key, or an API client's idempotency key) makes a
    repeated submission save nothing: the reading saved the first time comes back with
    `replayed = True`. `supersedes_id` makes the reading a correction of an earlier one of the
    same capacitor (see `reading_to_correct`), taken when that one was unless given: both are
    kept, the fits use the correction.
    """
    stored_key = stored_client_key(user, client_key) if client_key else None
    if stored_key:
        earlier = _earlier_submission(fitted_capacitor, stored_key, values)
        if earlier is not None:
            return earlier
    earlier = _correction_sent_before(fitted_capacitor, supersedes_id, values, user)
    if earlier is not None:
        return earlier
    supersedes = reading_to_correct(fitted_capacitor, supersedes_id)
    if supersedes is None:  # before the values are judged: against which capacitor's part is what is asked here
        _refuse_if_replaced_since_shown(fitted_capacitor, fitted_capacitor.removed_on, shown_values, removal_seen)
    if supersedes is not None and not values.get("taken_at"):
        values = {**values, "taken_at": supersedes.taken_at}
    try:
        checked = check_reading(fitted_capacitor, values, confirmed=confirmed, supersedes=supersedes)
    except ValidationError:
        # The same submission saved meanwhile by a double tap (its time now taken) is "sent twice", not a clash.
        earlier = _earlier_submission(fitted_capacitor, stored_key, values) if stored_key else None
        if earlier is not None:
            return earlier
        raise
    try:
        with transaction.atomic():
            # Readings of one capacitor are saved one at a time (its row locked on PostgreSQL), the time checked
            # again inside: a bad-input hunt saved seven identical readings sent at once, each checked before
            # any was saved. An import's write goes first or after, never between (`hold_reading_saves`).
            hold_reading_saves(bulk=False)
            locked = FittedCapacitor.objects.select_for_update().filter(pk=fitted_capacitor.pk)
            (removed_on,) = locked.values_list("removed_on", flat=True)
            if supersedes is None:  # replaced between the check above and this lock (`replace_capacitor` locks it)
                _refuse_if_replaced_since_shown(fitted_capacitor, removed_on, shown_values, removal_seen)
            if values.get("taken_at"):
                clash = _second_reading_at_one_time(
                    fitted_capacitor, checked["taken_at"], checked["method"], supersedes
                )
                if clash:
                    raise _TakenMeanwhile({"taken_at": clash})
            reading = Reading.objects.create(
                fitted_capacitor=fitted_capacitor,
                taken_by=user if user is not None and user.is_authenticated else None,
                supersedes=supersedes,
                source=source,
                client_key=stored_key,
                **checked,
            )
            # The read-again orders the reading answers (closed): the form's message names them.
            reading.closed_read_again = close_read_again_orders(fitted_capacitor_ids=[fitted_capacitor.id], user=user)
            transaction.on_commit(lambda: enqueue_refit([fitted_capacitor.id]))
    except (IntegrityError, _TakenMeanwhile) as error:
        # Saved meanwhile: this very submission (a double tap, a resent correction) is its replay.
        earlier = _earlier_submission(fitted_capacitor, stored_key, values) if stored_key else None
        earlier = earlier or _correction_sent_before(fitted_capacitor, supersedes_id, values, user)
        if earlier is not None:
            return earlier
        reading_to_correct(fitted_capacitor, supersedes_id)  # corrected meanwhile by someone else: says so by field
        if isinstance(error, _TakenMeanwhile):
            raise ValidationError(error.message_dict) from None
        raise
    reading.replayed = False
    return reading


# The capacitor's fields a reading form sends back as it showed them (`shown_values.SHOWN_VALUES`).
CAPACITOR_SHOWN = ["removed_on"]


def capacitor_as_shown(fitted_capacitor: FittedCapacitor) -> dict:
    """The capacitor as a reading form is drawn for it (`shown_values.stored_values`): in service or removed."""
    return stored_values(fitted_capacitor, CAPACITOR_SHOWN)


class ReplacedMeanwhile(ValidationError):
    """A new reading typed on a form drawn while its capacitor was in service, the capacitor replaced before the
    save: which capacitor was measured is the technician's to say (`removed_on`, and the one fitted now,
    `successor`, None where none is recorded)."""

    def __init__(self, fitted_capacitor: FittedCapacitor, removed_on: dt.date, successor: FittedCapacitor | None):
        super().__init__(replaced_meanwhile_words(fitted_capacitor, removed_on, successor))
        self.removed_on, self.successor = removed_on, successor


def _refuse_if_replaced_since_shown(fitted_capacitor, removed_on, shown_values: dict | None, removal_seen: str):
    """`ReplacedMeanwhile` where the form showed the capacitor in service and it is removed now, unless this save
    sends its removal date as stored (`shown_values.moved_meanwhile`). No form's values (the API, an import, a
    page that sent none that can be read): nothing to hold the save to, as before."""
    if not shown_values or shown_values.get("removed_on") is not None or removed_on is None:
        return
    now = {"removed_on": comparable(removed_on)}
    if moved_meanwhile(shown_values, now, {"removed_on": removal_seen} if removal_seen else {}):
        fitted_capacitor.removed_on = removed_on  # as stored now: the page that says so draws it removed
        raise ReplacedMeanwhile(fitted_capacitor, removed_on, successor_of(fitted_capacitor))


def replaced_meanwhile_words(fitted_capacitor: FittedCapacitor, removed_on: dt.date, successor) -> str:
    """ "This start capacitor (P-140) was replaced while this form was open: removed on 2026-12-05 (recorded
    by alice at 2026-12-05 10:41); the P-150 fitted on 2026-12-05 is in its place now. Nothing was saved: ..." """
    role = fitted_capacitor.get_role_display().lower()
    recorded, entry = "", None
    if successor is not None:  # when and by whom the replacement was recorded: its new capacitor's creation
        entry = (
            AuditEntry.objects.filter(
                model=FittedCapacitor._meta.label_lower, object_id=str(successor.pk), action=AuditEntry.Action.CREATE
            )
            .order_by("at")
            .first()
        )
    if entry is not None:
        zone = site_zone(fitted_capacitor.motor.site.time_zone)
        at = timezone.localtime(entry.at, zone)
        recorded = f" (recorded by {entry.username or 'the system'} at {at:%Y-%m-%d %H:%M})"
    if successor is None:
        now = "no capacitor is recorded in its place"
    else:
        serial = f", serial {successor.serial}" if successor.serial else ""
        now = f"the {successor.part.code} fitted on {successor.fitted_on}{serial} is in its place now"
    return (
        f"This {role} capacitor ({fitted_capacitor.part.code}) was replaced while this form was open: removed on "
        f"{removed_on}{recorded}; {now}. Nothing was saved: say which capacitor you measured."
    )


READING_SAVES_LOCK = "fleet readings saved"


def hold_reading_saves(*, bulk: bool) -> None:
    """Inside a transaction on PostgreSQL: an import's write of readings (`bulk=True`) waits for the single saves
    under way (the form's, the API's) and holds off new ones until it commits; single saves run side by side. Each
    checks again under it what the other may have stored (`record_reading`'s same-time check, the import's
    `import_checks.readings_stored_meanwhile`), so the second of the two finds the first: a reading typed while its
    import runs is stored once. Taken before any row lock, so neither waits on the other in a cycle (an import
    locking its capacitors' rows before its trigger writes their motors did, against a refit that locks the motors
    first). SQLite needs none: a write transaction there is one at a time from its start (BEGIN IMMEDIATE).

    A single save waits FLEET_WRITE_WAIT_MS at most, as a write on SQLite waits for its lock: past that it fails as
    "busy" (`faults.database_busy`), its page says so with every value kept, instead of the web server ending a
    request that waited on a large import's write (a 250,000-row file's write took 21 s here, measured 2026-12-05
    on a busy 2-core machine)."""
    if connection.vendor != "postgresql":
        return
    with connection.cursor() as cursor:
        if bulk:
            cursor.execute("SELECT pg_advisory_xact_lock(hashtext(%s))", [READING_SAVES_LOCK])
            return
        cursor.execute("SELECT current_setting('lock_timeout')")
        (before,) = cursor.fetchone()
        cursor.execute("SELECT set_config('lock_timeout', %s, true)", [f"{settings.FLEET_WRITE_WAIT_MS}ms"])
        cursor.execute("SELECT pg_advisory_xact_lock_shared(hashtext(%s))", [READING_SAVES_LOCK])
        cursor.execute("SELECT set_config('lock_timeout', %s, true)", [before])  # the row locks after wait as before


class _TakenMeanwhile(ValidationError):
    """Another reading of the capacitor at this time was saved between the check and the save."""


class KeyUsedBefore(ValidationError):
    """A client key sent again with other values, or for another capacitor: at `client_key` in the reading
    form's words; `earlier` is the reading saved under the key, for the API's own words."""

    def __init__(self, earlier: Reading, form_words: str):
        super().__init__({"client_key": form_words})
        self.earlier = earlier


def _earlier_submission(fitted_capacitor: FittedCapacitor, stored_key: str, values: dict) -> Reading | None:
    """The reading saved under this key before, if the values are the same; a key sent again
    with other values is refused by name, so nothing typed is silently dropped."""
    earlier = Reading.objects.filter(client_key=stored_key).first()
    if earlier is None:
        return None
    if earlier.fitted_capacitor_id != fitted_capacitor.id:
        raise KeyUsedBefore(earlier, "This key was already used for a reading of another capacitor.")
    if not _same_values(earlier, values):
        raise KeyUsedBefore(
            earlier,
            f"This page was already saved as a reading ({earlier.capacitance_uf:g} µF, "
            f"{earlier.taken_at:%Y-%m-%d %H:%M} UTC) and these values differ. Save again to log them as "
            "another reading.",
        )
    earlier.replayed = True
    return earlier


def _correction_sent_before(fitted_capacitor: FittedCapacitor, supersedes_id, values: dict, user) -> Reading | None:
    """The correction this user stored already for that reading, if it is the one sent now (the same
    correction sent twice, with or without a key): it comes back with `replayed = True`, as a reading
    can be corrected once. Any other correction is left to `reading_to_correct` to refuse by name."""
    if supersedes_id is None or supersedes_id == "":
        return None
    try:
        corrected_id = int(supersedes_id)
    except (TypeError, ValueError):
        return None
    if not storable_ids([corrected_id]):
        return None
    earlier = Reading.objects.filter(fitted_capacitor=fitted_capacitor, supersedes_id=corrected_id).first()
    owner = user.pk if user is not None and user.is_authenticated else None
    same = (
        earlier is not None
        and earlier.taken_by_id == owner
        and (values.get("method") or earlier.method) == earlier.method
        and (values.get("condition") or earlier.condition) == earlier.condition
        and (values.get("taken_at") or earlier.taken_at) == earlier.taken_at
        and _same_values(earlier, values)
    )
    if not same:
        return None
    earlier.replayed = True
    return earlier


def _same_values(reading: Reading, values: dict) -> bool:
    """The values sent (as typed) are those of the stored reading (in-circuit: its current and voltage), its
    method, its condition and, where one is given, its time; a value that is no number is never the same (sent
    again with a key, it would otherwise be taken for the reading saved and its fault never named)."""
    names = [n for n in Reading.MEASURED_FIELDS if n != "capacitance_uf" or reading.method == Reading.Method.METER]
    sent, problems = parse_numbers([values.get(name) for name in names])
    stored = np.array([np.nan if getattr(reading, n) is None else getattr(reading, n) for n in names], float)
    same_numbers = bool(np.all((sent == stored) | (np.isnan(sent) & np.isnan(stored)))) and not any(problems)
    taken_at = values.get("taken_at")
    return (
        same_numbers
        and (values.get("notes") or "").strip() == reading.notes
        and (values.get("method") or reading.method) == reading.method
        and (values.get("condition") or Reading.Condition.SOUND) == reading.condition
        and (not taken_at or _utc64(taken_at) == _utc64(reading.taken_at))
    )


def replace_capacitor(
    *,
    fitted_capacitor: FittedCapacitor,
    part,
    removed_on: dt.date,
    reason: str,
    user=None,
    serial: str = "",
    notes: str = "",
    substitute_override: bool = False,
    override_reason: str = "",
) -> FittedCapacitor:
    """Remove a fitted capacitor and fit its successor; close its open work orders (their ids in
    `successor.closed_orders`); take the part from the site's stock (never below zero: `successor.stock_left`
    is None when none was listed).

    The old capacitor's life ends at `removed_on` as a failure or a suspension
    (by `reason`); the new one's history starts the same day. A part other than the one coming out
    that the substitute advice does not call suitable needs `substitute_override` and a reason. The
    design is the position's (`design_part`): refitting a part that itself went on against the advice
    is judged again, not waved through as "the same part". The same replacement sent again
    (a double tap, two copies at once) returns the successor fitted the first time, `replayed`.
    """
    override_reason = (override_reason or "").strip()
    problems = replacement_problems(
        fitted_capacitor,
        part=part,
        removed_on=removed_on,
        reason=reason,
        serial=serial,
        substitute_override=substitute_override,
        override_reason=override_reason,
    )
    if problems:
        raise ValidationError(problems)
    sent = {"part": part, "serial": serial, "notes": notes, "removed_on": removed_on, "reason": reason}
    if fitted_capacitor.removed_on is not None:
        return _replacement_sent_before(fitted_capacitor, **sent)
    with transaction.atomic():
        locked = FittedCapacitor.objects.select_for_update().get(pk=fitted_capacitor.pk)
        if locked.removed_on is not None:  # replaced meanwhile (the same form sent twice at once?)
            return _replacement_sent_before(locked, **sent)
        locked.removed_on, locked.removal_reason = removed_on, reason
        locked.clean()
        locked.save(update_fields=["removed_on", "removal_reason"])
        successor = FittedCapacitor.objects.create(
            motor=locked.motor,
            role=locked.role,
            part=part,
            serial=serial,
            fitted_on=removed_on,
            notes=notes,
            substitute_override=substitute_override,
            override_reason=override_reason if substitute_override else "",
        )
        successor.stock_left, successor.from_stock = _take_from_stock(site_id=locked.motor.site_id, part=part)
        successor.replayed = False
        open_orders = WorkOrder.objects.filter(fitted_capacitor=locked, state__in=WorkOrder.OPEN_STATES)
        successor.closed_orders = sorted(open_orders.values_list("id", flat=True))  # for the message to name
        audited_update(
            open_orders,
            state=WorkOrder.State.DONE,
            closed_at=timezone.now(),
            closed_by=user if user and user.is_authenticated else None,
        )
    fitted_capacitor.refresh_from_db()
    return successor


def replacement_problems(
    fitted_capacitor: FittedCapacitor,
    *,
    part=None,
    removed_on: dt.date | None = None,
    reason: str | None = None,
    serial: str = "",
    substitute_override: bool = False,
    override_reason: str = "",
) -> dict[str, str]:
    """Every problem of a replacement as sent, by field, all at once (a form with a problem of its own gets the
    others in the same answer); a value None was not given or not read, and is the form's to name. The dates
    and the reason are judged on a capacitor still in service (one already out is a replay, or refused by name)."""
    problems = {}
    reason_typed = bool((override_reason or "").strip())
    if part is not None and part.pk != design_part(fitted_capacitor).pk:
        advice = verdict_of_part(fitted_capacitor, part)
        if advice["verdict"] != SUITABLE and not substitute_override:
            problems["substitute_override"] = (
                f"{part.code} is {advice['verdict']} here ("
                + "; ".join(advice["concerns"])
                + "). Tick the override and give a reason to fit it anyway."
            )
        needs_override, what = advice["verdict"] != SUITABLE, "suitable"
    else:
        needs_override, what = False, "the design part"
    needs_none = f"{part.code} is {what} here: it needs no override" if part is not None and not needs_override else ""
    if substitute_override and needs_none:
        # Ticked for a part that needs none, it would be kept as a stop-gap "fitted against the advice": listed to
        # swap for the design part (itself, perhaps) and counted on the plan. Refused, every value kept.
        problems["substitute_override"] = (
            f"{needs_none}. Untick the override and clear its reason (anything worth keeping goes in the notes)."
        )
    elif substitute_override and not reason_typed:
        problems["override_reason"] = "Say why this part is fitted against the advice."
    elif reason_typed and not substitute_override:  # kept only with the tick: never dropped unsaid
        problems["override_reason"] = (
            f"A reason is kept only with the override ticked, and {needs_none}: clear this box"
            if needs_none
            else "A reason is kept only with the override ticked: tick it to fit this part against the advice, "
            "or clear this box"
        ) + " (anything worth keeping goes in the notes)."
    serial_max_chars = FittedCapacitor._meta.get_field("serial").max_length
    if len(serial or "") > serial_max_chars:
        problems["serial"] = f"{len(serial)} characters: a serial or date code takes at most {serial_max_chars}."
    if fitted_capacitor.removed_on is not None:
        return problems
    if removed_on is not None and removed_on < fitted_capacitor.fitted_on:
        problems["removed_on"] = f"Removal date is before the fitting date {fitted_capacitor.fitted_on}."
    elif removed_on is not None and removed_on > timezone.localdate(
        timezone=site_zone(fitted_capacitor.motor.site.time_zone)
    ):
        problems["removed_on"] = "The removal date is in the future."
    if reason is not None and reason not in FittedCapacitor.RemovalReason.values:
        problems["removal_reason"] = "Choose why the capacitor was removed."
    return problems


def _replacement_sent_before(
    removed: FittedCapacitor, *, part, serial: str, notes: str, removed_on: dt.date, reason: str
) -> FittedCapacitor:
    """The successor fitted when this capacitor came out, if this replacement is the one recorded
    (the same page sent twice): returned with `replayed = True`. Another replacement of a capacitor
    already out is refused by name, so nothing typed is silently dropped."""
    successor = (
        FittedCapacitor.objects.filter(motor_id=removed.motor_id, role=removed.role, fitted_on=removed.removed_on)
        .exclude(pk=removed.pk)
        .order_by("pk")
        .first()
    )
    same = (
        successor is not None
        and (removed.removed_on, removed.removal_reason) == (removed_on, reason)
        and (successor.part_id, successor.serial, successor.notes) == (part.pk, serial, notes)
    )
    if not same:
        raise ValidationError({"fitted_capacitor": f"This capacitor was already removed on {removed.removed_on}."})
    successor.replayed, successor.stock_left, successor.from_stock = True, None, False
    return successor


def _take_from_stock(*, site_id: int, part) -> tuple[int, bool]:
    """One of `part` out of the site's stock, never below zero: (quantity left, whether one was in stock)."""
    row = SiteStock.objects.select_for_update().filter(site_id=site_id, part=part).first()
    if row is None or row.quantity == 0:
        return 0, False
    row.quantity -= 1
    row.save(update_fields=["quantity"])
    return row.quantity, True
