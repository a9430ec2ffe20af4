"""Each current assessment's walking order, stored and kept by triggers, so the plan and the home page
read a day's replacements by site and route order from one partial index of the assessments instead of
joining every assessment due that day to its capacitor and motor to sort them (3,000 capacitors due
the same day cost 20-35 ms a request at 100,000 motors).

- `Assessment.route_order`: its capacitor's motor's `route_order`. Set as an assessment is inserted
  when the writer does not send it (the refit sends it with the other facts it reads under its lock on
  the capacitors, migration 0029), and when an assessment's capacitor changes; carried to the current
  assessments when a motor's route order changes (the route page) and when a capacitor moves to another
  motor. A superseded assessment keeps the order of its day: no list reads it, and a route edit of a
  whole site would otherwise rewrite every assessment ever made there. Existing current rows are filled.
- A partial index over the current assessments of capacitors in service: (replace_by, site,
  route_order, fitted_capacitor), the plan's order once the few sites are read by code.

On SQLite, a later migration that rebuilds fleet_assessment, fleet_fittedcapacitor or fleet_motor drops
these triggers: reinstall them (SQLITE_FORWARD below).
"""

from django.db import migrations, models

from ._triggers import plpgsql_trigger, postgres_drops, run, sqlite_drops, sqlite_row_trigger

MOTOR_ROUTE_ORDER = (
    "(SELECT m.route_order FROM fleet_fittedcapacitor c JOIN fleet_motor m ON m.id = c.motor_id"
    " WHERE c.id = {capacitor})"
)
FILL = (
    "UPDATE fleet_assessment SET route_order = "
    + MOTOR_ROUTE_ORDER.format(capacitor="fleet_assessment.fitted_capacitor_id")
    + " WHERE is_current"
)

SQLITE_FORWARD = [
    sqlite_row_trigger(
        "fleet_assessment_route_order",
        "AFTER INSERT",
        "fleet_assessment",
        "NEW.route_order IS NULL",
        "UPDATE fleet_assessment SET route_order = "
        + MOTOR_ROUTE_ORDER.format(capacitor="NEW.fitted_capacitor_id")
        + " WHERE id = NEW.id;",
    ),
    sqlite_row_trigger(
        "fleet_assessment_capacitor_route_order",
        "AFTER UPDATE OF fitted_capacitor_id",
        "fleet_assessment",
        "NEW.fitted_capacitor_id IS NOT OLD.fitted_capacitor_id",
        "UPDATE fleet_assessment SET route_order = "
        + MOTOR_ROUTE_ORDER.format(capacitor="NEW.fitted_capacitor_id")
        + " WHERE id = NEW.id;",
    ),
    sqlite_row_trigger(
        "fleet_motor_route_order_assessments",
        "AFTER UPDATE OF route_order",
        "fleet_motor",
        "NEW.route_order IS NOT OLD.route_order",
        "UPDATE fleet_assessment SET route_order = NEW.route_order WHERE is_current"
        " AND fitted_capacitor_id IN (SELECT c.id FROM fleet_fittedcapacitor c WHERE c.motor_id = NEW.id);",
    ),
    sqlite_row_trigger(
        "fleet_capacitor_route_order_assessments",
        "AFTER UPDATE OF motor_id",
        "fleet_fittedcapacitor",
        "NEW.motor_id IS NOT OLD.motor_id",
        "UPDATE fleet_assessment SET route_order = (SELECT m.route_order FROM fleet_motor m WHERE m.id = NEW.motor_id)"
        " WHERE is_current AND fitted_capacitor_id = NEW.id;",
    ),
]
SQLITE_BACKWARD = sqlite_drops(
    "fleet_assessment_route_order",
    "fleet_assessment_capacitor_route_order",
    "fleet_motor_route_order_assessments",
    "fleet_capacitor_route_order_assessments",
)
LOOK_UP = """
SELECT m.route_order INTO NEW.route_order
FROM fleet_fittedcapacitor c JOIN fleet_motor m ON m.id = c.motor_id WHERE c.id = NEW.fitted_capacitor_id;
RETURN NEW;
"""
POSTGRES_FORWARD = [
    *plpgsql_trigger(
        "fleet_assessment_route_order",
        "BEFORE INSERT",
        "fleet_assessment",
        LOOK_UP,
        when="NEW.route_order IS NULL",
    ),
    *plpgsql_trigger(
        "fleet_assessment_capacitor_route_order",
        "BEFORE UPDATE OF fitted_capacitor_id",
        "fleet_assessment",
        LOOK_UP,
        when="OLD.fitted_capacitor_id IS DISTINCT FROM NEW.fitted_capacitor_id",
    ),
    *plpgsql_trigger(
        "fleet_motor_route_order_assessments",
        "AFTER UPDATE OF route_order",
        "fleet_motor",
        """
        UPDATE fleet_assessment a SET route_order = NEW.route_order
        FROM fleet_fittedcapacitor c WHERE c.motor_id = NEW.id AND a.fitted_capacitor_id = c.id AND a.is_current;
        RETURN NULL;
        """,
        when="OLD.route_order IS DISTINCT FROM NEW.route_order",
    ),
    *plpgsql_trigger(
        "fleet_capacitor_route_order_assessments",
        "AFTER UPDATE OF motor_id",
        "fleet_fittedcapacitor",
        """
        UPDATE fleet_assessment SET route_order = (SELECT m.route_order FROM fleet_motor m WHERE m.id = NEW.motor_id)
        WHERE fitted_capacitor_id = NEW.id AND is_current;
        RETURN NULL;
        """,
        when="OLD.motor_id IS DISTINCT FROM NEW.motor_id",
    ),
]
POSTGRES_BACKWARD = postgres_drops(
    ("fleet_assessment_route_order", "fleet_assessment"),
    ("fleet_assessment_capacitor_route_order", "fleet_assessment"),
    ("fleet_motor_route_order_assessments", "fleet_motor"),
    ("fleet_capacitor_route_order_assessments", "fleet_fittedcapacitor"),
)


class Migration(migrations.Migration):
    dependencies = [("fleet", "0033_design_counts")]

    operations = [
        migrations.AddField(
            model_name="assessment",
            name="route_order",
            field=models.IntegerField(
                blank=True,
                editable=False,
                help_text="Its capacitor's motor's route order (Motor.route_order); kept by database triggers while current",
                null=True,
            ),
        ),
        migrations.RunSQL(FILL, migrations.RunSQL.noop),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["replace_by", "site", "route_order", "fitted_capacitor"],
                name="in_service_walking_order",
            ),
        ),
    ]
