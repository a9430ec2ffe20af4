"""Backup and restore of the whole database as JSON (gzipped when the name ends in .gz).

Django's dumpdata/loaddata do the work: foreign keys to users, groups, permissions and
content types by natural key, so a backup loads into any freshly migrated database,
SQLite or PostgreSQL. Content types, permissions and sessions are left out (migrate
makes the first two; sessions are not worth keeping), and so is the ledger of counts, which the
triggers rebuild as the rows load. Rows keep their ids, and models
come out in dependency order (capacitors before their readings), so the readings'
triggers see each capacitor as it is when its readings arrive.
"""

from __future__ import annotations

import gzip
import os
import warnings
import zlib
from dataclasses import dataclass

from django.apps import apps
from django.contrib.auth.models import Group, Permission
from django.contrib.contenttypes.models import ContentType
from django.contrib.sessions.models import Session
from django.core.management import CommandError, call_command
from django.core.management.commands import loaddata
from django.core.serializers.base import DeserializationError
from django.db import connections, transaction
from django.template.defaultfilters import pluralize

from fleet import audit
from fleet.engineering.rules import site_time_zone
from fleet.models import Site
from fleet.roles import ROLES

# The ledgers of counts (InServiceCount, MotorReadCount, DesignCount) are left out too: their triggers
# count every row again as it loads.
LEFT_OUT = [
    "contenttypes",
    "auth.permission",
    "sessions",
    "fleet.inservicecount",
    "fleet.motorreadcount",
    "fleet.designcount",
]
SUFFIXES = (".json", ".json.gz")
# Rows that `migrate` itself creates: an empty database may hold them.
MADE_BY_MIGRATE = {ContentType, Permission, Session}


def _check_name(path: str) -> None:
    if not str(path).endswith(SUFFIXES):
        raise CommandError(f"{path}: name the file .json or .json.gz (gzipped)")


def write_backup(path: str, *, database: str = "default", replace: bool = False) -> None:
    """One consistent picture while the site runs: a single snapshot on PostgreSQL; on SQLite
    the file is read under one transaction, so writers wait (up to the busy timeout) until it ends.

    A file already at `path` (an earlier backup) is refused unless `replace`; the backup is written beside it
    under another name and takes its place only once whole, so a failed backup never spoils the one before."""
    _check_name(path)
    path = str(path)
    if os.path.exists(path) and not replace:
        raise CommandError(
            f"{path}: a file of that name is there already (an earlier backup?). Nothing was written: name another "
            "file, or add --replace to write over it."
        )
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise CommandError(f"{path}: there is no folder {folder}. Nothing was written: make it first, or name another.")
    suffix = next(ending for ending in sorted(SUFFIXES, key=len, reverse=True) if path.endswith(ending))
    writing = os.path.join(os.path.dirname(path), f".{os.path.basename(path)}.writing{suffix}")
    connection = connections[database]
    outermost = not connection.in_atomic_block
    try:
        with transaction.atomic(using=database):
            if outermost and connection.vendor == "postgresql":
                connection.cursor().execute("SET TRANSACTION ISOLATION LEVEL REPEATABLE READ READ ONLY")
            call_command(
                "dumpdata",
                exclude=LEFT_OUT,
                natural_foreign=True,
                output=writing,
                database=database,
                indent=None,
                verbosity=0,
            )
        os.replace(writing, path)
    finally:
        if os.path.exists(writing):
            os.remove(writing)


def rows_in_the_way(database: str = "default") -> dict[str, int]:
    """Models that hold rows a restore would collide with (role groups and migrate's own rows aside)."""
    found = {}
    for model in apps.get_models():
        if model in MADE_BY_MIGRATE or model._meta.proxy:
            continue
        queryset = model._default_manager.using(database)
        if model is Group:
            queryset = queryset.exclude(name__in=ROLES)
        count = queryset.count()
        if count:
            found[model._meta.label] = count
    return found


class _LoadThisFile(loaddata.Command):
    """loaddata of exactly the file named. loaddata itself takes a name as a fixture's and looks for it with
    every serialization and compression ending in every fixture directory: `X.json` beside `X.json.gz` was
    refused as "Multiple fixtures named 'X'", and `X.json` missing loaded `X.json.gz` unasked."""

    def find_fixtures(self, fixture_label):
        path = os.path.realpath(fixture_label)
        return [(path, os.path.dirname(path), os.path.basename(path))]


@dataclass(frozen=True)
class Restored:
    """What a restore loaded: the file (its full path), how many records, and the other backups of the same
    name beside it, which were not read."""

    path: str
    records: int
    beside: list[str]


def backups_beside(path: str) -> list[str]:
    """The other backups of `path`'s name in its folder (`X.json.gz` beside `X.json`, and the other way)."""
    stem = str(path).removesuffix(".gz").removesuffix(".json")
    return [
        os.path.basename(stem + suffix)
        for suffix in SUFFIXES
        if stem + suffix != str(path) and os.path.isfile(stem + suffix)
    ]


def restore_backup(path: str, *, database: str = "default", allow_empty: bool = False) -> Restored:
    """Load a backup into an empty, migrated database; refuse a database that holds data, and a backup that
    holds no records unless `allow_empty` (then nothing changes: the database stays as migrate made it)."""
    _check_name(path)
    if not os.path.isfile(path):
        beside = backups_beside(path)
        hint = f" ({' and '.join(beside)} {pluralize(len(beside), 'is,are')} beside it: name the one to restore)"
        raise CommandError(f"{path}: no such file{hint if beside else ''}. Nothing was restored.")
    in_the_way = rows_in_the_way(database)
    if in_the_way:
        listed = ", ".join(f"{label} ({count})" for label, count in sorted(in_the_way.items()))
        raise CommandError(
            f"The database is not empty: {listed}. Restore only into a new database: create it, run "
            "`manage.py migrate`, then restore."
        )
    loader = _LoadThisFile()
    try:
        with transaction.atomic(using=database), audit.suspended(), warnings.catch_warnings():
            # loaddata's own warning of a file with no records ("No fixture data found") is said below in words.
            warnings.filterwarnings("ignore", "No fixture data found", RuntimeWarning)
            # migrate made the role groups; the backup brings them back with their own ids and permissions.
            Group.objects.using(database).filter(name__in=ROLES).delete()
            call_command(loader, str(path), database=database, verbosity=0)
            _refuse_unknown_time_zones(path, database)
            if not loader.fixture_object_count:
                if not allow_empty:
                    raise CommandError(
                        f"{path}: the backup holds no records (not even the roles a migrated database has), so "
                        "restoring it would restore nothing. Nothing was restored. Check that it is the file "
                        "you meant; to restore it all the same (the database stays as migrate made it), add "
                        "--allow-empty."
                    )
                transaction.set_rollback(True, using=database)  # the role groups stay as migrate made them
    except (OSError, EOFError, zlib.error, UnicodeDecodeError, DeserializationError) as error:
        raise CommandError(f"{path}: {_unreadable_words(path, error)} Nothing was restored.") from error
    return Restored(os.path.realpath(path), loader.fixture_object_count, backups_beside(path))


def restored_words(restored: Restored) -> str:
    """What the restore command says it did: the file restored, its records, and the backups of the same name
    beside it that it did not read (the file named is the one restored, whatever else is there)."""
    said = f"Restored {restored.path} ({restored.records} record{pluralize(restored.records)})."
    if not restored.records:
        said = f"Restored {restored.path}: it holds no records, so nothing changed (--allow-empty)."
    if restored.beside:
        others = " and ".join(restored.beside)
        said += f" Not read: {others} beside it; the file named is the one restored."
    return said


def _unreadable_words(path: str, error: Exception) -> str:
    """Why loaddata could not read a backup, in words (its own message starts "Problem installing fixture")."""
    if isinstance(error, gzip.BadGzipFile):
        return (
            "not a gzipped file. A .json.gz backup is gzipped JSON, as `manage.py backup` writes it; "
            "a backup in plain JSON is named .json."
        )
    if isinstance(error, EOFError | zlib.error):
        return "the gzipped file is cut off or damaged: it cannot be unpacked to its end."
    cause = error.__cause__ or error
    detail = str(cause).split("': ", 1)[-1] if str(cause).startswith("Problem installing") else str(cause)
    return f"not a backup that can be read: {detail or type(cause).__name__}."


def _refuse_unknown_time_zones(path: str, database: str) -> None:
    """A site's time zone the tz database does not know is refused, by the site form's rule (`site_time_zone`):
    loaddata checks no field, and every page would read that site's times in the server's zone."""
    for code, zone in Site.objects.using(database).values_list("code", "time_zone"):
        if site_time_zone(zone) is None:
            raise CommandError(
                f"{path}: site {code} has the time zone {zone!r}, which the tz database does not know: use one "
                "like Europe/Madrid, America/Chicago or UTC. Nothing was restored."
            )
