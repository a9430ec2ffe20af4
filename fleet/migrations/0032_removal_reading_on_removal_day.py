"""A removal date is a day: a reading taken during it is the removed capacitor's, a reading after it is refused.

The application's rule is exact: the removal day ends at the site's local midnight (the rulebook's
`taken_on`, `FittedCapacitor.readings_after`). The triggers know no time zone (SQLite has none; a
site's zone name PostgreSQL does not know would make an insert fail, and the application's fallback
zone is a setting), so they hold the widest day any site can have: a reading is refused from 36 hours
after the removal date's UTC midnight on, the end of that day at UTC-12, the last zone to finish a day.
So the triggers never refuse a reading the application accepts, and refuse every reading taken after
the removal day whatever the site's zone; between the site's midnight and that bound only the
application refuses (a writer that bypasses it gets up to 26 hours' leeway, at a UTC+14 site).

The same bound holds for a removal date earlier than a reading (`fleet_removal_not_before_readings`).
Before, both compared the reading's UTC date, refusing a site west of UTC its evening readings of the
removal day. Same names, messages and error codes; on PostgreSQL the readings' check stays one per
statement (0021). On SQLite, a later migration that rebuilds fleet_reading or fleet_fittedcapacitor
drops these triggers: reinstall them (SQLITE_FORWARD below).
"""

import importlib

from django.db import migrations

from ._triggers import plpgsql_statement_trigger, plpgsql_trigger, postgres_drops, run, sqlite_drops, sqlite_row_trigger

AFTER_REMOVAL = importlib.import_module("fleet.migrations.0002_reading_triggers").AFTER_REMOVAL
REMOVAL_BEFORE_READINGS = importlib.import_module(
    "fleet.migrations.0009_rules_constraints_and_triggers"
).REMOVAL_BEFORE_READINGS
READING = ("fleet_reading_not_after_removal", "fleet_reading")
REMOVAL = ("fleet_removal_not_before_readings", "fleet_fittedcapacitor")


def _sqlite(later_than_removal: str) -> list[str]:
    """SQLite: both triggers, a reading counting as after the removal where `later_than_removal`
    (on `taken_at` and `removed_on`) holds."""
    reading_after = later_than_removal.format(taken_at="NEW.taken_at", removed_on="f.removed_on")
    removal_before = later_than_removal.format(taken_at="r.taken_at", removed_on="NEW.removed_on")
    return [
        *sqlite_drops(READING[0], REMOVAL[0]),
        sqlite_row_trigger(
            READING[0],
            "BEFORE INSERT",
            READING[1],
            "EXISTS (SELECT 1 FROM fleet_fittedcapacitor f WHERE f.id = NEW.fitted_capacitor_id\n"
            f"                 AND f.removed_on IS NOT NULL AND {reading_after})",
            f"SELECT RAISE(ABORT, '{AFTER_REMOVAL}');",
        ),
        sqlite_row_trigger(
            REMOVAL[0],
            "BEFORE UPDATE OF removed_on",
            REMOVAL[1],
            "NEW.removed_on IS NOT NULL AND EXISTS (SELECT 1 FROM fleet_reading r\n"
            f"                 WHERE r.fitted_capacitor_id = NEW.id AND {removal_before})",
            f"SELECT RAISE(ABORT, '{REMOVAL_BEFORE_READINGS}');",
        ),
    ]


# From 36 hours after the removal date's UTC midnight on; before, the reading's UTC date after it (0009;
# backwards with the column's name since 0022).
SQLITE_FORWARD = _sqlite("julianday({taken_at}) >= julianday({removed_on}) + 1.5")
SQLITE_BACKWARD = _sqlite("date({taken_at}) > {removed_on}")


def _postgres(later_than_removal: str) -> list[str]:
    """PostgreSQL: both triggers, a reading counting as after the removal where `later_than_removal`
    (on `taken_at` and `removed_on`) holds."""
    reading_after = later_than_removal.format(taken_at="r.taken_at", removed_on="f.removed_on")
    removal_before = later_than_removal.format(taken_at="r.taken_at", removed_on="NEW.removed_on")
    return [
        *postgres_drops(READING, REMOVAL),
        *plpgsql_statement_trigger(
            READING[0],
            "AFTER INSERT",
            READING[1],
            f"""
            IF EXISTS (SELECT 1 FROM new_readings r JOIN fleet_fittedcapacitor f ON f.id = r.fitted_capacitor_id
                       WHERE f.removed_on IS NOT NULL AND {reading_after}) THEN
              RAISE EXCEPTION '{AFTER_REMOVAL}' USING ERRCODE = 'check_violation';
            END IF;
            RETURN NULL;
            """,
            new_rows="new_readings",
        ),
        *plpgsql_trigger(
            REMOVAL[0],
            "BEFORE UPDATE OF removed_on",
            REMOVAL[1],
            f"""
            IF NEW.removed_on IS NOT NULL AND EXISTS (
                SELECT 1 FROM fleet_reading r WHERE r.fitted_capacitor_id = NEW.id AND {removal_before}) THEN
              RAISE EXCEPTION '{REMOVAL_BEFORE_READINGS}' USING ERRCODE = 'check_violation';
            END IF;
            RETURN NEW;
            """,
        ),
    ]


POSTGRES_FORWARD = _postgres("{taken_at} >= ({removed_on} + interval '36 hours') AT TIME ZONE 'UTC'")
POSTGRES_BACKWARD = _postgres("({taken_at} AT TIME ZONE 'UTC')::date > {removed_on}")


class Migration(migrations.Migration):
    dependencies = [("fleet", "0031_motor_read_counts")]

    operations = [
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
    ]
