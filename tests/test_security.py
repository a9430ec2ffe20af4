"""Doors and walls: sign-in lockout, API throttles, no self-promotion in the register,
Content-Security-Policy, proxy trust and HSTS preload, and site-scoped roles."""

import datetime as dt
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from django.conf import settings
from django.contrib.auth.models import Group, Permission, User
from django.urls import reverse
from django.utils import timezone
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient
from rest_framework.throttling import UserRateThrottle

from fleet.models import ImportJob, Reading, SiteMembership
from fleet.roles import ADMINISTRATOR, PLANNER, TECHNICIAN
from fleet.services.assessments import refit_fitted_capacitors
from tests.admin_pages import as_shown
from tests.factories import make_fitted_capacitor, make_motor, make_site, make_user, quarterly_readings

pytestmark = pytest.mark.django_db
ROOT = Path(__file__).resolve().parents[1]
PASSWORD = "a-long-test-password"


# Sign-in lockout ----------------------------------------------------------------------------------


def sign_in(client, username, password, url=None, address="10.0.0.7"):
    return client.post(url or reverse("login"), {"username": username, "password": password}, REMOTE_ADDR=address)


def test_a_hundred_wrong_passwords_then_the_right_one_does_not_sign_in(client, technician):
    for _ in range(100):
        assert sign_in(client, technician.username, "wrong-guess").status_code == 200
    response = sign_in(client, technician.username, PASSWORD)
    assert response.status_code == 200, "the right password signed in after 100 wrong ones"
    assert "_auth_user_id" not in client.session
    assert "Too many failed sign-ins" in response.content.decode()


def test_the_lockout_holds_one_name_from_one_address_and_a_success_resets_the_count(client, technician):
    limit = settings.LOGIN_FAILURE_LIMIT
    for _ in range(limit - 1):
        sign_in(client, technician.username, "wrong-guess")
    assert sign_in(client, technician.username, PASSWORD).status_code == 302  # under the limit: in
    client.logout()
    for _ in range(limit - 1):
        sign_in(client, technician.username, "wrong-guess")
    assert sign_in(client, technician.username, PASSWORD).status_code == 302  # the count started again
    client.logout()
    for _ in range(limit):
        sign_in(client, technician.username.upper(), "wrong-guess")  # the name's case changes nothing
    assert sign_in(client, technician.username, PASSWORD).status_code == 200
    assert sign_in(client, technician.username, PASSWORD, address="10.0.0.8").status_code == 302


def test_the_register_sign_in_is_no_side_door(client, administrator):
    url = reverse("admin:login")
    for _ in range(settings.LOGIN_FAILURE_LIMIT):
        sign_in(client, administrator.username, "wrong-guess", url=url)
    response = sign_in(client, administrator.username, PASSWORD, url=url)
    assert response.status_code == 200 and "_auth_user_id" not in client.session
    assert "Too many failed sign-ins" in response.content.decode()


# API throttles --------------------------------------------------------------------------------------


def test_bad_tokens_are_throttled_per_address(technician, fan_fitted_capacitor):
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    guesser = APIClient(REMOTE_ADDR="10.0.0.9")
    statuses = []
    for number in range(50):
        guesser.credentials(HTTP_AUTHORIZATION=f"Token {number:040x}")
        statuses.append(guesser.get(url).status_code)
    assert statuses[0] == 401 and statuses[-1] == 429, statuses
    assert statuses.count(401) == int(settings.API_BAD_TOKEN_RATE.split("/")[0])
    # Once throttled, even a right token from that address waits: guessing gains nothing.
    guesser.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=technician).key}")
    assert guesser.get(url).status_code == 429
    other = APIClient(REMOTE_ADDR="10.0.0.10")
    other.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.get(user=technician).key}")
    assert other.get(url).status_code == 200


def test_signed_in_api_users_are_throttled(monkeypatch, technician, fan_fitted_capacitor):
    monkeypatch.setattr(UserRateThrottle, "THROTTLE_RATES", {"user": "5/minute"})
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=technician).key}")
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    statuses = [client.get(url).status_code for _ in range(7)]
    assert statuses == [200] * 5 + [429] * 2
    assert set(settings.REST_FRAMEWORK["DEFAULT_THROTTLE_RATES"]) == {"anon", "user"}


# No self-promotion in the register ------------------------------------------------------------------


def user_form(user, **changes):
    """What the register's user page posts back for `user` (the inline of sites empty)."""
    data = {
        "username": user.username,
        "first_name": user.first_name,
        "last_name": user.last_name,
        "email": user.email,
        "is_active": "on",
        "groups": [g.pk for g in user.groups.all()],
        "user_permissions": [p.pk for p in user.user_permissions.all()],
        "date_joined_0": user.date_joined.strftime("%Y-%m-%d"),
        "date_joined_1": user.date_joined.strftime("%H:%M:%S"),
        "site_memberships-TOTAL_FORMS": "0",
        "site_memberships-INITIAL_FORMS": "0",
        "site_memberships-MIN_NUM_FORMS": "0",
        "site_memberships-MAX_NUM_FORMS": "1000",
        **as_shown(user),
    }
    if user.is_staff:
        data["is_staff"] = "on"
    data.update(changes)
    return data


def test_an_administrator_who_is_not_a_superuser_cannot_grant_superuser(client, administrator):
    client.force_login(administrator)
    own_page = reverse("admin:auth_user_change", args=[administrator.pk])
    assert client.post(own_page, user_form(administrator, first_name="Ann")).status_code == 302  # the form is right
    administrator.refresh_from_db()
    assert administrator.first_name == "Ann"
    client.post(own_page, user_form(administrator, is_superuser="on"))
    technician = make_user(TECHNICIAN)
    client.post(reverse("admin:auth_user_change", args=[technician.pk]), user_form(technician, is_superuser="on"))
    administrator.refresh_from_db()
    technician.refresh_from_db()
    assert not administrator.is_superuser and not technician.is_superuser


def test_no_permission_or_group_beyond_the_editors_own(client, administrator):
    client.force_login(administrator)
    sessions = Permission.objects.get(codename="delete_session")  # not an administrator's permission
    powerful = Group.objects.create(name="powerful")
    powerful_page = reverse("admin:auth_group_change", args=[powerful.pk])
    response = client.post(powerful_page, {"name": "powerful", "permissions": [sessions.pk], **as_shown(powerful)})
    assert "You cannot grant" in response.content.decode()
    assert not powerful.permissions.exists()
    powerful.permissions.add(sessions)  # made by a superuser, say
    page = reverse("admin:auth_user_change", args=[administrator.pk])
    response = client.post(page, user_form(administrator, user_permissions=[sessions.pk]))
    assert "You cannot grant" in response.content.decode()
    groups = [*administrator.groups.values_list("pk", flat=True), powerful.pk]
    response = client.post(page, user_form(administrator, groups=groups))
    assert "You cannot grant powerful" in response.content.decode()
    assert not administrator.user_permissions.exists() and not administrator.groups.filter(pk=powerful.pk).exists()
    # A group within the editor's own permissions is theirs to give.
    technician = make_user(TECHNICIAN)
    planner_group = Group.objects.get(name="planner")
    data = user_form(technician, groups=[*technician.groups.values_list("pk", flat=True), planner_group.pk])
    assert client.post(reverse("admin:auth_user_change", args=[technician.pk]), data).status_code == 302
    assert technician.groups.filter(pk=planner_group.pk).exists()


def test_a_roles_group_keeps_its_name_and_its_members_their_role(client, administrator):
    """The application knows a role by its group's name: renamed in the register ("Planners", tidied on a walk),
    every planner lost the role unseen. The name is shown, not a box; the group is not deleted."""
    from fleet.roles import roles_of

    planner = make_user(PLANNER)
    group = Group.objects.get(name=PLANNER)
    client.force_login(administrator)
    page = reverse("admin:auth_group_change", args=[group.pk])
    permissions = list(group.permissions.values_list("pk", flat=True))
    client.post(page, {"name": "Planners", "permissions": permissions, **as_shown(group)})
    group.refresh_from_db()
    assert group.name == PLANNER
    assert roles_of(User.objects.get(pk=planner.pk)) == {PLANNER}
    assert client.post(reverse("admin:auth_group_delete", args=[group.pk]), {"post": "yes"}).status_code == 403
    assert Group.objects.filter(name=PLANNER).exists()
    other = Group.objects.create(name="night shift")  # a group of the administrator's own is theirs to rename
    client.post(reverse("admin:auth_group_change", args=[other.pk]), {"name": "late shift", **as_shown(other)})
    other.refresh_from_db()
    assert other.name == "late shift"


def test_a_superusers_account_is_out_of_an_administrators_reach(client, administrator):
    root = User.objects.create_superuser("root", password=PASSWORD)
    client.force_login(administrator)
    response = client.post(
        reverse("admin:auth_user_password_change", args=[root.pk]),
        {"password1": "taken-over-123456", "password2": "taken-over-123456"},
    )
    assert response.status_code == 403
    client.post(reverse("admin:auth_user_change", args=[root.pk]), user_form(root, username="renamed"))
    root.refresh_from_db()
    assert root.check_password(PASSWORD) and root.username == "root"
    client.post(reverse("admin:authtoken_tokenproxy_add"), {"user": root.pk})
    assert not Token.objects.filter(user=root).exists()


# Content-Security-Policy, proxy trust, HSTS preload -----------------------------------------------


def test_pages_carry_a_policy_that_forbids_inline_script(client, technician, fan_fitted_capacitor):
    quarterly_readings(fan_fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.98, 3.96])
    refit_fitted_capacitors([fan_fitted_capacitor.id])
    client.force_login(technician)
    for url in [
        reverse("fitted_capacitor", args=[fan_fitted_capacitor.id]),
        reverse("reading_new", args=[fan_fitted_capacitor.id]),
        reverse("motor", args=[fan_fitted_capacitor.motor.asset_tag]) + f"?saved={fan_fitted_capacitor.id}",
    ]:
        response = client.get(url)
        policy = response["Content-Security-Policy"]
        script_src = re.search(r"script-src ([^;]*)", policy).group(1)
        assert "'unsafe-inline'" not in script_src and "'unsafe-eval'" not in script_src
        nonce = re.search(r"'nonce-([^']+)'", script_src).group(1)
        body = response.content.decode()
        inline = [a for a in re.findall(r"<script(?![^>]*\bsrc=)([^>]*)>", body) if "application/json" not in a]
        assert all(f'nonce="{nonce}"' in attributes for attributes in inline), (url, inline)
        assert not re.search(r"<[^>]+\son[a-z]+=", body), f"{url} has an inline event handler"
    chart_page = client.get(reverse("fitted_capacitor", args=[fan_fitted_capacitor.id])).content.decode()
    assert "data-figure=" in chart_page  # its chart is drawn by the page script from data, no inline code
    assert "frame-ancestors 'none'" in client.get(reverse("home"))["Content-Security-Policy"]


def test_no_template_has_an_inline_event_handler():
    for template in (ROOT / "templates").rglob("*.html"):
        assert not re.search(r"<[^>]+\son[a-z]+=", template.read_text()), template


def test_every_inline_script_in_a_template_carries_the_nonce():
    """A page added later must not lose its charts to the policy (the track record page once did)."""
    for template in (ROOT / "templates").rglob("*.html"):
        for attributes in re.findall(r"<script(?![^>]*\bsrc=)([^>]*)>", template.read_text()):
            if "application/json" not in attributes:
                assert "request.csp_nonce" in attributes, (template, attributes)


def production_settings(**env) -> dict:
    """Settings as a production process reads them from `env`."""
    code = (
        "import django, json; django.setup(); from django.conf import settings as s; "
        "print(json.dumps({'preload': s.SECURE_HSTS_PRELOAD, 'proxy': getattr(s, 'SECURE_PROXY_SSL_HEADER', None), "
        "'silenced': s.SILENCED_SYSTEM_CHECKS}))"
    )
    clean = {k: v for k, v in os.environ.items() if k not in {"SECURE_HSTS_PRELOAD", "FLEET_BEHIND_PROXY"}}
    clean.update(FLEET_PROFILE="production", SECRET_KEY="x" * 60, DJANGO_SETTINGS_MODULE="config.settings", **env)
    result = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=clean, capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    import json

    return json.loads(result.stdout)


def test_hsts_preload_and_the_forwarded_header_are_opt_in():
    default = production_settings()
    assert default["preload"] is False and default["proxy"] is None
    opted = production_settings(SECURE_HSTS_PRELOAD="true", FLEET_BEHIND_PROXY="true")
    assert opted["preload"] is True and opted["proxy"] == ["HTTP_X_FORWARDED_PROTO", "https"]
    assert "security.W021" not in opted["silenced"]


def test_compose_puts_a_proxy_in_front_and_only_then_trusts_its_header():
    services = yaml.safe_load((ROOT / "docker-compose.yml").read_text())["services"]
    assert "ports" not in services["web"], "gunicorn must not be reachable past the proxy"
    assert services["web"]["environment"]["FLEET_BEHIND_PROXY"] == "true"
    proxy = services["proxy"]
    assert any(str(port).endswith(":443") for port in proxy["ports"])
    assert "web:8000" in " ".join(proxy["command"])


# Site-scoped roles ----------------------------------------------------------------------------------


@pytest.fixture
def two_sites(db):
    """A capacitor with readings and an assessment at each of two sites."""
    here, there = make_site("HERE"), make_site("THERE")
    fitted_capacitors = {}
    for site in (here, there):
        fitted_capacitor = make_fitted_capacitor(motor=make_motor(site=site))
        quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 8, 9)), [4.0, 3.98, 3.96])
        fitted_capacitors[site.code] = fitted_capacitor
    refit_fitted_capacitors([i.id for i in fitted_capacitors.values()])
    return fitted_capacitors


def test_a_technician_limited_to_a_site_sees_and_writes_only_there(client, two_sites):
    technician = make_user(TECHNICIAN)
    SiteMembership.objects.create(user=technician, site=two_sites["HERE"].motor.site)
    client.force_login(technician)
    mine, theirs = two_sites["HERE"], two_sites["THERE"]
    reading = {"method": "meter", "capacitance_uf": "3.95", "case_temperature_c": "25", "condition": "sound"}
    for fitted_capacitor, expected in ((mine, 200), (theirs, 404)):
        motor = fitted_capacitor.motor
        assert client.get(reverse("motor", args=[motor.asset_tag])).status_code == expected
        assert client.get(reverse("fitted_capacitor", args=[fitted_capacitor.id])).status_code == expected
        assert client.get(reverse("reading_new", args=[fitted_capacitor.id])).status_code == expected
        assert client.get(reverse("route", args=[motor.site.code])).status_code == expected
        assert client.get(reverse("labels", args=[motor.site.code])).status_code == expected
        assert client.post(reverse("reading_new", args=[fitted_capacitor.id]), reading).status_code in {302, 404}
    assert Reading.objects.filter(fitted_capacitor=theirs, taken_by=technician).count() == 0
    assert Reading.objects.filter(fitted_capacitor=mine, taken_by=technician).count() == 1
    assert client.get(reverse("find"), {"tag": theirs.motor.asset_tag}).status_code == 200  # not found, no redirect

    api = APIClient()
    api.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=technician).key}")
    assert api.get(reverse("api_fitted_capacitor_readings", args=[mine.id])).status_code == 200
    assert api.get(reverse("api_fitted_capacitor_readings", args=[theirs.id])).status_code == 404
    posted = api.post(
        reverse("api_fitted_capacitor_readings", args=[theirs.id]), {"capacitance_uf": 3.9}, format="json"
    )
    assert posted.status_code == 404
    rows = api.get(reverse("api_assessments")).json()["results"]
    assert [row["fitted_capacitor_id"] for row in rows] == [mine.id]


def test_without_memberships_and_for_administrators_every_site_is_open(client, two_sites):
    technician, administrator = make_user(TECHNICIAN), make_user(ADMINISTRATOR)
    SiteMembership.objects.create(user=administrator, site=two_sites["HERE"].motor.site)
    for user in (technician, administrator):
        client.force_login(user)
        for fitted_capacitor in two_sites.values():
            assert client.get(reverse("motor", args=[fitted_capacitor.motor.asset_tag])).status_code == 200


def test_import_jobs_are_seen_by_their_owner_and_administrators_only(client):
    owner, colleague, administrator = make_user(TECHNICIAN), make_user(TECHNICIAN), make_user(ADMINISTRATOR)
    content = b"asset_tag,role,taken_at\nM-1,run,2026-01-01\n"
    job = ImportJob.objects.create(kind="readings", filename="owners-readings.csv", content=content, created_by=owner)
    for user, expected in ((owner, 200), (colleague, 404), (administrator, 200)):
        client.force_login(user)
        assert client.get(reverse("import_detail", args=[job.id])).status_code == expected
        assert client.get(reverse("import_rejected", args=[job.id])).status_code == expected
        assert ("owners-readings.csv" in client.get(reverse("imports")).content.decode()) == (expected == 200)
