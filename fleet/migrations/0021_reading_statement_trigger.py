"""Readings inserted in bulk without a per-row cost the import does not need (PostgreSQL only).

- "No reading after its capacitor's removal" becomes one check per statement over the rows it
  inserted (a transition table), instead of a PL/pgSQL call and a lookup for every row: a COPY of
  200,000 readings spent about a third of its server time in the row trigger. The refusal, its
  message and its error code are the same; it comes at the end of the statement, which is undone
  all the same. Dates are taken in UTC, as SQLite stores them and as the removal trigger of 0009
  reads them.
- The `varchar_pattern_ops` indexes Django adds beside the unique keys `import_key` and
  `client_key` serve only LIKE, which nothing runs on those keys; every insert paid for them.
  The unique indexes stay.

SQLite has no statement-level triggers: its row trigger of 0002 stays, with the same rule and
message, and no table is rebuilt here.
"""

import importlib

from django.db import migrations

TRIGGERS_0002 = importlib.import_module("fleet.migrations.0002_reading_triggers")
AFTER_REMOVAL = TRIGGERS_0002.AFTER_REMOVAL
PATTERN_INDEXED = ("import_key", "client_key")

POSTGRES_FORWARD = [
    "DROP TRIGGER IF EXISTS fleet_reading_not_after_removal ON fleet_reading;",
    "DROP FUNCTION IF EXISTS fleet_reading_not_after_removal();",
    f"""
    CREATE FUNCTION fleet_reading_not_after_removal() RETURNS trigger AS $$
    BEGIN
      IF EXISTS (SELECT 1 FROM new_readings r JOIN fleet_fittedcapacitor f ON f.id = r.installation_id
                 WHERE f.removed_on IS NOT NULL AND (r.taken_at AT TIME ZONE 'UTC')::date > f.removed_on) THEN
        RAISE EXCEPTION '{AFTER_REMOVAL}' USING ERRCODE = 'check_violation';
      END IF;
      RETURN NULL;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_reading_not_after_removal AFTER INSERT ON fleet_reading
    REFERENCING NEW TABLE AS new_readings FOR EACH STATEMENT EXECUTE FUNCTION fleet_reading_not_after_removal();
    """,
]
POSTGRES_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_reading_not_after_removal ON fleet_reading;",
    "DROP FUNCTION IF EXISTS fleet_reading_not_after_removal();",
    *[s for s in TRIGGERS_0002.POSTGRES_FORWARD if "not_after_removal" in s],
]


def _pattern_indexes(apps, schema_editor, create: bool) -> None:
    if schema_editor.connection.vendor != "postgresql":
        return
    for column in PATTERN_INDEXED:
        name = schema_editor._create_index_name("fleet_reading", [column], suffix="_like")
        if create:
            schema_editor.execute(f"CREATE INDEX IF NOT EXISTS {name} ON fleet_reading ({column} varchar_pattern_ops)")
        else:
            schema_editor.execute(f"DROP INDEX IF EXISTS {name}")


class Migration(migrations.Migration):
    dependencies = [("fleet", "0020_assessment_site_and_part")]

    operations = [
        migrations.RunPython(
            TRIGGERS_0002._run({"postgresql": POSTGRES_FORWARD}), TRIGGERS_0002._run({"postgresql": POSTGRES_BACKWARD})
        ),
        migrations.RunPython(
            lambda apps, editor: _pattern_indexes(apps, editor, create=False),
            lambda apps, editor: _pattern_indexes(apps, editor, create=True),
        ),
    ]
