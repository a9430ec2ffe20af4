"""Writes to the register that are not readings: the planner's walking order and site stock."""

from __future__ import annotations

from dataclasses import dataclass

from django.core.exceptions import ValidationError
from django.db import transaction
from django.db.models import Count, F, Window
from django.db.models.functions import RowNumber

from fleet.audit import audited_bulk_create, audited_bulk_update
from fleet.engineering.rules import ROUTE_ORDER_MAX, whole_number
from fleet.imports.columns import shown as quoted_start
from fleet.models import CapacitorPart, Motor, Site, SiteStock

from .bulk import storable_ids
from .shown_values import moved_rows

# How many places a saved walking order names as shared, and how many other motors at each.
SHARED_PLACES_NAMED = 5
SHARED_WITH_NAMED = 5


@dataclass(frozen=True)
class RouteOrderSaved:
    """What a walking-order save did: `updated` motors written; `shared`, each place this save moved a
    motor to that another motor in service at the site holds too (place, the motors moved there, the others
    there, how many others are not named), at most SHARED_PLACES_NAMED of `shared_places`."""

    updated: int
    shared: tuple[tuple[int, tuple[str, ...], tuple[str, ...], int], ...] = ()
    shared_places: int = 0

    def words(self) -> str:
        """The shared places in words ("GLH-0003 shares place 1 with GLH-0001."), or "" for none."""
        sentences = []
        for place, moved, others, unnamed in self.shared:
            verb = "shares" if len(moved) == 1 else "share"
            subject = _and(_named(moved[:SHARED_WITH_NAMED], len(moved) - SHARED_WITH_NAMED))
            named = _named(others, unnamed)
            sentences.append(f"{subject} {verb} place {place}" + (f" with {_and(named)}" if named else ""))
        if not sentences:
            return ""
        more = self.shared_places - len(self.shared)
        tail = f"; {more} more place{'s are' if more > 1 else ' is'} shared" if more else ""
        return "; ".join(sentences) + tail + " (motors at one place are walked in asset-tag order)."


def _named(tags: tuple[str, ...], unnamed: int) -> list[str]:
    """Tags as named, with the count of those left unnamed ("2 others") after them."""
    return [*tags, f"{unnamed} other{'s' if unnamed > 1 else ''}"] if unnamed > 0 else list(tags)


def _and(words: list[str] | tuple[str, ...]) -> str:
    return words[0] if len(words) == 1 else f"{', '.join(words[:-1])} and {words[-1]}"


def set_route_order(*, site: Site, positions: dict[int, str], shown: dict[int, str] | None = None) -> RouteOrderSaved:
    """Set each motor's place on the site's reading route from form text.

    Every position must be a whole number from 0 to 99999; one bad entry refuses
    them all, naming the motor. Two motors may hold one place (walked in asset-tag order, as the
    route lists them): the places this save moved a motor to that another motor in service holds
    come back in `shared`, for the page to say.

    `shown` is each motor's place as the form showed it (as the stock page's quantities): a motor left as shown
    is not written, so another planner's save meanwhile is not undone (a bad-input hunt found it silently
    overwritten); a motor typed over while its place moved is refused by name, nothing saved.
    """
    motors = {m.id: m for m in Motor.objects.filter(site=site, id__in=storable_ids(positions))}
    before = {motor_id: motor.route_order for motor_id, motor in motors.items()}
    errors = {}
    for motor_id, text in positions.items():
        motor = motors.get(motor_id)
        if motor is None:
            errors[f"motor {motor_id}"] = "is not on this site's route."
            continue
        value = whole_number(text)
        if value is None:
            value = -1
        if not str(text).strip():
            errors[motor.asset_tag] = (
                f"is empty: type its place on the round, a whole number from 0 to {ROUTE_ORDER_MAX}."
            )
        elif not 0 <= value <= ROUTE_ORDER_MAX:
            errors[motor.asset_tag] = f"{quoted_start(text)!r} is not a whole number from 0 to {ROUTE_ORDER_MAX}."
        else:
            motor.route_order = value
    if errors:
        raise ValidationError(errors)
    as_shown = {motor_id: whole_number(text) for motor_id, text in (shown or {}).items() if motor_id in motors}
    if shown is not None:
        motors = {i: m for i, m in motors.items() if as_shown.get(i) != m.route_order}
    with transaction.atomic():
        # In id order, as a refit share-locks them (`assessments._capacitor_facts_locked`).
        locked = Motor.objects.select_for_update().filter(id__in=list(motors)).order_by("id")
        now = dict(locked.values_list("id", "route_order"))
        typed = {i: motor.route_order for i, motor in motors.items() if i in now}
        moved = moved_rows(as_shown, now, typed)
        if moved:
            raise ValidationError(
                {
                    motors[i].asset_tag: (
                        f"moved from place {as_shown[i]} to {now[i]} while this page was open (another save of the "
                        "walking order); check it and save again."
                    )
                    for i in moved
                }
            )
        motors = {i: motor for i, motor in motors.items() if now.get(i) != motor.route_order}  # typed as it is now
        audited_bulk_update(list(motors.values()), ["route_order"])
        moved = [motor for motor_id, motor in motors.items() if motor.route_order != before[motor_id]]
        shared = _shared_places(site, moved)
    return RouteOrderSaved(updated=len(motors), shared=tuple(shared[:SHARED_PLACES_NAMED]), shared_places=len(shared))


def _shared_places(site: Site, moved: list[Motor]) -> list:
    """Each place a motor was moved to that more than one motor in service at the site holds, in place order:
    (place, tags moved there, other tags there up to SHARED_WITH_NAMED, how many others are not named).
    Two queries, bounded: the count at each place, then at most SHARED_WITH_NAMED others at each named place."""
    in_service = Motor.objects.filter(site=site, status=Motor.Status.IN_SERVICE)
    moved_by_place: dict[int, list[str]] = {}
    for motor in sorted(moved, key=lambda m: m.asset_tag):
        if motor.status == Motor.Status.IN_SERVICE:
            moved_by_place.setdefault(motor.route_order, []).append(motor.asset_tag)
    held = dict(
        in_service.filter(route_order__in=list(moved_by_place))
        .values("route_order")
        .annotate(n=Count("id"))
        .filter(n__gt=1)
        .values_list("route_order", "n")
    )
    named_places = sorted(held)[:SHARED_PLACES_NAMED]
    others = (
        in_service.filter(route_order__in=named_places)
        .exclude(id__in=[motor.id for motor in moved])
        .annotate(rank=Window(RowNumber(), partition_by=F("route_order"), order_by=F("asset_tag").asc()))
        .filter(rank__lte=SHARED_WITH_NAMED)
        .order_by("route_order", "asset_tag")
        .values_list("route_order", "asset_tag")
    )
    others_by_place: dict[int, list[str]] = {}
    for place, tag in others:
        others_by_place.setdefault(place, []).append(tag)
    shared = []
    for place in sorted(held):
        moved_there, named = tuple(moved_by_place[place]), tuple(others_by_place.get(place, ()))
        shared.append((place, moved_there, named, held[place] - len(moved_there) - len(named)))
    return shared


def set_site_stock(*, site: Site, quantities: dict[int, str], shown: dict[int, str] | None = None) -> int:
    """Set the quantity of each part (by id) held at the site from form text: a whole number from 0 to
    SiteStock.MAX_QUANTITY; one bad entry refuses them all, naming the part. Returns the number of rows written.

    `shown` is the quantity of each part as the form showed it. A part left as shown is not written, so
    a replacement that took one meanwhile is not undone; a part typed over while its quantity moved is
    refused by name, nothing saved, so the planner counts again. Without `shown` every quantity is set."""
    parts = CapacitorPart.objects.in_bulk(storable_ids(quantities))
    errors, values = {}, {}
    for part_id, text in quantities.items():
        part = parts.get(part_id)
        if part is None:
            errors[f"part {part_id}"] = "is not in the catalogue."
            continue
        value = _whole_number(text)
        if not str(text).strip():
            errors[part.code] = "is empty: type 0 if none are held (an emptied box is not taken as 0)."
        elif not 0 <= value <= SiteStock.MAX_QUANTITY:
            errors[part.code] = f"{quoted_start(text)!r} is not a whole number from 0 to {SiteStock.MAX_QUANTITY}."
        values[part_id] = value
    if errors:
        raise ValidationError(errors)
    before = {part_id: _whole_number(text) for part_id, text in (shown or {}).items() if part_id in values}
    values = {part_id: value for part_id, value in values.items() if before.get(part_id) != value}
    with transaction.atomic():
        # Two stock edits of one site at once take turns (the site's row locked): the second then
        # updates the rows the first created instead of creating them again (a unique pair). A
        # replacement takes its part with the stock row locked: the quantities compared here are final.
        list(Site.objects.select_for_update().filter(pk=site.pk).values_list("pk", flat=True))
        rows = {row.part_id: row for row in SiteStock.objects.select_for_update().filter(site=site, part__in=values)}
        now = {part_id: rows[part_id].quantity if part_id in rows else 0 for part_id in values}
        moved = moved_rows({i: count for i, count in before.items() if count >= 0}, now, values)
        if moved:
            # A replacement only takes one: a count that rose was another person's save.
            raise ValidationError(
                {
                    parts[i].code: (
                        f"changed from {before[i]} to {now[i]} while this page was open (someone else saved it"
                        f"{', or a replacement took one' if now[i] < before[i] else ''}); count again and save."
                    )
                    for i in moved
                }
            )
        changed = [row for part_id, row in rows.items() if row.quantity != values[part_id]]
        for row in changed:
            row.quantity = values[row.part_id]
        audited_bulk_update(changed, ["quantity"])
        new = [SiteStock(site=site, part_id=i, quantity=v) for i, v in values.items() if i not in rows and v > 0]
        audited_bulk_create(new)
    return len(changed) + len(new)


def _whole_number(text) -> int:
    """A quantity typed on the stock form; -1 where it is not a whole number (empty included)."""
    value = whole_number(text)
    return -1 if value is None else value
