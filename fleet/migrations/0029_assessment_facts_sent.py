"""A refit sends each new assessment's capacitor facts (in service, site, part, fitting date) with the
row, read under the lock it already takes on the capacitors; the row trigger that looks them up (0020,
its function as 0023 left it) then runs only for a row that comes without them (PostgreSQL).

The trigger ran a lookup of capacitor and motor for every row of a refit's COPY, about a fifth of the
server's time for each assessment written. Changing an assessment's capacitor still runs the lookup,
now from a trigger of its own. SQLite keeps 0023's trigger, which sets the same facts after the insert.
"""

import importlib

from django.db import migrations

run = importlib.import_module("fleet.migrations.0002_reading_triggers")._run

FACTS = "fleet_assessment_capacitor_facts"  # the function (0023) and, until now, its one trigger

POSTGRES_FORWARD = [
    f"DROP TRIGGER IF EXISTS {FACTS} ON fleet_assessment;",
    f"""
    CREATE TRIGGER {FACTS} BEFORE INSERT ON fleet_assessment
    FOR EACH ROW WHEN (NEW.site_id IS NULL OR NEW.part_id IS NULL OR NEW.fitted_on IS NULL)
    EXECUTE FUNCTION {FACTS}();
    """,
    f"""
    CREATE TRIGGER fleet_assessment_capacitor_changed BEFORE UPDATE OF fitted_capacitor_id ON fleet_assessment
    FOR EACH ROW EXECUTE FUNCTION {FACTS}();
    """,
]
POSTGRES_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_assessment_capacitor_changed ON fleet_assessment;",
    f"DROP TRIGGER IF EXISTS {FACTS} ON fleet_assessment;",
    f"""
    CREATE TRIGGER {FACTS} BEFORE INSERT OR UPDATE OF fitted_capacitor_id ON fleet_assessment
    FOR EACH ROW EXECUTE FUNCTION {FACTS}();
    """,
]


class Migration(migrations.Migration):
    dependencies = [("fleet", "0028_bend_given_slope")]

    operations = [
        migrations.RunPython(run({"postgresql": POSTGRES_FORWARD}), run({"postgresql": POSTGRES_BACKWARD})),
    ]
