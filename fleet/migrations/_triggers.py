"""The trigger SQL the migrations share, from 0015 on: a PL/pgSQL trigger function with its trigger,
and the statements that drop triggers. (Django's loader skips this module: its name starts with "_".)

FROZEN. A migration must run the same SQL on every database, whenever it is applied, so these
functions only assemble the names, events and bodies a migration passes in, and their output never
changes: a new shape of trigger gets a new function. tests/test_migration_triggers.py pins the SQL
of every migration that builds its triggers here.
"""

import importlib
import textwrap

# Runs a migration's statements for the database in use; defined once, in the first trigger migration.
run = importlib.import_module("fleet.migrations.0002_reading_triggers")._run


def plpgsql_trigger(name: str, event: str, table: str, body: str, *, level="ROW", referencing="", when="") -> list:
    """PostgreSQL: the trigger function `name` (its `body`, RETURN included, at any indent) and the trigger
    of the same name that runs it on `event` ("AFTER UPDATE OF removed_on") of `table`, for each ROW or
    STATEMENT; `referencing` names the statement's new rows as a table; `when` is the trigger's condition."""
    statements = textwrap.indent(textwrap.dedent(body).strip("\n"), "      ")
    new_rows = f"REFERENCING NEW TABLE AS {referencing} " if referencing else ""
    condition = f" WHEN ({when})" if when else ""
    return [
        f"""
    CREATE OR REPLACE FUNCTION {name}() RETURNS trigger AS $$
    BEGIN
{statements}
    END $$ LANGUAGE plpgsql;
    """,
        f"""
    CREATE TRIGGER {name} {event} ON {table}
    {new_rows}FOR EACH {level}{condition} EXECUTE FUNCTION {name}();
    """,
    ]


def postgres_drops(*triggers: tuple[str, str]) -> list[str]:
    """PostgreSQL: drop each (name, table) trigger made by `plpgsql_trigger`, then its function."""
    return [
        statement
        for name, table in triggers
        for statement in (f"DROP TRIGGER IF EXISTS {name} ON {table};", f"DROP FUNCTION IF EXISTS {name}();")
    ]


def sqlite_drops(*names: str) -> list[str]:
    """SQLite: drop each named trigger."""
    return [f"DROP TRIGGER IF EXISTS {name};" for name in names]


def plpgsql_statement_trigger(name: str, event: str, table: str, body: str, *, old_rows="", new_rows="") -> list:
    """PostgreSQL: the trigger function `name` and the trigger of the same name that runs it once per
    statement on `event` ("AFTER UPDATE") of `table`, with the statement's old and new rows as the tables
    `old_rows` and `new_rows` (either may be left out; an UPDATE may name both)."""
    statements = textwrap.indent(textwrap.dedent(body).strip("\n"), "      ")
    tables = [f"OLD TABLE AS {old_rows}"] * bool(old_rows) + [f"NEW TABLE AS {new_rows}"] * bool(new_rows)
    referencing = f"REFERENCING {' '.join(tables)} " if tables else ""
    return [
        f"""
    CREATE OR REPLACE FUNCTION {name}() RETURNS trigger AS $$
    BEGIN
{statements}
    END $$ LANGUAGE plpgsql;
    """,
        f"""
    CREATE TRIGGER {name} {event} ON {table}
    {referencing}FOR EACH STATEMENT EXECUTE FUNCTION {name}();
    """,
    ]


def summed_insert(ledger: str, key: str, *shares: str) -> str:
    """One INSERT into `ledger` ("table (columns)") of the `shares` (SELECTs of the key's columns and n)
    summed per `key`, leaving out the keys whose changes cancel: a ledger of counts kept by triggers."""
    union = "\n          UNION ALL ".join(shares)
    return (
        f"INSERT INTO {ledger}\n        SELECT {key}, SUM(n) FROM (\n          {union}\n        )"
        f" AS changes\n        GROUP BY {key} HAVING SUM(n) <> 0;"
    )


def sqlite_row_trigger(name: str, event: str, table: str, when: str, *statements: str) -> str:
    """SQLite: the trigger `name` on `event` ("AFTER UPDATE") of `table`, when `when` holds, running `statements`."""
    body = "\n      ".join(statements)
    return f"""
    CREATE TRIGGER {name} {event} ON {table}
    WHEN {when}
    BEGIN
      {body}
    END;
    """
