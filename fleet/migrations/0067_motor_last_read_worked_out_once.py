"""`Motor.last_read_at` worked out once per motor by its triggers on PostgreSQL (the rule of 0041, unchanged).

0041's UPDATE joins the motors to a subquery of their values by the rule, and writes only those it moves
(`m.last_read_at IS DISTINCT FROM n.last_read_at`). PostgreSQL folds that subquery into the UPDATE and then
works the rule out twice for each motor: once for the test, once for the value written. A 50,000-reading
import of 12,500 motors spent about 0.19 s of database CPU on the rule, half of it the second time (EXPLAIN
ANALYZE, 2026-12-05). Here the motors' values are a MATERIALIZED common table expression, which PostgreSQL
computes once and does not fold in (PostgreSQL's documentation, "WITH Queries", since version 12).

SQLite's triggers (one motor a row, `sqlite_refresh` of 0041) are left as they are.
"""

import importlib

from django.db import migrations

from ._triggers import plpgsql_statement_trigger, plpgsql_trigger, postgres_drops, run

ROUNDS_0041 = importlib.import_module("fleet.migrations.0041_rounds_every_position_read")
READINGS, MOVES, FITTED, DELETED = ROUNDS_0041.READINGS, ROUNDS_0041.MOVES, ROUNDS_0041.FITTED, ROUNDS_0041.DELETED


def refresh(motors: str) -> str:
    """0041's `refresh` with the rule worked out once per motor: the UPDATE that sets `last_read_at` of the
    motors whose ids the SELECT `motors` gives, writing only those it moves."""
    return (
        f"WITH n AS MATERIALIZED (SELECT id, {ROUNDS_0041.rule('postgresql')} AS last_read_at"
        f" FROM fleet_motor WHERE id IN ({motors}))"
        " UPDATE fleet_motor m SET last_read_at = n.last_read_at FROM n"
        " WHERE m.id = n.id AND m.last_read_at IS DISTINCT FROM n.last_read_at;"
    )


def triggers(refresh) -> list[str]:
    """The four PostgreSQL triggers of 0041 (a reading inserted; a capacitor moved, fitted, deleted) with `refresh`
    (given 0041's own, the SQL of 0041's POSTGRES_FORWARD)."""
    return [
        *postgres_drops(READINGS, MOVES, FITTED, DELETED),
        *plpgsql_trigger(
            READINGS[0],
            "AFTER INSERT",
            READINGS[1],
            f"{refresh(ROUNDS_0041.MOVED_BY_READINGS)}\nRETURN NULL;",
            level="STATEMENT",
            referencing="new_readings",
        ),
        *plpgsql_trigger(
            MOVES[0],
            "AFTER UPDATE OF motor_id, role, removed_on",
            MOVES[1],
            f"{refresh('OLD.motor_id, NEW.motor_id')}\nRETURN NULL;",
            when=ROUNDS_0041.CHANGED,
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


SQLITE_FORWARD: list[str] = []
SQLITE_BACKWARD: list[str] = []
POSTGRES_FORWARD = triggers(refresh)
POSTGRES_BACKWARD = ROUNDS_0041.POSTGRES_FORWARD


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0066_assessment_figures_on_reading"),
    ]

    operations = [
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
    ]
