from .roles import importable_kinds, roles_of


def roles(request):
    """The signed-in user's roles, and whether any import is open to them, for menus that show
    only what a role can use."""
    user = getattr(request, "user", None)
    signed_in = bool(user is not None and user.is_authenticated)
    return {
        "user_roles": roles_of(user) if signed_in else set(),
        "user_may_import": signed_in and bool(importable_kinds(user)),
    }
