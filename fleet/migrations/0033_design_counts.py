"""Counts of capacitors in service per position design, kept on write in an append-only ledger
(`DesignCount`), so the stand-in parts page reads the distinct designs (part, role and the motor's
type, load, ratings and equivalent circuit) from a few hundred rows instead of joining 150,000
capacitors with their motors on every request.

A capacitor in service on a motor in service adds 1 at (the motor's site, its part and role, the
motor's design). The triggers add, for every write, the new rows' share less the old rows':

- fitted capacitors, PostgreSQL: one trigger per statement on inserting, changing and deleting, over
  the statement's transition tables, summed per key; SQLite: the same shares by row triggers.
- motors, both engines: a row trigger with a condition, when the site, the status or a design column
  changes (as 0023's motor moves: every reading updates the motor's `last_read_at`, which moves no
  design). It moves the motor's capacitors in service from the old design to the new. A motor is
  inserted without capacitors, and its capacitors are deleted before it, so neither needs a trigger.

Summed in `services.substitutes.part_families`, compacted with the other ledgers (`compact_counts`).
Existing capacitors are counted once here. On SQLite, a later migration that rebuilds fleet_motor or
fleet_fittedcapacitor drops these triggers: reinstall them (SQLITE_FORWARD below).
"""

import django.db.models.deletion
from django.db import migrations, models


from ._triggers import (
    plpgsql_statement_trigger,
    plpgsql_trigger,
    postgres_drops,
    run,
    sqlite_drops,
    sqlite_row_trigger,
    summed_insert,
)

DESIGN_COLUMNS = (
    "motor_type",
    "load_type",
    "rated_voltage_v",
    "frequency_hz",
    "poles",
    "full_load_current_a",
    "rated_speed_rpm",
    "r1m_ohm",
    "x1m_ohm",
    "r1a_ohm",
    "x1a_ohm",
    "r2_ohm",
    "x2_ohm",
    "xm_ohm",
    "turns_ratio",
    "rotational_loss_w",
)
KEY = ", ".join(("site_id", "part_id", "role", *DESIGN_COLUMNS))
LEDGER = f"fleet_designcount ({KEY}, n)"
# The columns a share depends on: a change to any of them moves it.
CAPACITOR_COLUMNS = ("removed_on", "part_id", "role", "motor_id")
MOTOR_COLUMNS = ("site_id", "status", *DESIGN_COLUMNS)



def capacitor_share(rows: str, sign: int) -> str:
    """The share of fitted capacitors (`rows`: a table, or OLD/NEW in a row trigger): those in service
    on a motor in service, by the motor's site, their part and role, and the motor's design."""
    if rows in ("OLD", "NEW"):
        c, source = rows, f" FROM fleet_motor m WHERE m.id = {rows}.motor_id AND"
    else:
        c, source = "c", f" FROM {rows} c JOIN fleet_motor m ON m.id = c.motor_id WHERE"
    design = ", ".join(f"m.{column}" for column in DESIGN_COLUMNS)
    return (
        f"SELECT m.site_id, {c}.part_id, {c}.role, {design}, {sign} AS n"
        f"{source} {c}.removed_on IS NULL AND m.status = 'in_service'"
    )


def motor_share(m: str, sign: int) -> str:
    """The share of one motor's capacitors in service (`m`: OLD or NEW in a row trigger on motors)."""
    design = ", ".join(f"{m}.{column}" for column in DESIGN_COLUMNS)
    return (
        f"SELECT {m}.site_id, c.part_id, c.role, {design}, {sign} AS n FROM fleet_fittedcapacitor c"
        f" WHERE c.motor_id = {m}.id AND c.removed_on IS NULL AND {m}.status = 'in_service'"
    )


def summed(*shares: str) -> str:
    return summed_insert(LEDGER, KEY, *shares)


def _changed(columns, differ: str) -> str:
    return f"({', '.join('OLD.' + c for c in columns)}) {differ} ({', '.join('NEW.' + c for c in columns)})"


MOTOR_MOVES = summed(motor_share("OLD", -1), motor_share("NEW", 1))
SQLITE_FORWARD = [
    sqlite_row_trigger(
        "fleet_design_counts_insert",
        "AFTER INSERT",
        "fleet_fittedcapacitor",
        "NEW.removed_on IS NULL",
        summed(capacitor_share("NEW", 1)),
    ),
    sqlite_row_trigger(
        "fleet_design_counts_update",
        "AFTER UPDATE",
        "fleet_fittedcapacitor",
        _changed(CAPACITOR_COLUMNS, "IS NOT"),
        summed(capacitor_share("OLD", -1), capacitor_share("NEW", 1)),
    ),
    sqlite_row_trigger(
        "fleet_design_counts_delete",
        "AFTER DELETE",
        "fleet_fittedcapacitor",
        "OLD.removed_on IS NULL",
        summed(capacitor_share("OLD", -1)),
    ),
    sqlite_row_trigger(
        "fleet_design_counts_motor", "AFTER UPDATE", "fleet_motor", _changed(MOTOR_COLUMNS, "IS NOT"), MOTOR_MOVES
    ),
]
SQLITE_BACKWARD = sqlite_drops(
    "fleet_design_counts_insert",
    "fleet_design_counts_update",
    "fleet_design_counts_delete",
    "fleet_design_counts_motor",
)
POSTGRES_FORWARD = [
    *plpgsql_statement_trigger(
        "fleet_design_counts_insert",
        "AFTER INSERT",
        "fleet_fittedcapacitor",
        f"{summed(capacitor_share('new_rows', 1))}\nRETURN NULL;",
        new_rows="new_rows",
    ),
    *plpgsql_statement_trigger(
        "fleet_design_counts_update",
        "AFTER UPDATE",
        "fleet_fittedcapacitor",
        f"{summed(capacitor_share('old_rows', -1), capacitor_share('new_rows', 1))}\nRETURN NULL;",
        old_rows="old_rows",
        new_rows="new_rows",
    ),
    *plpgsql_statement_trigger(
        "fleet_design_counts_delete",
        "AFTER DELETE",
        "fleet_fittedcapacitor",
        f"{summed(capacitor_share('old_rows', -1))}\nRETURN NULL;",
        old_rows="old_rows",
    ),
    *plpgsql_trigger(
        "fleet_design_counts_motor",
        "AFTER UPDATE",
        "fleet_motor",
        f"{MOTOR_MOVES}\nRETURN NULL;",
        when=_changed(MOTOR_COLUMNS, "IS DISTINCT FROM"),
    ),
]
POSTGRES_BACKWARD = postgres_drops(
    *((f"fleet_design_counts_{event}", "fleet_fittedcapacitor") for event in ("insert", "update", "delete")),
    ("fleet_design_counts_motor", "fleet_motor"),
)


def fill() -> list[str]:
    """Every capacitor in service as it stands, counted once."""
    return [summed(capacitor_share("fleet_fittedcapacitor", 1))]


class Migration(migrations.Migration):

    dependencies = [
        ('fleet', '0032_removal_reading_on_removal_day'),
    ]

    operations = [
        migrations.CreateModel(
            name='DesignCount',
            fields=[
                ('id', models.BigAutoField(auto_created=True, primary_key=True, serialize=False, verbose_name='ID')),
                ('role', models.CharField(max_length=5)),
                ('motor_type', models.CharField(max_length=20)),
                ('load_type', models.CharField(max_length=20)),
                ('rated_voltage_v', models.FloatField()),
                ('frequency_hz', models.PositiveSmallIntegerField()),
                ('poles', models.PositiveSmallIntegerField()),
                ('full_load_current_a', models.FloatField()),
                ('rated_speed_rpm', models.FloatField()),
                ('r1m_ohm', models.FloatField(blank=True, null=True)),
                ('x1m_ohm', models.FloatField(blank=True, null=True)),
                ('r1a_ohm', models.FloatField(blank=True, null=True)),
                ('x1a_ohm', models.FloatField(blank=True, null=True)),
                ('r2_ohm', models.FloatField(blank=True, null=True)),
                ('x2_ohm', models.FloatField(blank=True, null=True)),
                ('xm_ohm', models.FloatField(blank=True, null=True)),
                ('turns_ratio', models.FloatField(blank=True, null=True)),
                ('rotational_loss_w', models.FloatField(blank=True, null=True)),
                ('n', models.IntegerField(help_text='Change to the count')),
                ('part', models.ForeignKey(blank=True, db_constraint=False, db_index=False, editable=False, help_text="The capacitors' part", null=True, on_delete=django.db.models.deletion.DO_NOTHING, related_name='+', to='fleet.capacitorpart')),
                ('site', models.ForeignKey(blank=True, db_constraint=False, db_index=False, editable=False, help_text="The motors' site", null=True, on_delete=django.db.models.deletion.DO_NOTHING, related_name='+', to='fleet.site')),
            ],
        ),
        migrations.AddIndex(
            model_name="fittedcapacitor",
            index=models.Index(
                condition=models.Q(("removed_on__isnull", True)), fields=["part", "role", "id"], name="in_service_by_part"
            ),
        ),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.RunPython(run({"sqlite": fill(), "postgresql": fill()}), migrations.RunPython.noop),
    ]
