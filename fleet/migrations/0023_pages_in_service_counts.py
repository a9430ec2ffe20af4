"""Counts of capacitors in service kept on write in an append-only ledger (`InServiceCount`), so the
risk counts (home, plan, dashboard), the capacitors not assessed yet and the spares forecast's
population sum a few rows instead of counting 150,000 index entries or joining every capacitor.

What each row counts (see the model): a capacitor in service adds 1 at (its motor's site, its part,
the month it was fitted, risk ""); a current assessment of a capacitor in service adds 1 at (its site,
its part, its risk level, the UTC day it was made). The triggers add, for every write, the new rows'
share less the old rows' share:

- PostgreSQL: one trigger per statement on inserting, changing and deleting assessments and fitted
  capacitors (a COPY included), over the statement's transition tables, summed per key: a refit
  chunk of 1,000 capacitors adds a few dozen rows, whatever else it changes, and updates no row.
  A motor moving to another site moves its capacitors' share (a row trigger with a condition, as
  0020's, since every reading updates the motor's `last_read_at`).
- SQLite: the same shares by row triggers. 0020's trigger fills an assessment's site and part by an
  UPDATE after the insert: the update trigger moves that row's share, so the sum is right in either
  order.

Each assessment also stores its capacitor's fitting date (`Assessment.fitted_on`), set by 0020's
row trigger with the site and part and carried along when the date is corrected, and the
`in_service_totals` index includes it: the dashboard's spares forecast groups the plan's window by
part, month fitted and month of replacement from that index alone, instead of joining every capacitor.

Each part's stored life fit (`PartLifeFit`) gains what the life-data page shows besides the fit (the
covariance for the bounds, the plot's points, the chance of failing within a year), so that page reads
it instead of fitting a part's capacitors on request; fits stored before have none and are not shown
until the nightly refresh (`refresh_life_fits`) stores them again.

Counts are summed with `services.counts`, compacted there (rows replaced by their sums). Existing
rows are counted once here. On SQLite, a later migration that rebuilds fleet_assessment,
fleet_fittedcapacitor or fleet_motor drops these triggers: reinstall them (SQLITE_FORWARD below).
"""

import importlib

from django.db import migrations, models

from ._triggers import plpgsql_statement_trigger, plpgsql_trigger, postgres_drops, run, sqlite_drops

LEDGER = "fleet_inservicecount (site_id, part_id, risk, fitted_month, assessed_on, n)"
KEY = "site_id, part_id, risk, fitted_month, assessed_on"
MONTH = {"postgresql": "date_trunc('month', {})::date", "sqlite": "date({}, 'start of month')"}
DAY = {"postgresql": "({} AT TIME ZONE 'UTC')::date", "sqlite": "date({})"}


def assessment_share(vendor: str, rows: str, sign: int) -> str:
    """The share of assessments (`rows`: a table, or OLD/NEW in a row trigger): the current ones of
    capacitors in service, by site, part, risk level and UTC day made."""
    a, source = (rows, "") if rows in ("OLD", "NEW") else ("a", f" FROM {rows} a")
    return (
        f"SELECT {a}.site_id, {a}.part_id, {a}.risk, CAST(NULL AS date) AS fitted_month,"
        f" {DAY[vendor].format(a + '.created_at')} AS assessed_on, {sign} AS n"
        f"{source} WHERE {a}.is_current AND {a}.capacitor_in_service"
    )


def capacitor_share(vendor: str, rows: str, sign: int) -> str:
    """The share of fitted capacitors (`rows`: a table, or OLD/NEW in a row trigger): those in service,
    by their motor's site, their part and the month they were fitted."""
    if rows in ("OLD", "NEW"):
        c, source = rows, f" FROM fleet_motor m WHERE m.id = {rows}.motor_id AND"
    else:
        c, source = "c", f" FROM {rows} c JOIN fleet_motor m ON m.id = c.motor_id WHERE"
    return (
        f"SELECT m.site_id, {c}.part_id, '' AS risk, {MONTH[vendor].format(c + '.fitted_on')} AS fitted_month,"
        f" CAST(NULL AS date) AS assessed_on, {sign} AS n"
        f"{source} {c}.removed_on IS NULL"
    )


def summed(*shares: str) -> str:
    """One INSERT of the shares summed per key, leaving out the keys whose changes cancel."""
    union = "\n          UNION ALL ".join(shares)
    return (
        f"INSERT INTO {LEDGER}\n        SELECT {KEY}, SUM(n) FROM (\n          {union}\n        )"
        f" AS changes\n        GROUP BY {KEY} HAVING SUM(n) <> 0;"
    )


def motor_moves(vendor: str) -> str:
    """A motor's capacitors in service counted at its new site instead of its old one (a row trigger)."""
    month = MONTH[vendor].format("c.fitted_on")
    return (
        f"INSERT INTO {LEDGER}\n        SELECT s.site_id, c.part_id, '', {month}, CAST(NULL AS date), s.n * COUNT(*)"
        " FROM fleet_fittedcapacitor c CROSS JOIN (SELECT OLD.site_id AS site_id, -1 AS n"
        " UNION ALL SELECT NEW.site_id, 1) AS s"
        f"\n        WHERE c.motor_id = NEW.id AND c.removed_on IS NULL GROUP BY s.site_id, s.n, c.part_id, {month};"
    )


def fill(vendor: str) -> list[str]:
    """Every capacitor and current assessment as it stands, counted once."""
    return [
        summed(assessment_share(vendor, "fleet_assessment", 1), capacitor_share(vendor, "fleet_fittedcapacitor", 1))
    ]


# The columns a share depends on: a change to any of them moves it.
ASSESSMENT_COLUMNS = ("is_current", "capacitor_in_service", "site_id", "part_id", "risk", "created_at")
CAPACITOR_COLUMNS = ("removed_on", "part_id", "motor_id", "fitted_on")


def _changed(columns) -> str:
    return f"({', '.join('OLD.' + c for c in columns)}) IS NOT ({', '.join('NEW.' + c for c in columns)})"


def _sqlite_trigger(name: str, event: str, table: str, when: str, *statements: str) -> str:
    body = "\n      ".join(statements)
    return f"""
    CREATE TRIGGER {name} {event} ON {table}
    WHEN {when}
    BEGIN
      {body}
    END;
    """


def _sqlite_insert(share: str) -> str:
    return f"INSERT INTO {LEDGER} {share};"


SQLITE_FORWARD = [
    _sqlite_trigger(
        "fleet_assessment_counts_insert",
        "AFTER INSERT",
        "fleet_assessment",
        "NEW.is_current AND NEW.capacitor_in_service",
        _sqlite_insert(assessment_share("sqlite", "NEW", 1)),
    ),
    _sqlite_trigger(
        "fleet_assessment_counts_update",
        "AFTER UPDATE",
        "fleet_assessment",
        _changed(ASSESSMENT_COLUMNS),
        _sqlite_insert(assessment_share("sqlite", "OLD", -1)),
        _sqlite_insert(assessment_share("sqlite", "NEW", 1)),
    ),
    _sqlite_trigger(
        "fleet_assessment_counts_delete",
        "AFTER DELETE",
        "fleet_assessment",
        "OLD.is_current AND OLD.capacitor_in_service",
        _sqlite_insert(assessment_share("sqlite", "OLD", -1)),
    ),
    _sqlite_trigger(
        "fleet_capacitor_counts_insert",
        "AFTER INSERT",
        "fleet_fittedcapacitor",
        "NEW.removed_on IS NULL",
        _sqlite_insert(capacitor_share("sqlite", "NEW", 1)),
    ),
    _sqlite_trigger(
        "fleet_capacitor_counts_update",
        "AFTER UPDATE",
        "fleet_fittedcapacitor",
        _changed(CAPACITOR_COLUMNS),
        _sqlite_insert(capacitor_share("sqlite", "OLD", -1)),
        _sqlite_insert(capacitor_share("sqlite", "NEW", 1)),
    ),
    _sqlite_trigger(
        "fleet_capacitor_counts_delete",
        "AFTER DELETE",
        "fleet_fittedcapacitor",
        "OLD.removed_on IS NULL",
        _sqlite_insert(capacitor_share("sqlite", "OLD", -1)),
    ),
    _sqlite_trigger(
        "fleet_motor_moves_counts",
        "AFTER UPDATE OF site_id",
        "fleet_motor",
        "NEW.site_id IS NOT OLD.site_id",
        motor_moves("sqlite"),
    ),
]
SQLITE_BACKWARD = sqlite_drops(
    "fleet_assessment_counts_insert",
    "fleet_assessment_counts_update",
    "fleet_assessment_counts_delete",
    "fleet_capacitor_counts_insert",
    "fleet_capacitor_counts_update",
    "fleet_capacitor_counts_delete",
    "fleet_motor_moves_counts",
)


def _statement_triggers(name: str, table: str, share) -> list[str]:
    """PostgreSQL: the three statement triggers of a table, each adding its statement's shares summed."""
    return [
        *plpgsql_statement_trigger(
            f"{name}_insert",
            "AFTER INSERT",
            table,
            f"{summed(share('new_rows', 1))}\nRETURN NULL;",
            new_rows="new_rows",
        ),
        *plpgsql_statement_trigger(
            f"{name}_update",
            "AFTER UPDATE",
            table,
            f"{summed(share('old_rows', -1), share('new_rows', 1))}\nRETURN NULL;",
            old_rows="old_rows",
            new_rows="new_rows",
        ),
        *plpgsql_statement_trigger(
            f"{name}_delete",
            "AFTER DELETE",
            table,
            f"{summed(share('old_rows', -1))}\nRETURN NULL;",
            old_rows="old_rows",
        ),
    ]


POSTGRES_FORWARD = [
    *_statement_triggers(
        "fleet_assessment_counts", "fleet_assessment", lambda rows, sign: assessment_share("postgresql", rows, sign)
    ),
    *_statement_triggers(
        "fleet_capacitor_counts", "fleet_fittedcapacitor", lambda rows, sign: capacitor_share("postgresql", rows, sign)
    ),
    *plpgsql_trigger(
        "fleet_motor_moves_counts",
        "AFTER UPDATE OF site_id",
        "fleet_motor",
        f"{motor_moves('postgresql')}\nRETURN NULL;",
        when="OLD.site_id IS DISTINCT FROM NEW.site_id",
    ),
]
POSTGRES_BACKWARD = postgres_drops(
    *((f"fleet_assessment_counts_{event}", "fleet_assessment") for event in ("insert", "update", "delete")),
    *((f"fleet_capacitor_counts_{event}", "fleet_fittedcapacitor") for event in ("insert", "update", "delete")),
    ("fleet_motor_moves_counts", "fleet_motor"),
)


SITE_AND_PART_0020 = importlib.import_module("fleet.migrations.0020_assessment_site_and_part")
FILL_FITTED_ON = """
UPDATE fleet_assessment SET fitted_on = (
  SELECT c.fitted_on FROM fleet_fittedcapacitor c WHERE c.id = fleet_assessment.fitted_capacitor_id)
"""
FACTS_SQLITE_FORWARD = [
    "DROP TRIGGER IF EXISTS fleet_assessment_site_and_part;",
    """
    CREATE TRIGGER fleet_assessment_site_and_part AFTER INSERT ON fleet_assessment
    BEGIN
      UPDATE fleet_assessment SET
        site_id = (SELECT m.site_id FROM fleet_fittedcapacitor c JOIN fleet_motor m ON m.id = c.motor_id
                   WHERE c.id = NEW.fitted_capacitor_id),
        part_id = (SELECT c.part_id FROM fleet_fittedcapacitor c WHERE c.id = NEW.fitted_capacitor_id),
        fitted_on = (SELECT c.fitted_on FROM fleet_fittedcapacitor c WHERE c.id = NEW.fitted_capacitor_id)
      WHERE id = NEW.id;
    END;
    """,
    "DROP TRIGGER IF EXISTS fleet_capacitor_moves_assessments;",
    """
    CREATE TRIGGER fleet_capacitor_moves_assessments AFTER UPDATE OF part_id, motor_id, fitted_on
    ON fleet_fittedcapacitor
    WHEN NEW.part_id IS NOT OLD.part_id OR NEW.motor_id IS NOT OLD.motor_id OR NEW.fitted_on IS NOT OLD.fitted_on
    BEGIN
      UPDATE fleet_assessment SET part_id = NEW.part_id, fitted_on = NEW.fitted_on,
        site_id = (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id)
      WHERE fitted_capacitor_id = NEW.id;
    END;
    """,
]
FACTS_SQLITE_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_assessment_site_and_part;",
    "DROP TRIGGER IF EXISTS fleet_capacitor_moves_assessments;",
    *(s.replace("installation_id", "fitted_capacitor_id") for s in SITE_AND_PART_0020.SQLITE_FORWARD[:2]),
]
FACTS_POSTGRES_FORWARD = [
    """
    CREATE OR REPLACE FUNCTION fleet_assessment_capacitor_facts() RETURNS trigger AS $$
    DECLARE
      in_service boolean;
      site bigint;
      part bigint;
      fitted date;
    BEGIN
      SELECT c.removed_on IS NULL, m.site_id, c.part_id, c.fitted_on INTO in_service, site, part, fitted
      FROM fleet_fittedcapacitor c JOIN fleet_motor m ON m.id = c.motor_id WHERE c.id = NEW.fitted_capacitor_id;
      IF FOUND THEN  -- otherwise the foreign key refuses the row
        NEW.capacitor_in_service := in_service;
        NEW.site_id := site;
        NEW.part_id := part;
        NEW.fitted_on := fitted;
      END IF;
      RETURN NEW;
    END $$ LANGUAGE plpgsql;
    """,
    "DROP TRIGGER IF EXISTS fleet_capacitor_moves_assessments ON fleet_fittedcapacitor;",
    """
    CREATE OR REPLACE FUNCTION fleet_capacitor_moves_assessments() RETURNS trigger AS $$
    BEGIN
      UPDATE fleet_assessment SET part_id = NEW.part_id, fitted_on = NEW.fitted_on,
        site_id = (SELECT m.site_id FROM fleet_motor m WHERE m.id = NEW.motor_id)
      WHERE fitted_capacitor_id = NEW.id;
      RETURN NULL;
    END $$ LANGUAGE plpgsql;
    """,
    """
    CREATE TRIGGER fleet_capacitor_moves_assessments AFTER UPDATE OF part_id, motor_id, fitted_on
    ON fleet_fittedcapacitor FOR EACH ROW
    WHEN (OLD.part_id IS DISTINCT FROM NEW.part_id OR OLD.motor_id IS DISTINCT FROM NEW.motor_id
          OR OLD.fitted_on IS DISTINCT FROM NEW.fitted_on)
    EXECUTE FUNCTION fleet_capacitor_moves_assessments();
    """,
]
FACTS_POSTGRES_BACKWARD = [
    "DROP TRIGGER IF EXISTS fleet_capacitor_moves_assessments ON fleet_fittedcapacitor;",
    *(
        s.replace("installation_id", "fitted_capacitor_id")
        for s in SITE_AND_PART_0020.POSTGRES_FORWARD
        if "fleet_assessment_capacitor_facts()" in s and "CREATE OR REPLACE" in s
        or "fleet_capacitor_moves_assessments" in s
    ),
]


class Migration(migrations.Migration):
    dependencies = [("fleet", "0022_fitted_capacitor_name")]

    operations = [
        migrations.CreateModel(
            name="InServiceCount",
            fields=[
                ("id", models.BigAutoField(auto_created=True, primary_key=True, serialize=False, verbose_name="ID")),
                (
                    "risk",
                    models.CharField(
                        blank=True, help_text='Current risk level; "" counts capacitors in service', max_length=20
                    ),
                ),
                (
                    "fitted_month",
                    models.DateField(blank=True, help_text="First day of the month fitted (capacitors)", null=True),
                ),
                (
                    "assessed_on",
                    models.DateField(
                        blank=True, help_text="UTC day of the current assessment (risk levels)", null=True
                    ),
                ),
                ("n", models.IntegerField(help_text="Change to the count")),
                (
                    "part",
                    models.ForeignKey(
                        blank=True,
                        db_constraint=False,
                        db_index=False,
                        editable=False,
                        help_text="The capacitors' part",
                        null=True,
                        on_delete=models.deletion.DO_NOTHING,
                        related_name="+",
                        to="fleet.capacitorpart",
                    ),
                ),
                (
                    "site",
                    models.ForeignKey(
                        blank=True,
                        db_constraint=False,
                        db_index=False,
                        editable=False,
                        help_text="The capacitors' motor's site",
                        null=True,
                        on_delete=models.deletion.DO_NOTHING,
                        related_name="+",
                        to="fleet.site",
                    ),
                ),
            ],
        ),
        migrations.RunPython(
            run({"sqlite": fill("sqlite"), "postgresql": fill("postgresql")}), migrations.RunPython.noop
        ),
        migrations.AddField(
            model_name="assessment",
            name="fitted_on",
            field=models.DateField(
                blank=True, editable=False, help_text="Its capacitor's fitting date; kept by database triggers", null=True
            ),
        ),
        migrations.RunSQL(FILL_FITTED_ON, migrations.RunSQL.noop),
        migrations.RunPython(
            run({"sqlite": FACTS_SQLITE_FORWARD, "postgresql": FACTS_POSTGRES_FORWARD}),
            run({"sqlite": FACTS_SQLITE_BACKWARD, "postgresql": FACTS_POSTGRES_BACKWARD}),
        ),
        migrations.AddField(model_name="partlifefit", name="var_log_beta", field=models.FloatField(blank=True, null=True)),
        migrations.AddField(model_name="partlifefit", name="cov_log_beta_eta", field=models.FloatField(blank=True, null=True)),
        migrations.AddField(model_name="partlifefit", name="var_log_eta", field=models.FloatField(blank=True, null=True)),
        migrations.AddField(model_name="partlifefit", name="plot_points", field=models.JSONField(blank=True, default=list, help_text="[[age in years, fraction failed], ...]")),
        migrations.AddField(model_name="partlifefit", name="next_year_failure", field=models.FloatField(blank=True, null=True)),
        migrations.RemoveIndex(model_name="assessment", name="in_service_totals"),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["replace_by"],
                include=("site", "part", "risk", "fitted_on"),
                name="in_service_totals",
            ),
        ),
        migrations.RunPython(
            run({"sqlite": SQLITE_FORWARD, "postgresql": POSTGRES_FORWARD}),
            run({"sqlite": SQLITE_BACKWARD, "postgresql": POSTGRES_BACKWARD}),
        ),
    ]
