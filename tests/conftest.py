"""Shared fixtures: a small register built through the ORM (factories as functions)."""

from __future__ import annotations

import importlib

import pytest

from fleet.roles import ADMINISTRATOR, PLANNER, RELIABILITY_ENGINEER, TECHNICIAN
from tests.factories import (
    make_fitted_capacitor,
    make_user,
)

# The suite runs on every core (pytest-xdist, `--dist loadgroup` in .pytest.ini). The tests of one group run
# one after another in one process: those that start real Celery workers on the shared broker or stop and
# start their own Redis and web server on fixed ports, and each simulated fleet's module, whose costly
# import and refit its tests share.
SERIAL_GROUPS = {
    "test_worker.py": "broker",
    "test_faults.py": "broker",
    "test_forecast_simulation.py": "first-simulated-fleet",
    "test_forecast_second_fleet.py": "second-simulated-fleet",
    "test_simulation_bound.py": "simulation-bound",
}


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(items):
    for item in items:
        group = SERIAL_GROUPS.get(item.path.name)
        if group:
            item.add_marker(pytest.mark.xdist_group(group))


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
