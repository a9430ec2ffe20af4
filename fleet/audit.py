"""The audit trail: who changed the register, users or roles, and when (old -> new).

One mechanism writes every entry: model signals for single saves and deletes (admin,
forms, services, shell) and `audited_update` / `audited_bulk_update` / `audited_bulk_create`
for the services' bulk writes, which send no signals. The user comes from the request
being served (set by `AuditMiddleware`); outside a request it is the system (None).
"""

from __future__ import annotations

import contextlib
import contextvars
import datetime as dt
import decimal

from django.contrib.auth import get_user_model
from django.contrib.auth.models import Group
from django.db import transaction
from django.db.models.signals import m2m_changed, post_delete, post_save, pre_save

_request = contextvars.ContextVar("fleet_audit_request", default=None)
_suspended = contextvars.ContextVar("fleet_audit_suspended", default=False)

# Fields that change on their own or must never be copied into the trail.
IGNORED_FIELDS = {"last_login"}
SECRET_FIELDS = {"password"}
HIDDEN = "(changed, not shown)"


class AuditMiddleware:
    """Remember the request being served, so a save anywhere below knows who made it."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        token = _request.set(request)
        try:
            return self.get_response(request)
        finally:
            _request.reset(token)


@contextlib.contextmanager
def suspended():
    """Write no entries inside (restoring a backup, setting up the role groups)."""
    token = _suspended.set(True)
    try:
        yield
    finally:
        _suspended.reset(token)


def current_user():
    """The signed-in user of the request being served (session or API token), or None."""
    request = _request.get()
    user = getattr(request, "user", None) if request is not None else None
    return user if user is not None and user.is_authenticated else None


def audited_models():
    from .models import CapacitorPart, FittedCapacitor, Motor, Site, SiteDayOff, SiteMembership, SiteStock, WorkOrder

    return [
        Site,
        Motor,
        CapacitorPart,
        FittedCapacitor,
        WorkOrder,
        SiteMembership,
        SiteStock,
        SiteDayOff,
        get_user_model(),
        Group,
    ]


def _plain(value):
    """A JSON-safe copy of a field value."""
    if isinstance(value, dt.datetime | dt.date | dt.time | decimal.Decimal):
        return value.isoformat() if not isinstance(value, decimal.Decimal) else str(value)
    if isinstance(value, float | int | str | bool) or value is None:
        return value
    return str(value)


def _values(instance) -> dict:
    return {
        field.attname: getattr(instance, field.attname)
        for field in instance._meta.concrete_fields
        if field.attname not in IGNORED_FIELDS and not field.primary_key
    }


def _diff(old: dict, new: dict) -> dict:
    changes = {}
    for name, value in new.items():
        before = old.get(name)
        if before != value:
            changes[name] = [HIDDEN, HIDDEN] if name in SECRET_FIELDS else [_plain(before), _plain(value)]
    return changes


def _created(instance) -> dict:
    """A new row's filled-in fields, as changes from nothing."""
    return _diff({}, {name: value for name, value in _values(instance).items() if value not in (None, "")})


def _entry(instance_or_model, object_id, object_repr: str, action: str, changes: dict):
    from .models import AuditEntry

    user = current_user()
    return AuditEntry(
        user_id=user.pk if user else None,
        username=user.get_username() if user else "",
        model=instance_or_model._meta.label_lower,
        object_id=str(object_id),
        object_repr=object_repr[:200],
        action=action,
        changes=changes,
    )


def record(instance, action: str, changes: dict) -> None:
    if _suspended.get():
        return
    _entry(instance, instance.pk, str(instance), action, changes).save()


def _remember_old(sender, instance, raw=False, **kwargs):
    if raw or _suspended.get() or instance.pk is None:
        instance._audit_old = None
        return
    fields = [f.attname for f in instance._meta.concrete_fields if f.attname not in IGNORED_FIELDS]
    instance._audit_old = sender._default_manager.filter(pk=instance.pk).values(*fields).first()


def _saved(sender, instance, created=False, raw=False, **kwargs):
    if raw or _suspended.get():
        return
    old = getattr(instance, "_audit_old", None)
    if created or old is None:
        record(instance, "create", _created(instance))
        return
    changes = _diff(old, _values(instance))
    if changes:
        record(instance, "update", changes)


def _deleted(sender, instance, **kwargs):
    record(instance, "delete", {})


def _m2m_changed(sender, instance, action, reverse, model, pk_set, **kwargs):
    """Group memberships and permissions granted or taken away, by name."""
    if action not in {"post_add", "post_remove", "pre_clear"} or _suspended.get():
        return
    field = _m2m_accessor(instance, sender)
    if action == "pre_clear":
        pk_set = set(getattr(instance, field).values_list("pk", flat=True))
    if not pk_set:
        return
    names = sorted(str(obj) for obj in model._default_manager.filter(pk__in=pk_set))
    verb = "added" if action == "post_add" else "removed"
    record(instance, "update", {field: {verb: names}})


def _m2m_accessor(instance, through) -> str:
    """The name on `instance` of the many-to-many relation stored in `through` (either side)."""
    for field in instance._meta.many_to_many:
        if field.remote_field.through is through:
            return field.name
    return next(
        r.get_accessor_name() for r in instance._meta.related_objects if r.many_to_many and r.through is through
    )


def audited_update(queryset, **values) -> int:
    """`queryset.update(**values)`, with an entry for each row it changes. The rows are read locked, in
    one transaction with the update: a writer that changes one meanwhile (a cancel while a reading closes
    the order) is waited for and the row read again, so no entry is written for a row the update then
    no longer matches."""
    fields = list(values)
    model = queryset.model
    with transaction.atomic():
        rows = list(queryset.select_for_update(of=("self",)).values("pk", *fields))
        count = queryset.filter(pk__in=[row["pk"] for row in rows]).update(**values)
        if not _suspended.get():
            after = {name: getattr(value, "pk", value) for name, value in values.items()}
            entries = [
                _entry(model, row["pk"], f"{model._meta.verbose_name} {row['pk']}", "update", changes)
                for row in rows
                if (changes := _diff(row, after))
            ]
            _bulk_write(entries)
    return count


def audited_bulk_update(objects, fields) -> None:
    """`bulk_update(objects, fields)`, with an entry for each object whose fields changed."""
    if not objects:
        return
    model = type(objects[0])
    attnames = [model._meta.get_field(name).attname for name in fields]
    old = {
        row["pk"]: row for row in model._default_manager.filter(pk__in=[o.pk for o in objects]).values("pk", *attnames)
    }
    model._default_manager.bulk_update(objects, fields)
    if not _suspended.get():
        entries = [
            _entry(obj, obj.pk, str(obj), "update", changes)
            for obj in objects
            if (changes := _diff(old.get(obj.pk, {}), {name: getattr(obj, name) for name in attnames}))
        ]
        _bulk_write(entries)


def audited_bulk_create(objects) -> list:
    """`bulk_create(objects)`, with a creation entry for each."""
    if not objects:
        return objects
    model = type(objects[0])
    created = model._default_manager.bulk_create(objects)
    if not _suspended.get():
        _bulk_write(
            [_entry(obj, obj.pk, f"{model._meta.verbose_name} {obj.pk}", "create", _created(obj)) for obj in created]
        )
    return created


def _bulk_write(entries) -> None:
    from .models import AuditEntry

    AuditEntry.objects.bulk_create(entries, batch_size=1000)


def connect() -> None:
    """Wire the signals (from the app's ready())."""
    user_model = get_user_model()
    for model in audited_models():
        uid = f"fleet-audit-{model._meta.label_lower}"
        pre_save.connect(_remember_old, sender=model, dispatch_uid=uid)
        post_save.connect(_saved, sender=model, dispatch_uid=uid)
        post_delete.connect(_deleted, sender=model, dispatch_uid=uid)
    for through in (user_model.groups.through, user_model.user_permissions.through, Group.permissions.through):
        m2m_changed.connect(_m2m_changed, sender=through, dispatch_uid=f"fleet-audit-{through._meta.label_lower}")
