"""Protections around the doors: sign-in lockout, API token throttling, Content-Security-Policy, and the
sign-in page a form reaches when its sender's sign-in has ended.

Counters live in Django's cache (Redis when CACHE_URL is set, so every web worker
shares them; process memory otherwise).
"""

from __future__ import annotations

import hashlib
import secrets
from urllib.parse import urlsplit

from django.conf import settings
from django.contrib.admin.forms import AdminAuthenticationForm
from django.contrib.auth.forms import AuthenticationForm
from django.contrib.auth.middleware import LoginRequiredMiddleware
from django.core.cache import cache
from django.core.exceptions import ValidationError
from django.http import HttpResponseRedirect
from django.shortcuts import resolve_url
from django.utils.http import url_has_allowed_host_and_scheme, urlencode
from rest_framework.authentication import TokenAuthentication
from rest_framework.exceptions import AuthenticationFailed, Throttled

# The sign-in page's parameter: a form was sent signed out and not saved (templates/registration/login.html).
NOT_SAVED = "not_saved"


def client_ip(request) -> str:
    """The caller's address: the proxy's X-Forwarded-For entry when a proxy is trusted, else the socket's."""
    if settings.FLEET_BEHIND_PROXY:
        forwarded = request.META.get("HTTP_X_FORWARDED_FOR", "")
        if forwarded.strip():
            return forwarded.split(",")[-1].strip()
    return request.META.get("REMOTE_ADDR", "")


def _lockout_key(request, username: str) -> str:
    """One counter per user name (as typed, case-folded) and address; hashed, so any text makes a valid key."""
    pair = f"{(username or '').strip().casefold()}\n{client_ip(request)}"
    return "fleet:login-failures:" + hashlib.sha256(pair.encode("utf-8", "replace")).hexdigest()


def sign_in_locked(request, username: str) -> bool:
    return cache.get(_lockout_key(request, username), 0) >= settings.LOGIN_FAILURE_LIMIT


class LockoutMixin:
    """After LOGIN_FAILURE_LIMIT failed sign-ins for one user name from one address within
    LOGIN_LOCKOUT_MINUTES, refuse that pair (even with the right password) until the window passes."""

    def clean(self):
        username = self.data.get("username", "")
        minutes = settings.LOGIN_LOCKOUT_MINUTES
        if sign_in_locked(self.request, username):
            raise ValidationError(
                f"Too many failed sign-ins for this user from this address. Try again in {minutes} minutes, "
                "or ask an administrator to reset your password.",
                code="locked",
            )
        key = _lockout_key(self.request, username)
        try:
            cleaned = super().clean()
        except ValidationError:
            if self.user_cache is None:  # a wrong password, not a refused but right one
                _count(key, minutes * 60)
            raise
        cache.delete(key)
        return cleaned


def _count(key: str, seconds: int) -> None:
    """Add one to a counter that lives `seconds` from its first count."""
    cache.add(key, 0, timeout=seconds)
    try:
        cache.incr(key)
    except ValueError:  # expired between add and incr
        cache.set(key, 1, timeout=seconds)


class LockoutAuthenticationForm(LockoutMixin, AuthenticationForm):
    """The sign-in page's form."""


class LockoutAdminAuthenticationForm(LockoutMixin, AdminAuthenticationForm):
    """The register's (admin) sign-in form: the same lockout, so it is no side door."""


class ThrottledTokenAuthentication(TokenAuthentication):
    """Token authentication that counts bad tokens per address and answers 429 past the limit,
    so tokens cannot be guessed at the speed of the network."""

    def authenticate(self, request):
        key = f"fleet:bad-tokens:{client_ip(request)}"
        limit, seconds = _parse_rate(settings.API_BAD_TOKEN_RATE)
        if cache.get(key, 0) >= limit:
            raise Throttled(wait=seconds, detail="Too many bad tokens from this address; wait and try again.")
        try:
            return super().authenticate(request)
        except AuthenticationFailed:
            _count(key, seconds)
            raise


def _parse_rate(rate: str) -> tuple[int, int]:
    """'10/minute' -> (10, 60), as DRF reads its rates."""
    count, period = rate.split("/")
    return int(count), {"s": 1, "m": 60, "h": 3600, "d": 86400}[period[0]]


class ContentSecurityPolicyMiddleware:
    """Content-Security-Policy on every response: scripts only from this site or carrying
    the request's nonce (`{{ request.csp_nonce }}`), no inline event handlers, no framing."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        request.csp_nonce = secrets.token_urlsafe(18)
        response = self.get_response(request)
        header = "Content-Security-Policy-Report-Only" if settings.CSP_REPORT_ONLY else "Content-Security-Policy"
        if header not in response:
            response[header] = (
                "default-src 'self'; "
                f"script-src 'self' 'nonce-{request.csp_nonce}'; "
                "style-src 'self' 'unsafe-inline'; "
                "img-src 'self' data:; "
                "font-src 'self' data:; "
                "connect-src 'self'; "
                "object-src 'none'; "
                "base-uri 'self'; "
                "form-action 'self'; "
                "frame-ancestors 'none'"
            )
        return response


class SignInFirstMiddleware(LoginRequiredMiddleware):
    """Django's LoginRequiredMiddleware, with one thing more: a form sent once the sign-in has ended (it timed out,
    or its sender signed out in another tab) is not saved, and the sign-in page it reaches says so
    (`?not_saved=1`), with `next` the page the form was on, so the sender comes back to it, signed in, to press
    Save again (page.js puts back what was typed; the reading form restores its own draft)."""

    def handle_no_permission(self, request, view_func):
        if request.method in ("GET", "HEAD", "OPTIONS"):
            return super().handle_no_permission(request, view_func)
        query = urlencode({self.get_redirect_field_name(view_func): page_form_was_on(request), NOT_SAVED: "1"})
        # 303: the browser asks for the sign-in page, never sends the form there.
        return HttpResponseRedirect(f"{resolve_url(self.get_login_url(view_func))}?{query}", status=303)


def page_form_was_on(request) -> str:
    """The address (path and query) of the page a form was sent from: its Referer, when that is on this site,
    else the address it was sent to (most of our forms are sent to their own page)."""
    referer = request.META.get("HTTP_REFERER", "")
    if referer and url_has_allowed_host_and_scheme(
        referer, allowed_hosts={request.get_host()}, require_https=request.is_secure()
    ):
        parts = urlsplit(referer)
        if parts.path:
            return parts.path + (f"?{parts.query}" if parts.query else "")
    return request.get_full_path()
