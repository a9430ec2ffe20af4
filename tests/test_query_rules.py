"""One rulebook for query strings on every page, download and API list, and refusals that say what is
valid: a parameter given twice is named (never one value used silently), an empty value is "not given",
the dashboard's downloads refuse what the exports refuse, messages list the valid values, a 403 says
which role may do it, and a site's pages find its code in any case. [derived: the README's API, Exports
and "Who uses it" sections; the project's rule that a bad value is a message naming the parameter.]"""

import datetime as dt
import html

import pytest
from django.urls import reverse
from django.utils import timezone

from fleet.models import Assessment, Reading, WorkOrder
from fleet.roles import RELIABILITY_ENGINEER, TECHNICIAN, permission_words, roles_holding
from fleet.services.workorders import plan_work_orders
from tests.factories import make_fitted_capacitor, make_motor, make_site, make_user, stored_assessment
from tests.test_api import client_for

pytestmark = pytest.mark.django_db


def notes(response) -> list[str]:
    return [str(message) for message in response.context["messages"]]


@pytest.fixture
def two_sites(db):
    """A capacitor to replace now at each of two sites, planned into a visit at each."""
    fitted = []
    for code in ("CST", "PKH"):
        capacitor = make_fitted_capacitor(motor=make_motor(site=make_site(code)))
        stored_assessment(capacitor, Assessment.Risk.REPLACE_NOW, timezone.localdate() + dt.timedelta(days=5))
        fitted.append(capacitor)
    plan_work_orders(horizon_days=90)
    return fitted


# 1. A single-valued parameter given twice is named on every page, and not used.


def test_the_plan_names_a_site_given_twice_and_shows_every_site(client, two_sites):
    """Before: /plan/?site=CST&site=PKH showed PKH only, without a word."""
    client.force_login(make_user(RELIABILITY_ENGINEER))
    response = client.get("/plan/?site=CST&site=PKH")
    assert response.status_code == 200
    assert "Ignored site: Give site once (given 2 times: CST, PKH)" in notes(response)
    assert response.context["site"] is None
    assert {row.fitted_capacitor.motor.site.code for row in response.context["page"]} == {"CST", "PKH"}


@pytest.mark.parametrize(
    "address,name",
    [
        ("/plan/?days=30&days=60", "days"),
        ("/plan/?page=1&page=2", "page"),
        ("/work-orders/?page=1&page=1", "page"),
        ("/sites/CST/route/?show=due&show=all", "show"),
        ("/sites/CST/labels/?tag=CST-0001&tag=CST-0002", "tag"),
        ("/life/?part=A&part=B", "part"),
        ("/life/?planned_cost=50&planned_cost=70", "planned_cost"),
        ("/find/?tag=CST&tag=PKH", "tag"),
    ],
)
def test_every_page_names_a_parameter_given_twice(client, administrator, two_sites, address, name):
    """Before: each page used the last value silently."""
    client.force_login(administrator)
    response = client.get(address)
    assert response.status_code == 200
    assert any(note.startswith(f"Ignored {name}: Give {name} once (given 2 times") for note in notes(response)), notes(
        response
    )


def test_the_reading_form_names_a_reading_to_correct_given_twice(client, technician, fan_fitted_capacitor):
    """Before: ?corrects=1&corrects=2 opened a correction of the second reading, without a word."""
    first, second = (
        Reading.objects.create(
            fitted_capacitor=fan_fitted_capacitor,
            taken_at=timezone.now() - dt.timedelta(days=days),
            method="meter",
            capacitance_uf=3.9,
        )
        for days in (20, 10)
    )
    client.force_login(technician)
    address = reverse("reading_new", args=[fan_fitted_capacitor.id])
    response = client.get(f"{address}?corrects={first.id}&corrects={second.id}")
    assert response.status_code == 200 and response.context["correcting"] is None
    assert f"Ignored corrects: Give corrects once (given 2 times: {first.id}, {second.id})" in notes(response)
    assert client.get(f"{address}?corrects={second.id}").context["correcting"] == second


def test_the_find_page_does_not_search_a_tag_given_twice(client, administrator, two_sites):
    client.force_login(administrator)
    response = client.get("/find/?tag=CST&tag=PKH")
    assert not response.context["find_form"].is_bound and not response.context["matches"]


# 2. An empty value is "not given", everywhere.


@pytest.mark.parametrize(
    "address",
    [
        "/api/assessments/?page_size=",
        "/api/assessments/?page_size=&site=&risk=&replace_by_before=&format=&page=",
        "/api/readings/?page_size=&cursor=&since=&until=&site=&part=&motor=",
    ],
)
def test_an_empty_api_parameter_is_not_given(engineer, two_sites, address):
    """Before: ?page_size= answered 400 while every other empty parameter answered as if left out."""
    response = client_for(engineer).get(address)
    assert response.status_code == 200, response.json()


def test_every_parameter_the_api_cannot_use_is_named_in_one_answer(engineer, two_sites):
    """A walk: `?page=abc&risk=zzz&site=999999` answered 400 naming `site` and `risk`; `page` only once they were
    put right. [ours] a page that is no whole number is named with them, as is an unknown parameter."""
    api = client_for(engineer)
    answer = api.get("/api/assessments/?page=abc&risk=zzz&site=999999&risks=x")
    assert answer.status_code == 400
    assert set(answer.json()) == {"page", "risk", "site", "risks"}, answer.json()
    assert answer.json()["page"] == ["A whole number from 1 to the last page."]
    for page in ("0", "-1", "1.5", "٣"):
        said = api.get(f"/api/assessments/?page={page}").json()
        assert "page" in said, (page, said)
    assert api.get("/api/assessments/?page=1").status_code == 200


def test_an_empty_parts_list_on_the_substitutes_is_the_catalogue(engineer, two_sites):
    """Before: ?parts= answered 400 "Name at least one part code"; left out, the catalogue is judged."""
    address = reverse("api_fitted_capacitor_substitutes", args=[two_sites[0].id])
    client = client_for(engineer)
    assert client.get(address, {"parts": ""}).json() == client.get(address).json()


def test_an_empty_find_box_is_the_page_as_first_opened(client, administrator, two_sites):
    """Before: /find/?tag= said "Type the asset tag ..." as an error: an empty box is a first visit."""
    client.force_login(administrator)
    response = client.get("/find/?tag=")
    assert response.status_code == 200 and not response.context["find_form"].errors


@pytest.mark.parametrize("address", ["/plan/?days=&site=&page=", "/sites/CST/route/?show=&page="])
def test_an_empty_page_parameter_is_not_given(client, administrator, two_sites, address):
    client.force_login(administrator)
    response = client.get(address)
    assert response.status_code == 200 and not notes(response)


# 3. The dashboard's downloads refuse what the exports refuse.


@pytest.mark.parametrize("query,name", [("x=1", "x"), ("site=XYZ", "site")])
@pytest.mark.parametrize("table", ["workload", "risk-mix"])
def test_a_dashboard_download_refuses_a_parameter_by_name(client, planner, two_sites, query, name, table):
    """Before: /dashboard/workload.csv?x=1 and ?site=XYZ answered 200 with every site's figures."""
    client.force_login(planner)
    address = reverse("dashboard_csv", args=[table])
    assert client.get(address).status_code == 200
    response = client.get(f"{address}?{query}")
    assert response.status_code == 400
    assert (
        response.content.decode() == f"Cannot read the filter: {name}: Not a parameter of this list, which takes none."
    )

    # Given empty, as the README's rule has it for every download: left out (it answered 400 here).
    def body(response):
        return b"".join(response.streaming_content) if response.streaming else response.content

    given_empty = client.get(f"{address}?{name}=")
    assert given_empty.status_code == 200 and body(given_empty) == body(client.get(address))


# 4. Messages that say what is valid.


def readings_url(fitted_capacitor) -> str:
    return reverse("api_fitted_capacitor_readings", args=[fitted_capacitor.id])


@pytest.mark.parametrize(
    "body,field,says",
    [
        ({"method": "volts", "capacitance_uf": 3.9}, "method", ['"volts" is not a method: one of meter, in_circuit.']),
        ({"method": "meter", "capacitance_uf": 3.9, "condition": "wet"}, "condition", ["wet", "sound", "bulged"]),
        ({"method": "meter", "capacitance_uf": 3.9, "supersedes": "x"}, "supersedes", ["id of the reading"]),
        ({"method": "meter", "capacitance_uf": 3.9, "supersedes": 0}, "supersedes", ["id of the reading"]),
        ({"method": "meter", "capacitance_uf": 3.9, "confirmed": "perhaps"}, "confirmed", ["true or false"]),
    ],
)
def test_a_reading_field_it_cannot_use_is_answered_with_what_it_takes(
    technician, fan_fitted_capacitor, body, field, says
):
    """Before: "is not a valid choice.", "A valid integer is required.", "Must be a valid boolean."."""
    response = client_for(technician).post(readings_url(fan_fitted_capacitor), body, format="json")
    assert response.status_code == 400, response.json()
    message = response.json()[field][0]
    assert all(words in message for words in says), message
    assert not Reading.objects.exists()


def test_a_null_taken_at_is_left_out(technician, fan_fitted_capacitor):
    """The README: taken_at is now if left out. Before: null answered "This field may not be null."."""
    before = timezone.now()
    body = {"method": "meter", "capacitance_uf": 3.9, "taken_at": None}
    response = client_for(technician).post(readings_url(fan_fitted_capacitor), body, format="json")
    assert response.status_code == 201, response.json()
    assert Reading.objects.get().taken_at >= before - dt.timedelta(seconds=1)


@pytest.mark.parametrize(
    "address,note",
    [
        ("/plan/?page=0", "Ignored page: pages start at 1; showing page 1"),
        ("/plan/?page=two", "Ignored page: pages are whole numbers; pages start at 1; showing page 1"),
        (
            "/sites/CST/route/?show=nonsense",
            "Ignored show: nonsense is not one of its values: due (the motors still to read this quarter) or all; "
            "showing all",
        ),
    ],
)
def test_a_page_note_names_the_parameter_and_its_valid_values(client, administrator, two_sites, address, note):
    """Before: "Ensure this value is greater than or equal to 1." and "Select a valid choice. nonsense is not one
    of the available choices."."""
    client.force_login(administrator)
    assert note in notes(client.get(address))


def test_the_find_box_says_what_it_takes(client, administrator, two_sites):
    """Before: "Ensure this value has at most 40 characters (it has 300).", not what the box is for."""
    client.force_login(administrator)
    errors = client.get("/find/", {"tag": "x" * 300}).context["find_form"].errors["tag"]
    assert errors == ["The box takes a tag (or part of one) or words of a place, at most 40 characters (this has 300)."]


# 5. A 403 says who may do it.


def test_the_apis_403_names_the_role_that_may_record_a_reading(engineer, fan_fitted_capacitor):
    """Before: "You do not have permission to perform this action." The README's role table: an engineer
    imports readings files on the import page; the API's POST of one reading is a technician's."""
    body = {"method": "meter", "capacitance_uf": 3.9}
    response = client_for(engineer).post(readings_url(fan_fitted_capacitor), body, format="json")
    assert response.status_code == 403
    assert response.json() == {
        "detail": "Recording readings needs the technician role (or administrator); your roles: reliability engineer."
    }
    assert not Reading.objects.exists()


def test_the_roles_named_are_the_roles_granted():
    """The words follow the role table in roles.py, not a copy of it."""
    assert roles_holding("add_reading") == [TECHNICIAN, "administrator"]
    assert roles_holding("import_readings")[:-1] == [TECHNICIAN, "planner", RELIABILITY_ENGINEER]
    assert permission_words(make_user(TECHNICIAN), ["fleet.add_refitrun"]) == (
        "Recording refit runs needs the planner or reliability engineer role (or administrator); your roles: "
        "technician."
    )
    assert permission_words(make_user(TECHNICIAN), ["fleet.add_backtest"]).startswith(
        "Recording backtests needs the reliability engineer role (or administrator); your roles: technician."
    )


def test_an_engineer_imports_readings_on_the_import_page(client, engineer):
    """The README's role table: the engineer brings readings in by file."""
    client.force_login(engineer)
    response = client.get(reverse("imports"))
    assert response.status_code == 200 and "readings" in dict(response.context["form"].fields["kind"].choices)


def test_the_admins_403_on_deleting_a_reading_says_readings_are_kept(client, administrator, fan_fitted_capacitor):
    """Before: the 403 page told the administrator to "ask an administrator"; no role deletes a reading."""
    client.force_login(administrator)
    reading = Reading.objects.create(
        fitted_capacitor=fan_fitted_capacitor, taken_at=timezone.now(), method="meter", capacitance_uf=3.9
    )
    response = client.get(reverse("admin:fleet_reading_delete", args=[reading.id]))
    body = response.content.decode()
    assert response.status_code == 403
    assert "Readings are never deleted" in body and "ask an administrator" not in body
    assert Reading.objects.filter(id=reading.id).exists()


# 6. A site's pages find its code in any case.


@pytest.mark.parametrize("name", ["route", "labels", "site_stock", "site_days_off"])
def test_a_site_page_in_another_case_goes_to_the_registers_spelling(client, administrator, two_sites, name):
    """Before: /sites/cst/route/ answered 404 while /motors/cst-0001/ answered the motor."""
    client.force_login(administrator)
    response = client.get(reverse(name, args=["cst"]) + "?page=1")
    assert response.status_code == 302 and response["Location"] == reverse(name, args=["CST"]) + "?page=1"
    assert client.get(response["Location"]).status_code == 200
    assert client.get(reverse(name, args=["XYZ"])).status_code == 404


def test_a_visit_sheet_in_another_case_goes_to_the_registers_spelling(client, administrator, two_sites):
    client.force_login(administrator)
    order = WorkOrder.objects.filter(site__code="CST").first()
    day = order.due_on.isoformat()
    response = client.get(reverse("visit_sheet", args=["cst", day]))
    assert response.status_code == 302 and response["Location"] == reverse("visit_sheet", args=["CST", day])


def test_a_site_another_user_works_at_is_not_found_in_any_case(client, two_sites):
    """The case-blind lookup keeps the site scope: a site the user does not work at is still a 404."""
    from fleet.models import SiteMembership

    user = make_user(TECHNICIAN)
    SiteMembership.objects.create(user=user, site=two_sites[1].motor.site)
    client.force_login(user)
    assert client.get(reverse("route", args=["cst"])).status_code == 404
    assert client.get(reverse("route", args=["pkh"])).status_code == 302


def test_the_api_keeps_site_codes_exact(engineer, two_sites):
    """The README: the API's codes are exact, capitals included."""
    response = client_for(engineer).get(reverse("api_assessments"), {"site": "cst"})
    assert response.status_code == 400 and "site" in response.json()


@pytest.mark.parametrize(
    ("name", "parameter"),
    [
        ("dashboard", "site"),
        ("work_orders", "risk"),
        ("plan", "risk"),
        # A walk found these four silent: the stand-in parts, the refits, the imports and a site's spares.
        ("stand_in_parts", "site"),
        ("refits", "site"),
        ("imports", "kind"),
        ("site_stock", "part"),
        ("home", "site"),
    ],
)
def test_a_page_names_a_parameter_it_does_not_take(client, administrator, two_sites, name, parameter):
    """`/dashboard/?site=CST` showed every site's figures with nothing said, as if filtered. Ours: the rule of
    the lists and exports (a parameter not taken is named, with the ones taken) as a note on the page, which is
    shown as without it; one given empty is left out, as everywhere."""
    client.force_login(administrator)
    address = reverse(name, args=["CST"] if name == "site_stock" else [])
    shown = client.get(address, {parameter: "CST"})
    assert shown.status_code == 200
    notes = [str(m) for m in shown.context["messages"]]
    assert any(note.startswith(f"Ignored {parameter}: Not a parameter of this page") for note in notes), notes
    assert not [str(m) for m in client.get(address, {parameter: ""}).context["messages"]]


@pytest.mark.parametrize(
    "address",
    [
        "/admin/fleet/workorder/?due_on__year=99999",
        "/admin/fleet/assessment/?replace_by__year=-5",
        "/admin/fleet/motor/?commissioned_on__year=10000",
        "/admin/fleet/reading/?created_at__year=abc",
    ],
)
def test_an_admin_list_refuses_a_year_outside_the_accepted_span_instead_of_a_server_error(client, address):
    """Before: 500 (ValueError: year 99999 is out of range, building the year's first day)."""
    from fleet.roles import ADMINISTRATOR

    user = make_user(ADMINISTRATOR)
    user.is_superuser = True
    user.save()
    client.force_login(user)
    assert client.get(address).status_code == 400
    assert client.get(address.split("?")[0] + "?" + address.split("?")[1].split("=")[0] + "=2026").status_code == 200


def test_the_other_pages_name_a_parameter_they_do_not_take_too(client, administrator, two_sites):
    """A second walk: find, route, track record, motor and capacitor pages still took an unknown parameter in
    silence (`/find/?q=...`, the find box's parameter being `tag`). Ours: one decorator, the lists' rule."""
    from fleet.models import FittedCapacitor

    client.force_login(administrator)
    capacitor = FittedCapacitor.objects.select_related("motor").first()
    for url in (
        reverse("find") + "?q=0093",
        reverse("route", args=["CST"]) + "?foo=1",
        reverse("labels", args=["CST"]) + "?foo=1",
        reverse("track_record") + "?x=1",
        reverse("motor", args=[capacitor.motor.asset_tag]) + "?foo=1",
        reverse("fitted_capacitor", args=[capacitor.id]) + "?foo=1",
        reverse("life_data") + "?foo=1",
    ):
        response = client.get(url)
        notes = [str(m) for m in response.context["messages"]]
        assert response.status_code == 200 and any("Not a parameter of this page" in n for n in notes), (url, notes)


def test_the_work_orders_list_takes_the_saved_reading_it_comes_back_with(client, technician, two_sites):
    """A walk: a first reading recorded from the work-orders list came back to `/work-orders/?saved=132` (the
    reading form's draft to drop), and the list said "Ignored saved: Not a parameter of this page". It takes it,
    as the motor page and the visit sheet do."""
    client.force_login(technician)
    shown = client.get(reverse("work_orders"), {"saved": two_sites[0].id})
    assert shown.status_code == 200 and not [str(m) for m in shown.context["messages"]]


def test_a_site_code_with_spaces_is_named_with_its_spaces(client, planner, two_sites):
    """A walk: `/work-orders/?site=%20CST%20` said "No site CST among the sites you work at", the spaces unseen, as
    if CST were missing. [ours] the code is named in quotes, as sent."""
    client.force_login(planner)
    page = html.unescape(client.get(reverse("work_orders"), {"site": " CST "}).content.decode())
    assert 'No site " CST " among the sites you work at' in page
