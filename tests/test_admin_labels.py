"""The admin labels quantities with their units as people write them (µF, °C, Ω), while field names,
the API's keys and the export headings stay ASCII. Unit symbols: [pub] The International System of
Units (SI Brochure, BIPM, 9th edition 2019), tables 4 and 7 (Ω, °C, the prefix µ)."""

import html
import re

import pytest
from django.urls import reverse

from fleet.models import Assessment, CapacitorPart, Motor, Reading
from tests.factories import make_reading

from .test_api import client_for

pytestmark = pytest.mark.django_db

SYMBOLS = {"uf": "µF", "c": "°C", "ohm": "Ω", "v": "V", "a": "A", "w": "W", "hz": "Hz", "pct": "%", "rpm": "rpm"}


def _unit_fields(model):
    """The model's fields named with a unit suffix, and the symbol that suffix stands for."""
    for field in model._meta.concrete_fields:
        suffix = field.name.rsplit("_", 1)[-1]
        if "_" in field.name and suffix in SYMBOLS:
            yield field, SYMBOLS[suffix]


@pytest.mark.parametrize("model", [Motor, CapacitorPart, Reading])
def test_every_quantity_of_the_register_and_readings_is_labelled_with_its_unit(model):
    fields = list(_unit_fields(model))
    assert fields
    for field, symbol in fields:
        assert f"({symbol})" in field.verbose_name, field.name
        assert field.name.isascii()


def _texts(response) -> str:
    return html.unescape(re.sub(r"<[^>]+>", " ", response.content.decode()))


def test_admin_lists_forms_and_view_pages_show_units(client, administrator, fan_fitted_capacitor):
    reading = make_reading(fan_fitted_capacitor, case_temperature_c=31.0, esr_ohm=0.2)
    client.force_login(administrator)
    parts = _texts(client.get(reverse("admin:fleet_capacitorpart_changelist")))
    assert "Rated capacitance (µF)" in parts and "Rated uf" not in parts
    part_form = _texts(client.get(reverse("admin:fleet_capacitorpart_change", args=[fan_fitted_capacitor.part_id])))
    assert "Highest case temperature (°C)" in part_form and "Tolerance minus (%)" in part_form
    motor_form = _texts(client.get(reverse("admin:fleet_motor_change", args=[fan_fitted_capacitor.motor_id])))
    assert "Rotor resistance R2 (Ω)" in motor_form and "Full-load current (A)" in motor_form
    new_reading = _texts(client.get(reverse("admin:fleet_reading_add")))
    assert "Case temperature (°C)" in new_reading and "ESR (Ω)" in new_reading
    readings = _texts(client.get(reverse("admin:fleet_reading_changelist")))
    assert "Capacitance (µF)" in readings and "Case temperature (°C)" in readings
    viewed = _texts(client.get(reverse("admin:fleet_reading_change", args=[reading.id])))
    assert "Capacitance (µF)" in viewed and "Capacitance uf" not in viewed
    assert "(µF)" in str(Assessment._meta.get_field("capacitance_now_uf").verbose_name)


def test_api_keys_and_export_headings_stay_ascii(client, engineer, fan_fitted_capacitor):
    make_reading(fan_fitted_capacitor, esr_ohm=0.2)
    body = client_for(engineer).get(reverse("api_readings")).json()
    keys = set(body["results"][0])
    assert {"capacitance_uf", "case_temperature_c", "esr_ohm"} <= keys and all(key.isascii() for key in keys)
    client.force_login(engineer)
    response = client.get(reverse("export", args=["readings", "csv"]))
    header = b"".join(response.streaming_content).decode("utf-8-sig").splitlines()[0]
    assert "capacitance_uf" in header and header.isascii()
