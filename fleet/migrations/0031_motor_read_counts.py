"""Counts of motors in service by site and the UTC day of their newest reading (never read: by the
day commissioned), kept on write in an append-only ledger (`MotorReadCount`), so the dashboard's
readings by route (overdue, due this quarter, read this quarter, per site) sums a few hundred rows
instead of counting 100,000 motors.

A motor in service adds 1 at (its site, the UTC day of `last_read_at`, its commissioning day when it
was never read). The triggers add, for every write to motors, the new rows' share less the old rows':

- PostgreSQL: one trigger per statement on inserting, changing and deleting motors, over the
  statement's transition tables, summed per key (the readings' statement trigger of 0021 moves
  `last_read_at` of a whole import's motors in one UPDATE: a few rows here).
- SQLite: the same shares by row triggers.

Summed with `services.counts.motor_read_counts`, compacted with the capacitors' ledger
(`compact_counts`). Existing motors are counted once here. On SQLite, a later migration that rebuilds
fleet_motor drops these triggers: reinstall them (SQLITE_FORWARD below).
"""

import django.db.models.deletion
from django.db import migrations, models

from ._triggers import (
    plpgsql_statement_trigger,
    postgres_drops,
    run,
    sqlite_drops,
    sqlite_row_trigger,
    summed_insert,
)

LEDGER = "fleet_motorreadcount (site_id, last_read_on, commissioned_on, n)"
KEY = "site_id, last_read_on, commissioned_on"
DAY = {"postgresql": "({} AT TIME ZONE 'UTC')::date", "sqlite": "date({})"}
# The columns a motor's share depends on: a change to any of them moves it.
MOTOR_COLUMNS = ("site_id", "status", "last_read_at", "commissioned_on")


def motor_share(vendor: str, rows: str, sign: int) -> str:
    """The share of motors (`rows`: a table, or OLD/NEW in a row trigger): those in service, by site,
    UTC day of the newest reading and, never read, the day commissioned."""
    m, source = (rows, "") if rows in ("OLD", "NEW") else ("m", f" FROM {rows} m")
    return (
        f"SELECT {m}.site_id, {DAY[vendor].format(m + '.last_read_at')} AS last_read_on,"
        f" CASE WHEN {m}.last_read_at IS NULL THEN {m}.commissioned_on END AS commissioned_on, {sign} AS n"
        f"{source} WHERE {m}.status = 'in_service'"
    )


def summed(*shares: str) -> str:
    return summed_insert(LEDGER, KEY, *shares)


def _sqlite_trigger(name: str, event: str, when: str, statement: str) -> str:
    return sqlite_row_trigger(name, event, "fleet_motor", when, statement)


CHANGED = f"({', '.join('OLD.' + c for c in MOTOR_COLUMNS)}) IS NOT ({', '.join('NEW.' + c for c in MOTOR_COLUMNS)})"
SQLITE_FORWARD = [
    _sqlite_trigger(
        "fleet_motor_read_counts_insert",
        "AFTER INSERT",
        "NEW.status = 'in_service'",
        summed(motor_share("sqlite", "NEW", 1)),
    ),
    _sqlite_trigger(
        "fleet_motor_read_counts_update",
        "AFTER UPDATE",
        CHANGED,
        summed(motor_share("sqlite", "OLD", -1), motor_share("sqlite", "NEW", 1)),
    ),
    _sqlite_trigger(
        "fleet_motor_read_counts_delete",
        "AFTER DELETE",
        "OLD.status = 'in_service'",
        summed(motor_share("sqlite", "OLD", -1)),
    ),
]
SQLITE_BACKWARD = sqlite_drops(
    "fleet_motor_read_counts_insert", "fleet_motor_read_counts_update", "fleet_motor_read_counts_delete"
)
POSTGRES_FORWARD = [
    *plpgsql_statement_trigger(
        "fleet_motor_read_counts_insert",
        "AFTER INSERT",
        "fleet_motor",
        f"{summed(motor_share('postgresql', 'new_rows', 1))}\nRETURN NULL;",
        new_rows="new_rows",
    ),
    *plpgsql_statement_trigger(
        "fleet_motor_read_counts_update",
        "AFTER UPDATE",
        "fleet_motor",
        f"{summed(motor_share('postgresql', 'old_rows', -1), motor_share('postgresql', 'new_rows', 1))}\nRETURN NULL;",
        old_rows="old_rows",
        new_rows="new_rows",
    ),
    *plpgsql_statement_trigger(
        "fleet_motor_read_counts_delete",
        "AFTER DELETE",
        "fleet_motor",
        f"{summed(motor_share('postgresql', 'old_rows', -1))}\nRETURN NULL;",
        old_rows="old_rows",
    ),
]
POSTGRES_BACKWARD = postgres_drops(
    *((f"fleet_motor_read_counts_{event}", "fleet_motor") for event in ("insert", "update", "delete"))
)


def fill(vendor: str) -> list[str]:
    """Every motor in service as it stands, counted once."""
    return [summed(motor_share(vendor, "fleet_motor", 1))]


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0030_capacitor_removals"),
    ]

    operations = [
        migrations.CreateModel(
            name="MotorReadCount",
            fields=[
                ("id", models.BigAutoField(auto_created=True, primary_key=True, serialize=False, verbose_name="ID")),
                (
                    "last_read_on",
                    models.DateField(blank=True, help_text="UTC day of the motors' newest reading", null=True),
                ),
                (
                    "commissioned_on",
                    models.DateField(blank=True, help_text="Day commissioned, of motors never read", null=True),
                ),
                ("n", models.IntegerField(help_text="Change to the count")),
                (
                    "site",
                    models.ForeignKey(
                        blank=True,
                        db_constraint=False,
                        db_index=False,
                        editable=False,
                        help_text="The motors' site",
                        null=True,
                        on_delete=django.db.models.deletion.DO_NOTHING,
                        related_name="+",
                        to="fleet.site",
                    ),
                ),
            ],
        ),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.RunPython(
            run({"sqlite": fill("sqlite"), "postgresql": fill("postgresql")}), migrations.RunPython.noop
        ),
    ]
