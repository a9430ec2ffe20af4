"""Codes and register figures: one rule at the admin and every import, the database behind them."""

import datetime as dt

import pytest
from django.core.exceptions import ValidationError
from django.db import IntegrityError, transaction
from django.urls import reverse

from fleet.imports.columns import PART_COLUMNS, REGISTER_COLUMNS, SITE_COLUMNS, mapped_frame
from fleet.models import CapacitorPart, FittedCapacitor, Motor, Site, constraint_errors
from fleet.services.import_checks import check_parts, check_register, check_sites, insert_register
from tests.factories import make_fitted_capacitor, make_motor, make_part, make_site

pytestmark = pytest.mark.django_db


def frame_of(columns, rows: list[dict]):
    header = list(columns)
    body = [[row.get(name, "") for name in header] for row in rows]
    return mapped_frame(header, body, {n: n for n in header}, columns)


def part_row(**values):
    row = dict(
        code="P-OK",
        rated_uf="10",
        tolerance_minus_pct="5",
        tolerance_plus_pct="5",
        rated_voltage_v="450",
        dielectric="film",
        frequency_hz="50",
    )
    return row | values


def errors_of(result):
    return [(row, field) for row, field, _ in result.errors]


# Sites and parts imports held to the admin's code characters (models.CODE_PATTERN) [derived].


def test_the_sites_import_refuses_codes_the_admin_refuses():
    result = check_sites(
        frame_of(SITE_COLUMNS, [{"code": c, "name": "A site", "time_zone": "UTC"} for c in ("NEW/3", "-NEW5", "NEW6")])
    )
    assert errors_of(result) == [(2, "code"), (3, "code")]
    assert "letters, digits" in result.errors[0][2]
    assert result.good["code"].tolist() == ["NEW6"]


def test_the_parts_import_refuses_codes_the_admin_refuses():
    result = check_parts(frame_of(PART_COLUMNS, [part_row(code=c) for c in ("P/1", "-P2", "P 3", "P.4")]))
    assert errors_of(result) == [(2, "code"), (3, "code"), (4, "code")]
    assert result.good["code"].tolist() == ["P.4"]


def register_row(**values):
    row = dict(
        asset_tag="T-1",
        site="CST",
        application="fan",
        motor_type="permanent_split",
        load_type="fan_law",
        rated_voltage_v="230",
        frequency_hz="50",
        poles="4",
        output_w="370",
        full_load_current_a="2.6",
        rated_speed_rpm="1400",
        commissioned_on="2020-01-01",
        run_part_code="RUN-30U-450",
        fitted_on="2020-01-01",
    )
    return row | values


@pytest.fixture
def register_world():
    make_site(code="CST")
    make_part(code="RUN-30U-450", rated_uf=30)


# Register import: every database constraint of a motor checked first, by row and field; figures and dates
# no motor has refused by the rulebook (rules.motor_problems, rules.commissioning_problems).


@pytest.mark.parametrize(
    "field,value,words",
    [
        ("rated_speed_rpm", "0", "above zero"),  # the database's motor_speed_below_synchronous [derived]
        ("rated_speed_rpm", "-10", "above zero"),
        ("rated_speed_rpm", "1", "under half of synchronous speed (1500 rpm)"),  # [trade]
        ("rated_speed_rpm", "1500", "at or above synchronous"),  # 120 f / p = 1500 rpm at 50 Hz, 4 poles [pub]
        ("poles", "3", "2, 4, 6"),
        ("frequency_hz", "55", "50 or 60"),
        ("rated_voltage_v", "0", "from 24 to 1,000 V"),
        ("commissioned_on", "1800-01-01", "before 1950"),
        ("commissioned_on", "0001-01-01", "before 1950"),
        ("commissioned_on", "1949-12-31", "before 1950"),
        ("fitted_on", "1800-01-01", "before 1950"),
        ("fitted_on", "1949-12-31", "before 1950"),
        ("fitted_on", "2020-01-01xyz", "not a date"),  # the day's first ten characters were read, the rest dropped
        ("fitted_on", "2020-01-01 and again 2021", "not a date"),
        ("commissioned_on", "2020-01-01 99:99", "not a date"),
        ("commissioned_on", "2019-12-01T09:00+25:00", "not a date"),
    ],
)
def test_the_register_import_refuses_what_no_motor_has_by_row_and_field(register_world, field, value, words):
    result = check_register(frame_of(REGISTER_COLUMNS, [register_row(**{field: value}), register_row(asset_tag="T-2")]))
    assert [(row, name) for row, name, _ in result.errors] == [(2, field)]
    assert words in result.errors[0][2]
    assert result.good["asset_tag"].tolist() == ["T-2"]
    insert_register(result.good)  # what passes the checks passes the database
    assert Motor.objects.filter(asset_tag="T-2").exists()


def test_a_two_value_motor_whose_capacitors_were_changed_apart_imports_each_with_its_own_day(register_world):
    """A two-value motor's start capacitor replaced two years after its run capacitor could not be put in the
    register (one fitted_on a motor) nor in the history (the register's capacitor held the position):
    `start_fitted_on` gives its own day; given for a capacitor the row does not have, or not a day, it is
    refused at its field."""
    make_part(code="START-108U-250", rated_uf=108, dielectric="electrolytic", rated_voltage_v=250)
    two_value = dict(motor_type="two_value", start_part_code="START-108U-250")
    result = check_register(
        frame_of(
            REGISTER_COLUMNS,
            [
                register_row(**two_value, start_fitted_on="2022-06-01"),
                register_row(asset_tag="T-2", start_fitted_on="2022-06-01"),
                register_row(asset_tag="T-3", **two_value, run_fitted_on="2022-02-30"),
            ],
        )
    )
    assert [(row, name) for row, name, _ in result.errors] == [(3, "start_fitted_on"), (4, "run_fitted_on")]
    assert "no start_part_code on this row" in result.errors[0][2]
    insert_register(result.good)
    days = dict(FittedCapacitor.objects.filter(motor__asset_tag="T-1").values_list("role", "fitted_on"))
    assert days == {"run": dt.date(2020, 1, 1), "start": dt.date(2022, 6, 1)}


# The admin's motor form: the same rulebook, at the field.


@pytest.mark.parametrize(
    "field,value,words",
    [
        ("r1m_ohm", -5.0, "above 0"),
        ("xm_ohm", 0.0, "above 0"),
        ("turns_ratio", 0.0, "from 0.2 to 5"),
        ("turns_ratio", -1.0, "from 0.2 to 5"),
        ("turns_ratio", 1e9, "from 0.2 to 5"),
        ("rotational_loss_w", -10.0, "from 0"),
        ("rotational_loss_w", 1e9, "from 0"),
        ("commissioned_on", dt.date(2030, 1, 1), "in the future"),
        ("commissioned_on", dt.date(1, 1, 1), "before 1950"),
        ("route_order", 99999999999, "from 0 to 99999"),
        ("rated_speed_rpm", 1.0, "under half of synchronous"),
        ("rated_speed_rpm", 0.0, "above zero"),
    ],
)
def test_the_admin_refuses_a_motor_figure_no_motor_has_at_its_field(field, value, words):
    motor = make_motor()
    setattr(motor, field, value)
    with pytest.raises(ValidationError) as error:
        motor.full_clean()
    assert list(error.value.message_dict) == [field]
    # PostgreSQL's integer range adds Django's own message on route_order; the rulebook's is there too.
    assert any(words in message.lower() for message in error.value.message_dict[field])


def test_a_part_of_a_ten_millionth_of_a_microfarad_is_refused_in_the_admin_and_the_import():
    part = make_part()
    part.rated_uf = 0.0000001
    with pytest.raises(ValidationError) as error:
        part.full_clean()
    assert (
        "not a rating motor-run film capacitors are made in (about 0.4 to 150 µF)"
        in error.value.message_dict["rated_uf"][0]
    )
    result = check_parts(frame_of(PART_COLUMNS, [part_row(rated_uf="0.0000001")]))
    assert errors_of(result) == [(2, "rated_uf")]


def test_the_database_constraints_read_in_words_naming_the_field():
    motor = make_motor()
    motor.rated_speed_rpm = 0
    errors = constraint_errors(motor)
    assert errors["rated_speed_rpm"] == [
        "The rated speed must be above zero and below synchronous speed (120 × frequency / poles)."
    ]
    for model in (Motor, CapacitorPart, FittedCapacitor, Site):
        for constraint in model._meta.constraints:
            assert "is violated" not in str(constraint.get_violation_error_message()), constraint.name


# Codes unique in any case: CST-0093 and cst-0093 would be one motor to a technician typing it, to Find and
# to the register import (which skips a tag it holds in any case) [derived].


def test_a_tag_differing_only_in_case_is_refused_at_the_field_and_by_the_database():
    first = make_motor(asset_tag="CST-0093")
    motor = Motor(**{f.attname: getattr(first, f.attname) for f in Motor._meta.concrete_fields if f.attname != "id"})
    motor.asset_tag = "cst-0093"
    with pytest.raises(ValidationError) as error:
        motor.full_clean()
    assert "CST-0093 is in the register already" in error.value.message_dict["asset_tag"][0]
    with pytest.raises(IntegrityError), transaction.atomic():
        motor.save()
    site = Site(code=first.site.code.lower(), name="Again", time_zone="UTC")
    with pytest.raises(ValidationError) as error:
        site.full_clean()
    assert "is in the register already" in error.value.message_dict["code"][0]
    part = make_part(code="RUN-30U-450")
    part.pk, part.code = None, "run-30u-450"
    with pytest.raises(ValidationError) as error:
        part.full_clean()
    assert "RUN-30U-450 is in the register already" in error.value.message_dict["code"][0]


def test_the_motor_page_and_find_answer_for_a_tag_in_any_case(client, technician):
    make_fitted_capacitor(motor=make_motor(asset_tag="CST-0093"))
    client.force_login(technician)
    for tag in ("CST-0093", "cst-0093"):
        assert client.get(reverse("motor", args=[tag])).status_code == 200
    assert client.get(reverse("find"), {"tag": "cst-0093"}).status_code in (200, 302)


def test_the_sites_and_parts_imports_refuse_a_code_held_in_another_case():
    site = make_site(code="CST")
    make_part(code="RUN-30U-450")
    sites = check_sites(
        frame_of(SITE_COLUMNS, [{"code": c, "name": "A site", "time_zone": "UTC"} for c in ("cst", "NEW7", "new7")])
    )
    assert errors_of(sites) == [(2, "code"), (4, "code")]
    assert "CST is in the register already" in sites.errors[0][2]
    assert sites.good["code"].tolist() == ["NEW7"]
    again = check_sites(frame_of(SITE_COLUMNS, [{"code": "CST", "name": site.name, "time_zone": site.time_zone}]))
    assert again.errors == [] and again.duplicates == 1
    parts = check_parts(frame_of(PART_COLUMNS, [part_row(code="run-30u-450")]))
    assert errors_of(parts) == [(2, "code")] and parts.good.empty
    assert "RUN-30U-450 is in the register already" in parts.errors[0][2]
    # As stored (the factory's 4 µF): already there; another rating is refused at it, never dropped unsaid.
    assert check_parts(frame_of(PART_COLUMNS, [part_row(code="RUN-30U-450", rated_uf="4")])).duplicates == 1
    assert errors_of(check_parts(frame_of(PART_COLUMNS, [part_row(code="RUN-30U-450")]))) == [(2, "rated_uf")]


def test_the_migration_stops_naming_codes_that_differ_only_in_case():
    from importlib import import_module

    from django.apps import apps
    from django.db import connection

    migration = import_module("fleet.migrations.0039_codes_codes_unique_any_case")
    make_motor(asset_tag="CST-0093")
    with transaction.atomic():
        with connection.cursor() as cursor:  # the unique index, gone inside this transaction only
            cursor.execute('DROP INDEX "motor_tag_unique_any_case"')
        Motor.objects.filter(pk=make_motor(asset_tag="X-1").pk).update(asset_tag="cst-0093")
        with pytest.raises(RuntimeError) as error:
            migration.refuse_codes_differing_only_in_case(apps, None)
        transaction.set_rollback(True)
    assert "asset tags: CST-0093, cst-0093" in str(error.value)


def test_the_admin_names_every_field_wrong_at_once_even_with_a_figure_missing():
    make_motor(asset_tag="CST-0093")
    motor = make_motor()
    motor.asset_tag, motor.rated_speed_rpm, motor.commissioned_on = "cst-0093", None, dt.date(2030, 1, 1)
    with pytest.raises(ValidationError) as error:
        motor.full_clean()
    assert {"asset_tag", "rated_speed_rpm", "commissioned_on"} <= set(error.value.message_dict)
