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
    "view_sitestock",
    "view_sitedayoff",
]
# Imports by role: technicians bring in readings (a logger's or another team's sheet); planners keep the
# register and its past capacitors; reliability engineers bring in the past capacitors that life data needs.
# Sites and parts (the catalogue) stay with the administrator.
ROLE_PERMISSIONS = {
    TECHNICIAN: VIEW_ALL
    + ["add_reading", "add_fittedcapacitor", "change_fittedcapacitor", "change_workorder"]
    + ["import_readings"],
    PLANNER: VIEW_ALL
    + ["add_workorder", "change_workorder", "change_motor", "add_refitrun"]
    + ["add_sitestock", "change_sitestock", "delete_sitestock"]
    + ["add_sitedayoff", "delete_sitedayoff"]
    + ["import_readings", "import_register", "import_history", "import_days_off"],
    RELIABILITY_ENGINEER: VIEW_ALL + ["add_refitrun", "add_backtest", "import_readings", "import_history"],
    ADMINISTRATOR: None,  # every permission of the fleet app, plus users and groups
}


def ensure_role_groups(**kwargs):
    """Create the role groups and (re)grant their permissions; safe to run again.

    Set up by the system after every migrate, so it is not written to the audit trail.
    """
    from .audit import suspended

    with suspended():
        _grant_role_permissions()


def _grant_role_permissions():
    for role, codenames in ROLE_PERMISSIONS.items():
        group, _ = Group.objects.get_or_create(name=role)
        if codenames is None:
            permissions = Permission.objects.filter(content_type__app_label__in=["fleet", "auth", "authtoken"])
        else:
            permissions = Permission.objects.filter(content_type__app_label="fleet", codename__in=codenames)
        group.permissions.set(permissions)


def roles_of(user) -> set[str]:
    """The user's roles, read once per user object (as Django keeps its permissions): a page asks in its view
    and again in its template's context."""
    if not user.is_authenticated:
        return set()
    if not hasattr(user, "_fleet_roles"):
        names = {group.name for group in user.groups.all()}
        if user.is_superuser:
            names.add(ADMINISTRATOR)
        user._fleet_roles = frozenset(names & set(ROLES))
    return set(user._fleet_roles)


ACTION_WORDS = {"view": "Seeing", "add": "Recording", "change": "Changing", "delete": "Deleting"}


def roles_holding(codename: str) -> list[str]:
    """The roles granted a fleet permission (by codename), the administrator last: it holds every one."""
    return [role for role, codenames in ROLE_PERMISSIONS.items() if codenames and codename in codenames] + [
        ADMINISTRATOR
    ]


def permission_words(user, permissions) -> str:
    """Why a user is refused an action, in words: which roles may do it, and which the user holds
    ("Recording readings needs the technician role (or administrator); your roles: reliability engineer.")."""
    from django.apps import apps

    words = []
    for permission in permissions:
        app_label, codename = permission.split(".", 1)
        action, _, model_name = codename.partition("_")
        try:
            model = apps.get_model(app_label, model_name)
        except LookupError:
            thing = model_name
        else:
            thing = model._meta.verbose_name_plural
        others = roles_holding(codename)[:-1]
        listed = ", ".join(others[:-1]) + " or " + others[-1] if len(others) > 1 else "".join(others)
        needs = f"the {listed} role (or {ADMINISTRATOR})" if others else f"the {ADMINISTRATOR} role"
        words.append(f"{ACTION_WORDS.get(action, action.capitalize())} {thing} needs {needs}")
    held = ", ".join(sorted(roles_of(user))) or "none"
    return f"{'; '.join(words)}; your roles: {held}."


def refused(user, permission: str):
    """The 403 for a user without `permission`, in words: the roles that hold it and the user's own (the API's
    words too, `permission_words`), for the page to show ("Not allowed for your role" said nothing of whom to
    ask for what)."""
    from django.core.exceptions import PermissionDenied

    words = permission_words(user, [permission])
    if permission == "fleet.add_reading" and user.has_perm("fleet.import_readings"):
        words += " Your role brings readings in by file: Import, in the menu."
    return PermissionDenied(words)


def needs_permission(permission: str):
    """A page view's decorator: a signed-in user without `permission` is refused, naming the roles that hold it
    (signing in is the middleware's: LoginRequiredMiddleware)."""
    from functools import wraps

    def decorator(view):
        @wraps(view)
        def guarded(request, *args, **kwargs):
            if not request.user.has_perm(permission):
                raise refused(request.user, permission)
            return view(request, *args, **kwargs)

        return guarded

    return decorator


def may_import(user, kind: str) -> bool:
    """Whether the user may bring in a file of this kind (sites, parts, register, history, readings)."""
    return user.has_perm(f"fleet.import_{kind}")


def importable_kinds(user) -> list[str]:
    """The kinds of file the user may import, in the import page's order."""
    from .models import ImportJob

    return [kind for kind in ImportJob.Kind.values if may_import(user, kind)]


def is_administrator(user) -> bool:
    return ADMINISTRATOR in roles_of(user)


# How each scoped model reaches its site.
SITE_PATHS = {
    "site": "id",
    "motor": "site",
    "fittedcapacitor": "motor__site",
    "reading": "fitted_capacitor__motor__site",
    "assessment": "site",  # stored on the assessment, kept by triggers (migration 0020)
    "inservicecount": "site",  # counts by site, kept by triggers (migration 0023)
    "motorreadcount": "site",  # counts by site, kept by triggers (migration 0028)
    "designcount": "site",  # counts by site, kept by triggers (migration 0032)
    "workorder": "site",
    "sitestock": "site",
    "sitedayoff": "site",
}


def visible_site_ids(user) -> set[int] | None:
    """The ids of the sites a user works at; None means every site.

    A user without site memberships, and every administrator, works at every site,
    so a plant that does not scope its people needs to set nothing.
    """
    if not user.is_authenticated:
        return None
    if not hasattr(user, "_fleet_site_ids"):  # once per request: the user object lives as long
        ids = None if is_administrator(user) else set(user.site_memberships.values_list("site_id", flat=True))
        user._fleet_site_ids = ids or None
    return user._fleet_site_ids


def scope_to_user(queryset, user):
    """The rows of `queryset` this user may see and write: the one rule views, services and the API share.

    Register rows and records are limited to the user's sites; import jobs to their owner
    (administrators see all). `user=None` is the system (a command or a task): every row.
    """
    if user is None:
        return queryset
    name = queryset.model._meta.model_name
    if name == "importjob":
        return queryset if is_administrator(user) else queryset.filter(created_by_id=user.pk)
    site_ids = visible_site_ids(user)
    if site_ids is None:
        return queryset
    return queryset.filter(**{f"{SITE_PATHS[name]}__in": site_ids})
