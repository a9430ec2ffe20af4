"""The design ledger (`DesignCount`, migration 0033) leaves out capacitors fitted against the advice.

A stop-gap (`substitute_override`) is not its position's design: counted, every stop-gap fitted made a
"design" of its own, and the stand-in parts page told the planner a part suited "3 of 6" run designs
where the fleet had four. The triggers of 0033 are replaced by the same ones with the stop-gaps left
out (a change of `substitute_override` moves a share too), and the ledger is counted again from the
capacitors as they stand. A design whose only capacitors in service are stop-gaps is then not
counted until its design part is back in (ours: the design part of a stop-gap's position is a rule of
the application, `selectors.design_parts`, not of a trigger).
"""

import importlib

from django.db import migrations

from ._triggers import (
    plpgsql_statement_trigger,
    plpgsql_trigger,
    postgres_drops,
    run,
    sqlite_drops,
    sqlite_row_trigger,
    summed_insert,
)

OLD = importlib.import_module("fleet.migrations.0033_design_counts")  # its shares, columns and triggers

KEY = OLD.KEY
LEDGER = OLD.LEDGER
CAPACITOR_COLUMNS = (*OLD.CAPACITOR_COLUMNS, "substitute_override")
MOTOR_COLUMNS = OLD.MOTOR_COLUMNS
DESIGN_COLUMNS = OLD.DESIGN_COLUMNS
NAMES = ("fleet_design_counts_insert", "fleet_design_counts_update", "fleet_design_counts_delete")


def capacitor_share(rows: str, sign: int) -> str:
    """As 0033's, less the capacitors fitted against the advice."""
    if rows in ("OLD", "NEW"):
        c, source = rows, f" FROM fleet_motor m WHERE m.id = {rows}.motor_id AND"
    else:
        c, source = "c", f" FROM {rows} c JOIN fleet_motor m ON m.id = c.motor_id WHERE"
    design = ", ".join(f"m.{column}" for column in DESIGN_COLUMNS)
    return (
        f"SELECT m.site_id, {c}.part_id, {c}.role, {design}, {sign} AS n"
        f"{source} {c}.removed_on IS NULL AND NOT {c}.substitute_override AND m.status = 'in_service'"
    )


def motor_share(m: str, sign: int) -> str:
    """As 0033's, less the capacitors fitted against the advice."""
    design = ", ".join(f"{m}.{column}" for column in DESIGN_COLUMNS)
    return (
        f"SELECT {m}.site_id, c.part_id, c.role, {design}, {sign} AS n FROM fleet_fittedcapacitor c"
        f" WHERE c.motor_id = {m}.id AND c.removed_on IS NULL AND NOT c.substitute_override"
        f" AND {m}.status = 'in_service'"
    )


def summed(*shares: str) -> str:
    return summed_insert(LEDGER, KEY, *shares)


def _changed(columns, differ: str) -> str:
    return f"({', '.join('OLD.' + c for c in columns)}) {differ} ({', '.join('NEW.' + c for c in columns)})"


MOTOR_MOVES = summed(motor_share("OLD", -1), motor_share("NEW", 1))
SQLITE_FORWARD = [
    *OLD.SQLITE_BACKWARD,
    sqlite_row_trigger(
        "fleet_design_counts_insert",
        "AFTER INSERT",
        "fleet_fittedcapacitor",
        "NEW.removed_on IS NULL AND NOT NEW.substitute_override",
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
        "OLD.removed_on IS NULL AND NOT OLD.substitute_override",
        summed(capacitor_share("OLD", -1)),
    ),
    sqlite_row_trigger(
        "fleet_design_counts_motor", "AFTER UPDATE", "fleet_motor", _changed(MOTOR_COLUMNS, "IS NOT"), MOTOR_MOVES
    ),
]
SQLITE_BACKWARD = [*sqlite_drops(*NAMES, "fleet_design_counts_motor"), *OLD.SQLITE_FORWARD]
POSTGRES_FORWARD = [
    *OLD.POSTGRES_BACKWARD,
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
POSTGRES_BACKWARD = [
    *postgres_drops(
        *((name, "fleet_fittedcapacitor") for name in NAMES), ("fleet_design_counts_motor", "fleet_motor")
    ),
    *OLD.POSTGRES_FORWARD,
]


def count_again(share) -> list[str]:
    """Every capacitor in service as it stands, counted once by `share`, in place of the ledger's rows."""
    return ["DELETE FROM fleet_designcount;", summed(share("fleet_fittedcapacitor", 1))]


class Migration(migrations.Migration):
    dependencies = [("fleet", "0062_in_service_against_advice")]

    operations = [
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.RunPython(
            run({"sqlite": count_again(capacitor_share), "postgresql": count_again(capacitor_share)}),
            run({"sqlite": count_again(OLD.capacitor_share), "postgresql": count_again(OLD.capacitor_share)}),
        ),
    ]
