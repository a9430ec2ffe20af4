# The operating figures as new and now are worked out on reading (`operating_pictures.with_operating_figures`),
# no longer stored with every assessment a refit writes.

from django.db import migrations

COLUMNS = ("figures_new", "figures_now")


def drop_columns(apps, schema_editor):
    """ALTER TABLE ... DROP COLUMN on both databases: on SQLite Django would rebuild the table for a field with a
    default, which drops the triggers that keep its counts and facts."""
    for column in COLUMNS:
        schema_editor.execute(f"ALTER TABLE fleet_assessment DROP COLUMN {column}")


def add_columns(apps, schema_editor):
    """Back: the columns as they were (json on PostgreSQL), nullable so SQLite adds them in place."""
    kind = "json" if schema_editor.connection.vendor == "postgresql" else "text"
    for column in COLUMNS:
        schema_editor.execute(f"ALTER TABLE fleet_assessment ADD COLUMN {column} {kind} NULL")


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0065_replace_now_index"),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            state_operations=[
                migrations.RemoveField(model_name="assessment", name="figures_new"),
                migrations.RemoveField(model_name="assessment", name="figures_now"),
            ],
            database_operations=[migrations.RunPython(drop_columns, add_columns)],
        ),
    ]
