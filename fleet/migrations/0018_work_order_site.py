"""Each work order's site, stored and kept by triggers, so the work-orders page groups and lists
open orders by visit (day, site) from the work orders alone, without joining every motor.

- `WorkOrder.site`: the motor's site, set by a trigger on inserting or changing a work order and
  carried along when a motor moves to another site. Existing rows are filled.
- The open orders' index by day and site replaces the one by day and motor.

On SQLite, a later migration that rebuilds fleet_workorder or fleet_motor drops these triggers:
reinstall them (SQLITE_FORWARD below), as 0009 and 0011 do theirs.
"""

import django.db.models.deletion
from django.db import migrations, models

from ._triggers import plpgsql_trigger, postgres_drops, run, sqlite_drops

FILL_SITE = """
UPDATE fleet_workorder SET site_id = (SELECT m.site_id FROM fleet_motor m WHERE m.id = fleet_workorder.motor_id)
"""

SQLITE_FORWARD = [
    """
    CREATE TRIGGER fleet_workorder_site_on_insert AFTER INSERT ON fleet_workorder
    BEGIN
      UPDATE fleet_workorder SET site_id = (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id)
      WHERE id = NEW.id;
    END;
    """,
    """
    CREATE TRIGGER fleet_workorder_site_on_update AFTER UPDATE OF motor_id, site_id ON fleet_workorder
    WHEN NEW.site_id IS NOT (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id)
    BEGIN
      UPDATE fleet_workorder SET site_id = (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id)
      WHERE id = NEW.id;
    END;
    """,
    """
    CREATE TRIGGER fleet_motor_moves_work_orders AFTER UPDATE OF site_id ON fleet_motor
    WHEN NEW.site_id IS NOT OLD.site_id
    BEGIN
      UPDATE fleet_workorder SET site_id = NEW.site_id WHERE motor_id = NEW.id;
    END;
    """,
]
SQLITE_BACKWARD = sqlite_drops(
    "fleet_workorder_site_on_insert", "fleet_workorder_site_on_update", "fleet_motor_moves_work_orders"
)
POSTGRES_FORWARD = [
    *plpgsql_trigger(
        "fleet_workorder_site",
        "BEFORE INSERT OR UPDATE",
        "fleet_workorder",
        """
        NEW.site_id := (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id);
        RETURN NEW;
        """,
    ),
    *plpgsql_trigger(
        "fleet_motor_moves_work_orders",
        "AFTER UPDATE OF site_id",
        "fleet_motor",
        """
        UPDATE fleet_workorder SET site_id = NEW.site_id WHERE motor_id = NEW.id;
        RETURN NULL;
        """,
        when="OLD.site_id IS DISTINCT FROM NEW.site_id",
    ),
]
POSTGRES_BACKWARD = postgres_drops(
    ("fleet_workorder_site", "fleet_workorder"), ("fleet_motor_moves_work_orders", "fleet_motor")
)


class Migration(migrations.Migration):
    dependencies = [("fleet", "0017_reading_source_api")]

    operations = [
        migrations.AddField(
            model_name="workorder",
            name="site",
            field=models.ForeignKey(
                blank=True,
                editable=False,
                help_text="The motor's site; kept by database triggers",
                null=True,
                on_delete=django.db.models.deletion.PROTECT,
                related_name="+",
                to="fleet.site",
            ),
        ),
        migrations.RemoveIndex(model_name="workorder", name="open_orders_by_day"),
        migrations.AddIndex(
            model_name="workorder",
            index=models.Index(
                condition=models.Q(("state__in", ["planned", "issued"])),
                fields=["due_on", "site"],
                name="open_orders_by_visit",
            ),
        ),
        migrations.RunSQL(FILL_SITE, migrations.RunSQL.noop),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
    ]
