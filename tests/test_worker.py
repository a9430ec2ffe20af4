"""The whole path through a real Celery worker over Redis, seen in PostgreSQL.

Runs where CELERY_BROKER_URL and a PostgreSQL DATABASE_URL are set (as .ci/run
sets them); skipped on the embedded default, where tasks run in-process.
"""

import datetime as dt
import os
import subprocess
import time
from pathlib import Path

import pytest
from django.conf import settings
from django.db import connection
from django.db.models import Min
from django.utils import timezone

from fleet.models import Assessment, RefitChunk, RefitRun
from fleet.services.readings import record_reading
from fleet.services.refits import start_fleet_refit
from tests.conftest import worker_command
from tests.factories import make_fitted_capacitor, make_part, quarterly_readings

ROOT = Path(__file__).resolve().parents[1]

pytestmark = [
    pytest.mark.worker,
    pytest.mark.skipif(not settings.CELERY_BROKER_URL, reason="no broker: tasks run in-process"),
    pytest.mark.skipif(connection.vendor != "postgresql", reason="needs a database the worker can share"),
]


@pytest.fixture
def worker(transactional_db):
    from config.celery import app

    app.control.purge()
    db = connection.settings_dict
    url = (
        f"postgres://{db['USER']}:{db['PASSWORD'] or ''}@{db['HOST'] or '127.0.0.1'}:{db['PORT'] or 5432}/{db['NAME']}"
    )
    env = dict(os.environ, DATABASE_URL=url)
    process = subprocess.Popen(
        worker_command(f"ci-{os.getpid()}@%h"),
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    yield process
    process.terminate()
    try:
        process.wait(timeout=20)
    except subprocess.TimeoutExpired:
        process.kill()


def wait_for(condition, seconds=90):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.5)
    return False


def test_a_saved_reading_is_refitted_by_a_worker(worker):
    part = make_part()
    fitted_capacitor = make_fitted_capacitor(part=part)
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 5, 9)), [4.0, 3.97, 3.95, 3.92])
    record_reading(fitted_capacitor=fitted_capacitor, values={"method": "meter", "capacitance_uf": 3.90})
    assert wait_for(lambda: Assessment.objects.filter(fitted_capacitor=fitted_capacitor, is_current=True).exists()), (
        worker.stdout.read() if worker.poll() is not None else "worker did not refit in time"
    )
    assessment = Assessment.objects.get(fitted_capacitor=fitted_capacitor, is_current=True)
    assert assessment.readings_used == 5


def fleet_refit_in_chunks_of_two(capacitors: int) -> RefitRun:
    """A fleet refit of that many read capacitors, in chunks of two, once the worker has done it."""
    part = make_part()
    for i in range(capacitors):
        fitted_capacitor = make_fitted_capacitor(part=part)
        quarterly_readings(
            fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 5, 9)), [4.0, 3.98 - 0.002 * i, 3.96]
        )
    run = start_fleet_refit(chunk_size=2)
    assert wait_for(lambda: RefitRun.objects.get(pk=run.pk).state == RefitRun.State.DONE)
    run.refresh_from_db()
    return run


def test_a_fleet_refit_runs_in_chunks_on_the_worker(worker):
    run = fleet_refit_in_chunks_of_two(5)
    assert (run.done, run.total) == (5, 5)
    assert Assessment.objects.filter(is_current=True).count() == 5


def test_the_worker_keeps_its_database_connection_from_task_to_task(worker):
    # [derived] As a web server keeps its connection from request to request (DB_CONN_MAX_AGE):
    # the connection that ran the first chunk is still open after the last. Closed after every
    # task, none would be left, or one opened after the first chunk.
    run = fleet_refit_in_chunks_of_two(6)
    first_chunk_done = RefitChunk.objects.filter(run=run).aggregate(first=Min("finished_at"))["first"]
    assert RefitChunk.objects.filter(run=run).count() == 3
    with connection.cursor() as cursor:
        cursor.execute(
            "SELECT backend_start FROM pg_stat_activity WHERE datname = current_database() AND pid <> pg_backend_pid()"
        )
        opened = [row[0] for row in cursor.fetchall()]
    assert any(started < first_chunk_done for started in opened), (first_chunk_done, opened)
