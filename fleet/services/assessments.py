"""Refits: readings in bulk from the database, the engineering core, assessments back.

A refit of any number of capacitors costs a fixed handful of queries: the
capacitors with their parts and motors, their readings, their companions'
ratings, the stored part priors and the current assessments, then one UPDATE and
one bulk INSERT. Nothing is written for a capacitor whose current assessment
already covers its newest reading (unless forced), so a refit re-run after a
worker died writes the same rows once.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd
from django.db import transaction
from django.utils import timezone

from fleet.engineering.capacitor import VERDICT_LOW, VERDICT_NAMES, VERDICT_OPEN, tolerance_verdict
from fleet.engineering.drift import LIMIT_NAMES, ROLE_RUN, capacitance_limits, has_run_capacitor, operating_figures
from fleet.engineering.motor import (
    LOAD_CONSTANT,
    LOAD_FAN,
    MotorCircuit,
    load_matching_rated_slip,
    synchronous_speed_rad_s,
)
from fleet.engineering.planning import risk_levels
from fleet.engineering.trends import MODEL_LOG, PartPriors, TrendSettings, crossing_quantiles, fit_trends
from fleet.models import Assessment, FittedCapacitor, PartPrior

from .selectors import (
    CIRCUIT_FIELDS,
    companion_capacitance_frame,
    installations_frame,
    part_priors_frame,
    readings_frame,
)

MODEL_VERSION = "trend-1"
TOLERANCE_LIMIT = "tolerance"
HORIZON_DAYS = 50 * 365


@dataclass(frozen=True)
class RefitOutcome:
    written: int
    skipped: int
    readings: int


def _hours_since_fitting(readings: pd.DataFrame, fitted_on: np.ndarray) -> np.ndarray:
    """Hours from the fitting date (midnight UTC) to each reading."""
    fitted = np.asarray(fitted_on, dtype="datetime64[D]").astype("datetime64[s]")
    taken = pd.to_datetime(readings["taken_at"], utc=True).dt.tz_localize(None).to_numpy().astype("datetime64[s]")
    return (taken - fitted) / np.timedelta64(1, "h")


def _fit_frames(inst: pd.DataFrame, readings: pd.DataFrame, priors: PartPriors | None, part_ids):
    """Run the trend fit on frames; returns the fit and the per-reading order used."""
    group = inst.index.get_indexer(readings["installation_id"])
    part_index = pd.Index(part_ids).get_indexer(inst["part_id"])
    fitted_on = inst["fitted_on"].to_numpy()[group]
    return fit_trends(
        group=group,
        part=part_index,
        time_h=_hours_since_fitting(readings, fitted_on),
        capacitance_uf=readings["capacitance_uf"].to_numpy(float),
        rated_uf=inst["rated_uf"].to_numpy(float),
        temperature_c=readings["case_temperature_c"].to_numpy(float),
        voltage_v=readings["capacitor_voltage_v"].to_numpy(float),
        rated_voltage_v=inst["part_rated_voltage_v"].to_numpy(float),
        settings=TrendSettings(),
        excluded=readings["superseded"].to_numpy(bool),
        priors=priors,
    )


def refresh_part_priors(part_ids=None) -> int:
    """Fit every capacitor of the given parts (all parts if None) and store each
    part's population of paths. Returns the number of parts stored."""
    installations = FittedCapacitor.objects.all()
    if part_ids is not None:
        installations = installations.filter(part_id__in=list(part_ids))
    ids = list(installations.filter(readings__isnull=False).distinct().values_list("id", flat=True))
    if not ids:
        return 0
    inst = installations_frame(ids).set_index("installation_id", drop=False)
    readings = readings_frame(ids)
    parts = np.sort(inst["part_id"].unique())
    fit = _fit_frames(inst, readings, None, parts)
    rows = [
        PartPrior(
            part_id=int(part_id),
            trend_model=str(fit.priors.model[i]),
            intercept_mean=float(fit.priors.intercept_mean[i]),
            intercept_var=float(fit.priors.intercept_var[i]),
            slope_mean=float(fit.priors.slope_mean[i]),
            slope_var=float(fit.priors.slope_var[i]),
            noise_var=float(fit.priors.noise_var[i]),
            capacitors=int(fit.priors.capacitors[i]),
        )
        for i, part_id in enumerate(parts)
    ]
    with transaction.atomic():
        PartPrior.objects.filter(part_id__in=parts.tolist()).delete()
        PartPrior.objects.bulk_create(rows)
    return len(rows)


def _stored_priors(part_ids) -> PartPriors:
    frame = part_priors_frame(part_ids)
    missing = [p for p in part_ids if frame.empty or p not in frame.index]
    if missing:
        refresh_part_priors(missing)
        frame = part_priors_frame(part_ids)
    frame = frame.loc[list(part_ids)]
    return PartPriors(
        model=frame["trend_model"].to_numpy(),
        intercept_mean=frame["intercept_mean"].to_numpy(float),
        intercept_var=frame["intercept_var"].to_numpy(float),
        slope_mean=frame["slope_mean"].to_numpy(float),
        slope_var=frame["slope_var"].to_numpy(float),
        noise_var=frame["noise_var"].to_numpy(float),
        capacitors=frame["capacitors"].to_numpy(int),
    )


def _motor_circuits(inst: pd.DataFrame):
    """Circuit, load and ratings of the motors that have an equivalent circuit."""
    with_circuit = inst["r1m_ohm"].notna().to_numpy()
    sub = inst[with_circuit]
    circuit = MotorCircuit.from_arrays(
        r1m=sub["r1m_ohm"],
        x1m=sub["x1m_ohm"],
        r1a=sub["r1a_ohm"],
        x1a=sub["x1a_ohm"],
        r2=sub["r2_ohm"],
        x2=sub["x2_ohm"],
        xm=sub["xm_ohm"],
        turns_ratio=sub["turns_ratio"],
        voltage_v=sub["voltage_v"],
        frequency_hz=sub["frequency_hz"],
        poles=sub["poles"],
        rotational_loss_w=sub["rotational_loss_w"].fillna(0.0),
    )
    companions = companion_capacitance_frame(sub["motor_id"].unique())
    own_run = np.where(sub["role"] == ROLE_RUN, sub["rated_uf"], np.nan)
    own_start = np.where(sub["role"] != ROLE_RUN, sub["rated_uf"], np.nan)
    run_uf = np.where(np.isnan(own_run), companions["run"].reindex(sub["motor_id"]).to_numpy(float), own_run)
    start_uf = np.where(np.isnan(own_start), companions["start"].reindex(sub["motor_id"]).to_numpy(float), own_start)
    kind = sub["motor_type"].to_numpy()
    runs = has_run_capacitor(kind)
    run_uf = np.where(runs, np.nan_to_num(run_uf), 0.0)
    start_uf = np.nan_to_num(start_uf)
    sync_rpm = (
        synchronous_speed_rad_s(sub["frequency_hz"].to_numpy(float), sub["poles"].to_numpy(float)) * 60 / (2 * np.pi)
    )
    rated_slip = 1.0 - sub["rated_speed_rpm"].to_numpy(float) / sync_rpm
    load_kind = np.where(sub["load_type"] == "fan_law", LOAD_FAN, LOAD_CONSTANT)
    load = load_matching_rated_slip(circuit, run_uf, rated_slip, load_kind, aux_in_circuit=runs)
    return with_circuit, circuit, load, run_uf, start_uf, kind


def _limits_per_design(sub: pd.DataFrame, circuit, load, kind, role, run_uf, start_uf):
    """Capacitance limits computed once per distinct design, then spread back.

    The limits depend on the circuit, the load and the ratings only, which a
    fleet's motors share by the dozen or the thousand; the scan is the costly
    part of a refit, so it runs once per distinct combination.
    """
    key = pd.DataFrame(
        {
            **{name: sub[name].to_numpy() for name in CIRCUIT_FIELDS},
            "role": role,
            "kind": kind,
            "run": run_uf,
            "start": start_uf,
            "fla": sub["full_load_current_a"].to_numpy(),
            "cap_v": sub["part_rated_voltage_v"].to_numpy(),
            "torque": np.round(load.torque_at_rated_nm, 9),
            "load_kind": load.kind,
        }
    )
    design = key.groupby(list(key.columns), sort=False, dropna=False).ngroup().to_numpy()
    first = np.unique(design, return_index=True)[1]
    limits = capacitance_limits(
        circuit.take(first),
        type(load)(load.torque_at_rated_nm[first], load.rated_speed_rad_s[first], np.asarray(load.kind)[first]),
        kind[first],
        role[first],
        run_uf[first],
        start_uf[first],
        sub["full_load_current_a"].to_numpy(float)[first],
        sub["part_rated_voltage_v"].to_numpy(float)[first],
    )
    # ngroup numbers designs 0..k-1 and `first` lists them in that order.
    return limits.governing_fraction[design], limits.governing_limit[design]


def refit_installations(installation_ids, *, now: dt.datetime | None = None, force: bool = False) -> RefitOutcome:
    """Fit, judge and plan the given fitted capacitors; store one assessment each."""
    now = now or timezone.now()
    ids = sorted({int(i) for i in installation_ids})
    inst = installations_frame(ids)
    readings = readings_frame(ids)
    usable = readings[~readings["superseded"]]
    newest = usable.groupby("installation_id")["taken_at"].max()
    max_reading_id = readings.groupby("installation_id")["id"].max()
    inst = inst[inst["installation_id"].isin(newest.index)]
    if not force and not inst.empty:
        # Stale means "a reading was added since the fit" (by id), not "a newer
        # reading date": a backdated or late-imported reading must be used too.
        seen = pd.Series(
            dict(
                Assessment.objects.filter(
                    installation_id__in=inst["installation_id"].tolist(), is_current=True, model_version=MODEL_VERSION
                ).values_list("installation_id", "max_reading_id")
            ),
            dtype="float64",
        )
        seen_id = seen.reindex(inst["installation_id"]).to_numpy()
        covered = ~np.isnan(seen_id) & (seen_id >= max_reading_id.reindex(inst["installation_id"]).to_numpy())
        inst = inst[~covered]
    skipped = len(ids) - len(inst)
    if inst.empty:
        return RefitOutcome(written=0, skipped=skipped, readings=0)
    inst = inst.set_index("installation_id", drop=False)
    readings = readings[readings["installation_id"].isin(inst.index)].reset_index(drop=True)
    part_ids = np.sort(inst["part_id"].unique())
    fit = _fit_frames(inst, readings, _stored_priors(part_ids.tolist()), part_ids)

    rated_uf = inst["rated_uf"].to_numpy(float)
    tolerance_fraction = 1.0 - inst["tolerance_minus_pct"].to_numpy(float) / 100.0
    limit_fraction = tolerance_fraction.copy()
    limit_source = np.full(len(inst), TOLERANCE_LIMIT, dtype=object)
    figures_now = [{} for _ in range(len(inst))]
    figures_new = [{} for _ in range(len(inst))]
    with_circuit, circuit, load, run_uf, start_uf, kind = _motor_circuits(inst)
    if with_circuit.any():
        role = inst["role"].to_numpy()[with_circuit]
        drift_fraction, governing_limit = _limits_per_design(
            inst[with_circuit], circuit, load, kind, role, run_uf, start_uf
        )
        index = np.flatnonzero(with_circuit)
        stricter = np.nan_to_num(drift_fraction, nan=-1.0) > limit_fraction[index]
        limit_fraction[index] = np.where(stricter, drift_fraction, limit_fraction[index])
        names = np.array(LIMIT_NAMES, dtype=object)[np.clip(governing_limit, 0, None)]
        limit_source[index] = np.where(stricter, names, limit_source[index])
        scale = fit.fraction_now[index]
        is_run = role == ROLE_RUN
        now_rows = operating_figures(
            circuit, load, np.where(is_run, scale, 1.0) * run_uf, np.where(is_run, 1.0, scale) * start_uf, kind
        ).as_rows()
        new_rows = operating_figures(circuit, load, run_uf, start_uf, kind).as_rows()
        for position, row_now, row_new in zip(index, now_rows, new_rows, strict=True):
            figures_now[position], figures_new[position] = row_now, row_new

    quantiles = crossing_quantiles(fit, limit_fraction)
    newest_at = pd.to_datetime(newest.reindex(inst.index), utc=True)
    elapsed_h = ((pd.Timestamp(now) - newest_at) / pd.Timedelta(hours=1)).to_numpy(float)
    with np.errstate(invalid="ignore"):
        days = ((quantiles - fit.stress_hours_now) / fit.stress_rate - elapsed_h) / 24.0

    latest = usable[usable["installation_id"].isin(inst.index)].sort_values(["installation_id", "taken_at", "id"])
    latest = latest.groupby("installation_id").tail(1).set_index("installation_id").reindex(inst.index)
    verdict = tolerance_verdict(
        latest["capacitance_uf"].to_numpy(float),
        rated_uf,
        inst["tolerance_minus_pct"].to_numpy(float),
        inst["tolerance_plus_pct"].to_numpy(float),
    )
    crossed = (
        np.isin(verdict.code, [VERDICT_LOW, VERDICT_OPEN])
        | (latest["condition"].to_numpy() != "sound")
        | (fit.fraction_now < limit_fraction)
    )
    risk, due_days = risk_levels(days[0], days[1], crossed)
    today = now.date()
    reading_ids = readings["id"].to_numpy()
    flagged_by_group = (
        pd.Series(reading_ids[fit.flagged]).groupby(readings["installation_id"].to_numpy()[fit.flagged]).apply(list)
    )
    slope_scale = np.where(fit.model == MODEL_LOG, fit.fraction_now, 1.0) * 1e5  # % of rated per 1000 h

    def day(offset):
        """A date from a day offset; None past the planning horizon (shown as "beyond")."""
        return today + dt.timedelta(days=float(offset)) if offset <= HORIZON_DAYS else None

    group_of_reading = inst.index.get_indexer(readings["installation_id"])
    stress_points = (
        pd.DataFrame({"group": group_of_reading, "id": reading_ids, "tau": np.round(fit.stress_hours, 1)})
        .groupby("group")[["id", "tau"]]
        .apply(lambda frame: frame.to_numpy().tolist())
    )

    def trend_record(i):
        return {
            "model": str(fit.model[i]),
            "intercept": float(fit.intercept[i]),
            "slope_per_hour": float(fit.slope_per_hour[i]),
            "covariance": [
                float(fit.covariance[i, 0, 0]),
                float(fit.covariance[i, 0, 1]),
                float(fit.covariance[i, 1, 1]),
            ],
            "noise_sd": float(fit.noise_sd[i]),
            "stress_hours_now": float(fit.stress_hours_now[i]),
            "stress_rate": float(fit.stress_rate[i]),
            "rated_uf": float(rated_uf[i]),
            "points": [[int(r), float(t)] for r, t in stress_points.get(i, [])],
        }

    rows = []
    for i, installation_id in enumerate(inst.index):
        rows.append(
            Assessment(
                installation_id=int(installation_id),
                model_version=MODEL_VERSION,
                fitted_through=newest_at.iloc[i].to_pydatetime(),
                newest_reading_id=int(latest["id"].iloc[i]),
                max_reading_id=int(max_reading_id[installation_id]),
                readings_used=int(fit.readings_used[i]),
                readings_flagged=int(fit.readings_flagged[i]),
                flagged_reading_ids=[int(x) for x in flagged_by_group.get(installation_id, [])],
                trend_model=str(fit.model[i]),
                slope_pct_per_1000h=float(fit.slope_per_hour[i] * slope_scale[i]),
                slope_sd_pct_per_1000h=float(fit.slope_sd[i] * slope_scale[i]),
                low_confidence=bool(fit.low_confidence[i]),
                capacitance_now_uf=float(fit.fraction_now[i] * rated_uf[i]),
                latest_verdict=VERDICT_NAMES[int(verdict.code[i])],
                limit_fraction=float(limit_fraction[i]),
                limit_source=str(limit_source[i]),
                p10_on=day(max(days[0, i], 0.0)),
                p50_on=day(max(days[1, i], 0.0)),
                p90_on=day(max(days[2, i], 0.0)),
                risk=str(risk[i]),
                replace_by=day(due_days[i]),
                figures_now=figures_now[i],
                figures_new=figures_new[i],
                trend=trend_record(i),
            )
        )
    with transaction.atomic():
        Assessment.objects.filter(installation_id__in=inst.index.tolist(), is_current=True).update(is_current=False)
        Assessment.objects.bulk_create(rows)
    return RefitOutcome(written=len(rows), skipped=skipped, readings=int(len(readings)))
