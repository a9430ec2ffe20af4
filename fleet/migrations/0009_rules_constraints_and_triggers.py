"""Rules of a reading held by the database: finite ranges, bounded notes, one-time client keys;
append-only for real (no DELETE); no removal date earlier than a reading of that capacitor.

On SQLite, adding the constraints rebuilds fleet_reading, which drops its triggers: the
triggers of 0002 are installed again here, after the rebuild (a later migration that rebuilds
the table must do the same). A test database flush truncates on PostgreSQL, which row triggers
do not see; on SQLite tests/conftest.py lifts the no-delete trigger for that one statement.
"""

import importlib

import django.core.validators
import django.db.models.functions.text
import django.db.models.lookups
from django.conf import settings
from django.db import migrations, models


TRIGGERS_0002 = importlib.import_module("fleet.migrations.0002_reading_triggers")

NO_DELETE = "readings are append-only: a reading is never deleted"
REMOVAL_BEFORE_READINGS = "removal date earlier than a reading of this capacitor"

SQLITE_READING_NO_DELETE = f"""
    CREATE TRIGGER fleet_reading_no_delete BEFORE DELETE ON fleet_reading
    BEGIN SELECT RAISE(ABORT, '{NO_DELETE}'); END;
    """
SQLITE_FORWARD = [
    *TRIGGERS_0002.SQLITE_BACKWARD,
    *TRIGGERS_0002.SQLITE_FORWARD,
    SQLITE_READING_NO_DELETE,
    f"""
    CREATE TRIGGER fleet_removal_not_before_readings BEFORE UPDATE OF removed_on ON fleet_fittedcapacitor
    WHEN NEW.removed_on IS NOT NULL AND EXISTS (SELECT 1 FROM fleet_reading r WHERE r.installation_id = NEW.id
                                                AND date(r.taken_at) > NEW.removed_on)
    BEGIN SELECT RAISE(ABORT, '{REMOVAL_BEFORE_READINGS}'); END;
    """,
]
SQLITE_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_reading_no_delete;",
    "DROP TRIGGER IF EXISTS fleet_removal_not_before_readings;",
]
POSTGRES_FORWARD = [
    f"""
    CREATE OR REPLACE FUNCTION fleet_reading_no_delete() RETURNS trigger AS $$
    BEGIN
      RAISE EXCEPTION '{NO_DELETE}' USING ERRCODE = 'check_violation';
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_reading_no_delete BEFORE DELETE ON fleet_reading
    FOR EACH ROW EXECUTE FUNCTION fleet_reading_no_delete();
    """,
    f"""
    CREATE OR REPLACE FUNCTION fleet_removal_not_before_readings() RETURNS trigger AS $$
    BEGIN
      IF NEW.removed_on IS NOT NULL AND EXISTS (
          SELECT 1 FROM fleet_reading r WHERE r.installation_id = NEW.id
          AND (r.taken_at AT TIME ZONE 'UTC')::date > NEW.removed_on) THEN
        RAISE EXCEPTION '{REMOVAL_BEFORE_READINGS}' USING ERRCODE = 'check_violation';
      END IF;
      RETURN NEW;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_removal_not_before_readings BEFORE UPDATE OF removed_on ON fleet_fittedcapacitor
    FOR EACH ROW EXECUTE FUNCTION fleet_removal_not_before_readings();
    """,
]
POSTGRES_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_reading_no_delete ON fleet_reading;",
    "DROP TRIGGER IF EXISTS fleet_removal_not_before_readings ON fleet_fittedcapacitor;",
    "DROP FUNCTION IF EXISTS fleet_reading_no_delete();",
    "DROP FUNCTION IF EXISTS fleet_removal_not_before_readings();",
]


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0008_security_sites_and_audit"),
        migrations.swappable_dependency(settings.AUTH_USER_MODEL),
    ]

    operations = [
        migrations.RemoveConstraint(
            model_name="reading",
            name="reading_voltage_positive",
        ),
        migrations.RemoveConstraint(
            model_name="reading",
            name="reading_current_not_negative",
        ),
        migrations.AddField(
            model_name="reading",
            name="client_key",
            field=models.CharField(
                blank=True,
                help_text="The form's one-time key or the API client's idempotency key: sent twice, saved once",
                max_length=64,
                null=True,
                unique=True,
            ),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="code",
            field=models.CharField(
                help_text="Use letters, digits, '-', '_' and '.', starting with a letter or digit",
                max_length=40,
                unique=True,
                validators=[
                    django.core.validators.RegexValidator(
                        "\\A[A-Za-z0-9][A-Za-z0-9._-]*\\Z",
                        "Use letters, digits, '-', '_' and '.', starting with a letter or digit.",
                        code="code_characters",
                    )
                ],
            ),
        ),
        migrations.AlterField(
            model_name="motor",
            name="asset_tag",
            field=models.CharField(
                help_text="Use letters, digits, '-', '_' and '.', starting with a letter or digit",
                max_length=40,
                unique=True,
                validators=[
                    django.core.validators.RegexValidator(
                        "\\A[A-Za-z0-9][A-Za-z0-9._-]*\\Z",
                        "Use letters, digits, '-', '_' and '.', starting with a letter or digit.",
                        code="code_characters",
                    )
                ],
            ),
        ),
        migrations.AlterField(
            model_name="site",
            name="code",
            field=models.CharField(
                help_text="Use letters, digits, '-', '_' and '.', starting with a letter or digit",
                max_length=20,
                unique=True,
                validators=[
                    django.core.validators.RegexValidator(
                        "\\A[A-Za-z0-9][A-Za-z0-9._-]*\\Z",
                        "Use letters, digits, '-', '_' and '.', starting with a letter or digit.",
                        code="code_characters",
                    )
                ],
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(("capacitance_uf__lt", 1000000000.0)),
                name="reading_capacitance_finite",
                violation_error_message="Capacitance must be a finite number.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("capacitor_voltage_v__isnull", True),
                    models.Q(("capacitor_voltage_v__gt", 0), ("capacitor_voltage_v__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_voltage_positive",
                violation_error_message="The capacitor voltage must be a finite number above zero.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("capacitor_current_a__isnull", True),
                    models.Q(("capacitor_current_a__gte", 0), ("capacitor_current_a__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_current_not_negative",
                violation_error_message="The capacitor current must be a finite number, zero or more.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("line_voltage_v__isnull", True),
                    models.Q(("line_voltage_v__gte", 0), ("line_voltage_v__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_line_voltage_finite",
                violation_error_message="The line voltage must be a finite number, zero or more.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("main_current_a__isnull", True),
                    models.Q(("main_current_a__gte", 0), ("main_current_a__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_main_current_finite",
                violation_error_message="The main current must be a finite number, zero or more.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("aux_current_a__isnull", True),
                    models.Q(("aux_current_a__gte", 0), ("aux_current_a__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_aux_current_finite",
                violation_error_message="The aux current must be a finite number, zero or more.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("line_current_a__isnull", True),
                    models.Q(("line_current_a__gte", 0), ("line_current_a__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_line_current_finite",
                violation_error_message="The line current must be a finite number, zero or more.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("ambient_temperature_c__isnull", True),
                    models.Q(("ambient_temperature_c__gte", -273.15), ("ambient_temperature_c__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_ambient_temperature_finite",
                violation_error_message="The ambient temperature must be a finite number above absolute zero.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=models.Q(
                    ("esr_ohm__isnull", True),
                    models.Q(("esr_ohm__gte", 0), ("esr_ohm__lt", 1000000000.0)),
                    _connector="OR",
                ),
                name="reading_esr_finite",
                violation_error_message="The ESR must be a finite number, zero or more.",
            ),
        ),
        migrations.AddConstraint(
            model_name="reading",
            constraint=models.CheckConstraint(
                condition=django.db.models.lookups.LessThanOrEqual(
                    django.db.models.functions.text.Length("notes"), 2000
                ),
                name="reading_notes_bounded",
                violation_error_message="Notes take at most 2000 characters.",
            ),
        ),
        migrations.RunPython(
            TRIGGERS_0002._run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            TRIGGERS_0002._run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
    ]
