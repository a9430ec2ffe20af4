"""A reading of 0 µF is stored: a meter that shows no capacitance on an open capacitor (the rulebook asks to
confirm it first). The check on a reading's capacitance becomes "0 or more" instead of "above 0".

On SQLite a changed check constraint rebuilds the readings table, which drops the triggers that name it: they
are dropped before and created again after from their own statements, as 0022 does (its functions serve)."""

import importlib

from django.db import migrations, models

_0022 = importlib.import_module("fleet.migrations.0022_fitted_capacitor_name")


def _restore_sqlite_triggers(apps, schema_editor):
    if schema_editor.connection.vendor == "sqlite":
        _0022._recreate("", "")(apps, schema_editor)


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0058_assessment_limit_was"),
    ]

    operations = [
        migrations.RunPython(_0022._drop_sqlite_triggers, _restore_sqlite_triggers),
        migrations.RemoveConstraint(
            model_name="reading",
            name="reading_capacitance_positive",
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(("capacitance_uf__gte", 0)),
                name="reading_capacitance_not_negative",
                violation_error_message="Capacitance must be 0 µF or more.",
            ),
        ),
        migrations.RunPython(_restore_sqlite_triggers, _0022._drop_sqlite_triggers),
    ]
