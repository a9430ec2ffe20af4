"""The assessment's five JSON documents are kept as written on PostgreSQL (json, not jsonb).

A refit writes them in bulk and pages read them whole; nothing looks inside them in SQL. Parsing them
into jsonb cost a 2,000-capacitor chunk's COPY about 20 ms of server CPU (of about 100), and the text
as written is narrower than jsonb (limits 380 against 400 bytes, figures 300 against 400), so the
UPDATE that retires an assessment copies less. Stored documents are converted in one rewrite of the
table; read back they give the same lists and numbers (`WrittenJSONField` reads the text and parses it
as a jsonb column is). SQLite keeps JSON as text already: nothing changes there, and its table (with
its triggers) is not rebuilt.
"""

from django.db import migrations

import fleet.models

COLUMNS = ("flagged_reading_ids", "limits", "figures_now", "figures_new", "calibration_terms")


def _retype(schema_editor, type_name: str) -> None:
    if schema_editor.connection.vendor != "postgresql":
        return
    changes = ", ".join(f"ALTER COLUMN {name} TYPE {type_name} USING {name}::{type_name}" for name in COLUMNS)
    schema_editor.execute(f"ALTER TABLE fleet_assessment {changes}")  # one rewrite of the table


def as_written(apps, schema_editor):
    _retype(schema_editor, "json")


def as_jsonb(apps, schema_editor):
    _retype(schema_editor, "jsonb")


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0051_assessment_fewer_current_indexes"),
    ]

    operations = [
        migrations.SeparateDatabaseAndState(
            database_operations=[migrations.RunPython(as_written, as_jsonb)],
            state_operations=[
                migrations.AlterField(
                    model_name="assessment",
                    name="calibration_terms",
                    field=fleet.models.WrittenJSONField(
                        blank=True,
                        help_text="The band calibration's six terms this forecast was made with "
                        "(BandCalibration's fields), so the page draws the same calibrated path its dates come from",
                        null=True,
                    ),
                ),
                migrations.AlterField(
                    model_name="assessment",
                    name="figures_new",
                    field=fleet.models.WrittenJSONField(blank=True, default=dict),
                ),
                migrations.AlterField(
                    model_name="assessment",
                    name="figures_now",
                    field=fleet.models.WrittenJSONField(blank=True, default=dict),
                ),
                migrations.AlterField(
                    model_name="assessment",
                    name="flagged_reading_ids",
                    field=fleet.models.WrittenJSONField(blank=True, default=list),
                ),
                migrations.AlterField(
                    model_name="assessment",
                    name="limits",
                    field=fleet.models.WrittenJSONField(
                        blank=True,
                        default=list,
                        help_text="Every limit evaluated: name, fraction of rated, P10/P50/P90 dates",
                    ),
                ),
            ],
        ),
    ]
