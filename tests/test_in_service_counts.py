"""The ledgers of counts kept by triggers (`InServiceCount`, migration 0023; `MotorReadCount`, migration 0028)
equal a count from scratch after every kind of write: refits, readings and corrections, replacements,
removals, a motor moving or retiring, register corrections, deletions and imports. [derived: the ledger is the
sum of each row's share, so it must equal the shares of the rows as they stand.] Runs on SQLite and PostgreSQL
alike."""

from __future__ import annotations

import datetime as dt
from collections import Counter

import pytest
from django.db import connection
from django.db.models import Count, F, Max, Sum
from django.db.models.functions import TruncDate, TruncMonth
from django.utils import timezone

from fleet.models import Assessment, DesignCount, FittedCapacitor, InServiceCount, Motor, MotorReadCount
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.counts import compact_counts, in_service_counts
from fleet.services.readings import record_reading, replace_capacitor
from fleet.services.substitutes import DESIGN_FIELDS
from tests.factories import (
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_reading,
    make_site,
    quarterly_readings,
    stored_assessment,
)
from tests.test_import_command import migrate_all
from tests.test_page_queries import SOUND, Fleet

pytestmark = pytest.mark.django_db


def from_scratch() -> dict:
    """Capacitors in service and their current assessments, counted through capacitors and motors
    (not through any stored copy of the site or part)."""
    assessed = (
        Assessment.objects.filter(is_current=True, fitted_capacitor__removed_on__isnull=True)
        .values_list(
            "fitted_capacitor__motor__site_id",
            "fitted_capacitor__part_id",
            "risk",
            TruncDate("created_at", tzinfo=dt.UTC),
        )
        .annotate(n=Count("id"))
        .order_by()
    )
    fitted = (
        FittedCapacitor.objects.filter(removed_on__isnull=True)
        .values_list("motor__site_id", "part_id", TruncMonth("fitted_on"))
        .annotate(n=Count("id"))
        .order_by()
    )
    return {
        "assessed": {tuple(row[:-1]): row[-1] for row in assessed},
        "fitted": {tuple(row[:-1]): row[-1] for row in fitted},
    }


def from_ledger() -> dict:
    counts = in_service_counts()
    return {"assessed": counts.assessed, "fitted": counts.fitted}


def motors_from_scratch() -> dict:
    """Motors in service by site, UTC day of the newest reading of any capacitor ever fitted to them (not the
    stored `last_read_at`) and, never read, day commissioned."""
    rows = (
        Motor.objects.filter(status=Motor.Status.IN_SERVICE)
        .annotate(newest=Max("capacitors__readings__taken_at"))
        .values_list("site_id", "commissioned_on", "newest")
    )
    return dict(
        Counter(
            (site_id, None, commissioned) if newest is None else (site_id, newest.astimezone(dt.UTC).date(), None)
            for site_id, commissioned, newest in rows
        )
    )


def motors_from_ledger() -> dict:
    rows = (
        MotorReadCount.objects.values_list("site_id", "last_read_on", "commissioned_on")
        .annotate(total=Sum("n"))
        .exclude(total=0)
        .order_by()
    )
    return {tuple(row[:-1]): row[-1] for row in rows}


DESIGN_KEY = ["site_id", "part_id", "role", *DESIGN_FIELDS]


def designs_from_scratch() -> dict:
    """Capacitors in service on motors in service by site, part, role and the motor's design, stop-gaps
    (fitted against the advice) left out."""
    rows = (
        FittedCapacitor.objects.filter(
            removed_on__isnull=True, motor__status=Motor.Status.IN_SERVICE, substitute_override=False
        )
        .values_list("motor__site_id", "part_id", "role", *(f"motor__{name}" for name in DESIGN_FIELDS))
        .annotate(n=Count("id"))
        .order_by()
    )
    return {tuple(row[:-1]): row[-1] for row in rows}


def designs_from_ledger() -> dict:
    rows = DesignCount.objects.values_list(*DESIGN_KEY).annotate(total=Sum("n")).exclude(total=0).order_by()
    return {tuple(row[:-1]): row[-1] for row in rows}


def refit_all() -> None:
    refit_fitted_capacitors(list(FittedCapacitor.objects.values_list("id", flat=True)), force=True)


def test_the_ledger_equals_a_count_from_scratch_after_every_kind_of_write(tmp_path, django_user_model):
    planner = django_user_model.objects.create_user("ledger-planner", password="a-long-test-password")
    checks = []

    def check(step):
        checks.append(step)
        assert from_ledger() == from_scratch(), step
        assert motors_from_ledger() == motors_from_scratch(), f"{step}: motors by newest reading"
        assert designs_from_ledger() == designs_from_scratch(), f"{step}: capacitors by design"
        stored = Assessment.objects.exclude(fitted_on=F("fitted_capacitor__fitted_on"))
        assert not stored.exists(), f"{step}: an assessment's stored fitting date differs from its capacitor's"

    fleet = Fleet()
    fleet.grow_to(8, planner)  # readings, two refits (one forced), work orders
    check("refits")
    assert sum(from_scratch()["assessed"].values()) == 8  # the comparison is of real values

    fitted = FittedCapacitor.objects.filter(removed_on__isnull=True, assessments__risk="replace now").first()
    wrong = record_reading(
        fitted_capacitor=fitted, values={"capacitance_uf": "3.1", "case_temperature_c": "25"}, confirmed=True
    )
    record_reading(
        fitted_capacitor=fitted,
        values={"capacitance_uf": "3.6", "case_temperature_c": "25"},
        supersedes_id=wrong.id,
        confirmed=True,
    )
    refit_fitted_capacitors([fitted.id])
    check("a reading, its correction and the refit")

    other_part = make_part(code="RUN-4U-B")
    successor = replace_capacitor(
        fitted_capacitor=fitted, part=other_part, removed_on=timezone.localdate(), reason="failed"
    )
    check("a replacement")
    stop_gap = replace_capacitor(
        fitted_capacitor=successor,
        part=make_part(code="RUN-2U-X", rated_uf=2.0),
        removed_on=timezone.localdate(),
        reason="failed",
        substitute_override=True,
        override_reason="the only part on the shelf",
    )
    check("a stop-gap fitted")
    FittedCapacitor.objects.filter(pk=stop_gap.pk).update(substitute_override=False, override_reason="")
    check("a stop-gap found to be the design after all")
    FittedCapacitor.objects.filter(pk=stop_gap.pk).delete()
    FittedCapacitor.objects.filter(pk=successor.pk).update(removed_on=None, removal_reason="")
    check("the stop-gap entered by mistake, deleted, its predecessor back in service")
    make_reading(fitted, taken_at=timezone.now())  # taken on its removal day, entered after the replacement
    check("a reading of the capacitor removed that day")
    quarterly_readings(successor, timezone.now() - dt.timedelta(days=400), SOUND)
    refit_fitted_capacitors([successor.id])
    check("the successor's refit")

    in_service = FittedCapacitor.objects.filter(removed_on__isnull=True).exclude(pk=successor.pk)
    removed = list(in_service.values_list("id", flat=True)[:2])
    FittedCapacitor.objects.filter(id__in=removed).update(removed_on=timezone.localdate(), removal_reason="failed")
    check("two removals in one statement")
    FittedCapacitor.objects.filter(id=removed[0]).update(removed_on=None, removal_reason="")
    check("a removal undone")

    moved = Motor.objects.filter(site=fleet.sites[0]).first()
    moved.site = fleet.sites[1]
    moved.save()
    Motor.objects.filter(site=fleet.sites[1]).update(site=fleet.sites[0])
    check("motors moving to another site")
    Motor.objects.filter(pk=moved.pk).update(status=Motor.Status.RETIRED)
    never_read = make_motor(site=fleet.sites[1], commissioned_on=dt.date(2026, 1, 5))
    Motor.objects.filter(pk=never_read.pk).update(commissioned_on=dt.date(2025, 6, 1))
    check("a motor retired, another commissioned and its date corrected")

    corrected = FittedCapacitor.objects.filter(removed_on__isnull=True).exclude(pk=successor.pk)
    first, second = corrected[:2]
    first.part, first.fitted_on = other_part, dt.date(2021, 3, 15)
    first.save()
    FittedCapacitor.objects.filter(pk=second.pk).update(motor=make_motor(site=make_site("THIRD")))
    check("a capacitor's part and fitting date corrected, another moved to a motor elsewhere")

    unread = make_fitted_capacitor(motor=make_motor(site=fleet.sites[0]), part=fleet.part)
    stored_assessment(unread, "watch", timezone.localdate() + dt.timedelta(days=90))
    check("a capacitor fitted and assessed")
    unread.delete()  # entered by mistake: its assessment goes with it
    Motor.objects.filter(pk=unread.motor_id).delete()
    check("a capacitor and a motor deleted")

    migrate_all(tmp_path)  # sites, parts, register, history and readings through the import path
    check("imports")
    refit_all()
    check("a fleet refit")

    rows = compact_counts()
    check("compacted")
    in_service_rows = len(from_scratch()["assessed"]) + len(from_scratch()["fitted"])
    assert InServiceCount.objects.count() == in_service_rows
    assert MotorReadCount.objects.count() == len(motors_from_scratch())
    assert DesignCount.objects.count() == len(designs_from_scratch())
    assert rows == in_service_rows + len(motors_from_scratch()) + len(designs_from_scratch())
    assert len(designs_from_scratch()) > 2  # the comparison is of real values
    assert sum(motors_from_scratch().values()) > 5  # the comparison is of real values
    assert len(checks) == 18


def test_pages_read_the_counts_at_the_users_sites_only(django_user_model):
    from fleet.models import SiteMembership

    fleet = Fleet()
    planner = django_user_model.objects.create_user("ledger-scoped", password="a-long-test-password")
    fleet.grow_to(6, planner)
    SiteMembership.objects.create(user=planner, site=fleet.sites[0])
    scoped = in_service_counts(planner)
    assert {site for site, _, _, _ in scoped.assessed} == {fleet.sites[0].id}
    expected = Assessment.objects.filter(is_current=True, site=fleet.sites[0], capacitor_in_service=True).count()
    assert sum(scoped.by_risk().values()) == expected > 0


def test_every_trigger_of_the_ledger_is_installed():
    """A migration that rebuilds a table on SQLite drops its triggers: this notices."""
    names = {
        f"fleet_{table}_counts_{event}"
        for table in ("assessment", "capacitor")
        for event in ("insert", "update", "delete")
    } | {"fleet_motor_moves_counts", *(f"fleet_motor_read_counts_{event}" for event in ("insert", "update", "delete"))}
    with connection.cursor() as cursor:
        if connection.vendor == "sqlite":
            cursor.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'")
        else:
            cursor.execute("SELECT tgname FROM pg_trigger WHERE NOT tgisinternal")
        assert names <= {row[0] for row in cursor.fetchall()}


def test_the_life_data_page_shows_the_stored_fit_as_a_fit_on_request_would(tmp_path):
    """[derived] The stored fit, its bounds, B10, plot points and next-year chance are those of a fit of
    the part's life table made now with the core (IEC 61649 methods in fleet/engineering/lifedata.py)."""
    import numpy as np

    from fleet.engineering.lifedata import fit_weibull, probability_plot_points
    from fleet.models import CapacitorPart
    from fleet.services.lifedata import life_table, part_life, refresh_life_fits

    migrate_all(tmp_path)
    part = CapacitorPart.objects.get(code="RUN-8")
    refresh_life_fits()
    stored = part_life(part.id, planned_cost=60, failure_cost=400)
    table = life_table(part.id)
    years, failed = table["age_days"].to_numpy() / 365.25, table["failed"].to_numpy(bool)
    fresh = fit_weibull(years, failed)
    assert stored["fit"].beta == pytest.approx(fresh.beta) and stored["fit"].eta == pytest.approx(fresh.eta)
    assert np.allclose(stored["fit"].covariance_log, fresh.covariance_log)
    assert stored["b10_bounds"] == pytest.approx(fresh.b_life_bounds())
    plot_t, plot_f = probability_plot_points(years, failed)
    assert np.allclose(stored["plot_points"][0], plot_t) and np.allclose(stored["plot_points"][1], plot_f)
    # The chance of failing within the year is the mean over those in service now: not over every suspension,
    # which also holds those replaced on plan (one in this history), whose year is over.
    in_service = table["in_service"].to_numpy(bool)
    assert (~failed & ~in_service).any()
    assert stored["next_year_failure"] == pytest.approx(np.mean(fresh.conditional_failure(years[in_service], 1.0)))


def test_an_assessment_holds_its_capacitors_facts_whether_the_refit_sends_them_or_the_database_looks_them_up():
    """[derived] A refit sends each row's in-service flag, site, part and fitting date (read under its
    lock); a row written without them gets them from the database's trigger. Either way they are the
    capacitor's own, as a join gives them."""
    site, elsewhere = make_site("FACTS-A"), make_site("FACTS-B")
    refitted = make_fitted_capacitor(motor=make_motor(site=site), fitted_on=dt.date(2022, 4, 1))
    quarterly_readings(refitted, timezone.now() - dt.timedelta(days=400), SOUND)
    refit_fitted_capacitors([refitted.id], force=True)
    unread = make_fitted_capacitor(motor=make_motor(site=elsewhere), part=make_part(code="RUN-6U-F"))
    looked_up = stored_assessment(unread, "watch", timezone.localdate() + dt.timedelta(days=90))
    stored = Assessment.objects.values_list(
        "fitted_capacitor_id", "capacitor_in_service", "site_id", "part_id", "fitted_on"
    ).order_by("id")
    joined = Assessment.objects.values_list(
        "fitted_capacitor_id",
        "fitted_capacitor__removed_on",
        "fitted_capacitor__motor__site_id",
        "fitted_capacitor__part_id",
        "fitted_capacitor__fitted_on",
    ).order_by("id")
    expected = [(c, removed is None, s, p, f) for c, removed, s, p, f in joined]
    assert list(stored) == expected
    assert [row[0] for row in stored] == [refitted.id, unread.id]  # sent by the refit, looked up
    assert Assessment.objects.filter(pk=looked_up.pk, site=elsewhere).exists()


def test_the_api_counts_its_list_from_the_ledger_as_the_list_counts_itself(client, django_user_model):
    """The assessments API's total (and so its pages) equals the filtered list's own count, for every
    site and risk level, for a user limited to one site, and with a replace-by date (counted directly)."""
    from django.urls import reverse

    from fleet.models import SiteMembership
    from fleet.roles import PLANNER
    from fleet.services.pages import in_service_assessments
    from tests.factories import make_user

    planner = make_user(PLANNER)
    fleet = Fleet()
    fleet.grow_to(12, planner)
    limited = make_user(PLANNER)
    SiteMembership.objects.create(user=limited, site=fleet.sites[1])
    until = timezone.localdate() + dt.timedelta(days=200)
    for user in (planner, limited):
        client.force_login(user)
        for site in (None, *fleet.sites[user is limited :]):
            for risk in (None, *Assessment.Risk.values):
                for replace_by_before in (None, until):
                    params = {"site": site and site.code, "risk": risk, "replace_by_before": replace_by_before}
                    params = {k: v for k, v in params.items() if v}
                    listed = in_service_assessments(user).filter(
                        **{
                            k: v
                            for k, v in (("site", site), ("risk", risk), ("replace_by__lte", replace_by_before))
                            if v
                        }
                    )
                    answer = client.get(reverse("api_assessments"), params)
                    assert answer.status_code == 200, answer.content[:300]
                    assert answer.json()["count"] == listed.count(), params
    assert in_service_assessments(limited).count() < in_service_assessments(planner).count()
