"""A record's values as an edit form showed them, checked against the record as stored at the save.

The stock and route pages send back each value they showed (`was-<id>`, `set_site_stock`, `set_route_order`),
each row judged alone by the same rule (`moved_rows`); an edit form of one whole record (the admin's change forms)
sends back its fields as shown in one hidden box, `shown_values`: the JSON of `stored_values` when the form was
built. At the save the record is read again
under a row lock (`locked_now`, inside the save's transaction, so a second save waits for the first and then
sees it) and `moved_meanwhile` names each field another save changed since, unless this one sends what is
stored now. The form then refuses the save, saying what each field is now and was (`moved_words`).
"""

from __future__ import annotations

import datetime as dt
import decimal
import json
import re

from django.db import models, transaction

from fleet.audit import _plain
from fleet.imports.columns import shown

# The hidden box of an edit form that carries its record's values as shown.
SHOWN_VALUES = "shown_values"

_UNIT = re.compile(r"(?P<name>.*?) \((?P<unit>[^()]+)\)")


def comparable(value):
    """A field's value in one spelling whatever its source (a form, a row read back, the JSON a page sent):
    an instant in UTC, a decimal without trailing zeros, a related record by its id, many by their sorted ids, a
    JSON field's object key by key."""
    if isinstance(value, models.Model):
        return value.pk
    if isinstance(value, dict):  # a JSON field's
        return {str(key): comparable(item) for key, item in value.items()}
    if isinstance(value, list | tuple | set | models.QuerySet):
        return sorted(comparable(item) for item in value)
    if isinstance(value, dt.datetime) and value.tzinfo is not None:
        value = value.astimezone(dt.UTC)
    if isinstance(value, decimal.Decimal):
        return format(value.normalize(), "f")
    return json.loads(json.dumps(_plain(value)))


def model_fields(instance, names) -> dict[str, models.Field]:
    """The model's fields (many-to-many included) among `names`, by name."""
    fields = {field.name: field for field in (*instance._meta.concrete_fields, *instance._meta.many_to_many)}
    return {name: fields[name] for name in names if name in fields}


def stored_values(instance, names) -> dict:
    """The named fields of `instance` as stored (`comparable`): what an edit form shows of it."""
    fields = model_fields(instance, names)
    return {name: comparable(field.value_from_object(instance)) for name, field in fields.items()}


def read_shown(text: str) -> dict | None:
    """The values a form sent as shown, or None when it sent none that can be read."""
    try:
        values = json.loads(text or "")
    except (ValueError, RecursionError):  # RecursionError: nested deeper than the parser goes ("[[[[...")
        return None
    return values if isinstance(values, dict) else None


def locked_now(instance, names=None):
    """The record as stored now (its fields `names` only, if given), its row locked until the caller's
    transaction ends (a save on it meanwhile waited for); None when it was deleted."""
    rows = type(instance)._base_manager.select_for_update().filter(pk=instance.pk)
    with transaction.atomic():
        return (rows if names is None else rows.only(*names)).first()


def moved_meanwhile(shown_values: dict, now: dict, sent: dict) -> list[str]:
    """The fields stored otherwise than shown, where this save does not send what is stored now. One moved
    field is reason enough to refuse the whole save: the register's checks judge fields together (rated speed
    against frequency and poles, a removal date with its reason), so a blend of two people's saves that neither
    saw could be a record nobody meant."""
    unknown = object()  # a field the form could not read: its box kept as typed
    return [name for name in now if shown_values.get(name) != now[name] and sent.get(name, unknown) != now[name]]


def moved_rows(shown: dict, now: dict, sent: dict) -> list:
    """The rows of a list of one field each (the stock page's quantities, the route page's places, by row id)
    that `moved_meanwhile` finds moved: each row is a record of its own, judged alone, and a row is judged only
    where the page showed a value that can be read (`shown`) and this save sends one (`sent`). A row left as
    shown is not the caller's to send: it writes only the rows typed over."""
    judged = [i for i in sent if shown.get(i) is not None and i in now]
    return moved_meanwhile({i: shown[i] for i in judged}, {i: now[i] for i in judged}, {i: sent[i] for i in judged})


def value_words(field: models.Field, value) -> str:
    """A stored value in plain words: its choice's label, the record named, a number with its unit."""
    if value in (None, "", []):
        return "empty"
    if field.many_to_many:
        return ", ".join(str(item) for item in field.related_model._base_manager.filter(pk__in=value)) or "empty"
    if field.is_relation:
        found = field.related_model._base_manager.filter(pk=value).first()
        return str(found) if found is not None else f"record {value}"
    if field.choices:
        return str(dict(field.flatchoices).get(value, value))
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(field, models.CharField | models.TextField):
        return f"“{shown(value)}”"
    unit = _UNIT.fullmatch(str(field.verbose_name))
    words = shown(float(value)) if isinstance(value, int | float) else shown(value)
    return f"{words} {unit['unit']}" if unit else words


def field_name(field: models.Field) -> str:
    """A field's name without the unit its verbose name ends with ("full-load current (A)": "full-load current")."""
    unit = _UNIT.fullmatch(str(field.verbose_name))
    return unit["name"] if unit else str(field.verbose_name)


def change_words(field: models.Field, was, now) -> str:
    """ "rated capacitance is now 4.2 µF (was 4 µF)"."""
    return f"{field_name(field)} is now {value_words(field, now)} (was {value_words(field, was)})"


def moved_words(instance, fields: dict[str, models.Field], shown_values: dict, now: dict, moved: list[str]) -> str:
    """The refusal of a save that came after another on the same record, naming each field moved meanwhile."""
    changes = "; ".join(change_words(fields[name], shown_values.get(name), now[name]) for name in moved)
    return (
        f"Someone else saved this {instance._meta.verbose_name} while you edited it: {changes}. Nothing was saved: "
        "check and save again."
    )
