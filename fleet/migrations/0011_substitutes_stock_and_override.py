"""Site stock; the override of the substitute advice on a fitted capacitor.

On SQLite, adding fields rebuilds fleet_fittedcapacitor, which trips and drops the triggers that
name it: they are dropped first and installed again after (as 0009 does).
"""

import importlib

import django.db.models.deletion
from django.db import migrations, models

TRIGGERS_0002 = importlib.import_module("fleet.migrations.0002_reading_triggers")
TRIGGERS_0009 = importlib.import_module("fleet.migrations.0009_rules_constraints_and_triggers")
SQLITE_DROP = [*TRIGGERS_0002.SQLITE_BACKWARD, *TRIGGERS_0009.SQLITE_BACKWARD]


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0010_band_calibration_curvature"),
    ]

    operations = [
        migrations.RunPython(
            TRIGGERS_0002._run({"sqlite": SQLITE_DROP}), TRIGGERS_0002._run({"sqlite": TRIGGERS_0009.SQLITE_FORWARD})
        ),
        migrations.AddField(
            model_name="fittedcapacitor",
            name="override_reason",
            field=models.TextField(blank=True, help_text="Why the advice was overridden"),
        ),
        migrations.AddField(
            model_name="fittedcapacitor",
            name="substitute_override",
            field=models.BooleanField(
                default=False,
                help_text="Fitted against the substitute advice (marginal or unsuitable), by a person's choice",
            ),
        ),
        migrations.CreateModel(
            name="SiteStock",
            fields=[
                ("id", models.BigAutoField(auto_created=True, primary_key=True, serialize=False, verbose_name="ID")),
                ("quantity", models.IntegerField(default=0)),
                (
                    "part",
                    models.ForeignKey(
                        on_delete=django.db.models.deletion.PROTECT, related_name="stock", to="fleet.capacitorpart"
                    ),
                ),
                (
                    "site",
                    models.ForeignKey(
                        on_delete=django.db.models.deletion.CASCADE, related_name="stock", to="fleet.site"
                    ),
                ),
            ],
            options={
                "verbose_name_plural": "site stock",
                "ordering": ["site__code", "part__code"],
                "constraints": [
                    models.UniqueConstraint(fields=("site", "part"), name="one_stock_row_per_site_and_part"),
                    models.CheckConstraint(
                        condition=models.Q(("quantity__gte", 0)),
                        name="stock_quantity_not_negative",
                        violation_error_message="The quantity cannot be below zero.",
                    ),
                ],
            },
        ),
        migrations.RunPython(
            TRIGGERS_0002._run({"sqlite": TRIGGERS_0009.SQLITE_FORWARD}), TRIGGERS_0002._run({"sqlite": SQLITE_DROP})
        ),
    ]
