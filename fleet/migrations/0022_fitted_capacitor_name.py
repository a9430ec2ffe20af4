"""One name for a fitted capacitor: the foreign keys named `installation` become `fitted_capacitor`
(column `fitted_capacitor_id`).

Triggers name the column in their SQL. PostgreSQL keeps a trigger function's body as written, so every
function of this schema whose body names the old column is defined again with the new name after the
renames. On SQLite, renaming a foreign key rebuilds its table, which drops that table's triggers: every
trigger is read from the schema and dropped before the renames, and created again after from its own
statement with the new column name. Backwards, the same steps run with the names swapped. Reading the
triggers as they stand (rather than listing the migrations that made them) keeps this true whatever
migrations came before.
"""

from django.db import migrations, models

OLD, NEW = "installation_id", "fitted_capacitor_id"
_SAVED: list[str] = []  # SQLite trigger statements between the drop and the re-creation


def _drop_sqlite_triggers(apps, schema_editor):
    if schema_editor.connection.vendor != "sqlite":
        return
    with schema_editor.connection.cursor() as cursor:
        cursor.execute("SELECT name, sql FROM sqlite_master WHERE type = 'trigger' ORDER BY name")
        rows = cursor.fetchall()
        _SAVED[:] = [sql for _, sql in rows]
        for name, _ in rows:
            cursor.execute(f'DROP TRIGGER "{name}"')


def _recreate(old: str, new: str):
    def run(apps, schema_editor):
        connection = schema_editor.connection
        with connection.cursor() as cursor:
            if connection.vendor == "sqlite":
                for statement in _SAVED:
                    cursor.execute(statement.replace(old, new))
                _SAVED.clear()
            elif connection.vendor == "postgresql":
                cursor.execute(
                    "SELECT pg_get_functiondef(p.oid) FROM pg_proc p JOIN pg_namespace n ON n.oid = p.pronamespace"
                    " WHERE n.nspname = current_schema() AND p.prosrc LIKE %s",
                    [f"%{old}%"],
                )
                for (definition,) in cursor.fetchall():
                    cursor.execute(definition.replace(old, new))

    return run


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0021_reading_statement_trigger"),
    ]

    operations = [
        migrations.RunPython(_drop_sqlite_triggers, _recreate(NEW, OLD)),
        migrations.RemoveConstraint(
            model_name='assessment',
            name='one_current_assessment',
        ),
        migrations.RemoveConstraint(
            model_name='digestentry',
            name='one_digest_entry_per_condition',
        ),
        migrations.RemoveConstraint(
            model_name='workorder',
            name='one_open_order_per_capacitor_and_kind',
        ),
        migrations.RemoveIndex(
            model_name='assessment',
            name='in_service_by_replace_by',
        ),
        migrations.RemoveIndex(
            model_name='reading',
            name='fleet_readi_install_36c3e0_idx',
        ),
        migrations.RenameField(model_name="reading", old_name="installation", new_name="fitted_capacitor"),
        migrations.RenameField(model_name="assessment", old_name="installation", new_name="fitted_capacitor"),
        migrations.RenameField(model_name="workorder", old_name="installation", new_name="fitted_capacitor"),
        migrations.RenameField(model_name="digestentry", old_name="installation", new_name="fitted_capacitor"),
        migrations.AlterModelOptions(
            name='reading',
            options={'ordering': ['fitted_capacitor_id', 'taken_at', 'id']},
        ),
        migrations.AddIndex(
            model_name='assessment',
            index=models.Index(condition=models.Q(('capacitor_in_service', True), ('is_current', True)), fields=['replace_by', 'fitted_capacitor'], name='in_service_by_replace_by'),
        ),
        migrations.AddIndex(
            model_name='reading',
            index=models.Index(fields=['fitted_capacitor', 'taken_at'], name='fleet_readi_fitted__4b6d23_idx'),
        ),
        migrations.AddConstraint(
            model_name='assessment',
            constraint=models.UniqueConstraint(condition=models.Q(('is_current', True)), fields=('fitted_capacitor',), name='one_current_assessment'),
        ),
        migrations.AddConstraint(
            model_name='digestentry',
            constraint=models.UniqueConstraint(fields=('kind', 'fitted_capacitor'), name='one_digest_entry_per_condition'),
        ),
        migrations.AddConstraint(
            model_name='workorder',
            constraint=models.UniqueConstraint(condition=models.Q(('state__in', ['planned', 'issued'])), fields=('fitted_capacitor', 'kind'), name='one_open_order_per_capacitor_and_kind'),
        ),
        migrations.RunPython(_recreate(OLD, NEW), _drop_sqlite_triggers),
    ]
