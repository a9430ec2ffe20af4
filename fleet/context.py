from django.utils.crypto import salted_hmac

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


def cautions_fold_key(request):
    """A value of this user's present sign-in, under which the browser tab remembers the safety
    cautions folded (page.js). Django gives the session a new key at every sign-in, so a fold is
    never carried to another user, nor to the same user's next sign-in; the key is an HMAC, so the
    page never shows the session key itself. Empty when signed out: nothing stays folded."""
    user = getattr(request, "user", None)
    session = getattr(request, "session", None)
    if user is None or not user.is_authenticated or session is None or not session.session_key:
        return {"cautions_fold_key": ""}
    digest = salted_hmac("fleet.cautions-fold", f"{user.pk}:{session.session_key}").hexdigest()
    return {"cautions_fold_key": digest[:32]}
