"""Rules that span tables, held by the database itself.

- A reading dated after its capacitor's removal is refused.
- A reading is never edited: corrections are new readings that supersede.
Both for SQLite (the embedded default) and PostgreSQL.
"""

from django.db import migrations

AFTER_REMOVAL = "reading taken after its capacitor was removed"
NO_EDIT = "readings are append-only: save a correction as a new reading"

SQLITE_FORWARD = [
    f"""
    CREATE TRIGGER fleet_reading_not_after_removal BEFORE INSERT ON fleet_reading
    WHEN EXISTS (SELECT 1 FROM fleet_fittedcapacitor f WHERE f.id = NEW.installation_id
                 AND f.removed_on IS NOT NULL AND date(NEW.taken_at) > f.removed_on)
    BEGIN SELECT RAISE(ABORT, '{AFTER_REMOVAL}'); END;
    """,
    f"""
    CREATE TRIGGER fleet_reading_append_only BEFORE UPDATE ON fleet_reading
    BEGIN SELECT RAISE(ABORT, '{NO_EDIT}'); END;
    """,
]
SQLITE_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_reading_not_after_removal;",
    "DROP TRIGGER IF EXISTS fleet_reading_append_only;",
]
POSTGRES_FORWARD = [
    f"""
    CREATE OR REPLACE FUNCTION fleet_reading_not_after_removal() RETURNS trigger AS $$
    BEGIN
      IF EXISTS (SELECT 1 FROM fleet_fittedcapacitor f WHERE f.id = NEW.installation_id
                 AND f.removed_on IS NOT NULL AND NEW.taken_at::date > f.removed_on) THEN
        RAISE EXCEPTION '{AFTER_REMOVAL}' USING ERRCODE = 'check_violation';
      END IF;
      RETURN NEW;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_reading_not_after_removal BEFORE INSERT ON fleet_reading
    FOR EACH ROW EXECUTE FUNCTION fleet_reading_not_after_removal();
    """,
    f"""
    CREATE OR REPLACE FUNCTION fleet_reading_append_only() RETURNS trigger AS $$
    BEGIN
      RAISE EXCEPTION '{NO_EDIT}' USING ERRCODE = 'check_violation';
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_reading_append_only BEFORE UPDATE ON fleet_reading
    FOR EACH ROW EXECUTE FUNCTION fleet_reading_append_only();
    """,
]
POSTGRES_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_reading_not_after_removal ON fleet_reading;",
    "DROP TRIGGER IF EXISTS fleet_reading_append_only ON fleet_reading;",
    "DROP FUNCTION IF EXISTS fleet_reading_not_after_removal();",
    "DROP FUNCTION IF EXISTS fleet_reading_append_only();",
]


def _run(statements_by_vendor):
    def run(apps, schema_editor):
        for statement in statements_by_vendor.get(schema_editor.connection.vendor, []):
            schema_editor.execute(statement)

    return run


class Migration(migrations.Migration):
    dependencies = [("fleet", "0001_register")]

    operations = [
        migrations.RunPython(
            _run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            _run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        )
    ]
