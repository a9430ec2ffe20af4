"""Two copies of one request at the same moment: the second is answered as a replay of the
first (or refused by name), never with a server error, and nothing is saved twice or lost.

Each race is made deterministic: a barrier holds both threads just before their write, so
both have passed every "was this done already?" check before either writes. On SQLite the
writes then queue on the database's one write lock; on PostgreSQL the second insert waits
on the first's unique index entry until it commits. [derived]
"""

import datetime as dt
import re
import threading
import time
from contextlib import contextmanager
from unittest import mock

import pytest
from django.db import close_old_connections, connection, transaction
from django.test import Client
from django.utils import timezone

from fleet.models import Assessment, FittedCapacitor, Reading
from fleet.services import readings as reading_service
from tests.factories import make_fitted_capacitor, make_user, quarterly_readings

pytestmark = pytest.mark.django_db(transaction=True)

# The test database on SQLite is one shared in-memory cache: a second connection meets table
# locks that wait for nothing ("database table is locked"), which a database file in WAL mode,
# as deployed, does not. The threaded races run on PostgreSQL (as in CI); SQLite takes every
# write transaction in turn (BEGIN IMMEDIATE), and the interleavings it allows are forced in
# one thread below.
threads_race = pytest.mark.skipif(
    connection.vendor != "postgresql",
    reason="two connections at once: PostgreSQL (the SQLite test database is one in-memory cache)",
)


def in_threads(*calls, timeout_s=30.0):
    """Run each call in its own thread with its own connection; their results or exceptions."""
    results = [None] * len(calls)

    def run(index, call):
        try:
            results[index] = call()
        except Exception as error:  # noqa: BLE001 - returned to the test, which asserts on it
            results[index] = error
        finally:
            close_old_connections()
            connection.close()

    threads = [threading.Thread(target=run, args=(i, c)) for i, c in enumerate(calls)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout_s)
    assert not any(t.is_alive() for t in threads), "a thread hung"
    return results


@contextmanager
def held_before(target, name, parties, *, give_up_after_s=None):
    """Patch `target.name` so `parties` callers all arrive before any goes on. With
    `give_up_after_s`, a caller waits that long at most and goes on: for a point that is
    outside a lock before a fix and inside it after (the others wait on the lock)."""
    barrier = threading.Barrier(parties, timeout=give_up_after_s or 20)
    original = getattr(target, name)

    def wait_then_call(*args, **kwargs):
        result = original(*args, **kwargs)
        try:
            barrier.wait()
        except threading.BrokenBarrierError:
            if give_up_after_s is None:
                raise
        return result

    with mock.patch.object(target, name, wait_then_call):
        yield barrier


@pytest.fixture
def capacitor():
    fitted_capacitor = make_fitted_capacitor()
    quarterly_readings(fitted_capacitor, dt.datetime(2025, 1, 1, tzinfo=dt.UTC), [4.0, 3.99, 3.98])
    return fitted_capacitor


@threads_race
def test_the_reading_form_sent_twice_at_once_saves_one_reading(capacitor):
    user = make_user("technician")
    form = {
        "taken_at": timezone.localtime(timezone.now()).strftime("%Y-%m-%dT%H:%M"),
        "method": "meter",
        "capacitance_uf": "3.95",
        "condition": "sound",
        "client_key": "page-1",
    }
    before = Reading.objects.count()

    def send():
        client = Client()
        client.force_login(user)
        return client.post(f"/fitted-capacitors/{capacitor.id}/reading/", form)

    with held_before(reading_service, "check_reading", 2):
        answers = in_threads(send, send)
    assert [getattr(a, "status_code", a) for a in answers] == [302, 302]
    assert Reading.objects.count() == before + 1


@threads_race
def test_one_reading_sent_from_two_pages_at_once_is_saved_once_and_the_other_told(capacitor):
    """A bad-input hunt: the same reading sent at one moment from several pages (each its own key: two tabs, two
    technicians) was saved seven times at one time, each request checked before any was saved. [derived] one
    reading per capacitor, method and second: the time is checked again with the capacitor's row locked."""
    user = make_user("technician")
    taken = timezone.localtime(timezone.now()).strftime("%Y-%m-%dT%H:%M")
    before = Reading.objects.count()

    def send(key):
        def post():
            client = Client()
            client.force_login(user)
            form = {"taken_at": taken, "method": "meter", "capacitance_uf": "3.95", "condition": "sound"}
            return client.post(f"/fitted-capacitors/{capacitor.id}/reading/", {**form, "client_key": key})

        return post

    with held_before(reading_service, "check_reading", 2):
        answers = in_threads(send("tab-1"), send("tab-2"))
    assert sorted(getattr(a, "status_code", a) for a in answers) == [200, 302]
    assert Reading.objects.count() == before + 1
    refused = next(a for a in answers if a.status_code == 200).content.decode()
    assert "This capacitor has a reading at this time already" in refused


@threads_race
def test_two_readings_of_one_capacitor_at_once_leave_one_current_assessment(capacitor):
    """Two technicians (or a phone and the API) save a reading of the same capacitor at the
    same moment: both refits run (in-process here, two workers in production) and must
    not both insert a current assessment (one per capacitor, a unique constraint)."""
    from fleet.services import assessments

    refit = assessments.refit_fitted_capacitors([capacitor.id])
    assert refit.written == 1
    user = make_user("technician")

    def send(key, value):
        def post():
            client = Client()
            client.force_login(user)
            form = {"method": "meter", "capacitance_uf": value, "condition": "sound", "client_key": key}
            return client.post(f"/fitted-capacitors/{capacitor.id}/reading/", form)

        return post

    with held_before(assessments, "_assessment_frame", 2):
        answers = in_threads(send("page-a", "3.96"), send("page-b", "3.97"))
    assert [getattr(a, "status_code", a) for a in answers] == [302, 302]
    current = Assessment.objects.filter(fitted_capacitor=capacitor, is_current=True)
    assert current.count() == 1
    newest = Reading.objects.filter(fitted_capacitor=capacitor).order_by("-id").first()
    assert current.get().max_reading_id == newest.id


def test_a_refit_that_read_fewer_readings_writes_nothing_over_a_newer_one(capacitor):
    """A refit that read the readings, then lost the race to one that read a newer reading,
    leaves the newer assessment current (forced in one thread: the other refit runs at the
    moment the first has computed and not yet written)."""
    from fleet.services import assessments

    original = assessments._assessment_frame
    newer = {}

    def meanwhile_a_newer_reading_is_refit(*args, **kwargs):
        rows = original(*args, **kwargs)
        if "reading" not in newer:
            newer["reading"] = None  # the inner refit goes straight through
            newer["reading"] = reading_service.record_reading(
                fitted_capacitor=capacitor, values={"method": "meter", "capacitance_uf": "3.96", "condition": "sound"}
            )
        return rows

    with mock.patch.object(assessments, "_assessment_frame", meanwhile_a_newer_reading_is_refit):
        outcome = assessments.refit_fitted_capacitors([capacitor.id])
    assert outcome.written == 0
    current = Assessment.objects.get(fitted_capacitor=capacitor, is_current=True)
    assert current.max_reading_id == newer["reading"].id


def replacement_form(fitted_capacitor, serial="X1"):
    return {
        "part": fitted_capacitor.part_id,
        "removed_on": timezone.localdate().isoformat(),
        "removal_reason": "failed",
        "serial": serial,
    }


def stock_of(fitted_capacitor, quantity):
    from fleet.models import SiteStock

    return SiteStock.objects.create(site=fitted_capacitor.motor.site, part=fitted_capacitor.part, quantity=quantity)


def test_the_replacement_form_sent_again_is_answered_as_already_recorded(capacitor):
    """A double tap on "Replace", or the page sent again after a lost answer: one successor, one
    part out of stock, and the technician is sent on to the new capacitor's reading form."""
    stock = stock_of(capacitor, 3)
    client = Client()
    client.force_login(make_user("technician"))
    url = f"/fitted-capacitors/{capacitor.id}/replace/"
    first = client.post(url, replacement_form(capacitor))
    again = client.post(url, replacement_form(capacitor), follow=True)
    successor = FittedCapacitor.objects.get(motor=capacitor.motor, removed_on__isnull=True)
    assert first["Location"].endswith(f"/fitted-capacitors/{successor.id}/reading/")
    assert again.redirect_chain[-1][0].endswith(f"/fitted-capacitors/{successor.id}/reading/")
    assert "already recorded (sent twice)" in again.content.decode()
    stock.refresh_from_db()
    assert stock.quantity == 2
    other = client.post(url, replacement_form(capacitor, serial="X2"))
    assert other.status_code == 200 and "already removed on" in other.content.decode()
    assert FittedCapacitor.objects.filter(motor=capacitor.motor).count() == 2


@threads_race
def test_the_replacement_form_sent_twice_at_once_fits_one_successor(capacitor):
    stock = stock_of(capacitor, 3)
    user = make_user("technician")

    def send():
        client = Client()
        client.force_login(user)
        return client.post(f"/fitted-capacitors/{capacitor.id}/replace/", replacement_form(capacitor))

    with held_before(reading_service, "design_part", 2):
        answers = in_threads(send, send)
    successor = FittedCapacitor.objects.get(motor=capacitor.motor, removed_on__isnull=True)
    assert [getattr(a, "status_code", a) for a in answers] == [302, 302]
    assert {a["Location"] for a in answers} == {f"/fitted-capacitors/{successor.id}/reading/"}
    stock.refresh_from_db()
    assert stock.quantity == 2


@threads_race
def test_an_api_post_sent_twice_at_once_with_one_idempotency_key_saves_one_reading(capacitor):
    user = make_user("technician")
    before = Reading.objects.count()

    def send():
        client = Client()
        client.force_login(user)
        body = {"method": "meter", "capacitance_uf": 3.95, "condition": "sound"}
        return client.post(
            f"/api/fitted-capacitors/{capacitor.id}/readings/",
            body,
            content_type="application/json",
            HTTP_IDEMPOTENCY_KEY="k-1",
        )

    with held_before(reading_service, "check_reading", 2):
        answers = in_threads(send, send)
    assert sorted(getattr(a, "status_code", a) for a in answers) == [200, 201]
    assert len({a.json()["id"] for a in answers}) == 1
    assert Reading.objects.count() == before + 1


def stock_edit(user, site, part, quantity):
    def post():
        client = Client()
        client.force_login(user)
        return client.post(f"/sites/{site.code}/stock/", {f"qty-{part.id}": str(quantity)})

    return post


@threads_race
def test_the_first_stock_of_a_part_set_twice_at_once_keeps_one_row(capacitor):
    from fleet.models import SiteStock
    from fleet.services import register

    site, part = capacitor.motor.site, capacitor.part
    planner = make_user("planner")
    with held_before(register.CapacitorPart.objects, "in_bulk", 2):
        answers = in_threads(stock_edit(planner, site, part, 4), stock_edit(planner, site, part, 5))
    assert [getattr(a, "status_code", a) for a in answers] == [302, 302]
    assert SiteStock.objects.get(site=site, part=part).quantity in {4, 5}


def test_a_stock_form_naming_a_part_number_beyond_any_id_is_refused_by_name(capacitor):
    client = Client()
    client.force_login(make_user("planner"))
    answer = client.post(f"/sites/{capacitor.motor.site.code}/stock/", {"qty-99999999999999999999": "3"})
    assert answer.status_code == 200
    assert "is not in the catalogue" in answer.content.decode()


@threads_race
def test_the_work_order_plan_run_twice_at_once_creates_each_order_once(capacitor):
    """Two planners press "Plan" together: one open order per capacitor, both answered."""
    from fleet.models import WorkOrder
    from fleet.services import assessments, workorders

    quarterly_readings(capacitor, dt.datetime(2025, 10, 1, tzinfo=dt.UTC), [3.5, 3.3])  # well past its limit
    assessments.refit_fitted_capacitors([capacitor.id])
    planner = make_user("planner")

    def plan():
        client = Client()
        client.force_login(planner)
        return client.post("/work-orders/", {"action": "plan", "days": "365"})

    with held_before(workorders, "bundle_visits", 2, give_up_after_s=3):
        answers = in_threads(plan, plan)
    assert [getattr(a, "status_code", a) for a in answers] == [302, 302]
    assert WorkOrder.objects.filter(fitted_capacitor=capacitor).count() == 1


def test_a_visit_issued_with_a_site_number_beyond_any_id_is_answered_not_found(capacitor):
    client = Client()
    client.force_login(make_user("planner"))
    answer = client.post(
        "/work-orders/", {"action": "issue", "day": "2026-01-05", "site": "99999999999999999999"}, follow=True
    )
    assert answer.status_code == 200
    assert "no planned work orders" in answer.content.decode()


def test_the_import_button_pressed_twice_at_once_imports_once_and_keeps_the_count():
    """Both presses read the job as checked; the one that comes second must not queue a second
    run (which would find every row a duplicate and record "0 imported" over the first's count).
    Forced in one thread: the other press is answered whole between this one's read and its queueing."""
    from fleet.models import ImportJob
    from fleet.services.import_jobs import check_job, create_job
    from fleet.views import imports as views
    from tests.test_imports import csv_of, fleet_of, good_rows

    fleet_of(2)
    technician = make_user("technician")
    job = check_job(
        create_job(
            kind="readings", filename="q.csv", content=csv_of(good_rows(["IMP-0000", "IMP-0001"], 2)), user=technician
        ).id
    )
    assert job.state == ImportJob.State.CHECKED and job.good_rows == 4
    client = Client()
    client.force_login(technician)
    url = f"/imports/{job.id}/"
    original, other = views.queue_import, []

    def the_other_press_first(*args, **kwargs):
        if not other:
            other.append(None)  # the other press goes straight through
            other[0] = client.post(url, {"action": "all"})
        return original(*args, **kwargs)

    with mock.patch.object(views, "queue_import", the_other_press_first):
        answer = client.post(url, {"action": "all"})
    assert answer.status_code == 302 and other[0].status_code == 302
    job.refresh_from_db()
    assert job.state == ImportJob.State.DONE and job.imported_rows == 4
    assert Reading.objects.count() == 4


def test_the_other_copy_saved_between_the_check_and_the_insert_is_answered_as_the_replay(capacitor):
    """The reading form's race forced in one thread (both databases): the other copy of the page
    is saved after this one looked for its key and before it inserts; the unique key's clash is
    answered as that copy's replay, not a 500."""
    user = make_user("technician")
    values = {"method": "meter", "capacitance_uf": "3.95", "condition": "sound"}
    original, other = reading_service.check_reading, []

    def the_other_copy_first(*args, **kwargs):
        if not other:
            other.append(None)  # the other copy goes straight through
            other[0] = reading_service.record_reading(
                fitted_capacitor=capacitor, values=dict(values), user=user, client_key="page-1"
            )
        return original(*args, **kwargs)

    with mock.patch.object(reading_service, "check_reading", the_other_copy_first):
        reading = reading_service.record_reading(
            fitted_capacitor=capacitor, values=dict(values), user=user, client_key="page-1"
        )
    assert reading.replayed and reading.pk == other[0].pk and not other[0].replayed
    assert Reading.objects.filter(fitted_capacitor=capacitor).count() == 4


def stock_form(client, site) -> dict:
    """The stock page's inputs as the planner's browser would send them back untouched."""
    page = client.get(f"/sites/{site.code}/stock/").content.decode()
    return form_inputs(page)


def form_inputs(page: str) -> dict:
    return dict(re.findall(r'<input[^>]*name="((?:qty|was)-\d+)"[^>]*value="(\d*)"', page))


def route_inputs(client, route: str) -> dict:
    """The walking-order boxes of a route page as the client sees it: each motor's place and the place shown."""
    page = client.get(route).content.decode()
    return dict(re.findall(r'<input[^>]*name="((?:order|was)-\d+)"[^>]*value="(\d*)"', page))


def test_a_walking_order_saved_meanwhile_by_another_planner_is_not_undone(capacitor):
    """A bad-input hunt: two planners opened one site's route; the first moved motor A and saw "Walking order
    saved."; the second, from the page as loaded, moved motor B and saved: A was back at its old place, and
    nobody was told. [derived] as the stock page: a box left as shown is not written; a box typed over while
    its place moved is refused by name, nothing saved."""
    from tests.factories import make_motor

    site = capacitor.motor.site
    first, second = capacitor.motor, make_motor(site=site)
    one, other = Client(), Client()
    one.force_login(make_user("planner"))
    other.force_login(make_user("planner"))
    route = f"/sites/{site.code}/route/"

    form_one, form_other = route_inputs(one, route), route_inputs(other, route)
    assert one.post(route, {**form_one, f"order-{first.id}": "50"}).status_code == 302
    assert other.post(route, {**form_other, f"order-{second.id}": "60"}).status_code == 302
    first.refresh_from_db(), second.refresh_from_db()
    assert (first.route_order, second.route_order) == (50, 60)

    refused = other.post(route, {**form_other, f"order-{first.id}": "7"})
    assert refused.status_code == 200
    assert f"{first.asset_tag}: moved from place {form_other[f'was-{first.id}']} to 50 while this page was open" in (
        refused.content.decode()
    )
    first.refresh_from_db()
    assert first.route_order == 50


def test_a_replacement_between_the_stock_page_and_its_save_is_not_undone(capacitor):
    """Forced in one thread (both databases): the planner opens the stock page (3 of the part), a
    replacement takes one, then the planner saves a change to another part: the draw stays (2 left),
    the other part is saved. A quantity the planner changed while it moved is refused by name."""
    from fleet.models import SiteStock
    from tests.factories import make_part

    site, part, other = capacitor.motor.site, capacitor.part, make_part(code="SPARE-B")
    stock = stock_of(capacitor, 3)
    planner = Client()
    planner.force_login(make_user("planner"))
    form = stock_form(planner, site)
    assert form[f"qty-{part.id}"] == "3"
    successor = reading_service.replace_capacitor(
        fitted_capacitor=capacitor, part=part, serial="X1", notes="", removed_on=timezone.localdate(), reason="failed"
    )
    assert successor.from_stock and successor.stock_left == 2
    assert planner.post(f"/sites/{site.code}/stock/", {**form, f"qty-{other.id}": "6"}).status_code == 302
    stock.refresh_from_db()
    assert stock.quantity == 2 and SiteStock.objects.get(site=site, part=other).quantity == 6
    form = stock_form(planner, site)
    reading_service.replace_capacitor(
        fitted_capacitor=successor, part=part, serial="X2", notes="", removed_on=timezone.localdate(), reason="failed"
    )
    refused = planner.post(f"/sites/{site.code}/stock/", {**form, f"qty-{part.id}": "5", f"qty-{other.id}": "7"})
    assert refused.status_code == 200
    text = refused.content.decode()
    assert f"{part.code}: changed from 2 to 1 while this page was open" in text
    stock.refresh_from_db()
    assert stock.quantity == 1 and SiteStock.objects.get(site=site, part=other).quantity == 6  # nothing saved
    again = form_inputs(text)
    assert again[f"qty-{part.id}"] == "5" and again[f"was-{part.id}"] == "1"  # the typed count, the new base
    assert planner.post(f"/sites/{site.code}/stock/", again).status_code == 302
    stock.refresh_from_db()
    assert stock.quantity == 5 and SiteStock.objects.get(site=site, part=other).quantity == 7


def test_a_stock_count_another_planner_raised_meanwhile_is_not_put_down_to_a_replacement(capacitor):
    """Two planners on one stock page: the first saves 11 where 1 was shown; the second's 12 is refused, saying
    someone else saved it. A walk found it put down to "a replacement takes one" though the count rose."""
    from fleet.models import SiteStock

    site, part = capacitor.motor.site, capacitor.part
    stock = stock_of(capacitor, 1)
    first, second = Client(), Client()
    first.force_login(make_user("planner"))
    second.force_login(make_user("planner"))
    form_first, form_second = stock_form(first, site), stock_form(second, site)
    assert first.post(f"/sites/{site.code}/stock/", {**form_first, f"qty-{part.id}": "11"}).status_code == 302
    refused = second.post(f"/sites/{site.code}/stock/", {**form_second, f"qty-{part.id}": "12"})
    assert refused.status_code == 200
    text = refused.content.decode()
    assert f"{part.code}: changed from 1 to 11 while this page was open (someone else saved it); count again" in text
    assert "replacement took" not in text
    stock.refresh_from_db()
    assert stock.quantity == 11 and SiteStock.objects.filter(site=site).count() == 1


def test_the_same_place_or_count_typed_by_two_planners_meanwhile_is_no_conflict(capacitor):
    """Two planners on one route page, and on one stock page: the first saves a motor's place (a part's count),
    the second, from the page as loaded, types the same. Before: the second was refused ("moved ... while this
    page was open"), the one save of the admin's rule (`shown_values.moved_meanwhile`: the same value typed by
    both is no conflict) not applied there. [derived] the second save goes through, writing nothing more; a
    different value typed over a moved one is still refused at its motor (part)."""
    from fleet.models import AuditEntry, SiteStock

    site, motor, part = capacitor.motor.site, capacitor.motor, capacitor.part
    stock = stock_of(capacitor, 1)
    first, second = Client(), Client()
    first.force_login(make_user("planner"))
    second.force_login(make_user("planner"))
    route = f"/sites/{site.code}/route/"

    route_first, route_second = route_inputs(first, route), route_inputs(second, route)
    stock_first, stock_second = stock_form(first, site), stock_form(second, site)
    assert first.post(route, {**route_first, f"order-{motor.id}": "50"}).status_code == 302
    assert first.post(f"/sites/{site.code}/stock/", {**stock_first, f"qty-{part.id}": "11"}).status_code == 302
    audited = AuditEntry.objects.count()

    assert second.post(route, {**route_second, f"order-{motor.id}": "50"}).status_code == 302
    assert second.post(f"/sites/{site.code}/stock/", {**stock_second, f"qty-{part.id}": "11"}).status_code == 302
    motor.refresh_from_db(), stock.refresh_from_db()
    assert (motor.route_order, stock.quantity, SiteStock.objects.filter(site=site).count()) == (50, 11, 1)
    assert AuditEntry.objects.count() == audited  # nothing written twice

    refused = second.post(route, {**route_second, f"order-{motor.id}": "51"})
    assert f"{motor.asset_tag}: moved from place {route_second[f'was-{motor.id}']} to 50 while" in (
        refused.content.decode()
    )
    refused = second.post(f"/sites/{site.code}/stock/", {**stock_second, f"qty-{part.id}": "12"})
    assert f"{part.code}: changed from 1 to 11 while this page was open (someone else saved it)" in (
        refused.content.decode()
    )
    motor.refresh_from_db(), stock.refresh_from_db()
    assert (motor.route_order, stock.quantity) == (50, 11)


@threads_race
@pytest.mark.parametrize("planner_types", [None, 5])
@pytest.mark.parametrize("replacement_held_at", ["design_part", "_take_from_stock"])
def test_a_stock_save_and_a_replacement_at_once_lose_neither(capacitor, planner_types, replacement_held_at):
    """The planner saves the stock page (leaving the part as shown, or typing 5) while a replacement
    takes one of that part. Both meet at one barrier: the planner before its locks, the replacement
    before its locks (either may write first) or just after taking the part, uncommitted (the draw
    goes first). Either order is right; losing the draw is not. [derived]"""
    from fleet.models import SiteStock
    from fleet.services import register
    from tests.factories import make_part

    site, part, other = capacitor.motor.site, capacitor.part, make_part(code="SPARE-B")
    stock = stock_of(capacitor, 3)
    planner, technician = Client(), Client()
    planner.force_login(make_user("planner"))
    technician.force_login(make_user("technician"))
    form = {**stock_form(planner, site), f"qty-{other.id}": "6"}
    if planner_types is not None:
        form[f"qty-{part.id}"] = str(planner_types)
    barrier = threading.Barrier(2, timeout=20)  # one barrier for two different points

    def after_barrier(original):
        def call(*args, **kwargs):
            result = original(*args, **kwargs)
            barrier.wait()
            return result

        return call

    held = getattr(reading_service, replacement_held_at)
    with (
        mock.patch.object(
            register.CapacitorPart.objects, "in_bulk", after_barrier(register.CapacitorPart.objects.in_bulk)
        ),
        mock.patch.object(reading_service, replacement_held_at, after_barrier(held)),
    ):
        saved, replaced = in_threads(
            lambda: planner.post(f"/sites/{site.code}/stock/", form),
            lambda: technician.post(f"/fitted-capacitors/{capacitor.id}/replace/", replacement_form(capacitor)),
        )
    assert getattr(replaced, "status_code", replaced) == 302
    assert FittedCapacitor.objects.filter(motor=capacitor.motor, removed_on__isnull=True).count() == 1
    stock.refresh_from_db()
    if planner_types is None:  # the part left as shown: the draw is kept whichever went first
        assert getattr(saved, "status_code", saved) == 302 and stock.quantity == 2
        assert SiteStock.objects.get(site=site, part=other).quantity == 6
    elif saved.status_code == 302:  # the count went first, then the draw
        assert replacement_held_at == "design_part"
        assert stock.quantity == 4 and SiteStock.objects.get(site=site, part=other).quantity == 6
    else:  # the draw went first: the count typed over a moved quantity is refused by name, nothing saved
        assert "changed from 3 to 2 while this page was open" in saved.content.decode()
        assert stock.quantity == 2 and not SiteStock.objects.filter(site=site, part=other).exists()


@threads_race
@pytest.mark.parametrize("key", ["", "correction-1"])
def test_an_api_correction_sent_twice_at_once_stores_one_and_answers_the_other_as_its_replay(capacitor, key):
    """Two copies of one correction at once, held past every check: the second insert meets the
    first's on the corrected reading (a reading is corrected once) and is answered 200 with it."""
    user = make_user("technician")
    wrong = Reading.objects.filter(fitted_capacitor=capacitor).order_by("id").last()
    headers = {"HTTP_IDEMPOTENCY_KEY": key} if key else {}

    def send():
        client = Client()
        client.force_login(user)
        body = {"method": "meter", "capacitance_uf": 3.97, "condition": "sound", "supersedes": wrong.id}
        return client.post(
            f"/api/fitted-capacitors/{capacitor.id}/readings/", body, content_type="application/json", **headers
        )

    with held_before(reading_service, "check_reading", 2):
        answers = in_threads(send, send)
    assert sorted(getattr(a, "status_code", a) for a in answers) == [200, 201]
    assert len({a.json()["id"] for a in answers}) == 1
    assert Reading.objects.filter(supersedes=wrong).count() == 1
    assert Reading.objects.filter(fitted_capacitor=capacitor).count() == 4


@threads_race
def test_a_walking_order_edited_while_a_refit_runs_reaches_the_new_assessment(capacitor):
    """The route form saves a new walking order while a refit of the motor's capacitor has read
    its motor's order and not yet written: the assessment the refit writes ends with the new
    order, as the plan sorts by it (the route form waits for the refit's lock; before, the refit
    wrote the order it had read, and the new one reached nothing until the next refit). [derived]"""
    from fleet.services import assessments
    from fleet.services.register import set_route_order

    assessments.refit_fitted_capacitors([capacitor.id])
    motor = capacitor.motor
    facts_read, route_saved = threading.Event(), threading.Event()
    original = assessments._capacitor_facts_locked

    def read_then_give_the_route_form_its_chance(ids):
        facts = original(ids)
        facts_read.set()
        route_saved.wait(2.0)  # before the fix the form saves here; after, it waits for this commit
        return facts

    def refit():
        with mock.patch.object(assessments, "_capacitor_facts_locked", read_then_give_the_route_form_its_chance):
            return assessments.refit_fitted_capacitors([capacitor.id], force=True)

    def edit_route():
        assert facts_read.wait(10.0)
        count = set_route_order(site=motor.site, positions={motor.id: str(motor.route_order + 7)})
        route_saved.set()
        return count

    outcome, saved = in_threads(refit, edit_route)
    assert getattr(outcome, "written", outcome) == 1 and saved.updated == 1
    motor.refresh_from_db()
    current = Assessment.objects.get(fitted_capacitor=capacitor, is_current=True)
    assert current.route_order == motor.route_order


def _read_again_order(capacitor, state="planned"):
    from fleet.models import WorkOrder

    return WorkOrder.objects.create(
        motor=capacitor.motor,
        fitted_capacitor=capacitor,
        kind=WorkOrder.Kind.READ_AGAIN,
        state=state,
        due_on=timezone.localdate() + dt.timedelta(days=3),
    )


def _reading_form(key: str) -> dict:
    return {
        "taken_at": timezone.localtime(timezone.now()).strftime("%Y-%m-%dT%H:%M"),
        "method": "meter",
        "capacitance_uf": "3.95",
        "condition": "sound",
        "client_key": key,
    }


@threads_race
@pytest.mark.parametrize("first", ["cancel", "reading"])
def test_a_cancel_while_a_reading_closes_the_read_again_order_leaves_one_end_and_its_trail(capacitor, first):
    """The planner cancels a "read again" order as the technician's reading closes it. One of them
    closes it, the other is waited for and finds it closed: the reading is saved either way, the order
    ends cancelled or done, and the audit trail holds that one change only. The cancel that came second
    is told who closed it and when. [derived] Forced: the first writer holds its row, uncommitted,
    until the second has started its own write."""
    from fleet.models import AuditEntry, WorkOrder
    from fleet.services import workorders
    from fleet.views import planning

    order = _read_again_order(capacitor)
    planner, technician = make_user("planner"), make_user("technician")
    first_wrote, second_started = threading.Event(), threading.Event()
    write, start_cancel = workorders.audited_update, planning.cancel_order

    def holding(call):  # the first writer writes, then keeps its row uncommitted until the second starts
        count = call()
        first_wrote.set()
        second_started.wait(20)
        time.sleep(0.5)  # the second is at its read of the row: a wait on the first's lock
        return count

    def after_first(call):  # the second writer starts once the first has written
        assert first_wrote.wait(20)
        second_started.set()
        return call()

    def audited_update(queryset, **values):
        def call():
            return write(queryset, **values)

        if "cancel_reason" in values:  # the cancel's write
            return holding(call) if first == "cancel" else call()
        return holding(call) if first == "reading" else after_first(call)

    def cancel_order(**kwargs):
        return after_first(lambda: start_cancel(**kwargs)) if first == "reading" else start_cancel(**kwargs)

    def cancel():
        client = Client()
        client.force_login(planner)
        return client.post(f"/work-orders/{order.id}/cancel/", {"reason": "motor to be scrapped"}, follow=True)

    def read():
        client = Client()
        client.force_login(technician)
        return client.post(f"/fitted-capacitors/{capacitor.id}/reading/", _reading_form("race-1"))

    readings = Reading.objects.count()
    with (
        mock.patch.object(workorders, "audited_update", audited_update),
        mock.patch.object(planning, "cancel_order", cancel_order),
    ):
        cancelled, read_answer = in_threads(cancel, read)
    assert getattr(read_answer, "status_code", read_answer) == 302
    assert Reading.objects.count() == readings + 1  # the technician's reading is kept whatever happened
    order.refresh_from_db()
    assert order.state == ("cancelled" if first == "cancel" else "done")
    trail = AuditEntry.objects.filter(
        model="fleet.workorder", object_id=str(order.id), action="update", changes__has_key="state"
    )
    assert [entry.changes["state"] for entry in trail] == [["planned", order.state]]
    text = cancelled.content.decode()
    if first == "reading":
        assert f"it was done, closed by {technician.username} on " in text and "Nothing changed." in text
        assert WorkOrder.objects.get(pk=order.id).cancel_reason is None
    else:
        assert "Work order cancelled" in text


@threads_race
def test_two_planners_moving_one_visit_at_once_move_it_once_and_the_other_is_told_where(capacitor):
    """Two planners move the same visit, to different days, at the same moment. [derived] The orders are
    locked before they move: one move wins whole (every order on its day, one audit entry each), the other
    finds the visit gone and is told where it went and by whom; nothing is split between the two days."""
    from fleet.models import AuditEntry, WorkOrder
    from fleet.services import workorders
    from tests.factories import make_fitted_capacitor, make_motor

    today = timezone.localdate()
    day = today + dt.timedelta(days=7)
    while day.weekday() >= 5:
        day += dt.timedelta(days=1)
    days = [d for d in (day + dt.timedelta(days=n) for n in range(1, 10)) if d.weekday() < 5][:2]
    others = [make_fitted_capacitor(motor=make_motor(site=capacitor.motor.site)) for _ in range(3)]
    for fitted_capacitor in [capacitor, *others]:
        WorkOrder.objects.create(
            motor=fitted_capacitor.motor, fitted_capacitor=fitted_capacitor, kind="replace_run", due_on=day
        )
    planners = [make_user("planner"), make_user("planner")]
    sheet = f"/work-orders/{capacitor.motor.site.code}/{day.isoformat()}/"

    def move(planner, to_day):
        def send():
            client = Client()
            client.force_login(planner)
            return client.post(sheet, {"to_day": to_day.isoformat()}, follow=True)

        return send

    with held_before(workorders, "visit_day_problem", 2):
        answers = in_threads(move(planners[0], days[0]), move(planners[1], days[1]))
    on_days = set(WorkOrder.objects.values_list("due_on", flat=True))
    assert len(on_days) == 1 and on_days <= set(days)  # whole, on one of the two days
    (won,) = on_days
    winner, loser = (answers[0], answers[1]) if won == days[0] else (answers[1], answers[0])
    assert "Visit moved from" in winner.content.decode()
    told = loser.content.decode()
    winner_name = planners[days.index(won)].username
    assert f"to {won:%a %Y-%m-%d} by {winner_name} on " in told and "nothing moved" in told
    moves = AuditEntry.objects.filter(model="fleet.workorder", action="update", changes__has_key="due_on")
    assert moves.count() == 4 and {tuple(e.changes["due_on"]) for e in moves} == {(day.isoformat(), won.isoformat())}


def readings_file() -> tuple[bytes, callable]:
    """A readings file of two motors' readings, and how many readings are stored."""
    from tests.test_imports import csv_of, fleet_of, good_rows

    fleet_of(2)
    return csv_of(good_rows(["IMP-0000", "IMP-0001"], 2)), Reading.objects.count


def history_file() -> tuple[bytes, callable]:
    """A history file of a motor's four past run capacitors, and how many past capacitors are stored."""
    from tests.test_imports import csv_of, fleet_of

    (motor,) = fleet_of(1)
    part = FittedCapacitor.objects.get(motor=motor).part.code
    rows = [
        [motor.asset_tag, "run", part, "2012-01-10", "2016-03-01", "failed"],
        [motor.asset_tag, "run", part, "2016-03-01", "2019-12-31", "planned"],
        [motor.asset_tag, "run", part, "2010-05-02", "2012-01-10", "other"],
        [motor.asset_tag, "run", part, "2008-01-01", "2010-05-02", "failed"],
    ]
    header = ["asset_tag", "role", "part_code", "fitted_on", "removed_on", "removal_reason"]
    return csv_of(rows, header=header), FittedCapacitor.objects.filter(removed_on__isnull=False).count


@threads_race
@pytest.mark.parametrize(("kind", "file_of"), [("readings", readings_file), ("history", history_file)])
def test_two_imports_of_one_file_at_once_save_each_row_once_and_say_so(kind, file_of):
    """Two import jobs of one file run together (two uploads, two workers), both checked, every row found new,
    before either writes. Before: both jobs ended "4 imported"; the readings were saved once (the second's
    were skipped on their key, unseen), the past capacitors twice. [derived] each row is saved once, and each
    job reports what it saved: the one that waited finds the other's rows already imported and says so."""
    from fleet.models import ImportJob
    from fleet.services import import_jobs

    content, stored = file_of()
    planner = make_user("planner")
    jobs = [
        import_jobs.check_job(import_jobs.create_job(kind=kind, filename=f"{n}.csv", content=content, user=planner).id)
        for n in range(2)
    ]
    assert [(job.good_rows, job.error_rows) for job in jobs] == [(4, 0), (4, 0)]

    def run(job):
        return lambda: import_jobs.run_job(job.id, ImportJob.Mode.ALL_OR_NOTHING)

    with held_before(import_jobs, "check_file", 2, give_up_after_s=3):
        answers = in_threads(run(jobs[0]), run(jobs[1]))
    assert not any(isinstance(answer, Exception) for answer in answers), answers
    assert stored() == 4
    second, first = sorted(answers, key=lambda job: job.imported_rows)
    assert (first.state, first.imported_rows, first.message) == (ImportJob.State.DONE, 4, "")
    assert (second.state, second.imported_rows, second.good_rows, second.duplicate_rows) == (
        ImportJob.State.DONE,
        0,
        0,
        4,
    )
    assert second.message == (
        "4 rows the check found new were already imported when this import ran (another import, the reading form "
        "or the API saved them meanwhile): counted as already imported, not saved again; this import saved 0 rows."
    )


def _reading_form_now(client_key: str) -> dict:
    """The reading form as sent for a meter reading of 3.9513 µF taken now, under its one-time key."""
    now = timezone.localtime(timezone.now()).strftime("%Y-%m-%dT%H:%M")
    return {
        "taken_at": now,
        "method": "meter",
        "capacitance_uf": "3.9513",
        "condition": "sound",
        "client_key": client_key,
    }


@threads_race
def test_a_reading_saved_while_an_import_writes_waits_a_bounded_time_and_keeps_every_value(capacitor, settings):
    """A reading saved on the form while a large readings import wrote waited on the import's lock for the whole
    write (21 s for 250,000 rows on a busy 2-core machine), unbounded: past the web server's timeout the request was
    ended with no words. [derived] it waits FLEET_WRITE_WAIT_MS at most, then the form comes back with every value
    and says it was not saved; nothing is saved; once the import is done, Save again stores it once."""
    settings.FLEET_WRITE_WAIT_MS = 300
    user = make_user("technician")
    form = {**_reading_form_now("page-busy"), "notes": "fan hums at start"}
    before = Reading.objects.count()
    writing, done = threading.Event(), threading.Event()

    def import_write():
        with transaction.atomic():
            reading_service.hold_reading_saves(bulk=True)
            writing.set()
            done.wait(20)

    def save():
        writing.wait(20)
        client = Client(raise_request_exception=False)  # the API's answer as its caller gets it
        client.force_login(user)
        try:
            api = client.post(
                f"/api/fitted-capacitors/{capacitor.id}/readings/",
                {"method": "meter", "capacitance_uf": 3.9513, "condition": "sound"},
                content_type="application/json",
            )
            return client.post(f"/fitted-capacitors/{capacitor.id}/reading/", form), api
        finally:
            done.set()

    _, (answer, api) = in_threads(import_write, save)
    # The API, waiting as long, answers 503 saying the database was busy and nothing was saved: not a 500.
    assert api.status_code == 503 and "nothing was saved" in api.json()["detail"] and api.json()["retry_after_s"]
    page = answer.content.decode()
    assert answer.status_code == 200 and "Not saved yet" in page and "press Save again" in page, page[:300]
    assert 'value="3.9513"' in page and "fan hums at start" in page
    assert Reading.objects.count() == before
    client = Client()
    client.force_login(user)
    assert client.post(f"/fitted-capacitors/{capacitor.id}/reading/", form).status_code == 302
    assert Reading.objects.count() == before + 1
    with transaction.atomic():  # the bounded wait ends with its save: later waits in the transaction are as before
        reading_service.hold_reading_saves(bulk=False)
        with connection.cursor() as cursor:
            cursor.execute("SHOW lock_timeout")
            assert cursor.fetchone()[0] == "0"


def test_a_reading_refused_by_a_busy_database_is_not_summed_up_as_something_to_put_right(capacitor):
    """A walk: a reading sent while an import held SQLite's write lock came back headed "Not saved: 1 to put
    right", as if the technician had typed something wrong. [ours] the summary says nothing typed is wrong; the
    busy words below it say to press Save again."""
    from django.db import OperationalError

    client = Client()
    client.force_login(make_user("technician"))
    with mock.patch("fleet.views.field.record_reading", side_effect=OperationalError("database is locked")):
        answer = client.post(f"/fitted-capacitors/{capacitor.id}/reading/", _reading_form_now("page-locked-2"))
    summary = re.search(r'<div class="error-summary".*?</strong>', answer.content.decode(), re.S).group(0)
    assert "nothing you typed is wrong" in summary and "to put right" not in summary


def test_a_reading_refused_by_a_busy_database_comes_back_with_every_value(capacitor):
    """The embedded default: SQLite's write lock held past the busy timeout by a large import or a backup. Before,
    the reading form answered the 503 page and the values lived on only in the phone's draft. [derived] the form
    comes back, every value kept, saying nothing was saved and to press Save again; any other database error
    still reaches the error handler."""
    from django.db import OperationalError

    user = make_user("technician")
    client = Client()
    client.force_login(user)
    form = _reading_form_now("page-locked")
    target = "fleet.views.field.record_reading"
    with mock.patch(target, side_effect=OperationalError("database is locked")):
        answer = client.post(f"/fitted-capacitors/{capacitor.id}/reading/", form)
    page = answer.content.decode()
    assert answer.status_code == 200 and "Not saved yet" in page and 'value="3.9513"' in page
    with (
        mock.patch(target, side_effect=OperationalError("server closed the connection")),
        pytest.raises(OperationalError),
    ):
        client.post(f"/fitted-capacitors/{capacitor.id}/reading/", form)
