"""An invented fleet of any size for the benchmark, written in bulk (COPY on PostgreSQL).

The designs, parts and the way capacitors age are the demo's (services/demo.py):
film run capacitors lose capacitance with stress time, faster past a knee;
electrolytic start capacitors dry out (their ESR rises) and now and then fail
suddenly. A capacitor read below its limit is often replaced on plan, a failed
one at once; the successor starts fresh. The simulation steps quarter by
quarter over every motor position at once (arrays, no per-motor loop).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd
from django.db import connection, transaction
from django.utils import timezone

from fleet.engineering.capacitor import acceleration_factor
from fleet.engineering.trends import TrendSettings, default_tempco_ppm_per_k
from fleet.models import FittedCapacitor, Motor, Reading, Site

from .bulk import insert_frame, on_postgresql
from .demo import DESIGNS, FREQUENCY_HZ, VOLTAGE_V, _circuit_for, _parts, _run_capacitor_voltage

SITE_PREFIX = "BFLEET-"
SITES = 4
SINGLE_SHARES = {"evaporator fan": 0.5, "circulation fan": 0.3, "packing conveyor": 0.2}
TWO_VALUE_SHARES = {"irrigation pump": 0.5, "cooler compressor": 0.5}
QUARTER_DAYS = 91


@dataclass(frozen=True)
class FleetSize:
    motors: int
    capacitors: int  # positions, so capacitors in service; replaced ones come on top
    readings: int


def existing_bench_fleet(prefix: str = SITE_PREFIX) -> bool:
    return Site.objects.filter(code__startswith=prefix).exists()


def _next_id(model) -> int:
    return (model.objects.order_by("-id").values_list("id", flat=True).first() or 0) + 1


def _reset_sequences(*models) -> None:
    if on_postgresql():
        with connection.cursor() as cursor:
            for model in models:
                table = model._meta.db_table
                cursor.execute(f"SELECT setval(pg_get_serial_sequence('{table}', 'id'), (SELECT MAX(id) FROM {table}))")


def build_bench_fleet(
    size: FleetSize,
    *,
    seed: int = 11,
    today: dt.date | None = None,
    prefix: str = SITE_PREFIX,
    progress: Callable[[str], None] = print,
) -> dict:
    """Create the fleet in one transaction (its sites' codes and its asset tags start with
    `prefix`); returns the counts written."""
    rng = np.random.default_rng(seed)
    today = today or timezone.localdate()
    settings = TrendSettings()
    with transaction.atomic():
        parts = _parts()
        designs = {d.name: d for d in DESIGNS}
        two_value_share = float(np.clip(size.capacitors / max(size.motors, 1) - 1.0, 0.0, 1.0))
        names = list(SINGLE_SHARES) + list(TWO_VALUE_SHARES)
        weights = np.r_[
            np.array(list(SINGLE_SHARES.values())) * (1 - two_value_share),
            np.array(list(TWO_VALUE_SHARES.values())) * two_value_share,
        ]
        design_of_motor = rng.choice(len(names), size=size.motors, p=weights / weights.sum())
        progress(f"estimating {len(names)} nameplate designs")
        circuits = {name: _circuit_for(designs[name], parts) for name in names}
        sites = [
            Site.objects.create(code=f"{prefix}{k + 1}", name=f"Benchmark plant {k + 1}", time_zone="UTC")
            for k in range(SITES)
        ]
        motor_ids = np.arange(size.motors) + _next_id(Motor)
        commissioned = np.datetime64(today) - rng.integers(4 * 365, 9 * 365, size.motors).astype("timedelta64[D]")
        motor_columns = {
            "id": motor_ids,
            "asset_tag": [f"{prefix}M{i:07d}" for i in range(size.motors)],
            "site_id": np.array([s.id for s in sites])[np.arange(size.motors) % SITES],
            "location": "",
            "route_order": np.arange(size.motors) // SITES,
            "insulation_class": "B",
            "commissioned_on": pd.Series(commissioned).dt.date,
            "rated_voltage_v": VOLTAGE_V,
            "frequency_hz": FREQUENCY_HZ,
        }
        frame = pd.DataFrame(motor_columns)
        per_design = pd.DataFrame(
            [
                {
                    "application": designs[n].application,
                    "motor_type": designs[n].motor_type,
                    "load_type": designs[n].load_type,
                    "poles": designs[n].poles,
                    "output_w": designs[n].output_w,
                    "full_load_current_a": designs[n].full_load_current_a,
                    "rated_speed_rpm": designs[n].rated_speed_rpm,
                    **{k: v for k, v in circuits[n].items() if not k.startswith("_")},
                }
                for n in names
            ]
        )
        frame = pd.concat([frame, per_design.iloc[design_of_motor].reset_index(drop=True)], axis=1)
        insert_frame(Motor, frame)
        progress(f"motors: {size.motors:,}")

        # Motor positions: (motor, role, part), one capacitor in service each.
        position_motor, position_role, position_part = [], [], []
        for k, name in enumerate(names):
            for role, code in (("run", designs[name].run_part), ("start", designs[name].start_part)):
                if code:
                    motors = np.flatnonzero(design_of_motor == k)
                    position_motor.append(motors)
                    position_role.append(np.full(len(motors), role, dtype=object))
                    position_part.append(np.full(len(motors), code, dtype=object))
        motor_index = np.concatenate(position_motor)
        role = np.concatenate(position_role)
        part_code = np.concatenate(position_part)
        positions = len(motor_index)
        part_table = pd.DataFrame(
            [
                {
                    "code": code,
                    "part_id": p.id,
                    "rated_uf": p.rated_uf,
                    "rated_voltage_v": p.rated_voltage_v,
                    "tolerance": 1.0 - p.tolerance_minus_pct / 100.0,
                    "film": p.dielectric == "film",
                }
                for code, p in parts.items()
            ]
        ).set_index("code")
        pp = part_table.loc[part_code]
        film = pp["film"].to_numpy(bool)
        rated_uf = pp["rated_uf"].to_numpy(float)
        tolerance = pp["tolerance"].to_numpy(float)
        case_by_design = np.array([designs[n].case_temp_c for n in names], float)
        case_c = case_by_design[design_of_motor[motor_index]] + rng.normal(0.0, 4.0, positions)
        v_run = np.array([_run_capacitor_voltage(designs[n], circuits[n], parts) for n in names], float)
        voltage = np.where(
            film, v_run[design_of_motor[motor_index]] * rng.normal(1.0, 0.03, positions), VOLTAGE_V * 1.2
        )
        rate = np.asarray(
            acceleration_factor(
                case_c,
                voltage,
                settings.reference_temperature_c,
                pp["rated_voltage_v"].to_numpy(float),
                settings.doubling_k,
                np.where(film, settings.voltage_exponent, 0.0),
            ),
            float,
        )
        tempco = np.asarray(default_tempco_ppm_per_k(np.where(film, "film", "electrolytic"), settings), float)

        quarters = max(1, int(np.ceil(size.readings / max(positions, 1))))
        skip = 1.0 - size.readings / (positions * quarters)
        first_day = np.datetime64(today) - np.timedelta64(QUARTER_DAYS * quarters, "D")
        commissioned_day = commissioned[motor_index]

        capacitor_rows: dict[str, list] = {"position": [], "fitted_on": []}
        next_capacitor = [0]

        def new_capacitors(which, fitted_day):
            """Fresh capacitors for the given positions: their own start, slope and sudden-failure time."""
            count = len(which)
            ids = np.arange(next_capacitor[0], next_capacitor[0] + count)
            next_capacitor[0] += count
            capacitor_rows["position"].append(which)
            capacitor_rows["fitted_on"].append(fitted_day)
            f = film[which]
            initial[which] = rng.normal(np.where(f, 1.01, 1.0), 0.015)
            slope[which] = -np.abs(rng.normal(np.where(f, 3e-6, 2.5e-6), np.where(f, 1e-6, 0.8e-6)))
            sudden_h[which] = np.where(f, np.inf, rng.exponential(12 * 8760, count))
            fitted[which] = fitted_day
            current[which] = ids

        removals: list[tuple] = []

        def remove(which, day, reason):
            """Mark the current capacitors of these positions removed on `day`."""
            removals.append((current[which].copy(), day, reason))

        initial = np.zeros(positions)
        slope = np.zeros(positions)
        sudden_h = np.zeros(positions)
        fitted = np.zeros(positions, "datetime64[D]")
        current = np.zeros(positions, int)

        # Before the readings start, each position's capacitor was fitted at commissioning or,
        # where that one would be worn out already, replaced at a time of its own.
        everyone = np.arange(positions)
        new_capacitors(everyone, commissioned_day)
        worn_hours = (first_day - commissioned_day).astype(float) * 24.0
        worn = initial + slope * worn_hours * rate < tolerance
        worn_positions = np.flatnonzero(worn)
        replaced_on = first_day - rng.integers(30, 3 * 365, len(worn_positions)).astype("timedelta64[D]")
        replaced_on = np.maximum(replaced_on, commissioned_day[worn_positions] + np.timedelta64(1, "D"))
        remove(worn_positions, replaced_on, np.where(rng.random(len(worn_positions)) < 0.3, "failed", "planned"))
        new_capacitors(worn_positions, replaced_on)

        reading_parts = []
        for q in range(quarters):
            day = (
                first_day
                + np.timedelta64(QUARTER_DAYS * q, "D")
                + rng.integers(0, 14, positions).astype("timedelta64[D]")
            )
            day = np.minimum(day, np.datetime64(today))
            hours = (day - fitted).astype(float) * 24.0
            fraction = initial + slope * hours * rate
            knee = np.where(film, 0.93, 0.95)
            fraction = np.where(fraction < knee, knee - 3.0 * (knee - fraction), fraction)
            failed = np.flatnonzero((hours > sudden_h) | (fraction < 0.6))
            if len(failed):
                gone = np.maximum(
                    day[failed] - rng.integers(1, 60, len(failed)).astype("timedelta64[D]"), fitted[failed]
                )
                remove(failed, gone, "failed")
                new_capacitors(failed, gone)
                hours[failed] = (day[failed] - fitted[failed]).astype(float) * 24.0
                fraction[failed] = initial[failed] + slope[failed] * hours[failed] * rate[failed]
            read = (rng.random(positions) >= skip) & (day > fitted)
            which = np.flatnonzero(read)
            seasonal = 6.0 * np.sin(2 * np.pi * (pd.DatetimeIndex(day[which]).day_of_year.to_numpy() - 100) / 365.0)
            temperature = np.round(case_c[which] + seasonal + rng.normal(0, 1.5, len(which)), 1)
            measured = (
                rated_uf[which]
                * fraction[which]
                * (1.0 + tempco[which] * 1e-6 * (temperature - 25.0))
                * (1 + rng.normal(0, 0.006, len(which)))
            )
            f = film[which]
            in_circuit = f & (rng.random(len(which)) < 0.3)
            cap_v = np.where(f, np.round(voltage[which] * rng.normal(1, 0.01, len(which)), 1), np.nan)
            esr_measured = ~f & (rng.random(len(which)) < 0.3)
            dissipation = 0.03 + 0.8 * np.maximum(1.0 - fraction[which], 0.0)
            esr = np.where(esr_measured, dissipation / (2 * np.pi * FREQUENCY_HZ * measured * 1e-6), np.nan)
            minute = rng.integers(9 * 60, 16 * 60, len(which))
            reading_parts.append(
                pd.DataFrame(
                    {
                        "capacitor": current[which],
                        "taken_at": day[which].astype("datetime64[m]") + minute.astype("timedelta64[m]"),
                        "method": np.where(in_circuit, "in_circuit", "meter"),
                        "capacitance_uf": np.round(measured, 3),
                        "capacitor_current_a": np.where(
                            in_circuit, np.round(measured * 1e-6 * 2 * np.pi * FREQUENCY_HZ * cap_v, 4), np.nan
                        ),
                        "capacitor_voltage_v": cap_v,
                        "case_temperature_c": temperature,
                        "ambient_temperature_c": np.round(temperature - rng.uniform(3, 12, len(which)), 1),
                        "esr_ohm": np.round(esr, 4),
                    }
                )
            )
            planned = which[(fraction[which] < tolerance[which] - 0.01) & (rng.random(len(which)) < 0.6)]
            if len(planned):
                remove(planned, day[planned], "planned")
                new_capacitors(planned, day[planned])
            progress(f"simulated quarter {q + 1}/{quarters}")

        capacitor_count = next_capacitor[0]
        removed_at = np.full(capacitor_count, np.datetime64("NaT"), "datetime64[D]")
        removed_reason = np.full(capacitor_count, "", dtype=object)
        for ids, day, reason in removals:
            removed_at[ids], removed_reason[ids] = day, reason
        first_capacitor_id = _next_id(FittedCapacitor)
        capacitor_position = np.concatenate(capacitor_rows["position"])
        capacitors = pd.DataFrame(
            {
                "id": np.arange(capacitor_count) + first_capacitor_id,
                "motor_id": motor_ids[motor_index[capacitor_position]],
                "role": role[capacitor_position],
                "part_id": pp["part_id"].to_numpy()[capacitor_position],
                "serial": "",
                "fitted_on": pd.Series(np.concatenate(capacitor_rows["fitted_on"])).dt.date,
                "removed_on": pd.Series(removed_at).dt.date,
                "removal_reason": removed_reason,
                "notes": "",
                "override_reason": "",
            }
        )
        capacitors["removed_on"] = capacitors["removed_on"].astype(object).where(capacitors["removed_on"].notna(), None)
        insert_frame(FittedCapacitor, capacitors)
        progress(f"capacitors: {capacitor_count:,} ({positions:,} in service)")

        readings = pd.concat(reading_parts, ignore_index=True)
        readings["fitted_capacitor_id"] = readings.pop("capacitor") + first_capacitor_id
        readings["taken_at"] = pd.to_datetime(readings["taken_at"]).dt.tz_localize("UTC")
        readings["source"] = Reading.Source.DEMO
        readings["notes"] = ""
        readings.insert(0, "id", np.arange(len(readings)) + _next_id(Reading))
        batch = 200_000
        for start in range(0, len(readings), batch):
            insert_frame(Reading, readings.iloc[start : start + batch])
            progress(f"readings: {min(start + batch, len(readings)):,}/{len(readings):,}")
        _reset_sequences(Motor, FittedCapacitor, Reading)
    return {"motors": size.motors, "capacitors": capacitor_count, "in_service": positions, "readings": len(readings)}
