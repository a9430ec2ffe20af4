"""Each assessment's site and part, stored and kept by triggers, so the plan's spares, the risk counts,
the dashboard's totals and site scoping read the assessments' indexes alone instead of joining every
capacitor and motor.

- `Assessment.site`, `Assessment.part`: its capacitor's motor's site and its capacitor's part. Set as an
  assessment is inserted (PostgreSQL: one row trigger that also sets `capacitor_in_service`, replacing
  the statement trigger of 0015, so a COPY of assessments writes each row once), and carried along when
  a capacitor changes part or motor and when a motor moves to another site. Existing rows are filled.
- Two partial indexes over the current assessments of capacitors in service: by replace-by date with
  the site, part and risk level included (totals by day, site and part, index only), and by site and
  risk level.

On SQLite, a later migration that rebuilds fleet_assessment, fleet_fittedcapacitor or fleet_motor drops
these triggers: reinstall them (SQLITE_FORWARD below), as 0015 and 0018 do theirs.
"""

import importlib

import django.db.models.deletion
from django.db import migrations, models

TRIGGERS_0002 = importlib.import_module("fleet.migrations.0002_reading_triggers")
STORED_FACTS_0015 = importlib.import_module("fleet.migrations.0015_list_pages_indexes_and_stored_facts")

FILL = """
UPDATE fleet_assessment SET
  site_id = (SELECT m.site_id FROM fleet_fittedcapacitor c JOIN fleet_motor m ON m.id = c.motor_id
             WHERE c.id = fleet_assessment.installation_id),
  part_id = (SELECT c.part_id FROM fleet_fittedcapacitor c WHERE c.id = fleet_assessment.installation_id)
"""

SQLITE_FORWARD = [
    """
    CREATE TRIGGER fleet_assessment_site_and_part AFTER INSERT ON fleet_assessment
    BEGIN
      UPDATE fleet_assessment SET
        site_id = (SELECT m.site_id FROM fleet_fittedcapacitor c JOIN fleet_motor m ON m.id = c.motor_id
                   WHERE c.id = NEW.installation_id),
        part_id = (SELECT c.part_id FROM fleet_fittedcapacitor c WHERE c.id = NEW.installation_id)
      WHERE id = NEW.id;
    END;
    """,
    """
    CREATE TRIGGER fleet_capacitor_moves_assessments AFTER UPDATE OF part_id, motor_id ON fleet_fittedcapacitor
    WHEN NEW.part_id IS NOT OLD.part_id OR NEW.motor_id IS NOT OLD.motor_id
    BEGIN
      UPDATE fleet_assessment SET part_id = NEW.part_id,
        site_id = (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id)
      WHERE installation_id = NEW.id;
    END;
    """,
    """
    CREATE TRIGGER fleet_motor_moves_assessments AFTER UPDATE OF site_id ON fleet_motor
    WHEN NEW.site_id IS NOT OLD.site_id
    BEGIN
      UPDATE fleet_assessment SET site_id = NEW.site_id
      WHERE installation_id IN (SELECT c.id FROM fleet_fittedcapacitor c WHERE c.motor_id = NEW.id);
    END;
    """,
]
SQLITE_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_assessment_site_and_part;",
    "DROP TRIGGER IF EXISTS fleet_capacitor_moves_assessments;",
    "DROP TRIGGER IF EXISTS fleet_motor_moves_assessments;",
]
POSTGRES_FORWARD = [
    # One row trigger sets the in-service flag, the site and the part as the row is written (a COPY
    # included): no second version of every new row, as an AFTER statement trigger's UPDATE would make.
    "DROP TRIGGER IF EXISTS fleet_assessment_in_service ON fleet_assessment;",
    "DROP FUNCTION IF EXISTS fleet_assessment_in_service();",
    """
    CREATE OR REPLACE FUNCTION fleet_assessment_capacitor_facts() RETURNS trigger AS $$
    DECLARE
      in_service boolean;
      site bigint;
      part bigint;
    BEGIN
      SELECT c.removed_on IS NULL, m.site_id, c.part_id INTO in_service, site, part
      FROM fleet_fittedcapacitor c JOIN fleet_motor m ON m.id = c.motor_id WHERE c.id = NEW.installation_id;
      IF FOUND THEN  -- otherwise the foreign key refuses the row
        NEW.capacitor_in_service := in_service;
        NEW.site_id := site;
        NEW.part_id := part;
      END IF;
      RETURN NEW;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_assessment_capacitor_facts BEFORE INSERT OR UPDATE OF installation_id ON fleet_assessment
    FOR EACH ROW EXECUTE FUNCTION fleet_assessment_capacitor_facts();
    """,
    """
    CREATE OR REPLACE FUNCTION fleet_capacitor_moves_assessments() RETURNS trigger AS $$
    BEGIN
      UPDATE fleet_assessment SET part_id = NEW.part_id,
        site_id = (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id)
      WHERE installation_id = NEW.id;
      RETURN NULL;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_capacitor_moves_assessments AFTER UPDATE OF part_id, motor_id ON fleet_fittedcapacitor
    FOR EACH ROW WHEN (OLD.part_id IS DISTINCT FROM NEW.part_id OR OLD.motor_id IS DISTINCT FROM NEW.motor_id)
    EXECUTE FUNCTION fleet_capacitor_moves_assessments();
    """,
    """
    CREATE OR REPLACE FUNCTION fleet_motor_moves_assessments() RETURNS trigger AS $$
    BEGIN
      UPDATE fleet_assessment a SET site_id = NEW.site_id
      FROM fleet_fittedcapacitor c WHERE c.motor_id = NEW.id AND a.installation_id = c.id;
      RETURN NULL;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_motor_moves_assessments AFTER UPDATE OF site_id ON fleet_motor
    FOR EACH ROW WHEN (OLD.site_id IS DISTINCT FROM NEW.site_id) EXECUTE FUNCTION fleet_motor_moves_assessments();
    """,
]
POSTGRES_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_assessment_capacitor_facts ON fleet_assessment;",
    "DROP FUNCTION IF EXISTS fleet_assessment_capacitor_facts();",
    "DROP TRIGGER IF EXISTS fleet_capacitor_moves_assessments ON fleet_fittedcapacitor;",
    "DROP FUNCTION IF EXISTS fleet_capacitor_moves_assessments();",
    "DROP TRIGGER IF EXISTS fleet_motor_moves_assessments ON fleet_motor;",
    "DROP FUNCTION IF EXISTS fleet_motor_moves_assessments();",
    *STORED_FACTS_0015.POSTGRES_FORWARD[:2],  # 0015's statement trigger for the in-service flag, back
]


class Migration(migrations.Migration):
    dependencies = [("fleet", "0019_unit_labels")]

    operations = [
        migrations.AddField(
            model_name="assessment",
            name="part",
            field=models.ForeignKey(
                blank=True,
                db_constraint=False,
                db_index=False,
                editable=False,
                help_text="Its capacitor's part; kept by database triggers",
                null=True,
                on_delete=django.db.models.deletion.DO_NOTHING,
                related_name="+",
                to="fleet.capacitorpart",
            ),
        ),
        migrations.AddField(
            model_name="assessment",
            name="site",
            field=models.ForeignKey(
                blank=True,
                db_constraint=False,
                db_index=False,
                editable=False,
                help_text="Its capacitor's motor's site; kept by database triggers",
                null=True,
                on_delete=django.db.models.deletion.DO_NOTHING,
                related_name="+",
                to="fleet.site",
            ),
        ),
        migrations.RunSQL(FILL, migrations.RunSQL.noop),
        migrations.RunPython(
            TRIGGERS_0002._run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            TRIGGERS_0002._run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["replace_by"],
                include=("site", "part", "risk"),
                name="in_service_totals",
            ),
        ),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["site", "risk"],
                name="in_service_by_site_risk",
            ),
        ),
    ]
