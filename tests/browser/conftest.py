"""Headless Chromium (Debian's package) driven by Playwright, against the live server."""

import os
import shutil
import threading
from pathlib import Path

import pytest
from django.contrib.auth.models import User
from django.core.management import call_command
from django.core.servers.basehttp import ThreadedWSGIServer
from django.db import connection
from django.test.testcases import LiveServerThread
from django.utils import timezone

from fleet.models import FittedCapacitor, ImportJob
from fleet.services.import_jobs import create_job
from fleet.services.readings import record_reading
from fleet.services.workorders import plan_work_orders

ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")

# Sign-ins the demo makes (fleet/services/demo.py `ensure_users`).
ROLES = {
    "technician": ("tech", "reading-route-7"),
    "planner": ("planner", "weekly-plan-7"),
    "reliability engineer": ("engineer", "life-data-7"),
    "administrator": ("admin", "register-keeper-7"),
}


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


@pytest.fixture
def demo_fleet(transactional_db):
    """The demo at a twentieth of its size, with work orders planned and an import waiting to be mapped."""
    call_command("demo", "--no-serve", "--scale", "0.05")
    # A capacitor read below its tolerance today: a twentieth of the demo may have nothing else due within
    # the home page's 30 days, whose rows the layout tests look at.
    low = FittedCapacitor.objects.filter(removed_on__isnull=True, role="run").select_related("part").first()
    record_reading(
        fitted_capacitor=low,
        values={"taken_at": timezone.now(), "method": "meter", "capacitance_uf": 0.9 * low.part.rated_uf},
        confirmed=True,
    )
    plan_work_orders(horizon_days=90)
    technician = ROLES["technician"][0]
    create_job(
        kind=ImportJob.Kind.READINGS,
        filename="route-cst.csv",
        content=b'asset_tag,role,taken_at,capacitance_uf\nCST-0001,run,2026-01-05 09:00,"3,9"\n',
        user=User.objects.get(username=technician),
    )


def demo_page(browser, live_server, role: str, width: int = 390, height: int = 844):
    """A new browser context at `width` x `height` px, signed in as the demo's user of `role`: (context, page)."""
    context = browser.new_context(viewport={"width": width, "height": height}, base_url=live_server.url)
    page = context.new_page()
    username, password = ROLES[role]
    page.goto("/login/")
    page.fill("#id_username", username)
    page.fill("#id_password", password)
    page.click("button[type=submit]")
    page.wait_for_url("**/")
    return context, page
