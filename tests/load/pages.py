"""Page benchmark: p50/p95 and query counts of the list pages at plant scale (PostgreSQL).

Not part of pytest; it prints figures and asserts nothing. Build an invented fleet in an
empty, migrated database (SQL set operations: 100,000 motors take about a minute), then time
each page through Django's test client, in-process, signed in as a planner who also reads (technician),
with the median CPU time of this process per request (view, template and database driver):

    export DATABASE_URL=postgres://postgres@127.0.0.1:5432/fleet_bench
    .venv/bin/python manage.py migrate
    .venv/bin/python -m tests.load.pages --build 100000
    .venv/bin/python -m tests.load.pages --requests 40 [--explain]

The fleet: four sites (one holds half the motors), every motor a run capacitor and every
other one a start capacitor as well (150,000 in service at 100,000 motors), one in ten with
a failed capacitor in its history, four quarterly readings per capacitor in service, two
assessments each (last week's and the current one, a few at another risk level), open work
orders for the capacitors to replace now. `--explain` prints EXPLAIN ANALYZE of every query
of each page that took longer than 20 ms. The planner's pages are timed too: the dashboard and its
four CSV downloads, a visit sheet, a site's stock, the stand-in parts and the life data of a part
without and of one with a stored fit (the build
adds spares at every site and each part's stored life fit for them; `--only WORD...` times the pages
whose name holds a word). The latest figures, with the query plans that changed, are in docs/benchmarks.md
("Page figures").

Measured 2026-12-02 on the 2-core machine shared with other work (load average 10 to 15, so read
the ratios more than the milliseconds), 100,000 motors, 40 or 20 requests a page after, 5 before:

    page                 queries before/after   KB before/after   p50 ms before/after   p95 ms before/after
    home                      12 / 12              9 / 9            819 / 165             847 / 198
    plan                      14 / 15             36 / 36         13216 / 430           14860 / 556
    plan, page 40             14 / 15             36 / 36         12488 / 593           13639 / 714
    refits                     8 / 9               4 / 4           5451 / 153            6594 / 169
    work orders                8 / 11            644 / 63          2529 / 503            2777 / 591
    route (big site)           9 / 11          16529 / 35         50010 / 91            62034 / 135
    route, due only            9 / 11           5945 / 35         26783 / 95            31684 / 122
    labels (big site)          - / 10          50,000 QR codes / 44  (not run) / 320     - / 334
    imports                    8 / 8              11 / 11           140 / 52              179 / 66
    motor                     12 / 12              3 / 3            209 / 64              226 / 71
    capacitor                 10 / 10              3 / 3            171 / 80              212 / 96
    API assessments            8 / 8              63 / 63           962 / 137             986 / 161
    API, due soon              8 / 8              63 / 63           383 / 99              519 / 176

Then (same day, load average 9 to 10, the code before and after run in turn on one database):
work orders p50 436-884 / 194-195 ms (p95 671-1528 / 316-574) once each order keeps its motor's site
(the visits are grouped and listed from the work orders alone: 3 ms and 29 ms instead of 58 ms and
116 ms by EXPLAIN ANALYZE); plan p50 256-384 / 228-424 ms, 15 / 14 queries (the changed-this-week
list picks its 50 rows before joining: 5 ms instead of 29-35 ms; the less-risky list is no longer
read, the page never showed it). Left on the plan: its spares total (50-99 ms, a join of every
capacitor for the parts), its page (48-82 ms, sorted by site and walking order through the motors)
and the risk counts (31 ms).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
STORED_FACTS_MIGRATION = "fleet.migrations.0015_list_pages_indexes_and_stored_facts"
SITES = (("BIG", "Main works"), ("NTH", "North plant"), ("STH", "South plant"), ("EST", "East store"))


def setup_django() -> None:
    sys.path.insert(0, str(ROOT))
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "config.settings")
    os.environ.setdefault("ALLOWED_HOSTS", "testserver,127.0.0.1,localhost")
    import django

    django.setup()


FLEET_SQL = """
INSERT INTO fleet_motor (asset_tag, location, route_order, application, motor_type, load_type, rated_voltage_v,
    frequency_hz, poles, output_w, full_load_current_a, rated_speed_rpm, insulation_class, commissioned_on, status,
    circuit_source, site_id)
SELECT 'BM-' || lpad(g::text, 6, '0'), 'Bay ' || (g %% 250), g, 'fan',
    CASE WHEN g %% 2 = 0 THEN 'two_value' ELSE 'permanent_split' END, 'fan_law', 230, 50, 4, 370, 2.6, 1400, '',
    date '2018-01-01', 'in_service', '',
    CASE WHEN g <= %(motors)s / 2 THEN %(big)s ELSE (ARRAY[%(others)s])[1 + g %% 3] END
FROM generate_series(1, %(motors)s) AS g;

INSERT INTO fleet_fittedcapacitor (role, serial, fitted_on, removed_on, removal_reason, notes, part_id, motor_id,
    override_reason, substitute_override)
SELECT 'run', '', date '2018-01-01', date '2021-06-01', 'failed', '', %(run_part)s, m.id, '', false
FROM fleet_motor m WHERE m.route_order %% 10 = 0
UNION ALL
SELECT 'run', '', CASE WHEN m.route_order %% 10 = 0 THEN date '2021-06-01' ELSE date '2018-01-01' END, NULL, '', '',
    %(run_part)s, m.id, '', false
FROM fleet_motor m
UNION ALL
SELECT 'start', '', date '2018-01-01', NULL, '', '', %(start_part)s, m.id, '', false
FROM fleet_motor m WHERE m.motor_type = 'two_value';

INSERT INTO fleet_reading (taken_at, method, capacitance_uf, condition, notes, outlier_confirmed, source, created_at,
    fitted_capacitor_id, case_temperature_c)
SELECT now() - make_interval(days => k * 91 + (c.id %% 120)::int), 'meter', 10.0 - 0.05 * (4 - k) - (c.id %% 7) * 0.01,
    'sound', '', false, 'demo', now() - make_interval(days => k * 91 + (c.id %% 120)::int), c.id, 30
FROM fleet_fittedcapacitor c CROSS JOIN generate_series(0, 3) AS k
WHERE c.removed_on IS NULL;

INSERT INTO fleet_assessment (is_current, model_version, fitted_through, readings_used, readings_flagged,
    flagged_reading_ids, trend_model, slope_pct_per_1000h, slope_sd_pct_per_1000h, low_confidence, capacitance_now_uf,
    latest_verdict, limit_fraction, limit_source, p10_on, p50_on, p90_on, risk, replace_by,
    created_at, fitted_capacitor_id, limits, max_reading_id, reason, set_aside)
SELECT v.is_current, 'bench', now() - interval '10 days', 4, 0, '[]', 'linear', -0.1, 0.02, false, 9.6,
    'within tolerance', 0.9, 'tolerance', current_date + v.days, current_date + v.days + 200,
    current_date + v.days + 400, v.risk, current_date + v.days, v.created_at, v.id, '[]',
    0, 'bench: ' || v.risk, ''
FROM (
    SELECT c.id, w.is_current, w.created_at,
        CASE WHEN r.bucket < 2 THEN 'replace now' WHEN r.bucket < 7 THEN 'due soon'
             WHEN r.bucket < 22 THEN 'watch' ELSE 'sound' END AS risk,
        CASE WHEN r.bucket < 2 THEN 0 WHEN r.bucket < 7 THEN (c.id %% 60)::int
             WHEN r.bucket < 22 THEN 60 + (c.id %% 300)::int ELSE 365 + (c.id * 7919 %% 4000)::int END AS days
    FROM fleet_fittedcapacitor c
    CROSS JOIN (VALUES (false, now() - interval '9 days'), (true, now() - interval '1 day'))
        AS w(is_current, created_at)
    CROSS JOIN LATERAL (SELECT CASE WHEN NOT w.is_current AND c.id %% 40 = 0 THEN (c.id * 31 + 11) %% 100
        ELSE (c.id * 31) %% 100 END AS bucket) AS r
    WHERE c.removed_on IS NULL
) AS v;

INSERT INTO fleet_workorder (kind, due_on, window_days, state, reason, created_at, fitted_capacitor_id, motor_id)
SELECT 'replace_' || c.role, current_date + (c.motor_id %% 4)::int * 14, 14, 'planned', 'replace now: tolerance limit',
    now(), c.id, c.motor_id
FROM fleet_assessment a JOIN fleet_fittedcapacitor c ON c.id = a.fitted_capacitor_id
WHERE a.is_current AND a.risk = 'replace now';
"""


def build(motors: int) -> None:
    """An invented fleet of `motors` motors, written by SQL set operations (PostgreSQL)."""
    from django.contrib.auth.models import Group, User
    from django.db import connection, transaction

    from fleet.models import CapacitorPart, ImportJob, RefitRun, Site
    from fleet.roles import PLANNER, TECHNICIAN

    if connection.vendor != "postgresql":
        raise SystemExit("--build writes with PostgreSQL's set operations: point DATABASE_URL at PostgreSQL")
    started = time.perf_counter()
    with transaction.atomic():
        sites = [Site.objects.create(code=code, name=name, time_zone="UTC") for code, name in SITES]
        common = dict(tolerance_minus_pct=5, tolerance_plus_pct=5, frequency_hz=50, unit_cost=12)
        run_part = CapacitorPart.objects.create(
            code="BENCH-RUN-10", rated_uf=10, rated_voltage_v=450, dielectric="film", **common
        )
        start_part = CapacitorPart.objects.create(
            code="BENCH-START-100", rated_uf=100, rated_voltage_v=250, dielectric="electrolytic", **common
        )
        planner = User.objects.create_user("bench-planner", password="bench-planner-password")
        planner.groups.add(*Group.objects.filter(name__in=[PLANNER, TECHNICIAN]))
        for number in range(12):
            RefitRun.objects.create(state=RefitRun.State.DONE, total=motors, done=motors)
            ImportJob.objects.create(
                kind="readings", filename=f"readings-{number}.csv", content=b"", created_by=planner
            )
        params = {
            "motors": motors,
            "big": sites[0].id,
            "others": ",".join(str(s.id) for s in sites[1:]),
            "run_part": run_part.id,
            "start_part": start_part.id,
        }
        with connection.cursor() as cursor:
            for statement in FLEET_SQL.split(";\n"):
                if statement.strip():
                    step = time.perf_counter()
                    cursor.execute(statement % params)
                    print(f"  {cursor.rowcount:>9,} rows  {time.perf_counter() - step:6.1f} s  {statement.split()[2]}")
        with connection.cursor() as cursor:  # each current assessment's latest change of risk, as refits keep it
            fill = importlib.import_module(STORED_FACTS_MIGRATION).FILL_RISK_HISTORY
            cursor.execute(fill.replace("installation_id", "fitted_capacitor_id"))  # the column's name since 0022
        add_stock_and_life_fits()
    with connection.cursor() as cursor:
        cursor.execute("VACUUM ANALYZE")
    print(f"built {motors:,} motors in {time.perf_counter() - started:.1f} s")


def add_stock_and_life_fits() -> None:
    """Spares held at every site and each part's stored life fit, as a running plant has them (the
    dashboard's spares forecast reads both); run again, it changes nothing."""
    from fleet.models import CapacitorPart, Site, SiteStock
    from fleet.services.lifedata import refresh_life_fits

    for site in Site.objects.all():
        for part in CapacitorPart.objects.all():
            SiteStock.objects.get_or_create(site=site, part=part, defaults={"quantity": 40})
    refresh_life_fits()


def page_urls() -> list[tuple[str, str]]:
    from django.urls import reverse

    from fleet.models import Assessment, FittedCapacitor, WorkOrder
    from fleet.services.dashboard import TABLES

    capacitor = FittedCapacitor.objects.filter(assessments__is_current=True).order_by("id").first()
    assert capacitor is not None and Assessment.objects.exists(), "build a fleet first (--build)"
    big = SITES[0][0]
    visit = WorkOrder.objects.filter(site__code=big).order_by("due_on").values_list("due_on", flat=True).first()
    return [
        ("home", reverse("home")),
        ("dashboard", reverse("dashboard")),
        *((f"dashboard {name}.csv", reverse("dashboard_csv", args=[name])) for name in TABLES),
        ("plan", reverse("plan")),
        ("plan, page 40", reverse("plan") + "?days=365&page=40"),
        ("refits", reverse("refits")),
        ("work orders", reverse("work_orders")),
        ("visit sheet (big site)", reverse("visit_sheet", args=[big, visit.isoformat()])),
        ("site stock", reverse("site_stock", args=[big])),
        ("stand-in parts", reverse("stand_in_parts")),
        ("life data", reverse("life_data")),
        ("life data, fitted part", reverse("life_data") + "?part=BENCH-RUN-10"),
        ("route (big site)", reverse("route", args=[big])),
        ("route, due only", reverse("route", args=[big]) + "?show=due"),
        ("labels (big site)", reverse("labels", args=[big])),
        ("imports", reverse("imports")),
        # Finding a motor: a whole tag (the index), without its separator, a part of one, words of a place.
        ("find, whole tag", reverse("find") + "?tag=bm-050000"),
        ("find, tag without separator", reverse("find") + "?tag=bm050000"),
        ("find, part of a tag", reverse("find") + "?tag=05000"),
        ("find, words of a place", reverse("find") + "?tag=bay+17"),
        ("motor", reverse("motor", args=[capacitor.motor.asset_tag])),
        ("capacitor", reverse("fitted_capacitor", args=[capacitor.id])),
        ("API assessments", reverse("api_assessments")),
        ("API assessments, due soon", reverse("api_assessments") + "?risk=due+soon"),
    ]


def measure(requests: int, explain: bool, skip: list[str], only: list[str]) -> None:
    from django.contrib.auth.models import User
    from django.core.signals import request_started
    from django.db import connection, reset_queries
    from django.test import Client
    from django.test.utils import CaptureQueriesContext

    from fleet.models import Assessment, FittedCapacitor, Motor

    request_started.disconnect(reset_queries)  # or every request would empty the captured list
    client = Client()
    client.force_login(User.objects.get(username="bench-planner"))
    print(
        f"fleet: {Motor.objects.count():,} motors, {FittedCapacitor.objects.count():,} fitted capacitors, "
        f"{Assessment.objects.count():,} assessments ({connection.vendor})"
    )
    print(f"{'page':<28}{'queries':>8}{'KB':>9}{'p50 ms':>9}{'p95 ms':>9}{'CPU ms':>9}")
    for name, url in page_urls():
        if any(word in name for word in skip) or (only and not any(word in name for word in only)):
            continue
        fetch(client, url)  # warm: templates, caches, the connection
        with CaptureQueriesContext(connection) as captured:
            status, body = fetch(client, url)
        queries = list(captured.captured_queries)  # read now: a later request may empty the log
        assert status == 200 or (status == 302 and name.startswith("find")), (name, status)  # a whole tag: its motor
        size_kb = len(body) / 1024
        times, cpu_times = [], []
        for _ in range(requests):
            start, cpu_start = time.perf_counter(), time.process_time()
            fetch(client, url)
            times.append((time.perf_counter() - start) * 1000)
            cpu_times.append((time.process_time() - cpu_start) * 1000)
        p50, p95 = np.percentile(times, [50, 95])
        cpu = np.median(cpu_times)  # this process's CPU a request: steadier than the wall time on a shared machine
        print(f"{name:<28}{len(queries):>8}{size_kb:>9.0f}{p50:>9.0f}{p95:>9.0f}{cpu:>9.0f}", flush=True)
        if explain:
            explain_slow(queries)


def fetch(client, url: str) -> tuple[int, bytes]:
    """One request, its body read to the end (a streamed download's queries run while it streams)."""
    response = client.get(url)
    body = b"".join(response.streaming_content) if response.streaming else response.content
    return response.status_code, body


def explain_slow(queries, threshold_s: float = 0.02) -> None:
    from django.db import connection

    for query in queries:
        if float(query["time"]) < threshold_s or not query["sql"].lstrip().upper().startswith("SELECT"):
            continue
        with connection.cursor() as cursor:
            cursor.execute("EXPLAIN (ANALYZE, BUFFERS OFF) " + query["sql"])
            plan = "\n".join("      " + row[0] for row in cursor.fetchall())
        print(f"    {float(query['time']) * 1000:.0f} ms: {query['sql'][:300]}\n{plan}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--build", type=int, metavar="MOTORS", help="build an invented fleet of this many motors")
    parser.add_argument("--requests", type=int, default=40, help="timed requests per page")
    parser.add_argument("--explain", action="store_true", help="EXPLAIN ANALYZE the queries over 20 ms")
    parser.add_argument("--skip", nargs="*", default=[], help="leave out the pages whose name holds one of these")
    parser.add_argument("--only", nargs="*", default=[], help="time only the pages whose name holds one of these")
    args = parser.parse_args()
    setup_django()
    from django.conf import settings

    settings.DEBUG = False
    if args.build:
        build(args.build)
    else:
        measure(args.requests, args.explain, args.skip, args.only)


if __name__ == "__main__":
    main()
