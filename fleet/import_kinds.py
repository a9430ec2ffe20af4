"""The other kinds of a whole migration: sites, capacitor parts and past fitted capacitors.

Same shape as readings and the register (fleet/imports.py): a vectorised check that
writes nothing and reports (row, field, message); an insert for the good rows, run
by the caller inside its transaction. Natural keys make a second import add nothing:
site code, part code, and (motor, role, fitted_on) for a fitted capacitor.
"""

from __future__ import annotations

import zoneinfo
from decimal import Decimal

import numpy as np
import pandas as pd
from django.utils import timezone

from fleet.imports import CheckResult, _Problems, finite_numbers, parse_dates, repeated_in_file
from fleet.models import CapacitorPart, FittedCapacitor, Motor, Site

SITE_COLUMNS = {
    "code": "Site code, unique, up to 20 characters (required)",
    "name": "Site name, up to 120 characters (required)",
    "time_zone": "Time zone name, e.g. Europe/Madrid or UTC; readings without an offset are in this zone (required)",
}
SITE_REQUIRED = ("code", "name", "time_zone")

PART_COLUMNS = {
    "code": "Part code, unique, up to 40 characters (required)",
    "rated_uf": "Rated capacitance in µF (required)",
    "tolerance_minus_pct": "Tolerance below rated, in %, e.g. 5 (required)",
    "tolerance_plus_pct": "Tolerance above rated, in %, e.g. 5 (required)",
    "rated_voltage_v": "Rated voltage in V AC (required)",
    "dielectric": "film (run capacitors) or electrolytic (start capacitors) (required)",
    "frequency_hz": "Rated frequency, 50 or 60 Hz (required)",
    "description": "Free text, up to 200 characters",
    "class_of_operation": "A, B, C or D: rated life 30,000, 10,000, 3,000 or 1,000 h (IEC 60252-1)",
    "duty": "Duty, up to 80 characters, e.g. continuous, or 20 starts/h of 3 s",
    "safety_class": "S0, S1, S2 or S3 (older markings P0, P1, P2)",
    "max_case_temperature_c": "Highest permitted case temperature in °C (default 70)",
    "max_dissipation_factor": "Highest dissipation factor (tan delta) as a fraction, e.g. 0.002",
    "unit_cost": "Price of one, in the plant's currency, two decimals (default 0)",
}
PART_REQUIRED = (
    "code",
    "rated_uf",
    "tolerance_minus_pct",
    "tolerance_plus_pct",
    "rated_voltage_v",
    "dielectric",
    "frequency_hz",
)
PART_NUMBERS = [
    "rated_uf",
    "tolerance_minus_pct",
    "tolerance_plus_pct",
    "rated_voltage_v",
    "frequency_hz",
    "max_case_temperature_c",
    "max_dissipation_factor",
    "unit_cost",
]

HISTORY_COLUMNS = {
    "asset_tag": "Motor asset tag, as in the register (required)",
    "role": "start or run (required)",
    "part_code": "Part code of the capacitor, as in the parts catalogue (required)",
    "fitted_on": "Date fitted, ISO 8601, e.g. 2019-05-02 (required)",
    "removed_on": "Date removed, ISO 8601; empty while the capacitor is in service",
    "removal_reason": "failed, planned or other: given exactly when removed_on is",
    "serial": "Serial number or date code, up to 60 characters",
    "notes": "Free text",
}
HISTORY_REQUIRED = ("asset_tag", "role", "part_code", "fitted_on")

EARLIEST_DATE = pd.Timestamp("1950-01-01")
OPEN_END = pd.Timestamp("2200-01-01")  # the end of a capacitor still in service, for overlap tests


def _known_zone(name: str) -> bool:
    try:
        zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError):
        return False
    return True


def _result(frame: pd.DataFrame, problems: _Problems, already: np.ndarray, on_progress) -> CheckResult:
    good_mask = ~problems.bad & ~already
    if on_progress:
        on_progress(len(frame))
    return CheckResult(
        good=frame[good_mask].reset_index(drop=True),
        errors=sorted(problems.items),
        duplicates=int((already & ~problems.bad).sum()),
        total=len(frame),
    )


def check_sites(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Sites: code, name and a time zone zoneinfo knows; codes already in the register are skipped."""
    problems = _Problems(frame)
    for name in SITE_REQUIRED:
        problems.add(frame[name].eq(""), name, "required")
    zones = {name: _known_zone(name) for name in set(frame["time_zone"])}
    problems.add(
        ~frame["time_zone"].map(zones).astype(bool),
        "time_zone",
        "not a time zone name: use one like Europe/Madrid, America/Chicago or UTC",
    )
    repeated_in_file(problems, frame["code"].where(frame["code"].ne("")), "code", "the same site code")
    already = frame["code"].isin(set(Site.objects.values_list("code", flat=True))).to_numpy()
    return _result(frame, problems, already, on_progress)


def insert_sites(good: pd.DataFrame) -> int:
    Site.objects.bulk_create(
        [Site(code=row.code, name=row.name, time_zone=row.time_zone) for row in good.itertuples(index=False)],
        batch_size=2000,
    )
    return len(good)


def check_parts(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Capacitor parts with the catalogue's field names; the database's constraints checked first."""
    problems = _Problems(frame)
    for name in PART_REQUIRED:
        problems.add(frame[name].eq(""), name, "required")
    numbers = finite_numbers(frame, PART_NUMBERS, problems)
    rated, minus, plus = numbers["rated_uf"], numbers["tolerance_minus_pct"], numbers["tolerance_plus_pct"]
    problems.add((rated <= 0) | (rated > 10_000), "rated_uf", "outside 0 to 10,000 µF: check the unit")
    problems.add((minus < 0) | (minus >= 100), "tolerance_minus_pct", "must be from 0 to below 100 %")
    problems.add((plus < 0) | (plus > 100), "tolerance_plus_pct", "must be from 0 to 100 %")
    volts = numbers["rated_voltage_v"]
    problems.add((volts <= 0) | (volts > 1000), "rated_voltage_v", "outside 1 to 1000 V")
    problems.add(~np.isin(numbers["frequency_hz"], [50, 60]), "frequency_hz", "must be 50 or 60")
    case = numbers["max_case_temperature_c"]
    problems.add((case < 0) | (case > 150), "max_case_temperature_c", "outside 0 to 150 C")
    factor = numbers["max_dissipation_factor"]
    problems.add((factor <= 0) | (factor >= 1), "max_dissipation_factor", "must be a fraction above 0 and below 1")
    cost = numbers["unit_cost"]
    problems.add((cost < 0) | (cost >= 1e8), "unit_cost", "must be from 0 to below 100,000,000")
    for name, choices in (
        ("dielectric", CapacitorPart.Dielectric.values),
        ("class_of_operation", CapacitorPart.OperationClass.values),
        ("safety_class", CapacitorPart.SafetyClass.values),
    ):
        given = frame[name].str.lower() if name == "dielectric" else frame[name].str.upper()
        problems.add(given.ne("") & ~given.isin(choices), name, "must be one of " + ", ".join(choices))
    repeated_in_file(problems, frame["code"].where(frame["code"].ne("")), "code", "the same part code")
    already = frame["code"].isin(set(CapacitorPart.objects.values_list("code", flat=True))).to_numpy()
    good = frame.copy()
    for name in PART_NUMBERS:
        good[name] = numbers[name]
    return _result(good, problems, already, on_progress)


def insert_parts(good: pd.DataFrame) -> int:
    def optional(value, default=None):
        return default if np.isnan(value) else float(value)

    CapacitorPart.objects.bulk_create(
        [
            CapacitorPart(
                code=row.code,
                description=row.description,
                rated_uf=float(row.rated_uf),
                tolerance_minus_pct=float(row.tolerance_minus_pct),
                tolerance_plus_pct=float(row.tolerance_plus_pct),
                rated_voltage_v=float(row.rated_voltage_v),
                frequency_hz=int(row.frequency_hz),
                dielectric=row.dielectric.lower(),
                class_of_operation=row.class_of_operation.upper(),
                duty=row.duty,
                safety_class=row.safety_class.upper(),
                max_case_temperature_c=optional(row.max_case_temperature_c, 70.0),
                max_dissipation_factor=optional(row.max_dissipation_factor),
                unit_cost=Decimal(f"{optional(row.unit_cost, 0.0):.2f}"),
            )
            for row in good.itertuples(index=False)
        ],
        batch_size=2000,
    )
    return len(good)


def check_history(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Past (and present) fitted capacitors, the failures and suspensions of life data.

    Dates must hang together: removed on or after fitting, a reason exactly when
    removed, no overlap with another capacitor of the same motor and role (in the
    file or in the register), so at most one in service. A capacitor already in
    the register (same motor, role and fitting date) is skipped.
    """
    problems = _Problems(frame)
    for name in HISTORY_REQUIRED:
        problems.add(frame[name].eq(""), name, "required")
    tags = frame["asset_tag"].str.upper()
    known = Motor.objects.filter(asset_tag__any_of=np.array(sorted(set(tags) - {""}), dtype=object))
    motors = pd.DataFrame.from_records(
        list(known.values_list("id", "asset_tag", "motor_type")),
        columns=["motor_id", "tag", "motor_type"],
    )
    motors["tag"] = motors["tag"].str.upper()
    motor = motors.drop_duplicates("tag").set_index("tag").reindex(tags)
    problems.add(motor["motor_id"].isna().to_numpy(), "asset_tag", "unknown asset tag: not in the register")
    role = frame["role"].str.lower()
    problems.add(~role.isin(FittedCapacitor.Role.values), "role", "must be start or run")
    has_role = np.where(
        role.eq(FittedCapacitor.Role.RUN),
        motor["motor_type"].isin([Motor.MotorType.PERMANENT_SPLIT, Motor.MotorType.TWO_VALUE]).to_numpy(),
        motor["motor_type"].isin([Motor.MotorType.CAPACITOR_START, Motor.MotorType.TWO_VALUE]).to_numpy(),
    )
    problems.add(
        ~has_role,
        "role",
        np.array(
            [
                f"a {t} motor has no {r} capacitor"
                for t, r in zip(motor["motor_type"].fillna("").str.replace("_", "-"), role, strict=True)
            ],
            dtype=object,
        ),
    )
    parts = dict(CapacitorPart.objects.values_list("code", "id"))
    problems.add(~frame["part_code"].isin(parts), "part_code", "unknown part code: add the part first")
    today = pd.Timestamp(timezone.localdate())
    fitted, removed = parse_dates(frame["fitted_on"]), parse_dates(frame["removed_on"])
    for name, parsed in (("fitted_on", fitted), ("removed_on", removed)):
        problems.add(frame[name].ne("") & parsed.isna(), name, "not a date (use 2026-03-14)")
        problems.add(parsed > today, name, "in the future")
        problems.add(parsed < EARLIEST_DATE, name, "before 1950: check the date")
    problems.add(removed < fitted, "removed_on", "before fitted_on")
    reason = frame["removal_reason"].str.lower()
    problems.add(removed.notna() & reason.eq(""), "removal_reason", "required when removed_on is given")
    problems.add(
        removed.isna() & reason.ne(""), "removal_reason", "given for a capacitor still in service: add removed_on"
    )
    problems.add(
        reason.ne("") & ~reason.isin(FittedCapacitor.RemovalReason.values),
        "removal_reason",
        "must be failed, planned or other",
    )
    rows = pd.DataFrame(
        {
            "row": frame["row"].to_numpy(),
            "motor_id": motor["motor_id"].to_numpy(float),
            "role": role.to_numpy(),
            "start": fitted.astype("datetime64[ns]").to_numpy(),
            "end": removed.astype("datetime64[ns]").fillna(OPEN_END).to_numpy(),
        }
    )
    keys = rows["motor_id"].astype(str) + "|" + rows["role"] + "|" + rows["start"].astype(str)
    repeated_in_file(problems, keys.where(~problems.bad), "fitted_on", "the same capacitor (motor, role, fitted_on)")
    register = pd.DataFrame.from_records(
        list(
            FittedCapacitor.objects.filter(motor_id__any_of=motors["motor_id"].to_numpy(np.int64)).values_list(
                "motor_id", "role", "fitted_on", "removed_on"
            )
        ),
        columns=["motor_id", "role", "start", "end"],
    )
    register = register.astype({"motor_id": float})
    register["start"] = pd.to_datetime(register["start"]).astype("datetime64[ns]")
    register["end"] = pd.to_datetime(register["end"]).astype("datetime64[ns]").fillna(OPEN_END)
    register["row"] = 0  # not a row of the file
    keys_in_register = register[["motor_id", "role", "start"]].drop_duplicates().assign(found=True)
    already = rows.merge(keys_in_register, on=["motor_id", "role", "start"], how="left")["found"].notna().to_numpy()
    _refuse_overlaps(problems, rows[~problems.bad & ~already], register)
    good = frame.assign(
        motor_id=rows["motor_id"],
        role=role,
        part_id=frame["part_code"].map(parts),
        fitted_on=fitted.dt.date,
        removed_on=removed.dt.date,
        removal_reason=reason,
    )
    return _result(good, problems, already, on_progress)


def _refuse_overlaps(problems: _Problems, rows: pd.DataFrame, register: pd.DataFrame) -> None:
    """Each row whose time on the motor overlaps another capacitor's in the same role, naming that one."""
    everyone = pd.concat([register, rows], ignore_index=True)  # a clash with the register is named first
    pairs = rows.merge(everyone, on=["motor_id", "role"], suffixes=("", "_other"))
    pairs = pairs[
        (pairs["row"] != pairs["row_other"])
        & (pairs["start"] < pairs["end_other"])
        & (pairs["start_other"] < pairs["end"])
    ].drop_duplicates("row")
    if pairs.empty:
        return

    def described(pair) -> str:
        where = f"row {pair.row_other}" if pair.row_other else "the register"
        until = "in service" if pair.end_other == OPEN_END else f"removed {pair.end_other.date()}"
        return f"the {pair.role} capacitor fitted {pair.start_other.date()} ({until}, {where})"

    both_open = ((pairs["end"] == OPEN_END) & (pairs["end_other"] == OPEN_END)).to_numpy()
    found = pd.DataFrame(
        {
            "field": np.where(both_open, "removed_on", "fitted_on"),
            "message": [
                f"another {pair.role} capacitor is in service on this motor: {described(pair)}"
                if open_ended
                else f"overlaps {described(pair)}"
                for pair, open_ended in zip(pairs.itertuples(index=False), both_open, strict=True)
            ],
        },
        index=pairs["row"].to_numpy(),
    ).reindex(problems.chunk["row"].to_numpy())
    for field_name in ("fitted_on", "removed_on"):
        problems.add(found["field"].eq(field_name).to_numpy(), field_name, found["message"].to_numpy(dtype=object))


def insert_history(good: pd.DataFrame) -> list[int]:
    """Create the fitted capacitors; returns their ids (their refits are queued by the caller)."""
    created = FittedCapacitor.objects.bulk_create(
        [
            FittedCapacitor(
                motor_id=int(row.motor_id),
                role=row.role,
                part_id=int(row.part_id),
                serial=row.serial,
                fitted_on=row.fitted_on,
                removed_on=None if pd.isna(row.removed_on) else row.removed_on,
                removal_reason=row.removal_reason,
                notes=row.notes,
            )
            for row in good.itertuples(index=False)
        ],
        batch_size=2000,
    )
    return [c.id for c in created]
