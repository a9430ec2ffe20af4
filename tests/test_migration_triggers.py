"""The migrations that build their trigger SQL with fleet/migrations/_triggers.py run the same SQL as
when they were written: a change to the shared helpers must not rewrite history. [derived] The
digests were taken from the migrations' literal SQL before it moved to the helpers."""

import hashlib
import importlib

import pytest
from django.db.migrations.loader import MigrationLoader

FROZEN = {  # SHA-256 of every statement, SQLite forward and backward then PostgreSQL's, joined by NUL
    "0015_list_pages_indexes_and_stored_facts": "28b4e201db8c686584e2978b59d284cce78ed55480b2daada370deff5e859e02",
    "0018_work_order_site": "baeaaadaaa68dadbad011785f47a9d6714d778375e5f4ef0d548d182e3dbd761",
    "0023_pages_in_service_counts": "85f1caaac135e2c929773a24713b8dfac03415dd0707d8bc3f23995f81055423",
    "0031_motor_read_counts": "4f2ca284015710ade4b46758eb915cec1d8d2d25468211a86c018acc50d10831",
    "0032_removal_reading_on_removal_day": "36fac8f43dd01c1269daa98d0bead0a29ef95dc0e57705a927daaf443ba5b945",
    "0034_pages_assessment_route_order": "b7fcf86d3e2112145cebcd6f1e68736ea964a2e139a2566e22af7a0d888567a9",
    "0035_pages_work_order_walk": "f44638702503ac2fc353342eaa49a2416917a1d7c11276d38662d96c27886658",
    "0037_rounds_motor_last_read": "7366c02d9ee9457f5fb3e88c6ac13b44036a92ae4c785c1672a27575b1f100b4",
    "0041_rounds_every_position_read": "01fb48371cfb577852254dfc839dcef017d3ac5e3ba41e6d744c0d2cb04d484f",
    "0063_design_counts_without_stop_gaps": "6b5245e2c24c0e96c718353228aebe0dc1900470c745eb533112f5ec1e02bb12",
    "0067_motor_last_read_worked_out_once": "aa17a387b7057109dacd48bf45bed147898486e59e188928c5a49ba6c09f5989",
}


@pytest.mark.parametrize("name", FROZEN)
def test_a_migration_runs_the_trigger_sql_it_was_written_with(name):
    migration = importlib.import_module(f"fleet.migrations.{name}")
    statements = [
        *migration.SQLITE_FORWARD,
        *migration.SQLITE_BACKWARD,
        *migration.POSTGRES_FORWARD,
        *migration.POSTGRES_BACKWARD,
    ]
    assert hashlib.sha256("\x00".join(statements).encode()).hexdigest() == FROZEN[name]


def test_the_shared_helpers_are_not_a_migration():
    assert ("fleet", "_triggers") not in MigrationLoader(None, ignore_no_migrations=True).disk_migrations


def test_the_motors_last_reading_is_worked_out_once_by_the_rule_of_before():
    """0067 changes how often PostgreSQL works the rule out, not the rule: given 0041's UPDATE, it builds 0041's
    triggers to the character, and its own UPDATE holds 0041's rule."""
    rounds_0041 = importlib.import_module("fleet.migrations.0041_rounds_every_position_read")
    once = importlib.import_module("fleet.migrations.0067_motor_last_read_worked_out_once")
    assert once.triggers(rounds_0041.refresh) == rounds_0041.POSTGRES_FORWARD
    assert rounds_0041.rule("postgresql") in once.refresh("SELECT 1")
    assert "MATERIALIZED" in once.refresh("SELECT 1") and "MATERIALIZED" not in rounds_0041.refresh("SELECT 1")
