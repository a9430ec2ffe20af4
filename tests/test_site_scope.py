"""Site-scoped roles on the fleet-wide pages: a user limited to some sites sees, plans, issues and imports
only there. Every check is [derived]: it follows from the rule that a limited user works at their sites only."""

import datetime as dt
import io
import re

import pytest
from django.contrib.auth.models import Permission
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse
from django.utils import timezone
from openpyxl import load_workbook

from fleet.models import Assessment, ImportJob, Reading, SiteMembership, WorkOrder
from fleet.roles import PLANNER, RELIABILITY_ENGINEER, TECHNICIAN
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.import_jobs import check_file, create_job, run_job
from fleet.services.workorders import plan_work_orders
from tests.factories import (
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_site,
    make_user,
    quarterly_readings,
    stored_assessment,
)

pytestmark = pytest.mark.django_db

WORN = [4.0, 3.8, 3.7, 3.6]  # a 4 uF +/-5 % run capacitor 10 % low: due for replacement now


def worn_capacitors(site, count, part=None):
    fitted_capacitors = [make_fitted_capacitor(motor=make_motor(site=site), part=part) for _ in range(count)]
    for fitted_capacitor in fitted_capacitors:
        quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 5, 9)), WORN)
    refit_fitted_capacitors([i.id for i in fitted_capacitors])
    return fitted_capacitors


@pytest.fixture
def here_and_there(db):
    """A worn capacitor at each of two sites, each of its own part."""
    here, there = make_site("HERE"), make_site("THERE")
    return {
        "HERE": worn_capacitors(here, 1, make_part(code="HERE-4U"))[0],
        "THERE": worn_capacitors(there, 1, make_part(code="THERE-4U"))[0],
    }


def limited(role, site):
    user = make_user(role)
    SiteMembership.objects.create(user=user, site=site)
    return user


def test_home_page_plan_and_risk_counts_hold_only_the_users_sites(client, here_and_there):
    mine, theirs = here_and_there["HERE"], here_and_there["THERE"]
    client.force_login(limited(PLANNER, mine.motor.site))
    response = client.get(reverse("home"))
    body = response.content.decode()
    assert mine.motor.asset_tag in body and theirs.motor.asset_tag not in body
    assert reverse("route", args=["THERE"]) not in body
    assert sum(count for _, count in response.context["risks"]) == 1


def test_plan_page_lists_spares_risks_and_sites_of_the_users_sites_only(client, here_and_there):
    mine, theirs = here_and_there["HERE"], here_and_there["THERE"]
    client.force_login(limited(PLANNER, mine.motor.site))
    body = client.get(reverse("plan"), {"days": 365}).content.decode()
    assert mine.motor.asset_tag in body and theirs.motor.asset_tag not in body
    assert "HERE-4U" in body and "THERE-4U" not in body  # spares
    assert 'value="THERE"' not in body  # the site choice
    asked = client.get(reverse("plan"), {"days": 365, "site": "THERE"}).content.decode()
    assert "Ignored site" in asked and theirs.motor.asset_tag not in asked


def test_the_plans_risk_changes_list_the_users_sites_only(client, here_and_there):
    week_ago = timezone.now() - dt.timedelta(days=8)
    for fitted_capacitor in here_and_there.values():  # each was sound a week ago, then a refit found it worn
        current = Assessment.objects.filter(fitted_capacitor=fitted_capacitor, is_current=True)
        current.update(risk="sound", created_at=week_ago)
        refit_fitted_capacitors([fitted_capacitor.id], force=True)
    mine = here_and_there["HERE"]
    client.force_login(limited(PLANNER, mine.motor.site))
    worse = client.get(reverse("plan"), {"days": 7}).context["change_lists"][0]["rows"]
    assert [assessment.fitted_capacitor_id for assessment in worse] == [mine.id]


@pytest.mark.parametrize("file_format", ["csv", "xlsx"])
def test_plan_downloads_hold_the_users_sites_only(client, here_and_there, file_format):
    mine = here_and_there["HERE"]
    client.force_login(limited(PLANNER, mine.motor.site))
    elsewhere = client.get(reverse("plan_export", args=[file_format]), {"days": 365, "site": "THERE"})
    assert elsewhere.status_code == 400 and b"site" in elsewhere.content  # refused by name, not the whole plan
    for query in ({"days": 365}, {"days": 365, "site": "HERE"}):
        response = client.get(reverse("plan_export", args=[file_format]), query)
        if file_format == "csv":
            lines = b"".join(response.streaming_content).decode("utf-8-sig").splitlines()[1:]
            tags = {line.split(",")[0] for line in lines}
        else:
            content = b"".join(response.streaming_content)
            rows = list(load_workbook(io.BytesIO(content)).active.iter_rows(values_only=True))[1:]
            tags = {row[0] for row in rows}
        assert tags == {mine.motor.asset_tag}


def test_plan_page_queries_stay_flat_as_the_fleet_grows_for_a_limited_user(client):
    here, there = make_site("HERE"), make_site("THERE")
    user = limited(PLANNER, here)
    client.force_login(user)
    counts = []
    for size in (2, 8):
        worn_capacitors(here, size)
        worn_capacitors(there, size)
        with CaptureQueriesContext(connection) as queries:
            response = client.get(reverse("plan"), {"days": 365})
        assert response.status_code == 200
        counts.append(len(queries))
    assert counts[0] == counts[1]


def test_a_limited_planner_plans_lists_and_issues_only_their_sites_visits(client, here_and_there):
    mine, theirs = here_and_there["HERE"], here_and_there["THERE"]
    planner = limited(PLANNER, mine.motor.site)
    client.force_login(planner)
    client.post(reverse("work_orders"), {"action": "plan", "days": "90"})
    assert set(WorkOrder.objects.values_list("fitted_capacitor_id", flat=True)) == {mine.id}

    plan_work_orders(horizon_days=90)  # the system plans every site
    body = client.get(reverse("work_orders")).content.decode()
    assert mine.motor.asset_tag in body and theirs.motor.asset_tag not in body
    their_order = WorkOrder.objects.get(fitted_capacitor=theirs)
    day = their_order.due_on.isoformat()
    assert client.get(reverse("visit_sheet", args=["THERE", day])).status_code == 404
    response = client.post(
        reverse("work_orders"), {"action": "issue", "site": theirs.motor.site_id, "day": day}, follow=True
    )
    assert "no planned work orders at your sites" in response.content.decode()
    their_order.refresh_from_db()
    assert their_order.state == WorkOrder.State.PLANNED
    my_order = WorkOrder.objects.get(fitted_capacitor=mine)
    client.post(reverse("work_orders"), {"action": "issue", "site": mine.motor.site_id, "day": my_order.due_on})
    my_order.refresh_from_db()
    assert my_order.state == WorkOrder.State.ISSUED


def readings_csv(rows) -> bytes:
    lines = ["asset_tag,role,taken_at,method,capacitance_uf"] + [",".join(row) for row in rows]
    return ("\n".join(lines) + "\n").encode()


def test_a_limited_technician_imports_readings_for_their_sites_only(here_and_there):
    mine, theirs = here_and_there["HERE"], here_and_there["THERE"]
    technician = limited(TECHNICIAN, mine.motor.site)
    content = readings_csv(
        [
            [mine.motor.asset_tag, "run", "2025-01-06 09:00", "meter", "3.55"],
            [theirs.motor.asset_tag, "run", "2025-01-06 09:10", "meter", "3.55"],
        ]
    )
    job = create_job(kind="readings", filename="quarter.csv", content=content, user=technician)
    done = run_job(job.id, ImportJob.Mode.GOOD_ROWS)
    assert done.errors == [
        [3, "asset_tag", f"motor {theirs.motor.asset_tag} is at site THERE, which you do not work at"]
    ]
    assert done.imported_rows == 1
    assert list(Reading.objects.filter(source="import").values_list("fitted_capacitor_id", flat=True)) == [mine.id]
    refused = run_job(create_job(kind="readings", filename="q.csv", content=content, user=technician).id, "all")
    assert refused.state == ImportJob.State.REFUSED
    unlimited = run_job(create_job(kind="readings", filename="q.csv", content=content, user=None).id, "good")
    assert unlimited.errors == [] and unlimited.imported_rows == 1  # the first file's row is already in


def test_a_limited_user_imports_register_rows_for_their_sites_only(here_and_there):
    here = here_and_there["HERE"].motor.site
    make_part(code="RUN-8", rated_uf=8.0)
    user = limited(RELIABILITY_ENGINEER, here)
    user.user_permissions.add(Permission.objects.get(codename="add_motor"))
    header = "asset_tag,site_code,application,motor_type,load_type,rated_voltage_v,frequency_hz,poles,output_w,"
    header += "full_load_current_a,rated_speed_rpm,run_part_code,fitted_on\n"
    body = "".join(
        f"NEW-{code},{code},fan,permanent_split,fan_law,230,50,4,180,1.2,1380,RUN-8,2024-01-01\n"
        for code in ("HERE", "THERE")
    )
    result = check_file(kind="register", filename="register.csv", content=(header + body).encode(), user=user).result
    assert result.errors == [(3, "site", "site THERE, which you do not work at")]
    assert list(result.good["asset_tag"]) == ["NEW-HERE"]
    theirs = here_and_there["THERE"]
    history = f"asset_tag,role,part_code,fitted_on\n{theirs.motor.asset_tag},run,RUN-8,2019-01-01\n".encode()
    result = check_file(kind="history", filename="history.csv", content=history, user=user).result
    assert result.errors == [
        (2, "asset_tag", f"motor {theirs.motor.asset_tag} is at site THERE, which you do not work at")
    ]


def test_the_plans_counts_changes_and_spares_follow_the_site_chosen_and_say_which(client):
    """/plan/?site=CST listed CST's capacitors under the whole fleet's risk counts and week of changes:
    every figure on the page counts the site chosen (the user's sites without one) and names it."""
    here, there, elsewhere = make_site("HERE"), make_site("THERE"), make_site("AWAY")
    soon = timezone.localdate() + dt.timedelta(days=20)
    levels = {here: ["replace now", "watch"], there: ["replace now", "replace now", "sound"], elsewhere: ["watch"]}
    parts = {site: make_part(code=f"{site.code}-4U") for site in levels}
    for site, risks in levels.items():
        for risk in risks:
            fitted_capacitor = make_fitted_capacitor(motor=make_motor(site=site), part=parts[site])
            stored_assessment(fitted_capacitor, "sound", soon, created_at=timezone.now() - dt.timedelta(days=30))
            stored_assessment(fitted_capacitor, risk, soon)  # sound a month ago: riskier this week, but one
    user = limited(PLANNER, here)
    SiteMembership.objects.create(user=user, site=there)
    client.force_login(user)

    def shown(query):
        response = client.get(reverse("plan"), query)
        body = response.content.decode()
        counts = dict(re.findall(r'<span class="risk risk-[a-z-]+">([a-z ]+)</span><b>(\d+)</b>', body))
        worse = {a.fitted_capacitor.motor.site.code for a in response.context["change_lists"][0]["rows"]}
        spares = body[body.index("Spares for this window") :]
        return body, counts, response.context["changes"]["worse"], worse, spares

    body, counts, worse_count, worse_sites, spares = shown({"days": 90, "site": "THERE"})
    assert counts == {"replace now": "2", "due soon": "0", "watch": "0", "sound": "1"}
    assert worse_count == 2 and worse_sites == {"THERE"}
    assert ">THERE-4U<" in spares and ">HERE-4U<" not in spares
    for heading in ("risk-counts", "risk-changes", "spares"):
        assert re.search(rf'<h2 id="{heading}">[^<]* at THERE \(Site THERE\)</h2>', body), heading

    body, counts, worse_count, worse_sites, spares = shown({"days": 90})  # every site of the user's, not AWAY
    assert counts == {"replace now": "3", "due soon": "0", "watch": "1", "sound": "1"}
    assert worse_count == 4 and worse_sites == {"HERE", "THERE"}
    assert ">HERE-4U<" in spares and ">THERE-4U<" in spares and ">AWAY-4U<" not in spares
    assert '<h2 id="risk-counts">Capacitors in service at your sites HERE, THERE</h2>' in body
    assert '<option value="">All your sites</option>' in body  # not "All sites": AWAY is not theirs
