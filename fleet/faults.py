"""What a request answers when the database cannot be reached: 503, not a bare 500; and what a
form answers when its CSRF check fails: a plain page that says nothing was saved, not Django's.

Installed as the site's 500 handler, so it also covers failures in middleware
(the session and the login check touch the database before any view runs).
Pages get a friendly page that retries by itself, the API a JSON body; both
say when to retry. Any other error keeps Django's 500 page (JSON under /api/). The 404
handler answers JSON under /api/ too.
"""

from __future__ import annotations

import sys

from django.conf import settings
from django.contrib.auth.decorators import login_not_required
from django.db import InterfaceError, OperationalError, connection
from django.http import HttpResponse, JsonResponse
from django.shortcuts import render
from django.template.loader import render_to_string
from django.urls import reverse
from django.utils.http import url_has_allowed_host_and_scheme
from django.views import defaults
from django.views.decorators.http import require_GET

from fleet.security import page_form_was_on

DATABASE_ERRORS = (OperationalError, InterfaceError)
RETRY_AFTER_S = 30
API_PREFIX = "/api/"


def server_error(request, template_name: str = defaults.ERROR_500_TEMPLATE_NAME):
    """Django's handler500, called while the exception is being handled; the API answers JSON."""
    error = sys.exc_info()[1]
    if isinstance(error, DATABASE_ERRORS):
        return database_unavailable(request, busy=database_busy(error))
    if request.path.startswith(API_PREFIX):
        return JsonResponse({"detail": "The server failed on this request; it has been logged."}, status=500)
    return defaults.server_error(request, template_name)


def page_not_found(request, exception, template_name: str = defaults.ERROR_404_TEMPLATE_NAME):
    """Django's handler404: an address under /api/ that names nothing answers JSON (the API answers JSON
    only), saying which addresses there are; pages keep the page that offers the motor search."""
    if request.path.startswith(API_PREFIX):
        body = {
            "detail": f"No API address {request.path}.",
            "addresses": [
                "/api/assessments/",
                "/api/readings/",
                "/api/fitted-capacitors/<id>/readings/",
                "/api/fitted-capacitors/<id>/substitutes/",
            ],
        }
        return JsonResponse(body, status=404)
    return defaults.page_not_found(request, exception, template_name)


@login_not_required
def api_address_unknown(request, rest: str = "") -> JsonResponse:
    """The last API route: an address under /api/ that names nothing. Django answers a 404 from its
    own debug page while DEBUG is on, not from handler404; this answers the same JSON either way."""
    return page_not_found(request, None)


# PostgreSQL's lock_not_available: a wait bounded by lock_timeout ran out (`readings.hold_reading_saves`).
LOCK_NOT_AVAILABLE = "55P03"


def database_busy(error: Exception) -> bool:
    """Whether `error` is a write that waited FLEET_WRITE_WAIT_MS for another, long one and gave up: SQLite's
    "database is locked" (another connection held its one write lock: a backup reading, a large import's write),
    or PostgreSQL's bounded wait for a readings import's write. Reached, but busy."""
    if not isinstance(error, OperationalError):
        return False
    return "database is locked" in str(error) or getattr(error.__cause__, "sqlstate", None) == LOCK_NOT_AVAILABLE


def not_saved_busy_words() -> str:
    """What a form says, every value kept, when its save gave up waiting for another long write."""
    seconds = settings.FLEET_WRITE_WAIT_MS // 1000
    return (
        f"Not saved yet: the database stayed busy with another long write (a large import or a backup) for {seconds} "
        "s. Everything you typed is still here: press Save again in a minute."
    )


def database_unavailable(request, *, busy: bool = False) -> HttpResponse:
    """503 with Retry-After; rendered without the request, so without touching the session or the user. `busy`:
    the database answered, but stayed busy with another write past the busy timeout (SQLite). A form sent gets a
    page that says it was not saved and leads back to the page it was on, where page.js puts back what was typed
    (as after a sign-in that had ended: `security.SignInFirstMiddleware`)."""
    headers = {"Retry-After": str(RETRY_AFTER_S)}
    if request.path.startswith(API_PREFIX):
        detail = (
            "The database stayed busy with another long write (an import or a backup); nothing was saved by this "
            "request: try again in a minute."
            if busy
            else "The database is unreachable; try again later."
        )
        return JsonResponse({"detail": detail, "retry_after_s": RETRY_AFTER_S}, status=503, headers=headers)
    context = {"retry_after_s": RETRY_AFTER_S, "busy": busy}
    if request.method == "POST":  # a form sent: page.js keeps what was typed and puts it back on the form's page
        context["form_page"] = page_form_was_on(request)
    html = render_to_string("503.html", context)
    return HttpResponse(html, status=503, headers=headers)


@login_not_required
@require_GET
def health(request) -> HttpResponse:
    """GET /health/: "ok" when the database answers (the compose health check); no sign-in,
    session or template, so it checks the process and its database, nothing else. An
    unreachable database raises, and the 500 handler above answers 503."""
    with connection.cursor() as cursor:
        cursor.execute("SELECT 1")
    return HttpResponse("ok", content_type="text/plain")


def csrf_failure(request, reason: str = "") -> HttpResponse:
    """settings.CSRF_FAILURE_VIEW: a form sent with a stale token (signed out and in again in
    another tab, most often) was not saved. 403, in the product's look, with a way back to the
    page the form was on when that page is on this site, else to the start page."""
    back = request.META.get("HTTP_REFERER", "")
    came_from_here = url_has_allowed_host_and_scheme(
        back, allowed_hosts={request.get_host()}, require_https=request.is_secure()
    )
    context = {"back": back if came_from_here else reverse("home"), "came_from_here": came_from_here}
    return render(request, "csrf_failure.html", context, status=403)
