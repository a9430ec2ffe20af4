"""Reads: querysets turned into DataFrames, one query per batch, never per motor."""

from __future__ import annotations

import numpy as np
import pandas as pd
from django.db.models import Exists, OuterRef

from fleet.models import FittedCapacitor, PartPrior, Reading

from .bulk import ID_ARRAY_SQL, id_array_text, on_postgresql, select_packed

CIRCUIT_FIELDS = [
    "r1m_ohm",
    "x1m_ohm",
    "r1a_ohm",
    "x1a_ohm",
    "r2_ohm",
    "x2_ohm",
    "xm_ohm",
    "turns_ratio",
    "rotational_loss_w",
]

FITTED_CAPACITOR_COLUMNS = {
    "id": "fitted_capacitor_id",
    "role": "role",
    "fitted_on": "fitted_on",
    "part_id": "part_id",
    "part__rated_uf": "rated_uf",
    "part__tolerance_minus_pct": "tolerance_minus_pct",
    "part__tolerance_plus_pct": "tolerance_plus_pct",
    "part__rated_voltage_v": "part_rated_voltage_v",
    "part__dielectric": "dielectric",
    "part__tempco_ppm_per_k": "part_tempco_ppm_per_k",
    "part__max_dissipation_factor": "max_dissipation_factor",
    "removed_on": "removed_on",
    "removal_reason": "removal_reason",
    "substitute_override": "stop_gap",
    "motor_id": "motor_id",
    "motor__motor_type": "motor_type",
    "motor__load_type": "load_type",
    "motor__rated_voltage_v": "voltage_v",
    "motor__frequency_hz": "frequency_hz",
    "motor__poles": "poles",
    "motor__full_load_current_a": "full_load_current_a",
    "motor__rated_speed_rpm": "rated_speed_rpm",
    **{f"motor__{name}": name for name in CIRCUIT_FIELDS},
    "motor__circuit_source": "circuit_source",
}


def not_superseded() -> Exists:
    """A reading no correction supersedes, as NOT EXISTS: PostgreSQL reads it as an anti-join probing the unique
    index on `supersedes_id` for each reading (16 ms for a week's 10,000 readings of a 600,000-reading table),
    where the ORM's `superseded_by__isnull=True`, a LEFT JOIN filtered on the other row's id, hashed the whole
    table (112-169 ms)."""
    return ~Exists(Reading.objects.filter(supersedes_id=OuterRef("pk")))


def fitted_capacitors_frame(fitted_capacitor_ids) -> pd.DataFrame:
    """Fitted capacitors with their part and motor, one row each (one query)."""
    rows = (
        FittedCapacitor.objects.filter(id__any_of=np.fromiter(fitted_capacitor_ids, np.int64))
        .order_by()  # sorted below: the model's own order would sort by the motors' tags
        .values_list(*FITTED_CAPACITOR_COLUMNS)
    )
    frame = pd.DataFrame.from_records(list(rows), columns=list(FITTED_CAPACITOR_COLUMNS.values()))
    for column in ("part_tempco_ppm_per_k", "max_dissipation_factor"):
        frame[column] = frame[column].astype(float)
    for column in ("fitted_on", "removed_on"):  # days as datetime64 (NaT: not removed), not one date object a row
        frame[column] = pd.to_datetime(frame[column]).astype("datetime64[s]")
    frame["design_rated_uf"] = design_rated_uf(frame)
    return frame.sort_values("fitted_capacitor_id").reset_index(drop=True)


def design_rated_uf(frame: pd.DataFrame) -> np.ndarray:
    """Per row (`motor_id`, `role`, `fitted_on`, `rated_uf`, `stop_gap`), the rated uF of its position's design
    part: its own, but for a capacitor fitted against the advice that of the newest capacitor at its motor and
    role fitted without an override on or before it (the rule of `substitutes.design_part`), so a stop-gap never
    becomes the motor's design. One query where any row is such a capacitor, none otherwise."""
    rated = frame["rated_uf"].to_numpy(float).copy()
    stop_gap = frame["stop_gap"].to_numpy(bool)
    if not stop_gap.any():
        return rated
    gaps = frame.loc[stop_gap, ["motor_id", "role", "fitted_on"]].assign(row=np.flatnonzero(stop_gap))
    advised = pd.DataFrame.from_records(
        list(
            FittedCapacitor.objects.filter(
                motor_id__any_of=gaps["motor_id"].unique().astype(np.int64), substitute_override=False
            ).values_list("motor_id", "role", "fitted_on", "id", "part__rated_uf")
        ),
        columns=["motor_id", "role", "fitted_on", "id", "design_uf"],
    )
    if advised.empty:  # no capacitor fitted as advised there before: the stop-gap's own rating is all there is
        return rated
    advised = advised.astype({"motor_id": np.int64, "role": str, "design_uf": float})
    gaps = gaps.astype({"motor_id": np.int64, "role": str})
    advised["fitted_on"] = pd.to_datetime(advised["fitted_on"]).astype("datetime64[s]")
    found = pd.merge_asof(  # the newest on or before each stop-gap's fitting, the later id on one day
        gaps.sort_values("fitted_on"),
        advised.sort_values(["fitted_on", "id"]),
        on="fitted_on",
        by=["motor_id", "role"],
        direction="backward",
    ).dropna(subset=["design_uf"])
    rated[found["row"].to_numpy(int)] = found["design_uf"].to_numpy(float)
    return rated


def companion_capacitance_frame(motor_ids) -> pd.DataFrame:
    """Rated uF of each motor's capacitors in service, by role (one query), indexed by motor; and, as
    `run_design` and `start_design`, their positions' design ratings (`design_rated_uf`: a stop-gap's design part's,
    one more query where any is a stop-gap).

    A two-value motor starts on run + start in parallel, so judging either
    capacitor needs the other's rating.
    """
    rows = (
        FittedCapacitor.objects.filter(motor_id__any_of=np.fromiter(motor_ids, np.int64), removed_on__isnull=True)
        .order_by()  # one capacitor in service per motor and role: no order needed, and no join to sort by
        .values_list("motor_id", "role", "part__rated_uf", "fitted_on", "substitute_override")
    )
    frame = pd.DataFrame.from_records(list(rows), columns=["motor_id", "role", "rated_uf", "fitted_on", "stop_gap"])
    roles = [FittedCapacitor.Role.RUN, FittedCapacitor.Role.START]
    columns = [*roles, *(f"{role}_design" for role in roles)]
    if frame.empty:
        return pd.DataFrame(columns=columns, dtype=float)
    frame["fitted_on"] = pd.to_datetime(frame["fitted_on"]).astype("datetime64[s]")
    frame["design_uf"] = design_rated_uf(frame)
    first = frame.drop_duplicates(["motor_id", "role"]).set_index("motor_id")
    table = pd.DataFrame(
        {
            **{role: first.loc[first["role"] == role, "rated_uf"] for role in roles},
            **{f"{role}_design": first.loc[first["role"] == role, "design_uf"] for role in roles},
        },
        columns=columns,
    )
    return table.astype(float).rename_axis(columns="role")


READING_COLUMNS = [
    "id",
    "fitted_capacitor_id",
    "taken_at",
    "capacitance_uf",
    "case_temperature_c",
    "capacitor_voltage_v",
    "esr_ohm",
    "supersedes_id",
    "condition",
]


# Each reading column as the refit reads it on PostgreSQL (`bulk.select_packed`): NULL as a stand-in
# (NaN: a stored value is always finite; 0: no reading has id 0), the condition as its place among the
# choices (-1: a value that is none of them; such a chunk is read through the ORM).
READING_CONDITIONS = [value for value, _ in Reading.Condition.choices]
PACKED_READING_FIELDS = [
    ("id", "id", "int8"),
    ("fitted_capacitor_id", "fitted_capacitor_id", "int8"),
    ("taken_at", "taken_at", "timestamptz"),
    ("capacitance_uf", "capacitance_uf", "float8"),
    *(
        (name, f"coalesce({name}, 'NaN')", "float8")
        for name in ("case_temperature_c", "capacitor_voltage_v", "esr_ohm")
    ),
    ("supersedes_id", "coalesce(supersedes_id, 0)", "int8"),
    (
        "condition",
        "(CASE condition "
        + " ".join(f"WHEN '{value}' THEN {code}" for code, value in enumerate(READING_CONDITIONS))
        + " ELSE -1 END)::int2",
        "int2",
    ),
]
READINGS_FROM = (
    f"fleet_reading WHERE fitted_capacitor_id BETWEEN %s AND %s AND fitted_capacitor_id = ANY({ID_ARRAY_SQL})"
)


def readings_frame(fitted_capacitor_ids) -> pd.DataFrame:
    """Every reading of the given capacitors (one query, straight into arrays: binary values on PostgreSQL),
    with `taken_at` in UTC and a `superseded` column."""
    ids = [int(i) for i in fitted_capacitor_ids]
    frame = _packed_readings(ids) if on_postgresql() else None
    if frame is None:
        rows = Reading.objects.filter(fitted_capacitor_id__any_of=np.array(ids, np.int64)).values_list(*READING_COLUMNS)
        frame = pd.DataFrame.from_records(list(rows), columns=READING_COLUMNS)
        frame["taken_at"] = pd.to_datetime(frame["taken_at"], utc=True)
    superseded_ids = set(frame["supersedes_id"].dropna().astype(np.int64))
    frame["superseded"] = frame["id"].isin(superseded_ids)
    for column in ("capacitance_uf", "case_temperature_c", "capacitor_voltage_v", "esr_ohm"):
        frame[column] = frame[column].astype(float)
    for column in ("id", "fitted_capacitor_id"):
        frame[column] = frame[column].astype(np.int64)
    return frame


def _packed_readings(ids: list[int]) -> pd.DataFrame | None:
    """The readings as `readings_frame` reads them on PostgreSQL; None if a reading's condition is none of the
    choices (read through the ORM instead, as it stands)."""
    frame = select_packed(
        PACKED_READING_FIELDS, READINGS_FROM, [min(ids, default=0), max(ids, default=0), id_array_text(ids)]
    )
    code = frame["condition"].to_numpy()
    if (code < 0).any():
        return None
    frame["condition"] = np.asarray(READING_CONDITIONS, dtype=object)[code]
    frame["supersedes_id"] = frame["supersedes_id"].where(frame["supersedes_id"] != 0)
    return frame[READING_COLUMNS]


def utc_datetime64(instants) -> np.ndarray:
    """Instants (a Series or index of aware timestamps, or naive ones taken as UTC) as naive UTC
    datetime64[ns], with no Python object per value: `.to_numpy()` of an aware column gives an object
    array of Timestamps, and arithmetic on it ran value by value (0.1 s of a 2,000-capacitor refit chunk's
    0.5 s, measured 2026-12-05)."""
    return pd.DatetimeIndex(pd.to_datetime(instants, utc=True)).tz_localize(None).to_numpy("datetime64[ns]")


def part_priors_frame(part_ids) -> pd.DataFrame:
    rows = PartPrior.objects.filter(part_id__in=list(part_ids)).values()
    return pd.DataFrame.from_records(list(rows)).set_index("part_id") if rows else pd.DataFrame()


def successor_of(fitted_capacitor) -> FittedCapacitor | None:
    """The capacitor fitted now in a removed capacitor's position (None while it is in service)."""
    if not fitted_capacitor.removed_on:
        return None
    return (
        FittedCapacitor.objects.filter(
            motor_id=fitted_capacitor.motor_id, role=fitted_capacitor.role, removed_on__isnull=True
        )
        .only("id", "fitted_on")
        .first()
    )
