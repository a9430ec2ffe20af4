"""An assessment's capacitor index gains the time it was made: (fitted_capacitor, created_at).

The plan's and the dashboard's changes of the week read each changed capacitor's level at the window's
start, its newest assessment made before then (`pages.with_level_then`). With the capacitor alone indexed,
each such look-up read all of that capacitor's kept assessments (one a refit, FLEET_ASSESSMENT_HISTORY_DAYS of
them) and sorted them; with the time beside it, one index entry. The new index replaces the foreign key's own
(it serves every look-up by capacitor as well), so a refit writes no more index entries than before.

The foreign key's index is found by what it covers rather than by name, as in migrations 0024 and 0046, so the
same operation runs on SQLite and PostgreSQL without rebuilding the table or touching its triggers; the partial
indexes on the same column (`in_service_replace_now`, `one_current_assessment`) are kept.
"""

import django.db.models.deletion
from django.db import migrations, models

TABLE, COLUMN = "fleet_assessment", "fitted_capacitor_id"
KEPT = {"in_service_replace_now", "one_current_assessment"}


def _foreign_key_indexes(schema_editor) -> list[str]:
    connection = schema_editor.connection
    with connection.cursor() as cursor:
        constraints = connection.introspection.get_constraints(cursor, TABLE)
    return [
        name
        for name, facts in constraints.items()
        if facts["index"]
        and not facts["unique"]
        and not facts["primary_key"]
        and facts["columns"] == [COLUMN]
        and name not in KEPT
    ]


def drop_index(apps, schema_editor):
    for name in _foreign_key_indexes(schema_editor):
        schema_editor.execute(f"DROP INDEX {schema_editor.quote_name(name)}")


def create_index(apps, schema_editor):
    if not _foreign_key_indexes(schema_editor):
        name = schema_editor._create_index_name(TABLE, [COLUMN])
        schema_editor.execute(
            f"CREATE INDEX {schema_editor.quote_name(name)} ON {schema_editor.quote_name(TABLE)} "
            f"({schema_editor.quote_name(COLUMN)})"
        )


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0069_assessment_visits_used"),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            state_operations=[
                migrations.AlterField(
                    model_name="assessment",
                    name="fitted_capacitor",
                    field=models.ForeignKey(
                        db_index=False,
                        on_delete=django.db.models.deletion.CASCADE,
                        related_name="assessments",
                        to="fleet.fittedcapacitor",
                    ),
                ),
            ],
            database_operations=[migrations.RunPython(drop_index, create_index)],
        ),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(fields=["fitted_capacitor", "created_at"], name="assessment_capacitor_made"),
        ),
    ]
