"""An assessment's `newest_reading` loses its index: nothing looks assessments up by it (migration 0041
dropped its constraint), and each refit wrote two entries into it a capacitor (the new assessment and
the new version of the one it replaces).

The index is found by what it covers rather than by name, as in migration 0024, so the same operation
runs on SQLite and PostgreSQL without rebuilding the table or touching its triggers.
"""

import django.db.models.deletion
from django.db import migrations, models

TABLE, COLUMN = "fleet_assessment", "newest_reading_id"


def _single_column_indexes(schema_editor) -> list[str]:
    connection = schema_editor.connection
    with connection.cursor() as cursor:
        constraints = connection.introspection.get_constraints(cursor, TABLE)
    return [
        name
        for name, facts in constraints.items()
        if facts["index"] and not facts["unique"] and not facts["primary_key"] and facts["columns"] == [COLUMN]
    ]


def drop_index(apps, schema_editor):
    for name in _single_column_indexes(schema_editor):
        schema_editor.execute(f"DROP INDEX {schema_editor.quote_name(name)}")


def create_index(apps, schema_editor):
    if not _single_column_indexes(schema_editor):
        name = schema_editor._create_index_name(TABLE, [COLUMN])
        schema_editor.execute(
            f"CREATE INDEX {schema_editor.quote_name(name)} ON {schema_editor.quote_name(TABLE)} "
            f"({schema_editor.quote_name(COLUMN)})"
        )


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0045_newest_reading_without_constraint"),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            state_operations=[
                migrations.AlterField(
                    model_name="assessment",
                    name="newest_reading",
                    field=models.ForeignKey(
                        db_constraint=False,
                        db_index=False,
                        null=True,
                        on_delete=django.db.models.deletion.SET_NULL,
                        related_name="+",
                        to="fleet.reading",
                    ),
                ),
            ],
            database_operations=[migrations.RunPython(drop_index, create_index)],
        ),
    ]
