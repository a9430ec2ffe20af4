"""Backup and restore: the round trip into a new database loses nothing; a full database is refused."""

import datetime as dt
import gzip
import io
import json
import os
import sqlite3
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest
from django.apps import apps
from django.contrib.auth.models import Group, User
from django.core.management import CommandError, call_command
from django.db import connection
from django.utils import timezone
from rest_framework.authtoken.models import Token

from fleet.models import FittedCapacitor, ImportJob, Reading, SiteMembership, WorkOrder
from fleet.roles import ADMINISTRATOR, PLANNER, TECHNICIAN, ensure_role_groups
from fleet.services.backup import LEFT_OUT
from fleet.services.counts import in_service_counts
from tests.factories import make_fitted_capacitor, make_motor, make_reading, make_site, make_user, quarterly_readings

pytestmark = pytest.mark.django_db
ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def plant(db, django_capture_on_commit_callbacks):
    """A little of everything: a removed capacitor with its readings, a correction, a fitted fleet,
    users with roles, sites, a token, a work order, an import job with its file, audit entries."""
    site = make_site("CST")
    motor = make_motor(site=site, asset_tag="CST-FAN-01")
    old = make_fitted_capacitor(motor=motor, fitted_on=dt.date(2021, 3, 1))
    start = timezone.make_aware(dt.datetime(2021, 4, 6, 9, 30))
    readings = quarterly_readings(old, start, [4.02, 3.99, 3.97, 3.93], case_temperature_c=31.5)
    make_reading(old, taken_at=start + dt.timedelta(days=300), capacitance_uf=3.95, supersedes=readings[-1])
    old.removed_on, old.removal_reason = dt.date(2022, 6, 1), "failed"
    old.save()
    new = make_fitted_capacitor(motor=motor, part=old.part, fitted_on=dt.date(2022, 6, 1))
    quarterly_readings(new, timezone.make_aware(dt.datetime(2022, 7, 4, 8)), [4.05, 4.03, 4.0, 3.99, 3.97])
    with django_capture_on_commit_callbacks(execute=True):
        call_command("refit")  # assessments, part priors, a refit run
    technician = make_user(TECHNICIAN, username="tech-cst")
    technician.set_password("kept-as-a-hash-123")
    technician.save()
    make_user(ADMINISTRATOR, username="keeper")
    # A role deleted and made again by migrate: its id no longer matches a new database's.
    Group.objects.filter(name=PLANNER).delete()
    ensure_role_groups()
    SiteMembership.objects.create(user=technician, site=site)
    Token.objects.create(user=technician)
    WorkOrder.objects.create(motor=motor, fitted_capacitor=new, kind="replace_run", due_on=dt.date(2027, 1, 4))
    ImportJob.objects.create(
        kind="readings", filename="q1.csv", content=b"tag,uf\nCST-FAN-01,3.9\n", created_by=technician
    )
    return {"old": old, "technician": technician}


def read_backup(path) -> list[dict]:
    with gzip.open(path, "rt") as file:
        return json.load(file)


def normalised(objects) -> list:
    """Objects with datetimes parsed, so 12:00:00Z and 12:00:00.000Z compare equal."""

    def value(v):
        if isinstance(v, str) and len(v) >= 19 and v[4] == "-" and v[10] == "T":
            try:
                return dt.datetime.fromisoformat(v.replace("Z", "+00:00"))
            except ValueError:
                return v
        return v

    return sorted(
        (json.dumps([o["model"], o.get("pk")], default=str), {k: value(v) for k, v in o["fields"].items()})
        for o in objects
    )


def counts_here() -> set:
    """The ledger of counts summed per key, dates as text."""
    counts = in_service_counts()
    return {(site, part, risk, None, str(day), n) for (site, part, risk, day), n in counts.assessed.items()} | {
        (site, part, "", str(month), None, n) for (site, part, month), n in counts.fitted.items()
    }


def restored_counts(tmp_path) -> set:
    with sqlite3.connect(tmp_path / "restored.sqlite3") as database:
        return set(
            database.execute(
                "SELECT site_id, part_id, risk, fitted_month, assessed_on, SUM(n) FROM fleet_inservicecount"
                " GROUP BY site_id, part_id, risk, fitted_month, assessed_on HAVING SUM(n) <> 0"
            )
        )


MOTOR_COUNTS_SQL = (
    "SELECT site_id, last_read_on, commissioned_on, SUM(n) FROM fleet_motorreadcount"
    " GROUP BY site_id, last_read_on, commissioned_on HAVING SUM(n) <> 0"
)


def motor_counts_here() -> set:
    """The ledger of motors by newest reading summed per key, dates as text."""
    with connection.cursor() as cursor:
        cursor.execute(MOTOR_COUNTS_SQL)
        return {
            (site, day and str(day), commissioned and str(commissioned), n) for site, day, commissioned, n in cursor
        }


def restored_motor_counts(tmp_path) -> set:
    with sqlite3.connect(tmp_path / "restored.sqlite3") as database:
        return set(database.execute(MOTOR_COUNTS_SQL))


def in_new_database(tmp_path, *commands) -> None:
    """Run manage.py commands against a new SQLite database file."""
    env = {**os.environ, "DATABASE_URL": f"sqlite:///{tmp_path / 'restored.sqlite3'}"}
    env.pop("DJANGO_SETTINGS_MODULE", None)
    for command in commands:
        result = subprocess.run(
            [sys.executable, "manage.py", *command], cwd=ROOT, env=env, capture_output=True, text=True
        )
        assert result.returncode == 0, result.stdout + result.stderr


def test_the_round_trip_into_a_new_database_loses_nothing(plant, tmp_path):
    backup, again = tmp_path / "fleet.json.gz", tmp_path / "again.json.gz"
    call_command("backup", str(backup))
    written = read_backup(backup)

    # Every row of every model (but what migrate makes) is in the file.
    left_out = {label for label in LEFT_OUT if "." in label} | {
        m._meta.label_lower for label in LEFT_OUT if "." not in label for m in apps.get_app_config(label).get_models()
    }
    expected = {
        m._meta.label_lower: m._default_manager.count()
        for m in apps.get_models()
        if not m._meta.proxy and m._meta.label_lower not in left_out
    }
    assert Counter(o["model"] for o in written) == {label: n for label, n in expected.items() if n}
    for label in (
        "fleet.reading",
        "fleet.assessment",
        "fleet.partprior",
        "auth.user",
        "auth.group",
        "fleet.auditentry",
    ):
        assert expected[label] > 0, label

    in_new_database(tmp_path, ["migrate", "--verbosity", "0"], ["restore", str(backup)], ["backup", str(again)])
    restored = read_backup(again)
    assert normalised(restored) == normalised(written)
    # The ledger of counts is not in the file: the restored database's triggers counted the rows again.
    assert not any(o["model"] == "fleet.inservicecount" for o in written)
    assert restored_counts(tmp_path) == counts_here() and counts_here()
    assert not any(o["model"] == "fleet.motorreadcount" for o in written)
    assert restored_motor_counts(tmp_path) == motor_counts_here() and motor_counts_here()

    # A sample of values, read back from the restored database's own backup.
    by_key = {(o["model"], o.get("pk")): o["fields"] for o in restored}
    reading = Reading.objects.filter(supersedes__isnull=False).get()
    fields = by_key[("fleet.reading", reading.pk)]
    assert fields["capacitance_uf"] == 3.95 and fields["supersedes"] == reading.supersedes_id
    assert fields["fitted_capacitor"] == plant["old"].pk
    old = by_key[("fleet.fittedcapacitor", plant["old"].pk)]
    assert (old["removed_on"], old["removal_reason"]) == ("2022-06-01", "failed")
    technician = next(f for (model, _), f in by_key.items() if model == "auth.user" and f["username"] == "tech-cst")
    assert technician["password"] == User.objects.get(username="tech-cst").password
    assert technician["groups"] == [[TECHNICIAN]]
    group = next(f for (model, _), f in by_key.items() if model == "auth.group" and f["name"] == ADMINISTRATOR)
    assert len(group["permissions"]) == Group.objects.get(name=ADMINISTRATOR).permissions.count()
    job = next(f for (model, _), f in by_key.items() if model == "fleet.importjob")
    assert job["content"] == written[[o["model"] for o in written].index("fleet.importjob")]["fields"]["content"]


def test_a_database_that_holds_data_is_refused_and_left_as_it_was(plant, tmp_path):
    backup = tmp_path / "fleet.json.gz"
    call_command("backup", str(backup))
    readings = Reading.objects.count()
    with pytest.raises(CommandError, match="not empty"):
        call_command("restore", str(backup))
    assert Reading.objects.count() == readings


def test_the_reading_triggers_hold_during_a_restore(plant, tmp_path):
    """A backup edited to date a reading after its capacitor's removal does not load, and nothing of it does."""
    backup = tmp_path / "fleet.json.gz"
    call_command("backup", str(backup))
    objects = read_backup(backup)
    late = next(
        o for o in objects if o["model"] == "fleet.reading" and o["fields"]["fitted_capacitor"] == plant["old"].pk
    )
    late["fields"]["taken_at"] = "2023-01-01T00:00:00Z"
    tampered = tmp_path / "tampered.json.gz"
    with gzip.open(tampered, "wt") as file:
        json.dump(objects, file)
    env = {**os.environ, "DATABASE_URL": f"sqlite:///{tmp_path / 'restored.sqlite3'}"}
    env.pop("DJANGO_SETTINGS_MODULE", None)
    subprocess.run([sys.executable, "manage.py", "migrate", "-v0"], cwd=ROOT, env=env, check=True)
    result = subprocess.run(
        [sys.executable, "manage.py", "restore", str(tampered)], cwd=ROOT, env=env, capture_output=True, text=True
    )
    assert result.returncode != 0 and "removed" in result.stderr
    in_new_database(tmp_path, ["restore", str(backup)])  # the same database, untouched, takes the real backup


def test_a_file_name_that_says_nothing_of_its_format_is_refused(tmp_path):
    with pytest.raises(CommandError, match=r"\.json or \.json\.gz"):
        call_command("backup", str(tmp_path / "fleet.bak"))
    assert not FittedCapacitor.objects.exists()


def test_a_backup_that_cannot_be_read_is_refused_in_words_not_a_traceback(tmp_path):
    """A .json.gz that is not gzipped ended in a BadGzipFile traceback, a gzip cut off in an EOFError, broken JSON
    in a DeserializationError ([pub] RFC 1952: a gzip member starts with the bytes 1f 8b; [derived]: each is
    refused naming the file, and nothing is restored)."""
    plain = tmp_path / "plain.json.gz"
    plain.write_text("[]")
    whole = gzip.compress(json.dumps([{"model": "fleet.site", "pk": 1, "fields": {"code": "X"}}] * 50).encode())
    cut = tmp_path / "cut.json.gz"
    cut.write_bytes(whole[: len(whole) // 2])
    broken = tmp_path / "broken.json"
    broken.write_text('[{"model": "fleet.site", "pk": 1, "fields": {"code": "X"')
    for path, words in (
        (plain, "not a gzipped file"),
        (cut, "the gzipped file is cut off or damaged"),
        (broken, "not a backup that can be read: Expecting"),
    ):
        with pytest.raises(CommandError) as refused:
            call_command("restore", str(path))
        assert str(refused.value).startswith(f"{path}: {words}") and "Nothing was restored" in str(refused.value)


def test_a_backup_naming_a_time_zone_nobody_knows_is_refused_by_the_site_forms_rule(tmp_path):
    """ "time_zone": "Nowhere/None" was restored as it was (loaddata checks no field), and that site's times were
    then read in the server's zone ([pub] IANA time zone database: no zone of that name; the rule is the site
    form's, `site_time_zone`)."""
    from fleet.models import Site

    backup = tmp_path / "zone.json"
    site = {"code": "NZ", "name": "Nowhere", "time_zone": "Nowhere/None"}
    backup.write_text(json.dumps([{"model": "fleet.site", "pk": 7, "fields": site}]))
    with pytest.raises(CommandError, match="site NZ has the time zone 'Nowhere/None', which the tz database"):
        call_command("restore", str(backup))
    assert not Site.objects.exists()
    site["time_zone"] = "Europe/Madrid"
    backup.write_text(json.dumps([{"model": "fleet.site", "pk": 7, "fields": site}]))
    call_command("restore", str(backup), stdout=io.StringIO())
    assert Site.objects.get().time_zone == "Europe/Madrid"


def site_backup(path, code: str) -> None:
    """A backup of one site, gzipped where the name says so."""
    objects = json.dumps([{"model": "fleet.site", "pk": 7, "fields": {"code": code, "name": code, "time_zone": "UTC"}}])
    if str(path).endswith(".gz"):
        with gzip.open(path, "wt") as file:
            file.write(objects)
    else:
        path.write_text(objects)


@pytest.mark.parametrize(("named", "other", "code"), [("X.json", "X.json.gz", "PLAIN"), ("X.json.gz", "X.json", "GZ")])
def test_the_file_named_is_restored_and_said_so_whatever_backup_of_its_name_is_beside_it(tmp_path, named, other, code):
    """X.json beside X.json.gz: `restore X.json` said "Multiple fixtures named 'X' in ... Aborting." (loaddata looks
    for the name with every ending) and restored nothing. [derived] the file named is restored, and the command
    says which, and that the other was not read."""
    from fleet.models import Site

    site_backup(tmp_path / "X.json", "PLAIN")
    site_backup(tmp_path / "X.json.gz", "GZ")
    said = io.StringIO()
    call_command("restore", str(tmp_path / named), stdout=said)
    assert list(Site.objects.values_list("code", flat=True)) == [code]
    assert said.getvalue().strip() == (
        f"Restored {tmp_path / named} (1 record). Not read: {other} beside it; the file named is the one restored."
    )


def test_a_backup_named_but_missing_is_refused_naming_the_one_beside_it(tmp_path):
    """`restore X.json` with only X.json.gz there restored X.json.gz, unasked, and said "Restored X.json"."""
    from fleet.models import Site

    site_backup(tmp_path / "X.json.gz", "GZ")
    with pytest.raises(CommandError) as refused:
        call_command("restore", str(tmp_path / "X.json"))
    assert str(refused.value) == (
        f"{tmp_path / 'X.json'}: no such file (X.json.gz is beside it: name the one to restore). Nothing was restored."
    )
    assert not Site.objects.exists()


@pytest.mark.parametrize("name", ["empty.json", "empty.json.gz"])
def test_a_backup_that_holds_no_records_is_refused_unless_asked_for(tmp_path, name):
    """A backup of no records ("[]": a file cut short, one written by another program) restored with only
    loaddata's warning "No fixture data found", and the role groups migrate made were deleted with nothing
    in their place. [derived] refused, saying it holds no records; with --allow-empty nothing changes."""
    path = tmp_path / name
    with gzip.open(path, "wt") if name.endswith(".gz") else open(path, "w") as file:
        file.write("[]")
    roles = sorted(Group.objects.values_list("name", flat=True))
    assert roles
    with pytest.raises(CommandError) as refused:
        call_command("restore", str(path))
    assert str(refused.value).startswith(f"{path}: the backup holds no records")
    assert "Nothing was restored" in str(refused.value) and "--allow-empty" in str(refused.value)
    said = io.StringIO()
    call_command("restore", str(path), "--allow-empty", stdout=said)
    assert said.getvalue().strip() == f"Restored {path}: it holds no records, so nothing changed (--allow-empty)."
    assert sorted(Group.objects.values_list("name", flat=True)) == roles


def test_a_backup_never_writes_over_an_earlier_one_unasked(plant, tmp_path):
    # [ours] nothing kept is overwritten unseen: an earlier backup of the same name is refused and left as it
    # was; --replace writes over it, and only once the new one is whole (no half-written file is left beside it)
    earlier = tmp_path / "fleet.json.gz"
    earlier.write_bytes(b"an earlier backup")
    with pytest.raises(CommandError, match="there already .* --replace"):
        call_command("backup", str(earlier))
    assert earlier.read_bytes() == b"an earlier backup"
    call_command("backup", str(earlier), "--replace")
    with gzip.open(earlier, "rt") as handle:
        assert any(record["model"] == "fleet.fittedcapacitor" for record in json.load(handle))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fleet.json.gz"]


def test_a_backup_into_a_folder_that_is_not_there_is_refused_in_words(tmp_path):
    # [ours] a command answers a mistyped path with what is wrong, not the serializer's traceback
    with pytest.raises(CommandError, match="there is no folder"):
        call_command("backup", str(tmp_path / "no-such-folder" / "fleet.json.gz"))
    assert list(tmp_path.iterdir()) == []
