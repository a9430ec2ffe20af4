"""Shared fixtures: a small register built through the ORM (factories as functions)."""

from __future__ import annotations

import importlib
import os
import pathlib
import sys
import tempfile

import pytest

from fleet.roles import ADMINISTRATOR, PLANNER, RELIABILITY_ENGINEER, TECHNICIAN
from tests.factories import (
    make_fitted_capacitor,
    make_user,
)

# The suite runs on every core (pytest-xdist, `-n auto --dist loadfile` in .pytest.ini: a module's tests stay in
# one process, each process has its own test database). The real Celery workers some tests start, and the tasks
# those workers send on, use this process's own queue on the shared broker, never another process's: the
# setting's environment variable, which the workers inherit (`worker_command`).
TEST_QUEUE = f"celery-tests-{os.environ.get('PYTEST_XDIST_WORKER', 'main')}"
os.environ["CELERY_TASK_DEFAULT_QUEUE"] = TEST_QUEUE


def pytest_configure(config):
    from config.celery import app

    app.conf.task_default_queue = TEST_QUEUE  # the settings were read before this module


def pytest_unconfigure(config):
    """The lock files this process's imports took on its in-memory SQLite test database
    (`import_jobs._sqlite_lock_path`: one a kind, in the temporary directory) go with it."""
    for lock in pathlib.Path(tempfile.gettempdir()).glob(f"fleet-import-{os.getpid()}-*.lock"):
        lock.unlink(missing_ok=True)


def worker_command(name: str) -> list[str]:
    """A real Celery worker (solo pool) for a test: named `name`, on this process's own queue."""
    return [
        sys.executable,
        "-m",
        "celery",
        "-A",
        "config",
        "worker",
        "--pool",
        "solo",
        "--loglevel",
        "WARNING",
        "-Q",
        TEST_QUEUE,
        "-n",
        name,
    ]


@pytest.fixture(autouse=True)
def fresh_cache():
    """Sign-in lockout and API throttle counters live in the cache: each test starts with none."""
    from django.core.cache import cache

    cache.clear()
    yield
    cache.clear()


@pytest.fixture(autouse=True)
def tasks_in_process(request):
    """Run Celery tasks in-process in every test but those marked `worker`, which
    send them through a real worker; with a broker configured (as in CI) a plain
    .delay() would otherwise queue work no test process consumes."""
    if request.node.get_closest_marker("worker"):
        yield
        return
    from config.celery import app

    saved = app.conf.task_always_eager
    app.conf.task_always_eager = True
    yield
    app.conf.task_always_eager = saved


@pytest.fixture(autouse=True)
def readings_flushable_on_sqlite(request):
    """A transactional test ends with a flush. PostgreSQL truncates (row triggers do not fire);
    SQLite deletes row by row, so the no-delete trigger on readings is lifted for that one
    statement and put back."""
    marker = request.node.get_closest_marker("django_db")
    transactional = "transactional_db" in request.fixturenames or (marker and marker.kwargs.get("transaction"))
    if not transactional:
        yield
        return
    request.getfixturevalue("transactional_db")
    yield
    from django.db import connection

    if connection.vendor == "sqlite":
        triggers = importlib.import_module("fleet.migrations.0009_rules_constraints_and_triggers")
        with connection.constraint_checks_disabled(), connection.cursor() as cursor:
            cursor.execute("DROP TRIGGER IF EXISTS fleet_reading_no_delete")
            cursor.execute("DELETE FROM fleet_reading")
            cursor.execute(triggers.SQLITE_READING_NO_DELETE)


# The ledgers of counts the database keeps on write (triggers): empty while the register is.
LEDGER_TABLES = ("fleet_inservicecount", "fleet_motorreadcount", "fleet_designcount")


@pytest.fixture(autouse=True)
def ledgers_start_empty_on_sqlite(request):
    """A transactional test ends with a flush; on SQLite it deletes table by table, row by row, and the
    register's triggers write their shares into a ledger the flush has already emptied, so the next test in
    the process started with counts of a register that was gone (an API list counted below zero). On SQLite
    each test that uses the database starts with the ledgers empty, as its empty register has them.
    PostgreSQL truncates (no row triggers fire)."""
    marker = request.node.get_closest_marker("django_db")
    fixtures = request.fixturenames
    if not (marker or "db" in fixtures or "transactional_db" in fixtures):
        yield
        return
    from django.db import connection

    if connection.vendor == "sqlite":
        transactional = "transactional_db" in fixtures or (marker and marker.kwargs.get("transaction"))
        request.getfixturevalue("transactional_db" if transactional else "db")
        with connection.cursor() as cursor:
            for table in LEDGER_TABLES:
                cursor.execute(f"DELETE FROM {table}")  # noqa: S608 - our own table names
    yield


@pytest.fixture
def technician(db):
    return make_user(TECHNICIAN)


@pytest.fixture
def planner(db):
    return make_user(PLANNER)


@pytest.fixture
def engineer(db):
    return make_user(RELIABILITY_ENGINEER)


@pytest.fixture
def administrator(db):
    return make_user(ADMINISTRATOR)


@pytest.fixture
def fan_fitted_capacitor(db):
    """A PSC fan with a 4 uF +/-5 % 450 V run capacitor fitted on 2022-01-01."""
    return make_fitted_capacitor()
