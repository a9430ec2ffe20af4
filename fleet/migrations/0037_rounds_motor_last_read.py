"""A motor was read when any capacitor fitted to it was read: either role, in service or removed since.
`Motor.last_read_at` is the newest such reading.

Before, the readings' trigger of 0015 moved `last_read_at` only for a reading of a capacitor still in
service as the reading was inserted: a reading taken on its capacitor's removal day and entered after
the replacement (an import of the day's readings, the demo) was left out, and the motor showed as never
read, or read on an older reading, on the route page and in the dashboard's ledger (`MotorReadCount`,
kept from `last_read_at` by 0031's triggers on motors, so it follows without a change of its own).

- The readings' trigger (same name; statement-level on PostgreSQL, a row trigger on SQLite) takes every
  reading of any capacitor of the motor.
- A capacitor moved to another motor (a register correction) takes its readings along: both motors'
  `last_read_at` are worked out again from their capacitors' readings (a row trigger on either database).
- Every motor's `last_read_at` is filled again by the rule; only the motors it moves are written.

On SQLite, a later migration that rebuilds fleet_reading or fleet_fittedcapacitor drops these triggers:
reinstall them (SQLITE_FORWARD below).
"""

import importlib

from django.db import migrations, models

from ._triggers import plpgsql_trigger, postgres_drops, run, sqlite_drops, sqlite_row_trigger

STORED_FACTS_0015 = importlib.import_module("fleet.migrations.0015_list_pages_indexes_and_stored_facts")
READINGS = ("fleet_motor_last_read", "fleet_reading")
MOVES = ("fleet_capacitor_moves_last_read", "fleet_fittedcapacitor")
# The readings of each motor's capacitors, any role, in service or not.
READ = "FROM fleet_reading r JOIN fleet_fittedcapacitor c ON c.id = r.fitted_capacitor_id"
# A capacitor moved: the motor it left and the one it joined, worked out again (two rows).
MOVED = (
    f"UPDATE fleet_motor SET last_read_at = (SELECT MAX(r.taken_at) {READ} WHERE c.motor_id = fleet_motor.id)"
    " WHERE id IN (OLD.motor_id, NEW.motor_id);"
)
# Every motor with a reading newer than its stored one (before: only while its capacitor was in service).
FILL = (
    f"UPDATE fleet_motor SET last_read_at = n.taken_at FROM (SELECT c.motor_id, MAX(r.taken_at) AS taken_at {READ}"
    " GROUP BY c.motor_id) AS n"
    " WHERE fleet_motor.id = n.motor_id AND (fleet_motor.last_read_at IS NULL OR fleet_motor.last_read_at < n.taken_at);"
)


def renamed_0015(statements: list[str]) -> list[str]:
    """0015's trigger statements with the readings' column named as 0022 renamed it."""
    return [statement.replace("installation_id", "fitted_capacitor_id") for statement in statements]


SQLITE_FORWARD = [
    *sqlite_drops(READINGS[0]),
    """
    CREATE TRIGGER fleet_motor_last_read AFTER INSERT ON fleet_reading
    BEGIN
      UPDATE fleet_motor SET last_read_at = NEW.taken_at
      WHERE id = (SELECT c.motor_id FROM fleet_fittedcapacitor c WHERE c.id = NEW.fitted_capacitor_id)
        AND (last_read_at IS NULL OR last_read_at < NEW.taken_at);
    END;
    """,
    sqlite_row_trigger(
        MOVES[0],
        "AFTER UPDATE OF motor_id",
        MOVES[1],
        "NEW.motor_id IS NOT OLD.motor_id",
        MOVED,
    ),
]
# Back to 0015's rule: its statements, with the column's name since 0022.
SQLITE_BACKWARD = [*sqlite_drops(READINGS[0], MOVES[0]), *renamed_0015(STORED_FACTS_0015.SQLITE_FORWARD[2:3])]
POSTGRES_FORWARD = [
    *postgres_drops(READINGS),
    *plpgsql_trigger(
        READINGS[0],
        "AFTER INSERT",
        READINGS[1],
        """
        UPDATE fleet_motor m SET last_read_at = n.taken_at
        FROM (SELECT c.motor_id, MAX(r.taken_at) AS taken_at
              FROM new_readings r JOIN fleet_fittedcapacitor c ON c.id = r.fitted_capacitor_id
              GROUP BY c.motor_id) AS n
        WHERE m.id = n.motor_id AND (m.last_read_at IS NULL OR m.last_read_at < n.taken_at);
        RETURN NULL;
        """,
        level="STATEMENT",
        referencing="new_readings",
    ),
    *plpgsql_trigger(
        MOVES[0],
        "AFTER UPDATE OF motor_id",
        MOVES[1],
        f"{MOVED}\nRETURN NULL;",
        when="OLD.motor_id IS DISTINCT FROM NEW.motor_id",
    ),
]
POSTGRES_BACKWARD = [*postgres_drops(READINGS, MOVES), *renamed_0015(STORED_FACTS_0015.POSTGRES_FORWARD[4:6])]


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0036_reading_in_circuit_message"),
    ]

    operations = [
        migrations.AlterField(
            model_name="motor",
            name="last_read_at",
            field=models.DateTimeField(
                blank=True,
                editable=False,
                help_text="Newest reading of any capacitor fitted to the motor, in service or removed since; "
                "kept by database triggers on readings and on a capacitor's motor",
                null=True,
            ),
        ),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.RunPython(run({"sqlite": [FILL], "postgresql": [FILL]}), migrations.RunPython.noop),
    ]
