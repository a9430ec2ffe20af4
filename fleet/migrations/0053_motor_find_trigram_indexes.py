"""Trigram indexes for the find page's part-of-a-tag and location search (PostgreSQL only).

A technician's "0093" or "condensing" is a LIKE '%...%' on the motors' tags (without their separators,
as `pages._stored_bare_tag` writes them) and locations, which no b-tree serves: at 100,000 motors each
such search read every motor. pg_trgm's GIN indexes serve LIKE with a wildcard on both sides
(PostgreSQL documentation, F.35 pg_trgm, "Index Support"). The index expressions are the ones the
queries write, so the planner can match them.

pg_trgm ships with PostgreSQL and is a trusted extension from PostgreSQL 13: a database owner may create
it. Where it cannot be created (an older server, or a user without that right), the migration says so
and goes on: the search still answers, by reading every motor, as before.
"""

from django.db import migrations, transaction

BARE_TAG = "REPLACE(REPLACE(REPLACE(UPPER(asset_tag), '-', ''), '_', ''), '.', '')"
LOCATION = "UPPER(location::text)"
INDEXES = {"motor_bare_tag_trigram": BARE_TAG, "motor_location_trigram": LOCATION}


def create_indexes(apps, schema_editor):
    if schema_editor.connection.vendor != "postgresql":
        return
    try:
        with transaction.atomic(using=schema_editor.connection.alias):
            schema_editor.execute("CREATE EXTENSION IF NOT EXISTS pg_trgm")
    except Exception as error:  # noqa: BLE001 - any refusal leaves the search as it was, said aloud
        print(f"\n  pg_trgm not available ({error}); the find page's part-of-a-tag search reads every motor.")
        return
    for name, expression in INDEXES.items():
        schema_editor.execute(f"CREATE INDEX IF NOT EXISTS {name} ON fleet_motor USING gin (({expression}) gin_trgm_ops)")


def drop_indexes(apps, schema_editor):
    if schema_editor.connection.vendor != "postgresql":
        return
    for name in INDEXES:
        schema_editor.execute(f"DROP INDEX IF EXISTS {name}")


class Migration(migrations.Migration):
    dependencies = [("fleet", "0052_assessment_json_as_written")]

    operations = [migrations.RunPython(create_indexes, drop_indexes)]
