"""Each work order's walking order (its motor's route order and asset tag) and its capacitor's part,
stored and kept by triggers, so the work-orders page and the visit sheet put a visit's orders in
walking order and count its spares from the open orders' index, instead of looking up every open
order's motor twice and its capacitor once (about 2,700 orders of a page of visits at 100,000 motors:
20 ms for each of the two queries).

- `WorkOrder.route_order`, `WorkOrder.asset_tag`: its motor's. `WorkOrder.part`: its capacitor's part
  (none for an order without a capacitor). Set whenever a work order is written (as 0018 sets its site),
  carried along when a motor's route order or tag changes and when a capacitor's part is corrected.
  Existing rows are filled.
- The open orders' index by day and site gains the walking order and the order's id, with the part
  included, and replaces 0018's.

On SQLite, a later migration that rebuilds fleet_workorder, fleet_motor or fleet_fittedcapacitor drops
these triggers: reinstall them (SQLITE_FORWARD below).
"""

import django.db.models.deletion
from django.db import migrations, models

from ._triggers import plpgsql_trigger, postgres_drops, run, sqlite_drops, sqlite_row_trigger

MOTOR_ROUTE_ORDER = "(SELECT m.route_order FROM fleet_motor m WHERE m.id = {order}.motor_id)"
MOTOR_TAG = "(SELECT m.asset_tag FROM fleet_motor m WHERE m.id = {order}.motor_id)"
CAPACITOR_PART = "(SELECT c.part_id FROM fleet_fittedcapacitor c WHERE c.id = {order}.fitted_capacitor_id)"


def facts_of(order: str) -> str:
    """The SET list that gives a work order (`order`: the table or NEW) its motor's and capacitor's facts."""
    return (
        f"route_order = {MOTOR_ROUTE_ORDER.format(order=order)}, asset_tag = {MOTOR_TAG.format(order=order)},"
        f" part_id = {CAPACITOR_PART.format(order=order)}"
    )


FILL = f"UPDATE fleet_workorder SET {facts_of('fleet_workorder')}"

SQLITE_FORWARD = [
    sqlite_row_trigger(
        "fleet_workorder_walk_on_insert",
        "AFTER INSERT",
        "fleet_workorder",
        "1",
        f"UPDATE fleet_workorder SET {facts_of('NEW')} WHERE id = NEW.id;",
    ),
    # Any update (Django's save writes every column, with the values it read): put the facts right.
    sqlite_row_trigger(
        "fleet_workorder_walk_on_update",
        "AFTER UPDATE",
        "fleet_workorder",
        f"NEW.route_order IS NOT {MOTOR_ROUTE_ORDER.format(order='NEW')}"
        f" OR NEW.asset_tag IS NOT {MOTOR_TAG.format(order='NEW')}"
        f" OR NEW.part_id IS NOT {CAPACITOR_PART.format(order='NEW')}",
        f"UPDATE fleet_workorder SET {facts_of('NEW')} WHERE id = NEW.id;",
    ),
    sqlite_row_trigger(
        "fleet_motor_walk_work_orders",
        "AFTER UPDATE OF route_order, asset_tag",
        "fleet_motor",
        "NEW.route_order IS NOT OLD.route_order OR NEW.asset_tag IS NOT OLD.asset_tag",
        "UPDATE fleet_workorder SET route_order = NEW.route_order, asset_tag = NEW.asset_tag WHERE motor_id = NEW.id;",
    ),
    sqlite_row_trigger(
        "fleet_capacitor_part_work_orders",
        "AFTER UPDATE OF part_id",
        "fleet_fittedcapacitor",
        "NEW.part_id IS NOT OLD.part_id",
        "UPDATE fleet_workorder SET part_id = NEW.part_id WHERE fitted_capacitor_id = NEW.id;",
    ),
]
SQLITE_BACKWARD = sqlite_drops(
    "fleet_workorder_walk_on_insert",
    "fleet_workorder_walk_on_update",
    "fleet_motor_walk_work_orders",
    "fleet_capacitor_part_work_orders",
)
POSTGRES_FORWARD = [
    *plpgsql_trigger(
        "fleet_workorder_walk",
        "BEFORE INSERT OR UPDATE",
        "fleet_workorder",
        """
        SELECT m.route_order, m.asset_tag INTO NEW.route_order, NEW.asset_tag FROM fleet_motor m WHERE m.id = NEW.motor_id;
        NEW.part_id := (SELECT c.part_id FROM fleet_fittedcapacitor c WHERE c.id = NEW.fitted_capacitor_id);
        RETURN NEW;
        """,
    ),
    *plpgsql_trigger(
        "fleet_motor_walk_work_orders",
        "AFTER UPDATE OF route_order, asset_tag",
        "fleet_motor",
        """
        UPDATE fleet_workorder SET route_order = NEW.route_order, asset_tag = NEW.asset_tag WHERE motor_id = NEW.id;
        RETURN NULL;
        """,
        when="OLD.route_order IS DISTINCT FROM NEW.route_order OR OLD.asset_tag IS DISTINCT FROM NEW.asset_tag",
    ),
    *plpgsql_trigger(
        "fleet_capacitor_part_work_orders",
        "AFTER UPDATE OF part_id",
        "fleet_fittedcapacitor",
        """
        UPDATE fleet_workorder SET part_id = NEW.part_id WHERE fitted_capacitor_id = NEW.id;
        RETURN NULL;
        """,
        when="OLD.part_id IS DISTINCT FROM NEW.part_id",
    ),
]
POSTGRES_BACKWARD = postgres_drops(
    ("fleet_workorder_walk", "fleet_workorder"),
    ("fleet_motor_walk_work_orders", "fleet_motor"),
    ("fleet_capacitor_part_work_orders", "fleet_fittedcapacitor"),
)


class Migration(migrations.Migration):
    dependencies = [("fleet", "0034_pages_assessment_route_order")]

    operations = [
        migrations.AddField(
            model_name="workorder",
            name="route_order",
            field=models.IntegerField(
                blank=True, editable=False, help_text="Its motor's route order; kept by database triggers", null=True
            ),
        ),
        migrations.AddField(
            model_name="workorder",
            name="asset_tag",
            field=models.CharField(
                blank=True,
                editable=False,
                help_text="Its motor's asset tag; kept by database triggers",
                max_length=40,
                null=True,
            ),
        ),
        migrations.AddField(
            model_name="workorder",
            name="part",
            field=models.ForeignKey(
                blank=True,
                db_constraint=False,
                db_index=False,
                editable=False,
                help_text="Its capacitor's part (none for an inspection); kept by database triggers",
                null=True,
                on_delete=django.db.models.deletion.DO_NOTHING,
                related_name="+",
                to="fleet.capacitorpart",
            ),
        ),
        migrations.RunSQL(FILL, migrations.RunSQL.noop),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
        migrations.RemoveIndex(model_name="workorder", name="open_orders_by_visit"),
        migrations.AddIndex(
            model_name="workorder",
            index=models.Index(
                condition=models.Q(("state__in", ["planned", "issued"])),
                fields=["due_on", "site", "route_order", "asset_tag", "id"],
                include=("part",),
                name="open_orders_by_visit_walk",
            ),
        ),
    ]
