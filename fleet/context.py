from .roles import roles_of


def roles(request):
    """The signed-in user's roles, for menus that show only what a role can use."""
    return {"user_roles": roles_of(getattr(request, "user", None)) if hasattr(request, "user") else set()}
