"""Bad input and faults, one test per problem found by the careful tester: the rulebook holds
at the form, the API and the import alike; the database holds what the rulebook misses."""

import csv
import datetime as dt
import io

import pandas as pd
import pytest
from django.core.exceptions import ValidationError
from django.db import DatabaseError, IntegrityError, connection, transaction
from django.urls import reverse
from django.utils import timezone
from rest_framework.authtoken.models import Token
from rest_framework.test import APIClient

from fleet.imports.columns import READING_COLUMNS, REGISTER_COLUMNS, mapped_frame
from fleet.models import FittedCapacitor, Motor, Reading, Site, WorkOrder, constraint_errors
from fleet.services.assessments import refit_fitted_capacitors
from fleet.services.import_checks import check_readings, check_register
from fleet.services.readings import record_reading, replace_capacitor
from tests.factories import (
    confirmation_of,
    make_fitted_capacitor,
    make_motor,
    make_part,
    make_reading,
    make_site,
    make_user,
    quarterly_readings,
)

pytestmark = pytest.mark.django_db


def api_for(user) -> APIClient:
    client = APIClient()
    client.credentials(HTTP_AUTHORIZATION=f"Token {Token.objects.create(user=user).key}")
    return client


def form_post(client, fitted_capacitor, **values):
    data = {"method": "meter", "condition": "sound", **values}
    return client.post(reverse("reading_new", args=[fitted_capacitor.id]), data)


def confirmed_post(client, fitted_capacitor, **values):
    """The reading form sent, asked to confirm, and sent again with "Value is right: save it"."""
    asked = form_post(client, fitted_capacitor, **values)
    assert asked.status_code == 200
    return form_post(client, fitted_capacitor, **values, **confirmation_of(asked))


def import_check(rows: list[dict]):
    header = list(READING_COLUMNS)
    body = [[row.get(name, "") for name in header] for row in rows]
    return check_readings(mapped_frame(header, body, {n: n for n in header}, READING_COLUMNS))


def import_row(fitted_capacitor, **values):
    return {
        "asset_tag": fitted_capacitor.motor.asset_tag,
        "role": fitted_capacitor.role,
        "taken_at": "2024-03-01 09:00",
        "method": "meter",
        "capacitance_uf": "3.95",
        **values,
    }


# critical: one absurd reading poisoned every refit


def test_a_million_volts_is_refused_by_the_form_the_api_and_the_import(client, technician, fan_fitted_capacitor):
    client.force_login(technician)
    response = form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", capacitor_voltage_v="1000000")
    assert response.status_code == 200 and "above 5000 V" in response.content.decode()
    api = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": 3.95, "capacitor_voltage_v": 1e6},
        format="json",
    )
    assert api.status_code == 400 and "above 5000 V" in api.json()["capacitor_voltage_v"][0]
    result = import_check([import_row(fan_fitted_capacitor, capacitor_voltage_v="inf")])
    assert result.errors == [(2, "capacitor_voltage_v", "not a finite number")] and result.good.empty
    assert not Reading.objects.exists()


def test_infinity_never_reaches_the_database_even_past_the_rulebook(fan_fitted_capacitor):
    """[derived] the CHECK bounds refuse infinity on SQLite and NaN/infinity on PostgreSQL."""
    for name in ("capacitor_voltage_v", "esr_ohm", "main_current_a", "ambient_temperature_c"):
        with pytest.raises((IntegrityError, DatabaseError)), transaction.atomic():
            make_reading(fan_fitted_capacitor, **{name: float("inf")})
    assert not Reading.objects.exists()


# high: readings dated before the capacitor was fitted


@pytest.mark.parametrize(
    "taken_at, words",
    [
        ("0001-01-01T00:00:00Z", "outside the span accepted, from 1900-01-01 to 2199-12-31"),  # the year, first
        ("2019-06-01T09:00:00Z", "efore this capacitor was fitted on 2022-01-01"),
    ],
)
def test_the_api_refuses_a_reading_dated_before_fitting(technician, fan_fitted_capacitor, taken_at, words):
    response = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": 3.95, "taken_at": taken_at},
        format="json",
    )
    assert response.status_code == 400
    assert words in response.json()["taken_at"][0]
    assert not Reading.objects.exists()


# high: a tag with "/" took down shared pages


def test_a_tag_with_a_slash_cannot_take_pages_down(client, planner, technician):
    site = make_site(code="NORTH/2")  # inserted directly: validators bypassed, as an old register would
    motor = make_motor(site=site, asset_tag="P-12/A")
    fitted_capacitor = make_fitted_capacitor(motor=motor)
    quarterly_readings(fitted_capacitor, timezone.make_aware(dt.datetime(2024, 1, 5, 9)), [4.0, 3.8, 3.6, 3.4])
    refit_fitted_capacitors([fitted_capacitor.id])
    WorkOrder.objects.create(
        motor=motor, fitted_capacitor=fitted_capacitor, kind="replace_run", due_on=timezone.localdate()
    )
    client.force_login(planner)
    motor_url = reverse("motor", args=[motor.asset_tag])
    for url in (
        reverse("home"),
        reverse("plan") + "?days=730",
        reverse("work_orders"),
        reverse("route", args=[site.code]),
        reverse("labels", args=[site.code]),
        motor_url,
    ):
        response = client.get(url)
        assert response.status_code == 200, url
    assert motor_url in client.get(reverse("route", args=[site.code])).content.decode()
    client.force_login(technician)
    assert "P-12/A" in client.get(motor_url).content.decode()


def test_tags_and_codes_outside_the_character_set_are_refused_at_entry():
    site = make_site(code="CST")
    with pytest.raises(ValidationError) as error:
        Motor(asset_tag="P-12/A", site=site, application="fan", motor_type="permanent_split").full_clean()
    assert "asset_tag" in error.value.message_dict
    with pytest.raises(ValidationError) as error:
        Site(code="A B", name="x").full_clean()
    assert "code" in error.value.message_dict
    part = make_part(code="RUN-4U0-450")
    row = dict.fromkeys(REGISTER_COLUMNS, "")
    row.update(
        asset_tag="P-12/A",
        site="CST",
        application="fan",
        motor_type="permanent_split",
        load_type="fan_law",
        rated_voltage_v="230",
        frequency_hz="50",
        poles="6",
        output_w="120",
        full_load_current_a="0,95",
        rated_speed_rpm="910",
        run_part_code=part.code,
        fitted_on="2024-01-01",
    )
    good = dict(row, asset_tag="P-12.A")
    header = list(REGISTER_COLUMNS)
    frame = mapped_frame(
        header, [[r[n] for n in header] for r in (row, good)], {n: n for n in header}, REGISTER_COLUMNS
    )
    result = check_register(frame)
    assert [(r, f) for r, f, _ in result.errors] == [(2, "asset_tag")]
    assert result.good["asset_tag"].tolist() == ["P-12.A"]
    assert result.good["full_load_current_a"].tolist() == [0.95]


# medium: out-of-range secondary values reached the database constraint (500)


@pytest.mark.parametrize(
    "field,value,words",
    [
        ("case_temperature_c", "200", "above 150 °C"),
        ("case_temperature_c", "-100", "-40 °C or more"),
        ("capacitor_voltage_v", "-5", "above 0 V"),
        ("capacitor_current_a", "-0.2", "0 A or more"),
        ("esr_ohm", "inf", "finite"),
    ],
)
def test_out_of_range_secondary_values_come_back_by_field(
    client, technician, fan_fitted_capacitor, field, value, words
):
    client.force_login(technician)
    response = form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", **{field: value})
    assert response.status_code == 200
    assert response.context["form"].errors[field] and words in response.context["form"].errors[field][0]
    api = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": 3.95, field: value},
        format="json",
    )
    assert api.status_code == 400 and words in api.json()[field][0]
    result = import_check([import_row(fan_fitted_capacitor, **{field: value})])
    assert [(f, words in m) for _, f, m in result.errors] == [(field, True)]
    assert not Reading.objects.exists()


def test_database_constraints_surface_as_field_errors(fan_fitted_capacitor):
    reading = Reading(
        fitted_capacitor=fan_fitted_capacitor, taken_at=timezone.now(), method="meter", capacitance_uf=4.0, esr_ohm=-1.0
    )
    reading.notes = "x" * 2001
    errors = constraint_errors(reading)
    assert set(errors) == {"esr_ohm", "notes"}
    # In words at the field, not "Constraint ... is violated." (the admin's form showed the latter).
    in_circuit = Reading(fitted_capacitor=fan_fitted_capacitor, taken_at=timezone.now(), method="in_circuit")
    assert constraint_errors(in_circuit)["capacitor_current_a"] == [
        "An in-circuit reading needs the capacitor current and the capacitor voltage."
    ]


def test_2300_volts_asks_for_confirmation_then_saves(client, technician, fan_fitted_capacitor):
    client.force_login(technician)
    data = {"capacitance_uf": "3.95", "capacitor_voltage_v": "2300"}
    response = form_post(client, fan_fitted_capacitor, **data)
    assert "missed decimal point" in response.content.decode() and not Reading.objects.exists()
    response = form_post(client, fan_fitted_capacitor, **data, **confirmation_of(response))
    assert response.status_code == 302
    assert Reading.objects.get().outlier_confirmed


def test_a_case_temperature_in_fahrenheit_asks_for_confirmation_everywhere(client, technician, fan_fitted_capacitor):
    """100 °F (38 °C) typed as 100 °C would age the capacitor about 70 times over the stress clock's interval.
    Above the part's highest case temperature (70 °C by default, its IEC 60252-1 category) by more than
    10 K the form and the API ask to confirm, and the import refuses the row (it cannot confirm)."""
    client.force_login(technician)
    hot = {"capacitance_uf": "3.95", "case_temperature_c": "100"}
    response = form_post(client, fan_fitted_capacitor, **hot)
    assert "in °F it would be 38 °C" in response.content.decode() and not Reading.objects.exists()
    api = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": 3.95, "case_temperature_c": 100},
        format="json",
    )
    # As every confirmation: 409, the reasons by field, "confirmed": true to keep the value.
    assert api.status_code == 409 and "highest case temperature of 70 °C" in str(api.json())
    result = import_check([import_row(fan_fitted_capacitor, case_temperature_c="100")])
    assert [(f, "°F" in m) for _, f, m in result.errors] == [("case_temperature_c", True)]
    # Within the margin, or confirmed as a hot capacitor, the value is kept.
    assert form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", case_temperature_c="79").status_code == 302
    assert form_post(client, fan_fitted_capacitor, **hot, **confirmation_of(response)).status_code == 302
    assert sorted(Reading.objects.values_list("case_temperature_c", flat=True)) == [79.0, 100.0]


def test_a_value_far_above_the_tolerance_asks_for_confirmation_everywhere(client, technician, fan_fitted_capacitor):
    """A capacitor does not gain capacitance as it ages (common practice of the trade, no single source): 4.6 uF
    on a 4 uF +5 % part (4.20 at most, 4.52 with the rulebook's 8 % of rating) is another capacitor on the
    meter's leads; in circuit, 0.70 A at 230 V and 50 Hz gives 9.7 uF: the voltage read across the line, not
    the capacitor. The form and the API ask to confirm, the import refuses the row unless it is confirmed."""
    client.force_login(technician)
    response = form_post(client, fan_fitted_capacitor, capacitance_uf="4.6")
    assert "above this capacitor&#x27;s tolerance (4.20 µF at most)" in response.content.decode()
    circuit = {"method": "in_circuit", "capacitor_current_a": "0.70", "capacitor_voltage_v": "230"}
    response = form_post(client, fan_fitted_capacitor, **circuit)
    assert "give 9.69 µF, above this capacitor&#x27;s tolerance" in response.content.decode()
    api = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": 4.6},
        format="json",
    )
    assert api.status_code == 409 and "a capacitor does not gain capacitance" in str(api.json())
    result = import_check([import_row(fan_fitted_capacitor, capacitance_uf="4.6")])
    assert [f for _, f, _ in result.errors] == ["capacitance_uf"]
    assert not Reading.objects.exists()
    # Within the margin the value is kept; confirmed, a high one is kept too.
    assert form_post(client, fan_fitted_capacitor, capacitance_uf="4.5").status_code == 302
    assert confirmed_post(client, fan_fitted_capacitor, capacitance_uf="4.6").status_code == 302
    assert sorted(Reading.objects.values_list("capacitance_uf", flat=True)) == [4.5, 4.6]


# medium: DELETE of a reading; a removal date earlier than readings


def test_a_reading_cannot_be_deleted(fan_fitted_capacitor):
    reading = make_reading(fan_fitted_capacitor)
    with pytest.raises((IntegrityError, DatabaseError)), transaction.atomic():
        Reading.objects.filter(pk=reading.pk).delete()
    with pytest.raises((IntegrityError, DatabaseError)), transaction.atomic(), connection.cursor() as cursor:
        cursor.execute("DELETE FROM fleet_reading")
    assert Reading.objects.filter(pk=reading.pk).exists()


def test_a_removal_date_before_readings_is_refused_everywhere(fan_fitted_capacitor):
    make_reading(fan_fitted_capacitor, taken_at=timezone.make_aware(dt.datetime(2024, 6, 1, 9)))
    early = dt.date(2024, 5, 1)
    with pytest.raises(ValidationError) as error:
        replace_capacitor(
            fitted_capacitor=fan_fitted_capacitor, part=fan_fitted_capacitor.part, removed_on=early, reason="failed"
        )
    assert "removed_on" in error.value.message_dict
    fan_fitted_capacitor.removed_on, fan_fitted_capacitor.removal_reason = early, "failed"
    with pytest.raises(ValidationError) as error:  # the admin's form runs the model's clean()
        fan_fitted_capacitor.full_clean()
    assert "2024-06-01" in error.value.message_dict["removed_on"][0]
    with pytest.raises((IntegrityError, DatabaseError)), transaction.atomic():
        FittedCapacitor.objects.filter(pk=fan_fitted_capacitor.pk).update(removed_on=early, removal_reason="failed")
    FittedCapacitor.objects.filter(pk=fan_fitted_capacitor.pk).update(
        removed_on=dt.date(2024, 6, 1), removal_reason="failed"
    )


# low: NUL bytes, bad filters, double submit, huge notes, the decimal comma


def test_nul_in_an_address_is_a_400_not_a_500(client, planner, engineer, fan_fitted_capacitor):
    client.force_login(planner)
    for url in ("/plan/?site=%00", "/motors/%00/", "/sites/%00/route/", "/life/?part=%00"):
        assert client.get(url).status_code == 400, url
    api = api_for(engineer).get("/api/assessments/?site=%00")
    assert api.status_code == 400 and "NUL" in api.json()["detail"]


def test_a_bad_api_date_filter_is_a_json_400_naming_the_parameter(engineer):
    response = api_for(engineer).get(reverse("api_assessments"), {"replace_by_before": "next tuesday"})
    assert response.status_code == 400 and response["Content-Type"].startswith("application/json")
    assert "replace_by_before" in response.json()


def test_bad_plan_parameters_show_a_message(client, planner):
    client.force_login(planner)
    response = client.get(reverse("plan"), {"days": "lots", "site": "NOWHERE"}, follow=True)
    body = response.content.decode()
    assert response.status_code == 200 and "Ignored days" in body and "Ignored site" in body


def test_a_double_submit_saves_one_reading(client, technician, fan_fitted_capacitor):
    client.force_login(technician)
    page = client.get(reverse("reading_new", args=[fan_fitted_capacitor.id]))
    key = page.context["form"]["client_key"].value()
    assert key and f'value="{key}"' in page.content.decode()
    first = form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", client_key=key)
    second = form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", client_key=key)
    assert first.status_code == second.status_code == 302
    assert Reading.objects.count() == 1


def test_an_api_idempotency_key_saves_one_reading(technician, fan_fitted_capacitor):
    client = api_for(technician)
    url = reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id])
    body = {"method": "meter", "capacitance_uf": 3.95}
    first = client.post(url, body, format="json", HTTP_IDEMPOTENCY_KEY="batch-7-row-3")
    second = client.post(url, body, format="json", HTTP_IDEMPOTENCY_KEY="batch-7-row-3")
    assert (first.status_code, second.status_code) == (201, 200)
    assert first.json()["id"] == second.json()["id"] and Reading.objects.count() == 1
    other = make_fitted_capacitor()
    elsewhere = client.post(
        reverse("api_fitted_capacitor_readings", args=[other.id]),
        body,
        format="json",
        HTTP_IDEMPOTENCY_KEY="batch-7-row-3",
    )
    assert elsewhere.status_code == 400 and Reading.objects.count() == 1


def test_a_two_megabyte_note_is_refused(client, technician, fan_fitted_capacitor):
    note = "n" * 2_000_000
    client.force_login(technician)
    response = form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", notes=note)
    assert "at most 2000" in response.context["form"].errors["notes"][0]
    api = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fan_fitted_capacitor.id]),
        {"method": "meter", "capacitance_uf": 3.95, "notes": note},
        format="json",
    )
    assert api.status_code == 400 and "at most 2000" in api.json()["notes"][0]
    with pytest.raises(ValidationError):
        record_reading(
            fitted_capacitor=fan_fitted_capacitor, values={"method": "meter", "capacitance_uf": 3.9, "notes": note}
        )
    assert not Reading.objects.exists()


@pytest.mark.parametrize("text,expected", [("3,93", 3.93), ("3.93", 3.93), ("3,9,3", None), ("1.003,9", None)])
def test_the_decimal_comma_is_read_the_same_by_form_api_and_import(client, technician, text, expected):
    fitted_capacitors = [make_fitted_capacitor() for _ in range(3)]
    client.force_login(technician)
    form = form_post(client, fitted_capacitors[0], capacitance_uf=text)
    api = api_for(technician).post(
        reverse("api_fitted_capacitor_readings", args=[fitted_capacitors[1].id]),
        {"method": "meter", "capacitance_uf": text},
        format="json",
    )
    result = import_check([import_row(fitted_capacitors[2], capacitance_uf=text)])
    if expected is None:
        message = "decimal separator"
        assert message in form.context["form"].errors["capacitance_uf"][0]
        assert message in api.json()["capacitance_uf"][0]
        assert message in result.errors[0][2]
        assert not Reading.objects.exists()
    else:
        assert form.status_code == 302 and api.status_code == 201 and len(result.good) == 1
        stored = list(Reading.objects.values_list("capacitance_uf", flat=True))
        assert stored == [expected, expected] and result.good["capacitance_uf"].tolist() == [expected]


def test_imported_readings_keep_their_checked_values(fan_fitted_capacitor):
    result = import_check([import_row(fan_fitted_capacitor, case_temperature_c="31,5", notes="  ok  ")])
    assert result.errors == []
    row = result.good.iloc[0]
    assert (row["case_temperature_c"], row["notes"], row["method"]) == (31.5, "ok", "meter")
    assert isinstance(row["taken_at"], pd.Timestamp)


def test_a_saved_page_sent_again_with_other_values_is_not_silently_dropped(client, technician, fan_fitted_capacitor):
    client.force_login(technician)
    key = client.get(reverse("reading_new", args=[fan_fitted_capacitor.id])).context["form"]["client_key"].value()
    form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", client_key=key)
    again = form_post(client, fan_fitted_capacitor, capacitance_uf="3.91", client_key=key)
    assert again.status_code == 200 and "these values differ" in again.content.decode()
    fresh = again.context["form"]["client_key"].value()
    assert fresh != key and 'value="3.91"' in again.content.decode()
    assert form_post(client, fan_fitted_capacitor, capacitance_uf="3.91", client_key=fresh).status_code == 302
    assert sorted(Reading.objects.values_list("capacitance_uf", flat=True)) == [3.91, 3.95]


def _admin_adding_readings(client, administrator) -> None:
    """Signed in to the admin as an administrator who may add readings there."""
    from django.contrib.auth.models import Permission

    administrator.user_permissions.add(Permission.objects.get(codename="add_reading"))
    client.force_login(administrator)


def test_a_reading_added_in_the_admin_passes_the_same_rulebook(client, administrator, fan_fitted_capacitor):
    _admin_adding_readings(client, administrator)
    data = {
        "fitted_capacitor": fan_fitted_capacitor.id,
        "taken_at_0": "2024-03-01",
        "taken_at_1": "09:00",
        "method": "meter",
        "capacitance_uf": "3.95",
        "capacitor_voltage_v": "1000000",
        "condition": "sound",
        "source": "form",  # not a field of the admin's: ignored
        "taken_by": client.session.get("_auth_user_id"),
    }
    response = client.post(reverse("admin:fleet_reading_add"), data)
    assert response.status_code == 200 and "above 5000 V" in response.content.decode()
    assert not Reading.objects.exists()
    response = client.post(reverse("admin:fleet_reading_add"), {**data, "capacitor_voltage_v": "400"})
    assert response.status_code == 302 and Reading.objects.count() == 1
    # Who and where are the register's own: the administrator, from the register (a walk filed one under a
    # technician's name as a reading-form entry). Derived records are not added by hand.
    assert list(Reading.objects.values_list("taken_by", "source")) == [(administrator.id, "register")]
    assert client.get(reverse("admin:fleet_partprior_add")).status_code == 403
    assert client.get(reverse("admin:fleet_refitrun_add")).status_code == 403


def test_a_nul_in_imported_notes_is_a_row_error_not_a_stuck_import(fan_fitted_capacitor):
    result = import_check([import_row(fan_fitted_capacitor, notes="belt\x00squeals"), import_row(fan_fitted_capacitor)])
    assert [(row, field) for row, field, _ in result.errors] == [(2, "notes")]
    assert result.good["row"].tolist() == [3]


def test_no_current_in_circuit_is_named_as_an_open_capacitor_or_a_misplaced_clamp():
    """0 A through a capacitor with 330 V across it was answered "gives 0 must be above 0 µF" (common
    practice of the trade, no single source: no current with voltage across it is an open circuit)."""
    import numpy as np

    from fleet.engineering.rules import check_readings

    result = check_readings(
        {"capacitor_current_a": ["0", "0.9"], "capacitor_voltage_v": ["330", "330"]},
        method=np.array(["in_circuit", "in_circuit"], object),
        rated_uf=8.0,
        frequency_hz=50.0,
        motor_voltage_v=230.0,
        full_load_current_a=1.9,
        fitted_on=np.datetime64("2025-01-01"),
        removed_on=np.datetime64("NaT"),
        taken_at=np.array(["2026-01-05T10:00"] * 2, "datetime64[ns]"),
        now=np.datetime64("2026-02-01T00:00", "ns"),
    )
    assert result.errors["capacitor_current_a"][0].startswith("0 A with voltage across the capacitor: the clamp")
    assert result.errors["capacitor_current_a"][1] == ""


# high: a tenfold slip came in through the import, which held no reading to the capacitor's trend


def test_a_tenfold_slip_off_the_trend_is_refused_by_the_import_unless_its_row_confirms_it():
    """1.19 µF typed for 11.9 µF on a 12 µF film run capacitor with a trend: the reading form asks to confirm
    it (more than 8 % of the rating off the trend, `ReadingRules.off_trend_fraction`, common practice of the
    trade, no single source); the import took it without a word, and the next refit judged the capacitor open.
    The import now holds the row to the same trend value as the form, and keeps it only when its `confirmed`
    column says yes."""
    from fleet.services.import_checks import insert_readings
    from fleet.services.readings import NeedsConfirmation, check_reading

    fitted = make_fitted_capacitor(part=make_part(rated_uf=12.0))
    quarterly_readings(fitted, timezone.make_aware(dt.datetime(2024, 1, 5, 9)), [11.95, 11.93, 11.92])
    refit_fitted_capacitors([fitted.id])
    with pytest.raises(NeedsConfirmation) as asked:
        check_reading(
            fitted,
            {"method": "meter", "capacitance_uf": "1.19", "taken_at": timezone.make_aware(dt.datetime(2025, 3, 1, 9))},
            confirmed=False,
        )
    form_words = asked.value.message_dict["capacitance_uf"][0]
    result = import_check(
        [
            import_row(fitted, taken_at="2025-03-01 09:00", capacitance_uf="1.19"),
            import_row(fitted, taken_at="2025-03-02 09:00", capacitance_uf="1.19", confirmed="Yes"),
            import_row(fitted, taken_at="2025-03-03 09:00", capacitance_uf="11.9", confirmed="maybe"),
            import_row(fitted, taken_at="2025-03-04 09:00", capacitance_uf="11.9", confirmed="0"),
            # confirmed where nothing was asked: stored as not confirmed, as the form and the API store it
            import_row(fitted, taken_at="2025-03-05 09:00", capacitance_uf="11.91", confirmed="yes"),
        ]
    )
    assert [(row, field) for row, field, _ in result.errors] == [(2, "capacitance_uf"), (4, "confirmed")]
    refused = result.errors[0][2]
    assert refused.startswith(form_words[:1].lower() + form_words[1:]) and "confirmed column says yes" in refused
    assert result.errors[1][2] == "maybe is not yes or no (true or false, 1 or 0; empty is no)"
    assert result.good["row"].tolist() == [3, 5, 6]
    insert_readings(result.good)
    kept = dict(Reading.objects.filter(source=Reading.Source.IMPORT).values_list("capacitance_uf", "outlier_confirmed"))
    assert kept == {1.19: True, 11.9: False, 11.91: False}


def test_an_imported_reading_older_than_the_trends_newest_is_not_held_to_todays_value():
    """A back-filled reading from before the trend's newest reading was held to today's value: a capacitor that
    lost 2 µF since would have had every old reading refused ([derived]: the trend's value then is not stored)."""
    fitted = make_fitted_capacitor(part=make_part(rated_uf=12.0))
    quarterly_readings(fitted, timezone.make_aware(dt.datetime(2024, 1, 5, 9)), [11.0, 10.5, 10.0])
    refit_fitted_capacitors([fitted.id])
    result = import_check(
        [
            import_row(fitted, taken_at="2023-10-05 09:00", capacitance_uf="12.0"),
            import_row(fitted, taken_at="2025-03-01 09:00", capacitance_uf="12.0"),
        ]
    )
    assert [(row, field) for row, field, _ in result.errors] == [(3, "capacitance_uf")]
    assert result.good["row"].tolist() == [2]


def test_a_capacitance_in_farads_is_named_and_asked_everywhere_first_and_back_dated_readings_too(client, technician):
    """A meter on its F range shows a 30 µF run capacitor as 0.00003 (common practice of the trade, no single
    source: meters range F, mF, µF, nF). A new capacitor's first reading, and a reading dated before the trend's
    newest, have no trend to be held to: 0.00003 was saved as an open capacitor without a question, and the
    brand-new part planned "replace now". The form and the API ask to confirm naming the slip, the import
    refuses the row unless confirmed; an open capacitor's 0.02 µF is still kept as read."""
    fitted = make_fitted_capacitor(part=make_part(rated_uf=30.0))
    client.force_login(technician)
    first = form_post(client, fitted, capacitance_uf="0.00003")
    assert first.status_code == 200 and "0.00003 looks like farads: 30 µF? (rated 30 µF)" in first.content.decode()
    assert not Reading.objects.exists()
    quarterly_readings(fitted, timezone.make_aware(dt.datetime(2024, 1, 5, 9)), [30.0, 29.9, 29.8])
    refit_fitted_capacitors([fitted.id])
    url = reverse("api_fitted_capacitor_readings", args=[fitted.id])
    api = api_for(technician)
    back_dated = {"method": "meter", "capacitance_uf": 0.0000301, "taken_at": "2024-02-01T09:00:00Z"}
    answer = api.post(url, back_dated, format="json")
    assert answer.status_code == 409
    assert answer.json()["capacitance_uf"][0].startswith("0.0000301 looks like farads: 30.1 µF?")
    later = api.post(url, {"method": "meter", "capacitance_uf": 0.00003}, format="json")
    assert later.status_code == 409 and "looks like farads" in later.json()["capacitance_uf"][0]
    result = import_check(
        [
            import_row(fitted, taken_at="2024-02-02 09:00", capacitance_uf="0,00003"),
            import_row(fitted, taken_at="2024-02-03 09:00", capacitance_uf="0.00003", confirmed="yes"),
            import_row(fitted, taken_at="2024-02-04 09:00", capacitance_uf="0.03"),
        ]
    )
    assert [(row, field) for row, field, _ in result.errors] == [(2, "capacitance_uf"), (4, "capacitance_uf")]
    assert "looks like farads" in result.errors[0][2] and "looks like millifarads" in result.errors[1][2]
    assert result.good["row"].tolist() == [3]
    assert api.post(url, {**back_dated, "confirmed": True}, format="json").status_code == 201
    open_one = form_post(client, fitted, capacitance_uf="0.02", taken_at="2024-02-05T09:00", confirmed="on")
    assert open_one.status_code == 302
    assert sorted(Reading.objects.filter(capacitance_uf__lt=1).values_list("capacitance_uf", flat=True)) == [
        0.0000301,
        0.02,
    ]


def test_a_meter_showing_no_capacitance_is_recorded_as_an_open_capacitor_everywhere(client, technician):
    """A meter on an open capacitor shows 0 µF (common practice of the trade, no single source): it was refused
    as "0 must be above 0 µF" and could not be recorded. The form, the API and the import ask to confirm it,
    saying it is recorded as an open capacitor to replace; confirmed, it is kept, set aside by the trend fit
    (under 5 % of the rating, as a slip is) and judged open circuit, replace now, with the reason in words.
    A negative value stays refused."""
    fitted = make_fitted_capacitor(part=make_part(rated_uf=30.0, tolerance_minus_pct=5, tolerance_plus_pct=5))
    start = timezone.now() - dt.timedelta(days=91 * 4 + 30)
    quarterly_readings(fitted, start, [30.1, 30.0, 29.9, 29.8], esr_ohm=0.5)
    client.force_login(technician)
    asked = form_post(client, fitted, capacitance_uf="0")
    page = asked.content.decode()
    assert asked.status_code == 200 and "0 µF: the meter shows no capacitance" in page
    assert "recorded as an open capacitor, to replace now" in page and 'id="confirm"' in page
    assert Reading.objects.filter(capacitance_uf=0).count() == 0
    url = reverse("api_fitted_capacitor_readings", args=[fitted.id])
    api = api_for(technician)
    answer = api.post(url, {"method": "meter", "capacitance_uf": 0}, format="json")
    assert answer.status_code == 409 and "open capacitor" in answer.json()["capacitance_uf"][0]
    negative = api.post(url, {"method": "meter", "capacitance_uf": -1, "confirmed": True}, format="json")
    assert negative.status_code == 400 and "-1 must be 0 µF or more" in negative.json()["capacitance_uf"][0]
    result = import_check(
        [
            import_row(fitted, taken_at="2022-02-01 09:00", capacitance_uf="0"),
            import_row(fitted, taken_at="2022-02-02 09:00", capacitance_uf="0,0", confirmed="yes"),
        ]
    )
    assert [(row, field) for row, field, _ in result.errors] == [(2, "capacitance_uf")]
    assert "open capacitor" in result.errors[0][2] and result.good["row"].tolist() == [3]
    saved = confirmed_post(client, fitted, capacitance_uf="0", esr_ohm="0.5")
    assert saved.status_code == 302
    reading = Reading.objects.get(capacitance_uf=0)
    assert reading.outlier_confirmed
    refit_fitted_capacitors([fitted.id])
    assessment = fitted.assessments.get(is_current=True)
    assert assessment.risk == "replace now" and assessment.latest_verdict == "open circuit suspected"
    assert "open circuit suspected: latest reading 0.00 µF" in assessment.reason
    # The trend is the four readings before it: 0 µF bends nothing (its fit ends near 29.8 µF).
    assert assessment.readings_used == 4 and abs(assessment.capacitance_now_uf - 29.8) < 0.3
    # Its pages and exports show it as read (nothing divides by it nor takes its log).
    client.force_login(make_user("reliability engineer"))
    page = client.get(reverse("fitted_capacitor", args=[fitted.id]))
    assert page.status_code == 200 and "open circuit suspected" in page.content.decode()
    tables = {}
    for kind in ("readings", "assessments"):
        export = client.get(reverse("export", args=[kind, "csv"]))
        assert export.status_code == 200
        text = b"".join(export.streaming_content).decode() if export.streaming else export.content.decode()
        tables[kind] = list(csv.DictReader(io.StringIO(text.lstrip("\ufeff"))))
    assert sorted(float(row["capacitance_uf"]) for row in tables["readings"])[0] == 0.0
    assert [row["risk"] for row in tables["assessments"]] == ["replace now"]


@pytest.mark.parametrize("typed", ["1e-320", "0.0001", "0,0004"])
def test_a_value_under_a_meters_finest_step_is_asked_about_as_0_is(client, technician, typed):
    """A meter's finest capacitance step is 1 nF (common practice of the trade, no single source): a value under
    half of it is a meter showing no capacitance. Before, 1e-320 was stored unconfirmed on every path and shown as
    "0.00 µF", while 0 was asked about as an open capacitor (a fuzz test found it); and the message that did
    ask about it wrote the value in 320 digits. The farads slip (0.00003 on a 30 µF part) is asked as a slip."""
    fitted = make_fitted_capacitor(part=make_part(rated_uf=30.0, tolerance_minus_pct=5, tolerance_plus_pct=5))
    client.force_login(technician)
    asked = form_post(client, fitted, capacitance_uf=typed)
    page = asked.content.decode()
    # Said at the field; the live hint's rules carry the words once on every form page.
    assert asked.status_code == 200 and page.count("0 µF: the meter shows no capacitance") == 2
    assert "0.0000000000000" not in page
    assert not Reading.objects.exists()
    farads = form_post(client, fitted, capacitance_uf="0.00003").content.decode()
    assert "looks like farads" in farads and farads.count("the meter shows no capacitance") == 1


def test_a_reading_added_in_the_admin_is_read_in_its_sites_time(client, administrator, fan_fitted_capacitor):
    """A fuzz: the admin read a reading's time in the server's TIME_ZONE while the form, the API and the import read
    it in the site's, so a reading typed at a site six hours off UTC was stored six hours off. [ours] the admin reads
    the site's wall-clock time by the form's rule. America/Chicago is UTC-6 on 2024-03-01 and skips 02:00-03:00 on
    2024-03-10 (the tz database, IANA)."""
    site = fan_fitted_capacitor.motor.site
    site.time_zone = "America/Chicago"
    site.save()
    _admin_adding_readings(client, administrator)
    data = {
        "fitted_capacitor": fan_fitted_capacitor.id,
        "taken_at_0": "2024-03-10",
        "taken_at_1": "02:30",
        "method": "meter",
        "capacitance_uf": "3.95",
        "condition": "sound",
    }
    skipped = client.post(reverse("admin:fleet_reading_add"), data)
    assert skipped.status_code == 200 and "skipped or repeated in America/Chicago" in skipped.content.decode()
    assert not Reading.objects.exists()
    saved = client.post(reverse("admin:fleet_reading_add"), {**data, "taken_at_0": "2024-03-01", "taken_at_1": "09:00"})
    assert saved.status_code == 302
    assert Reading.objects.get().taken_at == dt.datetime(2024, 3, 1, 15, 0, tzinfo=dt.UTC)


def test_a_confirmation_counts_for_the_values_it_was_asked_about_only(client, technician, fan_fitted_capacitor):
    """An audit of inputs: asked about a case temperature of 140 °C, the capacitance was changed to 0.00395 (the
    rating in millifarads) and "Value is right: save it" pressed: saved as confirmed, the millifarad slip never
    asked about. [ours] the page carries a digest of the values it asked about; a confirmation sent with other
    values is asked again, with the new question; confirmed for those, it is saved."""
    client.force_login(technician)
    asked = form_post(client, fan_fitted_capacitor, capacitance_uf="3.95", case_temperature_c="140")
    assert "highest case temperature" in asked.content.decode()
    changed = {"capacitance_uf": "0.00395", "case_temperature_c": "140"}
    again = form_post(client, fan_fitted_capacitor, **changed, **confirmation_of(asked))
    assert again.status_code == 200 and not Reading.objects.exists()
    assert "looks like millifarads" in again.content.decode()
    assert 'type="hidden" name="confirmed"' not in again.content.decode()  # the stale confirmation is not carried
    saved = form_post(client, fan_fitted_capacitor, **changed, **confirmation_of(again))
    assert saved.status_code == 302 and Reading.objects.get().outlier_confirmed
