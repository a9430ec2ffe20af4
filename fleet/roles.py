"""The four roles as Django groups, and the permissions each one holds."""

from __future__ import annotations

from django.contrib.auth.models import Group, Permission

TECHNICIAN = "technician"
PLANNER = "planner"
RELIABILITY_ENGINEER = "reliability engineer"
ADMINISTRATOR = "administrator"
ROLES = (TECHNICIAN, PLANNER, RELIABILITY_ENGINEER, ADMINISTRATOR)

VIEW_ALL = [
    "view_site",
    "view_motor",
    "view_capacitorpart",
    "view_fittedcapacitor",
    "view_reading",
    "view_assessment",
    "view_workorder",
    "view_refitrun",
]
ROLE_PERMISSIONS = {
    TECHNICIAN: VIEW_ALL + ["add_reading", "add_fittedcapacitor", "change_fittedcapacitor", "change_workorder"],
    PLANNER: VIEW_ALL + ["add_workorder", "change_workorder", "change_motor", "add_refitrun"],
    RELIABILITY_ENGINEER: VIEW_ALL + ["add_refitrun", "add_backtest"],
    ADMINISTRATOR: None,  # every permission of the fleet app, plus users and groups
}


def ensure_role_groups(**kwargs):
    """Create the role groups and (re)grant their permissions; safe to run again."""
    for role, codenames in ROLE_PERMISSIONS.items():
        group, _ = Group.objects.get_or_create(name=role)
        if codenames is None:
            permissions = Permission.objects.filter(content_type__app_label__in=["fleet", "auth", "authtoken"])
        else:
            permissions = Permission.objects.filter(content_type__app_label="fleet", codename__in=codenames)
        group.permissions.set(permissions)


def roles_of(user) -> set[str]:
    if not user.is_authenticated:
        return set()
    names = {group.name for group in user.groups.all()}
    if user.is_superuser:
        names.add(ADMINISTRATOR)
    return names & set(ROLES)
