"""The audit trail: who changed the register, users and roles, when, and from what to what."""

import datetime as dt

import pytest
from django.contrib.auth.models import Group, User
from django.urls import reverse

from fleet.audit import HIDDEN
from fleet.models import AuditEntry, FittedCapacitor, SiteMembership, WorkOrder
from fleet.roles import ADMINISTRATOR, PLANNER, TECHNICIAN
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_site, make_user

pytestmark = pytest.mark.django_db


def entries(model, object_id=None, action=None):
    found = AuditEntry.objects.filter(model=model).order_by("id")
    if object_id is not None:
        found = found.filter(object_id=str(object_id))
    if action is not None:
        found = found.filter(action=action)
    return list(found)


def test_a_nameplate_change_outside_a_request_is_the_systems_with_old_and_new():
    motor = make_motor(rated_voltage_v=230)
    [created] = entries("fleet.motor", motor.pk, "create")
    assert created.changes["asset_tag"] == [None, motor.asset_tag] and created.user_id is None
    motor.rated_voltage_v = 240
    motor.location = "Pump house"
    motor.save()
    motor.save()  # nothing changed: nothing written
    [changed] = entries("fleet.motor", motor.pk, "update")
    assert changed.changes == {"rated_voltage_v": [230.0, 240.0], "location": ["Cold room 1", "Pump house"]}
    assert changed.username == "" and changed.object_repr == motor.asset_tag


def test_a_replacement_through_the_page_names_the_technician_for_every_row_it_touched(client):
    technician = make_user(TECHNICIAN)
    fitted_capacitor = make_fitted_capacitor(fitted_on=dt.date(2022, 1, 1))
    order = WorkOrder.objects.create(
        motor=fitted_capacitor.motor, fitted_capacitor=fitted_capacitor, kind="replace_run", due_on=dt.date(2026, 1, 1)
    )
    client.force_login(technician)
    response = client.post(
        reverse("replace", args=[fitted_capacitor.id]),
        {"part": fitted_capacitor.part.pk, "removed_on": "2025-06-01", "removal_reason": "failed", "serial": "NEW-1"},
    )
    assert response.status_code == 302
    successor = FittedCapacitor.objects.get(removed_on__isnull=True)
    [removal] = entries("fleet.fittedcapacitor", fitted_capacitor.pk, "update")
    assert removal.changes["removed_on"] == [None, "2025-06-01"] and removal.username == technician.username
    [fitted] = entries("fleet.fittedcapacitor", successor.pk, "create")
    assert fitted.user_id == technician.pk and fitted.changes["serial"] == [None, "NEW-1"]
    [closed] = entries("fleet.workorder", order.pk, "update")
    assert closed.changes["state"] == ["planned", "done"] and closed.changes["closed_by"] == [None, technician.pk]
    assert closed.username == technician.username


def test_a_planners_bulk_writes_are_written_down_too(client):
    planner = make_user(PLANNER)
    site = make_site()
    motors = [make_motor(site=site, route_order=n) for n in (1, 2)]
    client.force_login(planner)
    client.post(reverse("route", args=[site.code]), {f"order-{motors[0].pk}": "7", f"order-{motors[1].pk}": "2"})
    [moved] = entries("fleet.motor", motors[0].pk, "update")
    assert moved.changes == {"route_order": [1, 7]} and moved.username == planner.username
    assert entries("fleet.motor", motors[1].pk, "update") == []  # unchanged: nothing written

    order = WorkOrder.objects.create(motor=motors[0], kind="inspect", due_on=dt.date(2026, 3, 2))
    answer = client.post(reverse("work_orders"), {"action": "issue", "site": site.pk, "day": "2026-03-02"}, follow=True)
    # The message names the visit (a walk read "4 work orders issued to the technicians." and wondered which).
    said = [str(m) for m in answer.context["messages"]]
    assert f"1 work order of the {site.code} visit on Mon 2026-03-02 issued to the technicians." in said, said
    [issued] = entries("fleet.workorder", order.pk, "update")
    assert issued.changes == {"state": ["planned", "issued"]} and issued.username == planner.username


def test_users_roles_and_sites_are_on_the_trail_and_passwords_never_are():
    user = User.objects.create_user("casey", password="first-password-123")
    user.set_password("second-password-456")
    user.save()
    [changed] = entries("auth.user", user.pk, "update")
    assert changed.changes == {"password": [HIDDEN, HIDDEN]}
    assert "pbkdf2" not in str(AuditEntry.objects.filter(model="auth.user").values_list("changes", flat=True))

    technician, planner = Group.objects.get(name=TECHNICIAN), Group.objects.get(name=PLANNER)
    user.groups.add(technician, planner)
    user.groups.remove(planner)
    planner.user_set.add(user)  # from the group's side
    user.groups.clear()
    changes = [e.changes for e in entries("auth.user", user.pk, "update")[1:]]
    assert changes[:2] == [{"groups": {"added": [PLANNER, TECHNICIAN]}}, {"groups": {"removed": [PLANNER]}}]
    assert changes[2] == {"groups": {"removed": [PLANNER, TECHNICIAN]}}
    assert entries("auth.group", planner.pk, "update")[-1].changes == {"user_set": {"added": ["casey"]}}

    site = make_site()
    membership = SiteMembership.objects.create(user=user, site=site)
    membership.delete()
    assert [e.action for e in entries("fleet.sitemembership")] == ["create", "delete"]
    part = make_part()
    part_id = part.pk
    part.delete()
    assert [e.action for e in entries("fleet.capacitorpart", part_id)] == ["create", "delete"]


def test_the_trail_is_read_only_for_the_administrator(client):
    administrator = make_user(ADMINISTRATOR)
    make_motor(asset_tag="FAN-AUDIT-1")
    client.force_login(administrator)
    listing = client.get(reverse("admin:fleet_auditentry_changelist"), {"model": "fleet.motor"})
    assert listing.status_code == 200 and "FAN-AUDIT-1" in listing.content.decode()
    entry = AuditEntry.objects.filter(model="fleet.motor").first()
    assert client.get(reverse("admin:fleet_auditentry_add")).status_code == 403
    assert client.post(reverse("admin:fleet_auditentry_delete", args=[entry.pk]), {"post": "yes"}).status_code == 403
    client.post(reverse("admin:fleet_auditentry_change", args=[entry.pk]), {"action": "delete", "username": "x"})
    entry.refresh_from_db()
    assert entry.action == "create" and entry.username == ""
    with pytest.raises(ValueError, match="append-only"):
        entry.save()
    with pytest.raises(ValueError, match="append-only"):
        entry.delete()
