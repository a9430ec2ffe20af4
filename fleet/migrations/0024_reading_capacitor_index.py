"""Readings lose the index on `fitted_capacitor_id` alone: the index on (fitted_capacitor_id, taken_at)
serves every lookup by capacitor, and each index costs every reading written (an import of 200,000
readings writes 200,000 entries into each).

The index is found by what it covers rather than by name (its name was made when the column was still
`installation_id`, and SQLite's table rebuilds in migration 0022 may have renamed it), so the same
operation runs on SQLite and PostgreSQL without rebuilding the table or touching its triggers.
"""

import django.db.models.deletion
from django.db import migrations, models

TABLE, COLUMN = "fleet_reading", "fitted_capacitor_id"


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
        ("fleet", "0023_pages_in_service_counts"),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            state_operations=[
                migrations.AlterField(
                    model_name="reading",
                    name="fitted_capacitor",
                    field=models.ForeignKey(
                        db_index=False,
                        on_delete=django.db.models.deletion.PROTECT,
                        related_name="readings",
                        to="fleet.fittedcapacitor",
                    ),
                ),
            ],
            database_operations=[migrations.RunPython(drop_index, create_index)],
        ),
    ]
