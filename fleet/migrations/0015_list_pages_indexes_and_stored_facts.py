"""Stored facts and indexes so that list pages read a page at a time, whatever the fleet's size.

- `Assessment.risk_was` and `risk_changed_at`: each current assessment's latest change of risk
  level, so the plan lists recent changes without comparing assessment histories. Existing rows
  are filled from the assessments already stored.
- `Assessment.capacitor_in_service`: whether its capacitor has no removal date, kept by triggers
  (on inserting assessments, on changing a removal date), so the plan, the risk counts and the
  API read one table through partial indexes instead of joining every capacitor.
- `Motor.last_read_at`: the newest reading of a capacitor while in service, kept by a trigger on
  readings (statement-level on PostgreSQL, so a COPY or a bulk insert updates each motor once),
  so the route counts and filters the motors still to read with an index. Existing rows are filled.
- An index on the motor's tag in any case (the motor page and Find look tags up that way).
- Indexes for the plan and the API (current assessments by replace-by date), the route and label
  pages (walking order), the work-orders page (open orders by day), the refits page (runs newest
  first, readings by when they were saved).

On SQLite, a later migration that rebuilds fleet_reading, fleet_fittedcapacitor or fleet_assessment
drops their triggers: reinstall these too (SQLITE_FORWARD below), as 0009 and 0011 do theirs.
"""

from django.conf import settings
from django.db import migrations, models
from django.db.models.functions import Upper

from ._triggers import plpgsql_trigger, postgres_drops, run, sqlite_drops

# Window functions and UPDATE ... FROM: PostgreSQL, and SQLite 3.33 or newer.
FILL_RISK_HISTORY = """
WITH ordered AS (
    SELECT installation_id, risk, created_at,
           LAG(risk) OVER (PARTITION BY installation_id ORDER BY created_at, id) AS before
    FROM fleet_assessment
), changes AS (
    SELECT installation_id, created_at, COALESCE(before, '') AS before,
           ROW_NUMBER() OVER (PARTITION BY installation_id ORDER BY created_at DESC) AS newest
    FROM ordered
    WHERE before IS NULL OR before <> risk
)
UPDATE fleet_assessment
SET risk_was = changes.before, risk_changed_at = changes.created_at
FROM changes
WHERE changes.installation_id = fleet_assessment.installation_id AND changes.newest = 1
  AND fleet_assessment.is_current
"""

FILL_LAST_READ = """
UPDATE fleet_motor SET last_read_at = (
    SELECT MAX(r.taken_at) FROM fleet_reading r JOIN fleet_fittedcapacitor c ON c.id = r.installation_id
    WHERE c.motor_id = fleet_motor.id AND c.removed_on IS NULL
)
"""

FILL_IN_SERVICE = """
UPDATE fleet_assessment SET capacitor_in_service = FALSE
WHERE installation_id IN (SELECT id FROM fleet_fittedcapacitor WHERE removed_on IS NOT NULL)
"""

SQLITE_FORWARD = [
    """
    CREATE TRIGGER fleet_assessment_in_service AFTER INSERT ON fleet_assessment
    WHEN NEW.capacitor_in_service <> (SELECT c.removed_on IS NULL FROM fleet_fittedcapacitor c
                                      WHERE c.id = NEW.installation_id)
    BEGIN
      UPDATE fleet_assessment SET capacitor_in_service = NOT NEW.capacitor_in_service WHERE id = NEW.id;
    END;
    """,
    """
    CREATE TRIGGER fleet_capacitor_in_service AFTER UPDATE OF removed_on ON fleet_fittedcapacitor
    BEGIN
      UPDATE fleet_assessment SET capacitor_in_service = (NEW.removed_on IS NULL)
      WHERE installation_id = NEW.id AND capacitor_in_service <> (NEW.removed_on IS NULL);
    END;
    """,
    """
    CREATE TRIGGER fleet_motor_last_read AFTER INSERT ON fleet_reading
    BEGIN
      UPDATE fleet_motor SET last_read_at = NEW.taken_at
      WHERE id = (SELECT c.motor_id FROM fleet_fittedcapacitor c
                  WHERE c.id = NEW.installation_id AND c.removed_on IS NULL)
        AND (last_read_at IS NULL OR last_read_at < NEW.taken_at);
    END;
    """,
]
SQLITE_BACKWARD = sqlite_drops("fleet_motor_last_read", "fleet_assessment_in_service", "fleet_capacitor_in_service")
POSTGRES_FORWARD = [
    *plpgsql_trigger(
        "fleet_assessment_in_service",
        "AFTER INSERT",
        "fleet_assessment",
        """
        UPDATE fleet_assessment a SET capacitor_in_service = (c.removed_on IS NULL)
        FROM new_assessments n JOIN fleet_fittedcapacitor c ON c.id = n.installation_id
        WHERE a.id = n.id AND a.capacitor_in_service <> (c.removed_on IS NULL);
        RETURN NULL;
        """,
        level="STATEMENT",
        referencing="new_assessments",
    ),
    *plpgsql_trigger(
        "fleet_capacitor_in_service",
        "AFTER UPDATE OF removed_on",
        "fleet_fittedcapacitor",
        """
        UPDATE fleet_assessment SET capacitor_in_service = (NEW.removed_on IS NULL)
        WHERE installation_id = NEW.id AND capacitor_in_service <> (NEW.removed_on IS NULL);
        RETURN NULL;
        """,
    ),
    *plpgsql_trigger(
        "fleet_motor_last_read",
        "AFTER INSERT",
        "fleet_reading",
        """
        UPDATE fleet_motor m SET last_read_at = n.taken_at
        FROM (SELECT c.motor_id, MAX(r.taken_at) AS taken_at
              FROM new_readings r JOIN fleet_fittedcapacitor c ON c.id = r.installation_id
              WHERE c.removed_on IS NULL GROUP BY c.motor_id) AS n
        WHERE m.id = n.motor_id AND (m.last_read_at IS NULL OR m.last_read_at < n.taken_at);
        RETURN NULL;
        """,
        level="STATEMENT",
        referencing="new_readings",
    ),
]
POSTGRES_BACKWARD = postgres_drops(
    ("fleet_assessment_in_service", "fleet_assessment"),
    ("fleet_capacitor_in_service", "fleet_fittedcapacitor"),
    ("fleet_motor_last_read", "fleet_reading"),
)


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0014_forecast_curvature_and_alert_level"),
        migrations.swappable_dependency(settings.AUTH_USER_MODEL),
    ]

    operations = [
        migrations.AddField(
            model_name="assessment",
            name="capacitor_in_service",
            field=models.BooleanField(
                db_default=True,
                default=True,
                editable=False,
                help_text="Its capacitor has no removal date: kept by database triggers, so lists need no join",
            ),
        ),
        migrations.AddField(
            model_name="assessment",
            name="risk_changed_at",
            field=models.DateTimeField(
                blank=True,
                help_text="When the risk level took its present value (carried over by later refits)",
                null=True,
            ),
        ),
        migrations.AddField(
            model_name="assessment",
            name="risk_was",
            field=models.CharField(
                db_default="",
                blank=True,
                help_text="The risk level before its latest change; empty if it never changed",
                max_length=20,
            ),
        ),
        migrations.AddField(
            model_name="motor",
            name="last_read_at",
            field=models.DateTimeField(
                blank=True,
                editable=False,
                help_text="Newest reading of a capacitor while in service; kept by a database trigger on readings",
                null=True,
            ),
        ),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["replace_by", "installation"],
                name="in_service_by_replace_by",
            ),
        ),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["risk"],
                name="in_service_by_risk",
            ),
        ),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["risk_changed_at"],
                name="in_service_by_risk_change",
            ),
        ),
        migrations.AddIndex(
            model_name="motor",
            index=models.Index(fields=["site", "route_order", "asset_tag"], name="motor_walking_order"),
        ),
        migrations.AddIndex(
            model_name="motor",
            index=models.Index(fields=["site", "status", "last_read_at"], name="motor_last_read"),
        ),
        migrations.AddIndex(
            model_name="motor",
            index=models.Index(Upper("asset_tag"), name="motor_tag_any_case"),
        ),
        migrations.AddIndex(
            model_name="reading",
            index=models.Index(fields=["created_at"], name="reading_by_created_at"),
        ),
        migrations.AddIndex(
            model_name="refitrun",
            index=models.Index(fields=["-started_at"], name="refit_run_newest_first"),
        ),
        migrations.AddIndex(
            model_name="workorder",
            index=models.Index(
                condition=models.Q(("state__in", ["planned", "issued"])),
                fields=["due_on", "motor"],
                name="open_orders_by_day",
            ),
        ),
        migrations.RunSQL(FILL_RISK_HISTORY, migrations.RunSQL.noop),
        migrations.RunSQL(FILL_LAST_READ, migrations.RunSQL.noop),
        migrations.RunSQL(FILL_IN_SERVICE, migrations.RunSQL.noop),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
    ]
