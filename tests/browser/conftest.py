"""Headless Chromium (Debian's package) driven by Playwright, against the live server."""

import os
import shutil
import threading
from pathlib import Path

import pytest
from django.core.servers.basehttp import ThreadedWSGIServer
from django.db import connection
from django.test.testcases import LiveServerThread

ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


class OneRequestAtATimeOnSQLite(ThreadedWSGIServer):
    """The live server, answering one request at a time on SQLite. Its test database is one
    in-memory cache shared by the request threads' connections, whose table locks fail at once
    ("database table is locked", a 503) instead of waiting as a deployment's database file in
    WAL mode does. On PostgreSQL requests overlap, as deployed."""

    def set_app(self, application):
        turn = threading.Lock()

        def one_at_a_time_on_sqlite(environ, start_response):
            if connection.vendor != "sqlite":
                return application(environ, start_response)
            with turn:
                return application(environ, start_response)

        return super().set_app(one_at_a_time_on_sqlite)


LiveServerThread.server_class = OneRequestAtATimeOnSQLite


@pytest.fixture(scope="session")
def browser():
    if not CHROMIUM:
        pytest.skip("Debian's chromium is not installed (apt-get install chromium)")
    from playwright.sync_api import sync_playwright

    # Playwright's sync API runs an event loop in this thread; the ORM calls in the
    # tests are plain synchronous code, so Django's async guard stands aside while
    # the browser is open, and only then.
    os.environ["DJANGO_ALLOW_ASYNC_UNSAFE"] = "true"
    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(
            executable_path=CHROMIUM,
            args=[
                "--no-sandbox",
                "--disable-background-networking",
                "--disable-gpu",
                "--disable-component-update",
                "--no-first-run",
            ],
        )
        yield browser
        browser.close()
    os.environ.pop("DJANGO_ALLOW_ASYNC_UNSAFE", None)


@pytest.fixture
def phone(browser, live_server):
    """A page at phone width (390 px), with a helper that saves a screenshot."""
    context = browser.new_context(viewport={"width": 390, "height": 844}, base_url=live_server.url)
    page = context.new_page()
    ARTIFACTS.mkdir(exist_ok=True)

    def shot(name):
        # A full-page shot resizes the page for a moment. Taken while an input has
        # focus, the blur of the next click then runs against the stale layout and
        # mousedown and mouseup land on different elements: leave the field first.
        page.evaluate("() => document.activeElement && document.activeElement.blur()")
        page.screenshot(path=str(ARTIFACTS / f"{name}.png"), full_page=True)

    page.shot = shot
    yield page
    context.close()
