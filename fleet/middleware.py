"""A NUL character in an address is refused before any view or query sees it.

PostgreSQL cannot hold NUL in text, so `/plan/?site=%00` or `/motors/%00/` would reach
the database as an error (a 500). One check for every page and the API: 400, in JSON
for the API.
"""

from __future__ import annotations

from urllib.parse import unquote

from django.http import HttpResponseBadRequest, JsonResponse

MESSAGE = "The address contains a NUL character (%00): remove it and try again."


class RefuseNulMiddleware:
    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        query = unquote(request.META.get("QUERY_STRING", ""))
        if "\x00" in request.path or "\x00" in query:
            if request.path.startswith("/api/"):
                return JsonResponse({"detail": MESSAGE}, status=400)
            return HttpResponseBadRequest(MESSAGE, content_type="text/plain; charset=utf-8")
        return self.get_response(request)
