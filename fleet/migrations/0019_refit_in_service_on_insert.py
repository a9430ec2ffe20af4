"""PostgreSQL: a new assessment takes its capacitor's in-service flag as it is inserted.

0015 fixed the flag after each INSERT statement by an UPDATE joining the statement's new rows (a
transition table holding every new row whole, JSON included) with the capacitors and the
assessments: about 0.2 s of server time for each 2,000-capacitor chunk of a fleet refit, nearly
all of it for rows already right. A row trigger BEFORE INSERT sets the flag from the capacitor's
removal date instead: one index lookup a row, no transition table, no second version of the row.
The trigger on a capacitor's removal (0015) is unchanged, and so is SQLite's trigger.
"""

import importlib

from django.db import migrations

TRIGGERS_0002 = importlib.import_module("fleet.migrations.0002_reading_triggers")
MIGRATION_0015 = importlib.import_module("fleet.migrations.0015_list_pages_indexes_and_stored_facts")

POSTGRES_FORWARD = [
    "DROP TRIGGER IF EXISTS fleet_assessment_in_service ON fleet_assessment;",
    """
    CREATE OR REPLACE FUNCTION fleet_assessment_in_service() RETURNS trigger AS $$
    BEGIN
      NEW.capacitor_in_service := COALESCE(
        (SELECT c.removed_on IS NULL FROM fleet_fittedcapacitor c WHERE c.id = NEW.installation_id),
        NEW.capacitor_in_service
      );
      RETURN NEW;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_assessment_in_service BEFORE INSERT ON fleet_assessment
    FOR EACH ROW EXECUTE FUNCTION fleet_assessment_in_service();
    """,
]
POSTGRES_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_assessment_in_service ON fleet_assessment;",
    *(s for s in MIGRATION_0015.POSTGRES_FORWARD if "fleet_assessment_in_service" in s),
]


class Migration(migrations.Migration):
    dependencies = [("fleet", "0018_work_order_site")]

    operations = [
        migrations.RunPython(
            TRIGGERS_0002._run({"postgresql": POSTGRES_FORWARD}),
            TRIGGERS_0002._run({"postgresql": POSTGRES_BACKWARD}),
        ),
    ]
