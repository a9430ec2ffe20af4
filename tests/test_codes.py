"""Codes and register figures: one rule at the admin and every import, the database behind them."""

import pytest

from fleet.imports.columns import PART_COLUMNS, SITE_COLUMNS, mapped_frame
from fleet.services.import_checks import check_parts, check_sites

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
