"""Load test: concurrent technicians posting readings through gunicorn on loopback.

Not part of pytest (bounded, but it takes a minute and wants PostgreSQL). Run it
against a database with a fleet in it (e.g. after `manage.py demo --no-serve`):

    DATABASE_URL=postgres://... .venv/bin/python -m tests.load.readings --technicians 50 --readings 10

It signs up one technician per thread (a user and an API token), starts gunicorn
on 127.0.0.1, warms its workers up (a worker's first request loads the whole
application, seconds on a busy machine), lets every technician post its readings to the API at once (no
retries: a retry could store a reading twice), stops gunicorn, then checks that
every reading answered 201 is stored exactly once and nothing else is, and
prints the latency percentiles. It stops by itself: a fixed number of readings
and a deadline.
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import socket
import subprocess
import sys
import threading
import time
import uuid
from collections import Counter
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]


def setup_django() -> None:
    sys.path.insert(0, str(ROOT))
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings")
    import django

    django.setup()


def technicians_with_tokens(count: int) -> list[str]:
    from django.contrib.auth.models import Group, User
    from rest_framework.authtoken.models import Token

    from fleet.roles import TECHNICIAN

    group = Group.objects.get(name=TECHNICIAN)
    keys = []
    for number in range(count):
        user, created = User.objects.get_or_create(username=f"load-technician-{number:02d}")
        if created:
            user.set_unusable_password()
            user.save()
            user.groups.add(group)
        keys.append(Token.objects.get_or_create(user=user)[0].key)
    return keys


def targets(count: int) -> list[tuple[int, float]]:
    """Capacitors in service with a current assessment, and a capacitance on their trend."""
    from fleet.models import Assessment

    rows = (
        Assessment.objects.filter(is_current=True, fitted_capacitor__removed_on__isnull=True)
        .order_by("fitted_capacitor_id")
        .values_list("fitted_capacitor_id", "capacitance_now_uf")[:count]
    )
    return [(fitted_capacitor_id, round(capacitance, 3)) for fitted_capacitor_id, capacitance in rows]


def listening(port: int) -> bool:
    with socket.socket() as probe:
        return probe.connect_ex(("127.0.0.1", port)) == 0


def start_gunicorn(port: int, workers: int) -> subprocess.Popen:
    if listening(port):
        raise SystemExit(f"port {port} is taken")
    command = [sys.executable, "-m", "gunicorn", "config.wsgi:application", "--bind", f"127.0.0.1:{port}"]
    command += ["--workers", str(workers), "--timeout", "60", "--log-level", "warning"]
    process = subprocess.Popen(command, cwd=ROOT, env=dict(os.environ, DEBUG="false"))
    deadline = time.monotonic() + 30
    while not listening(port):
        if time.monotonic() > deadline or process.poll() is not None:
            process.kill()
            raise SystemExit("gunicorn did not start")
        time.sleep(0.2)
    return process


def warm_up(port: int, key: str, fitted_capacitor_id: int, requests: int) -> None:
    """Let every gunicorn worker load the application (its first request imports the whole stack)."""

    def read():
        connection = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
        connection.request(
            "GET", f"/api/fitted-capacitors/{fitted_capacitor_id}/readings/", headers={"Authorization": f"Token {key}"}
        )
        connection.getresponse().read()
        connection.close()

    threads = [threading.Thread(target=read) for _ in range(requests)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=90)


def technician(port, key, plan, start, deadline, results, lock):
    """Post this technician's readings one after another on one kept-alive connection."""
    connection = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    headers = {"Authorization": f"Token {key}", "Content-Type": "application/json"}
    start.wait()
    for fitted_capacitor_id, capacitance_uf, marker in plan:
        if time.monotonic() > deadline:
            break
        body = {"method": "meter", "capacitance_uf": capacitance_uf, "notes": marker, "confirmed": True}
        began = time.perf_counter()
        try:
            connection.request(
                "POST", f"/api/fitted-capacitors/{fitted_capacitor_id}/readings/", json.dumps(body), headers
            )
            response = connection.getresponse()
            response.read()
            status = response.status
        except (OSError, http.client.HTTPException) as error:
            status = type(error).__name__
            connection.close()
            connection = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
        with lock:
            results.append((marker, status, time.perf_counter() - began))
    connection.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--technicians", type=int, default=50)
    parser.add_argument("--readings", type=int, default=10, help="readings each technician posts")
    parser.add_argument("--capacitors", type=int, default=40, help="capacitors they share (several on one at once)")
    parser.add_argument("--port", type=int, default=8113)
    parser.add_argument("--workers", type=int, default=3, help="gunicorn workers")
    parser.add_argument("--deadline", type=float, default=180, help="seconds before the technicians stop posting")
    options = parser.parse_args()

    setup_django()
    from django.db import connection

    from fleet.models import Reading

    keys = technicians_with_tokens(options.technicians)
    capacitors = targets(options.capacitors)
    if not capacitors:
        raise SystemExit("no assessed capacitors in this database: run manage.py demo --no-serve first")
    tag = f"load-{uuid.uuid4().hex[:10]}"
    plans = [
        [
            (*capacitors[(t * options.readings + r) % len(capacitors)], f"{tag} t{t:02d} r{r:03d}")
            for r in range(options.readings)
        ]
        for t in range(options.technicians)
    ]
    server = start_gunicorn(options.port, options.workers)
    results, lock, start = [], threading.Lock(), threading.Event()
    try:
        warm_up(options.port, keys[0], capacitors[0][0], requests=4 * options.workers)
        deadline = time.monotonic() + options.deadline
        threads = [
            threading.Thread(
                target=technician, args=(options.port, key, plan, start, deadline, results, lock), daemon=True
            )
            for key, plan in zip(keys, plans, strict=True)
        ]
        for thread in threads:
            thread.start()
        began = time.perf_counter()
        start.set()
        for thread in threads:
            thread.join(timeout=options.deadline + 60)
        wall_s = time.perf_counter() - began
    finally:
        server.terminate()
        server.wait(timeout=30)

    stored = Counter(Reading.objects.filter(notes__startswith=tag).values_list("notes", flat=True))
    created = {marker for marker, status, _ in results if status == 201}
    statuses = Counter(status for _, status, _ in results)
    latencies_ms = np.array([seconds for _, _, seconds in results]) * 1000
    twice = [marker for marker, count in stored.items() if count > 1]
    missing = created - set(stored)
    unexpected = set(stored) - created
    print(
        f"{options.technicians} technicians x {options.readings} readings on {len(capacitors)} capacitors, "
        f"gunicorn {options.workers} workers, {connection.vendor} database {connection.settings_dict['NAME']}"
    )
    print(f"requests {len(results)} in {wall_s:.1f} s ({len(results) / wall_s:.0f}/s); statuses {dict(statuses)}")
    if len(latencies_ms):
        p50, p95, p99 = np.percentile(latencies_ms, [50, 95, 99])
        print(f"latency ms: p50 {p50:.0f}  p95 {p95:.0f}  p99 {p99:.0f}  max {latencies_ms.max():.0f}")
    print(
        f"stored {sum(stored.values())} readings; answered 201 {len(created)}; "
        f"stored twice {len(twice)}; answered 201 but missing {len(missing)}; stored without a 201 {len(unexpected)}"
    )
    exactly_once = (
        not twice and not missing and not unexpected and len(results) == options.technicians * options.readings
    )
    print("every reading stored exactly once" if exactly_once else "FAILED: see the counts above")
    sys.exit(0 if exactly_once else 1)


if __name__ == "__main__":
    main()
