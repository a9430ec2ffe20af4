"""An assessment's `newest_reading` keeps no foreign-key constraint in the database.

Readings are append-only (triggers refuse UPDATE and DELETE), so the reference cannot dangle, and
checking it cost every refit a deferred check per assessment that locked, and so dirtied, the
newest reading of each capacitor it wrote (about a tenth of a 2,000-capacitor chunk's server time
with the other deferred check).

PostgreSQL only: SQLite would rebuild the assessments table for it and lose its triggers; there the
constraint stays (found by what it covers, so the same code reverses it).
"""

import django.db.models.deletion
from django.db import migrations, models

TABLE, COLUMN = "fleet_assessment", "newest_reading_id"


def _constraints(schema_editor) -> list[str]:
    connection = schema_editor.connection
    with connection.cursor() as cursor:
        constraints = connection.introspection.get_constraints(cursor, TABLE)
    return [name for name, facts in constraints.items() if facts["foreign_key"] and facts["columns"] == [COLUMN]]


def drop_constraint(apps, schema_editor):
    if schema_editor.connection.vendor != "postgresql":
        return
    for name in _constraints(schema_editor):
        schema_editor.execute(
            f"ALTER TABLE {schema_editor.quote_name(TABLE)} DROP CONSTRAINT {schema_editor.quote_name(name)}"
        )


def add_constraint(apps, schema_editor):
    if schema_editor.connection.vendor != "postgresql" or _constraints(schema_editor):
        return
    schema_editor.execute(
        f"ALTER TABLE {TABLE} ADD CONSTRAINT {TABLE}_{COLUMN}_fk_fleet_reading_id FOREIGN KEY ({COLUMN}) "
        "REFERENCES fleet_reading (id) DEFERRABLE INITIALLY DEFERRED"
    )


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0044_assessment_calibration_terms"),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            state_operations=[
                migrations.AlterField(
                    model_name="assessment",
                    name="newest_reading",
                    field=models.ForeignKey(
                        db_constraint=False,
                        null=True,
                        on_delete=django.db.models.deletion.SET_NULL,
                        related_name="+",
                        to="fleet.reading",
                    ),
                ),
            ],
            database_operations=[migrations.RunPython(drop_constraint, add_constraint)],
        ),
    ]
