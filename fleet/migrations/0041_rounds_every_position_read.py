"""A motor is read when every capacitor in service on it was read: `Motor.last_read_at` is the oldest of
its positions' newest readings.

Before (0037), the newest reading of any capacitor fitted to the motor counted: a motor with a start and
a run capacitor showed "done" on its route, and never came up as overdue, when only its run capacitor
was read, quarter after quarter, while its start capacitor (the electrolytic, the one that dries out)
went unread.

The rule now, for each motor:
- a position is a role (start, run) with a capacitor in service; its newest reading is that of any
  capacitor fitted in that role on the motor, removed since included: a reading taken on a capacitor's
  removal day, entered after its successor was fitted, still counts for that position;
- a reading that a correction superseded no longer counts (a mistyped date is corrected by a new
  reading with the right one);
- `last_read_at` is the oldest of the positions' newest readings, and empty when a position in service
  has never been read (the motor's commissioning day then decides whether it is overdue);
- a motor with no capacitor in service keeps the newest reading of any capacitor it had.

Kept by triggers on readings (statement-level on PostgreSQL, row on SQLite: only motors whose value can
move are worked out again: a reading newer than the stored one, a first reading, or a correction) and on
fitted capacitors (fitted, moved, re-roled, removed, deleted). `MotorReadCount` follows from 0031's
triggers on motors. Every motor's `last_read_at` is filled again by the rule; only motors it moves are
written.

On SQLite, a later migration that rebuilds fleet_reading or fleet_fittedcapacitor drops these triggers:
reinstall them (SQLITE_FORWARD below).
"""

import importlib

from django.db import migrations, models

from ._triggers import plpgsql_statement_trigger, plpgsql_trigger, postgres_drops, run, sqlite_drops

ROUNDS_0037 = importlib.import_module("fleet.migrations.0037_rounds_motor_last_read")
READINGS = ROUNDS_0037.READINGS  # ("fleet_motor_last_read", "fleet_reading"): same name, new body
MOVES = ROUNDS_0037.MOVES  # ("fleet_capacitor_moves_last_read", "fleet_fittedcapacitor"): more columns
FITTED = ("fleet_capacitor_fitted_last_read", "fleet_fittedcapacitor")
DELETED = ("fleet_capacitor_deleted_last_read", "fleet_fittedcapacitor")

# A capacitor's newest reading that counts (one not superseded by a correction; readings are
# append-only, so a correction is a later row naming it, `supersedes_id` unique). PostgreSQL walks the
# (capacitor, time) index backwards and stops at the first such reading; SQLite, given that ORDER BY,
# may walk the whole time index instead (minutes for a 50,000-row import), so it takes the MAX of the
# capacitor's readings on the (capacitor, time) index, each probed once on `supersedes_id`.
COUNTS = "NOT EXISTS (SELECT 1 FROM fleet_reading s WHERE s.supersedes_id = r.id)"
NEWEST = {
    "postgresql": "(SELECT r.taken_at FROM fleet_reading r WHERE r.fitted_capacitor_id = p.id"
    f" AND {COUNTS} ORDER BY r.taken_at DESC LIMIT 1)",
    "sqlite": f"(SELECT MAX(r.taken_at) FROM fleet_reading r WHERE r.fitted_capacitor_id = p.id AND {COUNTS})",
}


def position(vendor: str) -> str:
    """The newest counting reading of the position (motor, role) of capacitor `c`, removed capacitors included."""
    return (
        f"(SELECT MAX({NEWEST[vendor]}) FROM fleet_fittedcapacitor p WHERE p.motor_id = c.motor_id AND p.role = c.role)"
    )


# Stands for "never read" under MIN, before the oldest reading: a position never read wins the MIN.
NEVER = {"postgresql": "'-infinity'::timestamptz", "sqlite": "''"}


def rule(vendor: str) -> str:
    """The rule for the motor `fleet_motor.id`: the oldest position's newest reading (none if a position
    in service was never read); with no capacitor in service, the newest reading of any capacitor it had."""
    return (
        "(SELECT CASE WHEN COUNT(*) = 0"
        f" THEN (SELECT MAX({NEWEST[vendor]}) FROM fleet_fittedcapacitor p WHERE p.motor_id = fleet_motor.id)"
        f" ELSE NULLIF(MIN(COALESCE({position(vendor)}, {NEVER[vendor]})), {NEVER[vendor]}) END"
        " FROM fleet_fittedcapacitor c WHERE c.motor_id = fleet_motor.id AND c.removed_on IS NULL)"
    )


def refresh(motors: str) -> str:
    """The UPDATE that sets `last_read_at` of the motors whose ids the SELECT `motors` gives by the rule,
    writing only those it moves (each write moves the motors' ledger)."""
    return (
        f"UPDATE fleet_motor m SET last_read_at = n.last_read_at FROM (SELECT id, {rule('postgresql')} AS last_read_at"
        f" FROM fleet_motor WHERE id IN ({motors})) AS n"
        " WHERE m.id = n.id AND m.last_read_at IS DISTINCT FROM n.last_read_at;"
    )


def sqlite_refresh(motors: str) -> str:
    """SQLite's form of `refresh` (in a trigger: no UPDATE ... FROM with a subquery of the row's values)."""
    return (
        f"UPDATE fleet_motor SET last_read_at = {rule('sqlite')}"
        f" WHERE id IN ({motors}) AND last_read_at IS NOT {rule('sqlite')};"
    )


# A reading can move its motor's value only when it is newer than the stored one, the motor has none, or
# it corrects another reading: older readings of a position never lower the oldest position's newest.
MOVED_BY_READINGS = (
    "SELECT c.motor_id FROM new_readings r JOIN fleet_fittedcapacitor c ON c.id = r.fitted_capacitor_id"
    " JOIN fleet_motor o ON o.id = c.motor_id"
    " WHERE o.last_read_at IS NULL OR o.last_read_at < r.taken_at OR r.supersedes_id IS NOT NULL"
)
CHANGED = "OLD.motor_id IS DISTINCT FROM NEW.motor_id OR OLD.role IS DISTINCT FROM NEW.role"
CHANGED += " OR OLD.removed_on IS DISTINCT FROM NEW.removed_on"

SQLITE_FORWARD = [
    *sqlite_drops(READINGS[0], MOVES[0], FITTED[0], DELETED[0]),
    f"""
    CREATE TRIGGER {READINGS[0]} AFTER INSERT ON fleet_reading
    BEGIN
      {
        sqlite_refresh(
            "SELECT c.motor_id FROM fleet_fittedcapacitor c JOIN fleet_motor o ON o.id = c.motor_id"
            " WHERE c.id = NEW.fitted_capacitor_id AND (o.last_read_at IS NULL OR o.last_read_at < NEW.taken_at"
            " OR NEW.supersedes_id IS NOT NULL)"
        )
    }
    END;
    """,
    f"""
    CREATE TRIGGER {MOVES[0]} AFTER UPDATE OF motor_id, role, removed_on ON fleet_fittedcapacitor
    WHEN {CHANGED.replace("IS DISTINCT FROM", "IS NOT")}
    BEGIN
      {sqlite_refresh("OLD.motor_id, NEW.motor_id")}
    END;
    """,
    f"""
    CREATE TRIGGER {FITTED[0]} AFTER INSERT ON fleet_fittedcapacitor
    BEGIN
      {sqlite_refresh("NEW.motor_id")}
    END;
    """,
    f"""
    CREATE TRIGGER {DELETED[0]} AFTER DELETE ON fleet_fittedcapacitor
    BEGIN
      {sqlite_refresh("OLD.motor_id")}
    END;
    """,
]
# The motor's newest reading of any capacitor it had: 0037's rule, to go back to.
ANY_CAPACITOR = (
    "UPDATE fleet_motor SET last_read_at = (SELECT MAX(r.taken_at) FROM fleet_reading r"
    " JOIN fleet_fittedcapacitor c ON c.id = r.fitted_capacitor_id WHERE c.motor_id = fleet_motor.id);"
)
SQLITE_BACKWARD = [*sqlite_drops(READINGS[0], MOVES[0], FITTED[0], DELETED[0]), *ROUNDS_0037.SQLITE_FORWARD]
POSTGRES_FORWARD = [
    *postgres_drops(READINGS, MOVES, FITTED, DELETED),
    *plpgsql_trigger(
        READINGS[0],
        "AFTER INSERT",
        READINGS[1],
        f"{refresh(MOVED_BY_READINGS)}\nRETURN NULL;",
        level="STATEMENT",
        referencing="new_readings",
    ),
    *plpgsql_trigger(
        MOVES[0],
        "AFTER UPDATE OF motor_id, role, removed_on",
        MOVES[1],
        f"{refresh('OLD.motor_id, NEW.motor_id')}\nRETURN NULL;",
        when=CHANGED,
    ),
    *plpgsql_statement_trigger(
        FITTED[0],
        "AFTER INSERT",
        FITTED[1],
        f"{refresh('SELECT motor_id FROM fitted')}\nRETURN NULL;",
        new_rows="fitted",
    ),
    *plpgsql_statement_trigger(
        DELETED[0],
        "AFTER DELETE",
        DELETED[1],
        f"{refresh('SELECT motor_id FROM deleted')}\nRETURN NULL;",
        old_rows="deleted",
    ),
]
POSTGRES_BACKWARD = [*postgres_drops(READINGS, MOVES, FITTED, DELETED), *ROUNDS_0037.POSTGRES_FORWARD]
FILL = {"sqlite": [sqlite_refresh("SELECT id FROM fleet_motor")], "postgresql": [refresh("SELECT id FROM fleet_motor")]}


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0040_drop_second_tag_index"),
    ]

    operations = [
        migrations.AlterField(
            model_name="motor",
            name="last_read_at",
            field=models.DateTimeField(
                blank=True,
                editable=False,
                help_text="When every capacitor in service on the motor had last been read: the oldest of its "
                "positions' newest readings (a position's predecessors included, corrected readings left out); "
                "empty while a position was never read; kept by database triggers on readings and capacitors",
                null=True,
            ),
        ),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.RunPython(run(FILL), run({"sqlite": [ANY_CAPACITOR], "postgresql": [ANY_CAPACITOR]})),
    ]
