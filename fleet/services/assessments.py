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
import json
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import partial

import numpy as np
import pandas as pd
from django.conf import settings
from django.db import connection, transaction
from django.db.models import Exists, Max, OuterRef
from django.utils import timezone

from fleet.engineering.calibration import (
    HOURS_PER_DAY,
    calibrated_crossing_quantiles,
    crossing_days_through_readings,
    default_calibration,
)
from fleet.engineering.capacitor import (
    VERDICT_NAMES,
    VERDICT_OPEN,
    VERDICT_SHORT,
    dissipation_factor_from_esr,
    tolerance_verdict,
)
from fleet.engineering.drift import (
    CIRCUIT_ESTIMATED,
    LIMIT_NAMES,
    ROLE_RUN,
    ROLE_START,
    DriftLimits,
    OperatingFigures,
    capacitance_limits,
    has_run_capacitor,
    judge_limits,
    limit_levels,
    operating_figures,
    overloaded_by_the_part,
)
from fleet.engineering.motor import (
    MotorCircuit,
    load_kind_from_type,
    load_matching_rated_slip,
    synchronous_speed_rad_s,
)
from fleet.engineering.planning import (
    ALERT_LEVELS,
    DISSIPATION_LIMIT,
    EVIDENCE_DEFECT,
    EVIDENCE_DF,
    EVIDENCE_NONE,
    EVIDENCE_OPEN_OR_SHORT,
    EVIDENCE_OVERLOAD,
    RISK_REPLACE_NOW,
    TOLERANCE_LIMIT,
    Judgement,
    PlanningSettings,
    alert_index,
    instant_days,
    judge,
)
from fleet.engineering.rules import CONDITION_SOUND, microfarad_text
from fleet.engineering.trends import (
    MODEL_LINEAR,
    MODEL_LOG,
    PATH_STRAIGHT,
    PartPriors,
    TrendFit,
    TrendSettings,
    default_tempco_ppm_per_k,
    dissipation_trend,
    fit_trends,
)
from fleet.models import Assessment, BandCalibration, FittedCapacitor, PartPrior, Reading

from .bulk import ID_ARRAY_SQL, id_array_text, insert_frame, on_postgresql, select_frame, select_packed, side_by_side
from .selectors import (
    CIRCUIT_FIELDS,
    companion_capacitance_frame,
    fitted_capacitors_frame,
    part_priors_frame,
    readings_frame,
    utc_datetime64,
)

MODEL_VERSION = "trend-2"
ALL_LIMITS = (TOLERANCE_LIMIT, *LIMIT_NAMES)


@dataclass(frozen=True)
class RefitOutcome:
    written: int
    skipped: int
    readings: int


def _hours_since_fitting(readings: pd.DataFrame, fitted_on: np.ndarray) -> np.ndarray:
    """Hours from the fitting date (midnight UTC) to each reading."""
    fitted = np.asarray(fitted_on, dtype="datetime64[D]").astype("datetime64[s]")
    taken = utc_datetime64(readings["taken_at"]).astype("datetime64[s]")
    return (taken - fitted) / np.timedelta64(1, "h")


def fit_frames(
    inst: pd.DataFrame,
    readings: pd.DataFrame,
    priors: PartPriors | None,
    part_ids,
    forms: dict[str, str] | None = None,
    settings: TrendSettings | None = None,
    shapes: dict[str, str] | None = None,
) -> TrendFit:
    """Run the trend fit on frames (inst indexed by fitted capacitor id); `forms` and `shapes` map a
    dielectric to the trend form and the path shape its back-test chose (stored ones by default)."""
    group = inst.index.get_indexer(readings["fitted_capacitor_id"])
    part_index = pd.Index(part_ids).get_indexer(inst["part_id"])
    fitted_on = np.asarray(inst["fitted_on"].to_numpy(), dtype="datetime64[D]")[group]  # dates converted once each
    settings = settings or TrendSettings()
    own_tempco = inst["part_tempco_ppm_per_k"].to_numpy(float)
    forms = stored_forms() if forms is None else forms
    shapes = stored_shapes() if shapes is None else shapes
    return fit_trends(
        group=group,
        part=part_index,
        time_h=_hours_since_fitting(readings, fitted_on),
        capacitance_uf=readings["capacitance_uf"].to_numpy(float),
        rated_uf=inst["rated_uf"].to_numpy(float),
        temperature_c=readings["case_temperature_c"].to_numpy(float),
        voltage_v=readings["capacitor_voltage_v"].to_numpy(float),
        rated_voltage_v=inst["part_rated_voltage_v"].to_numpy(float),
        settings=settings,
        excluded=readings["superseded"].to_numpy(bool),
        priors=priors,
        tempco_ppm_per_k=np.where(
            np.isnan(own_tempco), default_tempco_ppm_per_k(inst["dielectric"].to_numpy(), settings), own_tempco
        ),
        tempco_fixed=~np.isnan(own_tempco),
        model_per_capacitor=inst["dielectric"].map(forms).astype(object).fillna("").to_numpy(object),
        straight_per_capacitor=(inst["dielectric"].map(shapes) == PATH_STRAIGHT).to_numpy(bool),
        dielectric=inst["dielectric"].to_numpy(str),
    )


def _finite_prior_rows(fit: TrendFit, parts) -> list[PartPrior]:
    """Part priors to store; a part whose estimate is not finite is left out (and
    keeps its previous prior), so one absurd capacitor can never poison the rest."""
    priors = fit.priors
    names = ("intercept_mean", "intercept_var", "slope_mean", "slope_var", "noise_var", "tempco_ppm_per_k")
    values = np.stack([np.asarray(getattr(priors, name), float) for name in names])
    extra = {
        field: np.broadcast_to(np.nan_to_num(np.asarray(0.0 if v is None else v, float)), (len(parts),))
        for field, v in (
            ("curvature_per_h2", priors.curvature),
            ("curvature_var", priors.curvature_var),
            ("slope_per_age", priors.slope_per_age),
            ("bend_slope_mean", priors.bend_slope_mean),
            ("bend_slope_var", priors.bend_slope_var),
            ("bend_slope_cov", priors.bend_slope_cov),
        )
    }
    finite = np.isfinite(values).all(axis=0) & (values[[1, 3, 4]] > 0).all(axis=0)
    return [
        PartPrior(
            part_id=int(part_id),
            trend_model=str(priors.model[i]),
            capacitors=int(priors.capacitors[i]),
            **{name: float(values[k, i]) for k, name in enumerate(names)},
            **{field: float(values[i]) for field, values in extra.items()},
            voltage_ratio=_finite_or_none(np.broadcast_to(np.asarray(priors.voltage_ratio, float), (len(parts),))[i])
            if priors.voltage_ratio is not None
            else None,
            **{
                field: _finite_or_none(np.broadcast_to(np.asarray(values, float), (len(parts),))[i])
                if values is not None
                else None
                for field, values in (
                    ("stress_rate", priors.stress_rate),
                    ("stress_rate_log_var", priors.stress_rate_log_var),
                    ("reading_log_var", priors.reading_log_var),
                )
            },
        )
        for i, part_id in enumerate(parts)
        if finite[i]
    ]


def refresh_part_priors(part_ids=None) -> int:
    """Fit capacitors of the given parts (all parts if None) and store each part's population
    of paths. Returns the number of parts stored.

    A population is statistics: past FLEET_PRIOR_MAX_CAPACITORS_PER_PART capacitors of a part, a
    fixed random sample of them is fitted, so a plant-size refit starts in bounded time and memory.
    """
    ids = _prior_sample(part_ids, settings.FLEET_PRIOR_MAX_CAPACITORS_PER_PART)
    if not ids:
        return 0
    # The sample's readings lie scattered over the table: read in two halves at once, the server works on both.
    halves = [ids[: len(ids) // 2], ids[len(ids) // 2 :]] if len(ids) > 1 else [ids]
    inst, *read = side_by_side(partial(fitted_capacitors_frame, ids), *(partial(readings_frame, h) for h in halves))
    readings = pd.concat(read, ignore_index=True)
    inst = inst.set_index("fitted_capacitor_id", drop=False)
    parts = np.sort(inst["part_id"].unique())
    rows = _finite_prior_rows(fit_frames(inst, readings, None, parts), parts)
    with transaction.atomic():
        PartPrior.objects.filter(part_id__in=[row.part_id for row in rows]).delete()
        PartPrior.objects.bulk_create(rows)
    return len(rows)


def _prior_sample(part_ids, per_part: int) -> list[int]:
    """Up to `per_part` capacitors with readings of each part (all parts if None), a fixed random sample, in id
    order: every capacitor of a part that has fewer.

    The capacitors are shuffled once (seed 0) and looked at in that order, twice as many a part as wanted at a
    time, each batch asked which have readings (an index probe a capacitor): a plant's 350,000 capacitors are
    never joined to its two million readings to learn which have any (1.3-1.9 s of the fleet refit's start,
    measured 2026-12-04)."""
    capacitors = FittedCapacitor.objects.order_by()  # no ordering: the model's sorts by motor tag, through a join
    if part_ids is not None:
        capacitors = capacitors.filter(part_id__in=list(part_ids))
    sql, params = capacitors.values_list("id", "part_id").query.sql_with_params()
    if on_postgresql():
        frame = select_packed([("id", "id", "int8"), ("part_id", "part_id", "int8")], f"({sql}) AS q", params)
    else:
        frame = select_frame(sql, params, ["id", "part_id"]).astype(np.int64)
    if frame.empty:
        return []
    frame = frame.sort_values("id", ignore_index=True)  # the rows as stored come in no set order
    shuffled = frame.iloc[np.random.default_rng(0).permutation(len(frame))].reset_index(drop=True)
    rank = shuffled.groupby("part_id").cumcount().to_numpy()
    has_readings = np.zeros(len(shuffled), bool)
    asked = np.zeros(len(shuffled), bool)
    reach = 2 * per_part
    while True:
        kept = pd.Series(has_readings).groupby(shuffled["part_id"]).cumsum().to_numpy()
        short = pd.Series(kept < per_part).groupby(shuffled["part_id"]).transform("all").to_numpy()
        batch = ~asked & (rank < reach) & short
        if not batch.any():
            break
        batch_ids = shuffled["id"].to_numpy()[batch]
        found = set(
            FittedCapacitor.objects.order_by()
            .filter(id__any_of=batch_ids)
            .filter(Exists(Reading.objects.filter(fitted_capacitor=OuterRef("pk"))))
            .values_list("id", flat=True)
        )
        has_readings[batch] = np.isin(batch_ids, np.fromiter(found, np.int64, len(found)))
        asked |= batch
        reach *= 2
    order = pd.Series(has_readings).groupby(shuffled["part_id"]).cumsum().to_numpy()
    chosen = has_readings & (order <= per_part)
    return np.sort(shuffled["id"].to_numpy()[chosen]).tolist()


def _stored_priors(part_ids) -> PartPriors:
    frame = part_priors_frame(part_ids)
    missing = [p for p in part_ids if frame.empty or p not in frame.index]
    if missing:
        refresh_part_priors(missing)
        frame = part_priors_frame(part_ids)
    frame = frame.reindex(list(part_ids))
    defaults = {"trend_model": MODEL_LINEAR, "intercept_mean": 1.0, "intercept_var": 0.05**2, "slope_mean": 0.0}
    defaults.update({"slope_var": 1e-10, "noise_var": 1e-4, "capacitors": 0, "tempco_ppm_per_k": 0.0})
    defaults.update({"curvature_per_h2": 0.0, "curvature_var": 0.0, "slope_per_age": 0.0})
    defaults.update({"bend_slope_mean": 0.0, "bend_slope_var": 0.0, "bend_slope_cov": 0.0})
    frame = frame.fillna(defaults)  # a part whose every capacitor was unusable: broad defaults
    return PartPriors(
        model=frame["trend_model"].to_numpy(),
        intercept_mean=frame["intercept_mean"].to_numpy(float),
        intercept_var=frame["intercept_var"].to_numpy(float),
        slope_mean=frame["slope_mean"].to_numpy(float),
        slope_var=frame["slope_var"].to_numpy(float),
        noise_var=frame["noise_var"].to_numpy(float),
        capacitors=frame["capacitors"].to_numpy(int),
        tempco_ppm_per_k=frame["tempco_ppm_per_k"].to_numpy(float),
        curvature=frame["curvature_per_h2"].to_numpy(float),
        curvature_var=frame["curvature_var"].to_numpy(float),
        slope_per_age=frame["slope_per_age"].to_numpy(float),
        bend_slope_mean=frame["bend_slope_mean"].to_numpy(float),
        bend_slope_var=frame["bend_slope_var"].to_numpy(float),
        bend_slope_cov=frame["bend_slope_cov"].to_numpy(float),
        voltage_ratio=frame["voltage_ratio"].to_numpy(float) if "voltage_ratio" in frame else None,
        **{
            name: frame[name].to_numpy(float) if name in frame else None
            for name in ("stress_rate", "stress_rate_log_var", "reading_log_var")
        },
    )


CALIBRATION_FIELDS = (
    "slope_bias",
    "slope_spread",
    "extra_slope_per_h",
    "extra_sd_per_h",
    "acceleration_per_h",
    "curvature_per_h2",
)
DEFAULT_TERMS = tuple(default_calibration(1).per_capacitor([0])[:, 0])  # a family with no stored calibration


def stored_forms() -> dict[str, str]:
    """The trend form each dielectric's latest back-test chose."""
    return dict(BandCalibration.objects.exclude(trend_model="").values_list("family", "trend_model"))


def stored_shapes() -> dict[str, str]:
    """The path shape (bent or straight) each dielectric's latest back-test chose."""
    return dict(BandCalibration.objects.exclude(path_shape="").values_list("family", "path_shape"))


def stored_alert_levels() -> dict[str, float]:
    """Per dielectric: the crossing quantile the latest back-test chose for the risk rule."""
    return dict(BandCalibration.objects.values_list("family", "alert_quantile"))


def stored_calibration() -> dict[str, tuple[float, ...]]:
    """Per dielectric: the six projection terms of the latest back-test's calibration."""
    rows = BandCalibration.objects.values_list("family", *CALIBRATION_FIELDS)
    return {family: tuple(values) for family, *values in rows}


def assessment_terms(assessment: Assessment, dielectric: str) -> tuple[float, ...]:
    """The six calibration terms an assessment's dates were worked out with; for one stored before they
    were kept, the dielectric's stored calibration (or the thin-history default)."""
    if assessment.calibration_terms:
        return tuple(float(assessment.calibration_terms[name]) for name in CALIBRATION_FIELDS)
    return stored_calibration().get(dielectric, DEFAULT_TERMS)


def _with_circuit(inst: pd.DataFrame) -> np.ndarray:
    """Which rows' motors have an equivalent circuit."""
    return inst["r1m_ohm"].notna().to_numpy()


def motor_circuits(inst: pd.DataFrame, companions: pd.DataFrame | None = None):
    """Circuit, load and ratings of the motors that have an equivalent circuit; `companions` are
    their motors' capacitors' ratings by role (`companion_capacitance_frame`), read if not given."""
    with_circuit = _with_circuit(inst)
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
    if companions is None:
        companions = companion_capacitance_frame(sub["motor_id"].unique())
    own_run = np.where(sub["role"] == ROLE_RUN, sub["rated_uf"], np.nan)
    own_start = np.where(sub["role"] != ROLE_RUN, sub["rated_uf"], np.nan)
    run_uf = np.where(np.isnan(own_run), companions[ROLE_RUN].reindex(sub["motor_id"]).to_numpy(float), own_run)
    start_uf = np.where(np.isnan(own_start), companions[ROLE_START].reindex(sub["motor_id"]).to_numpy(float), own_start)
    kind = sub["motor_type"].to_numpy()
    runs = has_run_capacitor(kind)
    run_uf = np.where(runs, np.nan_to_num(run_uf), 0.0)
    start_uf = np.nan_to_num(start_uf)
    # The load is the one the motor as designed drives at its rated slip: with its position's design run
    # capacitor, never a stop-gap's rating (a stop-gap fitted must not move the load the motor turns).
    design_run = np.where(
        sub["role"] == ROLE_RUN,
        sub["design_rated_uf"],
        companions[f"{ROLE_RUN}_design"].reindex(sub["motor_id"]).to_numpy(float),
    )
    design_run = np.where(runs, np.nan_to_num(design_run), 0.0)
    sync_rpm = (
        synchronous_speed_rad_s(sub["frequency_hz"].to_numpy(float), sub["poles"].to_numpy(float)) * 60 / (2 * np.pi)
    )
    rated_slip = 1.0 - sub["rated_speed_rpm"].to_numpy(float) / sync_rpm
    load_kind = load_kind_from_type(sub["load_type"].to_numpy(object))
    load = load_matching_rated_slip(circuit, design_run, rated_slip, load_kind, aux_in_circuit=runs)
    return with_circuit, circuit, load, run_uf, start_uf, kind


# Limits and figures as new of the designs this process has met, by design: a fleet has a handful
# of designs and every chunk of its refit meets them again, so a worker works each design out once.
_DESIGNS: dict[tuple, tuple[np.ndarray, np.ndarray]] = {}
DESIGNS_KEPT = 10_000
FIGURE_NAMES = list(OperatingFigures.__dataclass_fields__)


def _per_design(sub: pd.DataFrame, circuit, load, kind, role, run_uf, start_uf):
    """Capacitance limits and operating figures as new, computed once per distinct design, then
    spread back: (limits (L, n), OperatingFigures of n motors).

    Both depend on the circuit, the load and the ratings only, which a fleet's motors share by the
    dozen or the thousand; the limits' scan is the costly part of a refit, so it runs once per
    distinct combination (and once per process: see _DESIGNS).
    """
    key = pd.DataFrame(
        {
            **{name: sub[name].to_numpy() for name in (*CIRCUIT_FIELDS, "voltage_v", "frequency_hz", "poles")},
            "role": role,
            "kind": kind,
            ROLE_RUN: run_uf,
            ROLE_START: start_uf,
            "fla": sub["full_load_current_a"].to_numpy(),
            "cap_v": sub["part_rated_voltage_v"].to_numpy(),
            "torque": np.round(load.torque_at_rated_nm, 9),
            "speed": np.round(load.rated_speed_rad_s, 9),
            "load_kind": load.kind,
        }
    ).fillna(-1.0)
    design = key.groupby(list(key.columns), sort=False, dropna=False).ngroup().to_numpy()
    # ngroup numbers designs 0..k-1 and `first` lists them in that order.
    first = np.unique(design, return_index=True)[1]
    keys = list(key.iloc[first].itertuples(index=False, name=None))
    unknown = np.array([k not in _DESIGNS for k in keys], bool)
    if unknown.any():
        new = first[unknown]
        new_circuit = circuit.take(new)
        new_load = load.take(new)
        limits = capacitance_limits(
            new_circuit,
            new_load,
            kind[new],
            role[new],
            run_uf[new],
            start_uf[new],
            sub["full_load_current_a"].to_numpy(float)[new],
            sub["part_rated_voltage_v"].to_numpy(float)[new],
        )
        as_new = operating_figures(new_circuit, new_load, run_uf[new], start_uf[new], kind[new])
        figures = np.stack([np.atleast_1d(getattr(as_new, name)).astype(float) for name in FIGURE_NAMES])
        if len(_DESIGNS) > DESIGNS_KEPT:
            _DESIGNS.clear()
        for column, position in enumerate(np.flatnonzero(unknown)):
            _DESIGNS[keys[position]] = (limits.fractions[:, column], figures[:, column])
    fractions = np.stack([_DESIGNS[k][0] for k in keys], axis=1)[:, design]
    figures = np.stack([_DESIGNS[k][1] for k in keys], axis=1)[:, design]
    return fractions, OperatingFigures(**dict(zip(FIGURE_NAMES, figures, strict=True)))


@dataclass(frozen=True)
class Assessed:
    """A batch judged: every figure an assessment row or a back-test needs, per
    capacitor in the order of `inst` (indexed by fitted capacitor id)."""

    inst: pd.DataFrame
    fit: TrendFit
    judgement: Judgement
    limit_fraction: np.ndarray  # (L, G) as evaluated, nan where not applicable
    limit_used: np.ndarray  # (L, G) False where set aside (note says why)
    limit_notes: np.ndarray  # (L, G) text
    limit_findings: np.ndarray  # (L, G) the finding that set a limit aside ("" if none)
    limit_days: np.ndarray  # (3, L, G) days from `now` to P10/P50/P90
    level_days: np.ndarray  # (K, L, G) days from `now` to the crossing at each of ALERT_LEVELS
    latest: pd.DataFrame  # newest usable reading per capacitor
    latest_fraction_25c: np.ndarray
    verdict_code: np.ndarray
    newest_at: pd.Series
    set_aside: np.ndarray
    terms: np.ndarray  # (6, G) calibration terms of each capacitor's projection
    wear_days: np.ndarray  # (3, G) days to the dissipation-factor maximum (inf: none in sight)
    esr_readings: np.ndarray | None = None  # (G,) readings with ESR behind each dissipation-factor trend


def _latest_capacitor_voltage(usable: pd.DataFrame, index: pd.Index) -> np.ndarray:
    """Median of each capacitor's last four measured capacitor voltages (nan if none); `usable` is
    the readings not superseded, in time order (`_in_time_order`)."""
    measured = usable[usable["capacitor_voltage_v"].notna()]
    recent = measured.groupby("fitted_capacitor_id").tail(4)
    return recent.groupby("fitted_capacitor_id")["capacitor_voltage_v"].median().reindex(index).to_numpy(float)


def _in_time_order(readings: pd.DataFrame) -> pd.DataFrame:
    """The readings not superseded, with their `position` in `readings`, sorted by capacitor, time
    taken and id: sorted once for the newest reading and the recent voltages."""
    superseded = readings["superseded"].to_numpy(bool)
    usable = readings[~superseded].assign(position=np.flatnonzero(~superseded))
    return usable.sort_values(["fitted_capacitor_id", "taken_at", "id"])


def _format_each(values, spec: str, where=None) -> np.ndarray:
    """Numbers as text by `spec` ("{:.2f}", or a function of the number), each distinct value (bit for bit)
    formatted once; only
    `where` it is true ("" elsewhere) when given."""
    values = np.asarray(values, float)
    text = np.full(values.shape, "", dtype=object)
    chosen = np.ones(values.shape, bool) if where is None else np.asarray(where, bool)
    _, first, position = np.unique(values[chosen].view(np.int64), return_index=True, return_inverse=True)
    write = spec.format if isinstance(spec, str) else spec
    text[chosen] = np.array([write(value) for value in values[chosen][first]], dtype=object)[position]
    return text


DEFECT_REASON = "latest reading found the capacitor "  # then the defect: the reason of a capacitor seen damaged


def _evidence(latest: pd.DataFrame, verdict_code, inst: pd.DataFrame):
    """What the newest reading itself shows, strongest first, with its words."""
    condition = latest["condition"].fillna(CONDITION_SOUND).to_numpy(object)
    capacitance = latest["capacitance_uf"].to_numpy(float)
    dissipation = dissipation_factor_from_esr(
        latest["esr_ohm"].to_numpy(float), capacitance, inst["frequency_hz"].to_numpy(float)
    )
    max_df = inst["max_dissipation_factor"].to_numpy(float)
    with np.errstate(invalid="ignore"):
        df_high = np.isfinite(dissipation) & np.isfinite(max_df) & (dissipation > max_df)
    open_or_short = np.isin(verdict_code, [VERDICT_OPEN, VERDICT_SHORT])
    defect = condition != CONDITION_SOUND
    evidence = np.select(
        [defect, open_or_short, df_high], [EVIDENCE_DEFECT, EVIDENCE_OPEN_OR_SHORT, EVIDENCE_DF], EVIDENCE_NONE
    )
    uf = _format_each(capacitance, microfarad_text, open_or_short)  # numbers only where their words are used
    verdict_words = np.array([VERDICT_NAMES[int(code)] for code in np.unique(verdict_code)], dtype=object)
    verdict_words = verdict_words[np.searchsorted(np.unique(verdict_code), verdict_code)] if len(verdict_code) else []
    df_pct = _format_each(100 * dissipation, "{:.1f}", df_high)
    max_pct = _format_each(100 * max_df, "{:.1f}", df_high)
    text = np.select(
        [defect, open_or_short, df_high],
        [
            DEFECT_REASON + condition.astype(str),
            verdict_words + ": latest reading " + uf + " \u00b5F",
            "dissipation factor " + df_pct + " %, above the part's " + max_pct + " % maximum",
        ],
        "",
    )
    return evidence, text


def _with_overload(evidence, evidence_text, line_current_a, inst: pd.DataFrame):
    """The evidence with a part fitted against the advice that overloads the motor now
    (`drift.overloaded_by_the_part`) where the newest reading shows nothing stronger, with its words."""
    full_load_a = inst["full_load_current_a"].to_numpy(float)
    over = (evidence == EVIDENCE_NONE) & overloaded_by_the_part(line_current_a, full_load_a, inst["stop_gap"])
    if not over.any():
        return evidence, evidence_text
    words = (
        "fitted against the advice, it overloads the motor: the motor model draws "
        + _format_each(line_current_a, "{:.2f}", over)
        + " A with it, over "
        + _format_each(DriftLimits().main_current_ratio * full_load_a, "{:.2f}", over)
        + " A (the nameplate's full-load current with the service factor); fit the design part"
    )
    return np.where(over, EVIDENCE_OVERLOAD, evidence), np.where(over, words, evidence_text)


def _dissipation_days(inst: pd.DataFrame, usable: pd.DataFrame, now: dt.datetime) -> np.ndarray:
    """Days from `now` to each capacitor's dissipation-factor maximum on its ESR trend (3, G)."""
    measured = usable[usable["esr_ohm"].notna()]
    group = inst.index.get_indexer(measured["fitted_capacitor_id"])
    frequency = inst["frequency_hz"].to_numpy(float)[group]
    dissipation = dissipation_factor_from_esr(
        measured["esr_ohm"].to_numpy(float), measured["capacitance_uf"].to_numpy(float), frequency
    )
    fitted_on = np.asarray(inst["fitted_on"].to_numpy(), dtype="datetime64[D]")
    now_h = (
        (np.datetime64(pd.Timestamp(now).tz_convert("UTC").tz_localize(None), "s") - fitted_on) / np.timedelta64(1, "h")
    ).astype(float)
    hours = dissipation_trend(
        group,
        _hours_since_fitting(measured, fitted_on[group]),
        dissipation,
        len(inst),
        inst["max_dissipation_factor"].to_numpy(float),
        now_h,
    )
    return hours / 24.0


def assess(
    inst: pd.DataFrame,
    readings: pd.DataFrame,
    *,
    priors: PartPriors | None,
    calibration: dict[str, tuple[float, ...]],
    forms: dict[str, str],
    now: dt.datetime,
    alert_levels: dict[str, float] | None = None,
    shapes: dict[str, str] | None = None,
    companions: pd.DataFrame | None = None,
) -> Assessed:
    """Fit, judge and plan a batch of capacitors from frames; nothing is read or written.

    The refit stores the result; the back-test calls it with the readings known
    at a past cut-off (and `now` = the cut-off) and scores it against later ones.
    `alert_levels` maps a dielectric to the crossing quantile its risk rule flags on, `shapes` to
    its path shape (stored ones by default); `companions` are the motors' capacitor ratings
    (`motor_circuits`: read if not given).
    """
    part_ids = np.sort(inst["part_id"].unique())
    fit = fit_frames(inst, readings, priors, part_ids, forms, shapes=shapes)
    n = len(inst)
    rated_uf = inst["rated_uf"].to_numpy(float)
    limit_fraction = np.full((len(ALL_LIMITS), n), np.nan)
    limit_fraction[0] = 1.0 - inst["tolerance_minus_pct"].to_numpy(float) / 100.0
    limit_used = np.isfinite(limit_fraction)
    notes = np.full((len(ALL_LIMITS), n), "", dtype=object)
    line_current_now = np.full(n, np.nan)  # the running line current with the capacitor as now (a circuit only)
    limit_findings = np.full((len(ALL_LIMITS), n), "", dtype=object)
    with_circuit, circuit, load, run_uf, start_uf, kind = motor_circuits(inst, companions)
    in_time_order = _in_time_order(readings)
    latest = in_time_order[~in_time_order["fitted_capacitor_id"].duplicated(keep="last")]  # each one's newest
    latest = latest.set_index("fitted_capacitor_id").reindex(inst.index)
    latest_fraction = fit.fraction_25c[latest["position"].to_numpy(int)]
    if with_circuit.any():
        role = inst["role"].to_numpy()[with_circuit]
        index = np.flatnonzero(with_circuit)
        drift, new_figures = _per_design(inst[with_circuit], circuit, load, kind, role, run_uf, start_uf)
        # The operating point now: at the trend's value, or without a trend at the latest reading (as the stored
        # capacitance now is: a first reading at half the rating moved nothing here while the chart showed it).
        scale = np.where(np.isfinite(fit.fraction_now[index]), fit.fraction_now[index], latest_fraction[index])
        scale = np.nan_to_num(scale, nan=1.0)
        is_run = role == ROLE_RUN
        # The operating point now is read only beside a measured capacitor voltage (`judge_limits`) and for a part
        # fitted against the advice (`overloaded_by_the_part`): solved for those motors alone.
        measured_voltage_v = _latest_capacitor_voltage(in_time_order, inst.index[index])
        stop_gap = inst["stop_gap"].to_numpy(bool)[index]
        solved = np.flatnonzero(np.isfinite(measured_voltage_v) | stop_gap)
        estimated_voltage_v = np.full(len(index), np.nan)
        if len(solved):
            now_figures = operating_figures(
                circuit.take(solved),
                load.take(solved),
                (np.where(is_run, scale, 1.0) * run_uf)[solved],
                (np.where(is_run, 1.0, scale) * start_uf)[solved],
                kind[solved],
            )
            estimated_voltage_v[solved] = np.where(
                is_run[solved], now_figures.v_capacitor_v, now_figures.start_capacitor_voltage_v
            )
            line_current_now[index[solved]] = now_figures.i_line_a
        findings = judge_limits(
            drift,
            new_figures,
            limit_levels(
                load,
                role,
                inst["full_load_current_a"].to_numpy(float)[index],
                inst["part_rated_voltage_v"].to_numpy(float)[index],
            ),
            role,
            nameplate_only=inst["circuit_source"].to_numpy(object)[index] == CIRCUIT_ESTIMATED,
            estimated_voltage_v=estimated_voltage_v,
            measured_voltage_v=measured_voltage_v,
            stop_gap=stop_gap,
        )
        limit_fraction[1:, index] = drift
        limit_used[1:, index] = findings.used
        notes[1:, index] = findings.note
        limit_findings[1:, index] = findings.finding

    finite = (
        np.isfinite(fit.intercept)
        & np.isfinite(fit.slope_per_hour)
        & np.isfinite(fit.covariance).all(axis=(1, 2))
        & np.isfinite(fit.fraction_now)
        & (fit.stress_rate > 0)
        & np.isfinite(fit.stress_rate)
        & (fit.readings_used > 0)
    )
    set_aside = np.where(finite, "", "no usable trend: the readings give no finite fit; check them")
    families = np.unique(inst["dielectric"].to_numpy(str))
    family_terms = np.array([calibration.get(d, DEFAULT_TERMS) for d in families], float).reshape(-1, 6)
    terms = family_terms[np.searchsorted(families, inst["dielectric"].to_numpy(str))].T
    horizon_stress_hours = fit.stress_rate * PlanningSettings().horizon_days * 24.0
    newest_at = pd.to_datetime(
        readings[~readings["superseded"]].groupby("fitted_capacitor_id")["taken_at"].max(), utc=True
    )
    newest_at = newest_at.reindex(inst.index)
    elapsed_h = ((pd.Timestamp(now) - newest_at) / pd.Timedelta(hours=1)).to_numpy(float)
    effective = np.where(limit_used, limit_fraction, np.nan)
    levels = (0.1, 0.5, 0.9, *ALERT_LEVELS)
    quantiles = np.stack(
        [
            calibrated_crossing_quantiles(fit, effective[k], terms, horizon_stress_hours, levels)
            for k in range(len(ALL_LIMITS))
        ],
        axis=1,
    )
    # Readings as the chart draws them (not superseded, each at its stress hours), for crossings already made.
    reading_days = (
        (
            utc_datetime64(in_time_order["taken_at"])
            - utc_datetime64(newest_at.reindex(in_time_order["fitted_capacitor_id"]))
        )
        / np.timedelta64(1, "h")
        / HOURS_PER_DAY
    )
    all_days = (
        crossing_days_through_readings(
            quantiles,
            fit.stress_hours_now,
            fit.stress_rate,
            inst.index.get_indexer(in_time_order["fitted_capacitor_id"]),
            fit.stress_hours[in_time_order["position"].to_numpy(int)],
            reading_days,
        )
        - elapsed_h / HOURS_PER_DAY
    )
    all_days = np.where(finite & np.isfinite(effective), all_days, np.inf)
    all_days = np.where(np.isnan(all_days), np.inf, all_days)
    limit_days, level_days = all_days[:3], all_days[3:]
    chosen = alert_index(inst["dielectric"].map(alert_levels or {}).to_numpy(float))
    alert_days = level_days[chosen, :, np.arange(n)].T

    verdict = tolerance_verdict(
        latest["capacitance_uf"].to_numpy(float),
        rated_uf,
        inst["tolerance_minus_pct"].to_numpy(float),
        inst["tolerance_plus_pct"].to_numpy(float),
    )
    evidence, evidence_text = _evidence(latest, verdict.code, inst)
    evidence, evidence_text = _with_overload(evidence, evidence_text, line_current_now, inst)
    wear_days = _dissipation_days(inst, readings[~readings["superseded"]], now)
    with_esr = inst.index.get_indexer(
        readings.loc[~readings["superseded"] & readings["esr_ohm"].notna(), "fitted_capacitor_id"]
    )
    esr_readings = np.bincount(with_esr[with_esr >= 0], minlength=len(inst))
    wear_words = (
        "the part's "
        + _format_each(100 * inst["max_dissipation_factor"].to_numpy(float), "{:.1f}")
        + " % dissipation-factor maximum"
    )
    judgement = judge(
        limit_names=ALL_LIMITS,
        # A limit is a level, whatever the fit: without a trend the latest reading is still judged against it
        # (a new capacitor's first reading at half its rating, set aside as a slip, left "sound"); its dates
        # are never (all_days above), the reason says why no forecast was made.
        limit_fraction=np.where(limit_used, limit_fraction, np.nan),
        limit_days=limit_days,
        fraction_now=np.where(finite, fit.fraction_now, np.inf),
        rated_uf=rated_uf,
        latest_uf=latest_fraction * rated_uf,
        latest_fraction_25c=latest_fraction,
        evidence=evidence,
        evidence_text=evidence_text,
        today=now.date(),
        day_fraction=fraction_of_day(now),
        wear_days=wear_days,
        wear_words=wear_words,
        alert_days=alert_days,
        latest_on=utc_datetime64(newest_at).astype("datetime64[D]"),
        settings=PlanningSettings(),
    )
    return Assessed(
        inst=inst,
        fit=fit,
        judgement=judgement,
        limit_fraction=limit_fraction,
        limit_used=limit_used,
        limit_notes=notes,
        limit_findings=limit_findings,
        limit_days=limit_days,
        level_days=level_days,
        latest=latest,
        latest_fraction_25c=latest_fraction,
        verdict_code=verdict.code,
        newest_at=newest_at,
        set_aside=set_aside,
        terms=terms,
        wear_days=wear_days,
        esr_readings=esr_readings,
    )


@dataclass(frozen=True)
class _Batch:
    """A batch as read for its refit: the capacitors with something to refit (indexed by fitted
    capacitor id), their readings, and what their fit reads besides (nothing more is read to judge
    them)."""

    inst: pd.DataFrame
    readings: pd.DataFrame
    max_reading_id: pd.Series
    priors: PartPriors
    companions: pd.DataFrame


@dataclass(frozen=True)
class _Stored:
    """What every batch of a refit reads alike: the latest back-test's calibration and choices."""

    calibration: dict[str, tuple[float, ...]]
    forms: dict[str, str]
    alert_levels: dict[str, float]
    shapes: dict[str, str]

    @classmethod
    def read(cls) -> _Stored:
        return cls(stored_calibration(), stored_forms(), stored_alert_levels(), stored_shapes())


def refit_fitted_capacitors(
    fitted_capacitor_ids,
    *,
    now: dt.datetime | None = None,
    force: bool = False,
    as_of: bool = False,
    part_size: int | None = None,
) -> RefitOutcome:
    """Fit, judge and plan the given fitted capacitors; store one assessment each.

    `as_of`: judge as it stood at `now` in the past, from the readings taken by then only (the
    demo's few weeks of assessment history).

    `part_size` (a fleet refit's chunk): refit the capacitors in parts of this many, each part
    judged on a second thread while this one reads the next part and writes the one before, so
    the database's work and the fit's overlap. Each part is written in a transaction of its own,
    with the numbers a single batch gives. The second thread reads and writes nothing.
    """
    now = now or timezone.now()
    ids = sorted({int(i) for i in fitted_capacitor_ids})
    if not part_size or len(ids) <= part_size:
        batch = _read_batch(ids, now, force=force, as_of=as_of)
        written = _store_rows(_judged_rows(batch, _Stored.read(), now), now, as_of=as_of) if batch else 0
        return RefitOutcome(written=written, skipped=len(ids) - written, readings=_readings_of(batch))
    written = readings = 0
    stored = judging = None  # judging: the part on the second thread (its future rows)
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="refit-judge") as judge_thread:
        for start in range(0, len(ids) + part_size, part_size):
            batch = _read_batch(ids[start : start + part_size], now, force=force, as_of=as_of)
            previous, judging = judging, None
            if batch is not None:
                stored = stored or _Stored.read()
                judging = judge_thread.submit(_judged_rows, batch, stored, now)
                readings += _readings_of(batch)
            if previous is not None:
                written += _store_rows(previous.result(), now, as_of=as_of)
    return RefitOutcome(written=written, skipped=len(ids) - written, readings=readings)


def _readings_of(batch: _Batch | None) -> int:
    return 0 if batch is None else int(len(batch.readings))


def _read_batch(ids: list[int], now: dt.datetime, *, force: bool, as_of: bool) -> _Batch | None:
    """The capacitors among `ids` with something to refit, and all their fit reads; None if none."""
    if not ids:
        return None
    inst = fitted_capacitors_frame(ids)
    readings = readings_frame(ids)
    if as_of:
        readings = readings[readings["taken_at"] <= now].reset_index(drop=True)
    usable = readings[~readings["superseded"]]
    max_reading_id = readings.groupby("fitted_capacitor_id")["id"].max()
    inst = inst[inst["fitted_capacitor_id"].isin(usable["fitted_capacitor_id"].unique())]
    if not force and not inst.empty:
        # Due when a reading was added since the fit (by id, not by reading date: a backdated or
        # late-imported reading must be used too), when the assessment was judged before the
        # day of `now` (the risk levels count days from the judgement, and priors move), or before
        # the band calibration in force was stored (a back-test's new calibration reaches every
        # capacitor at the next refit, not the next day): one assessment per capacitor, newest
        # reading, day and calibration.
        seen = pd.DataFrame(
            Assessment.objects.filter(
                fitted_capacitor_id__any_of=inst["fitted_capacitor_id"].to_numpy(np.int64),
                is_current=True,
                model_version=MODEL_VERSION,
            )
            .order_by()
            .values_list("fitted_capacitor_id", "max_reading_id", "created_at"),
            columns=["fitted_capacitor_id", "max_reading_id", "created_at"],
        ).set_index("fitted_capacitor_id")
        seen = seen.reindex(inst["fitted_capacitor_id"])
        day_start = timezone.localtime(now).replace(hour=0, minute=0, second=0, microsecond=0)
        calibrated_at = BandCalibration.objects.aggregate(newest=Max("updated_at"))["newest"]
        judged_since = max(day_start, calibrated_at) if calibrated_at is not None else day_start
        judged_today = pd.to_datetime(seen["created_at"], utc=True).ge(judged_since).to_numpy()
        seen_id = seen["max_reading_id"].to_numpy(float)
        newest = max_reading_id.reindex(inst["fitted_capacitor_id"]).to_numpy()
        covered = ~np.isnan(seen_id) & (seen_id >= newest) & judged_today
        inst = inst[~covered]
    if inst.empty:
        return None
    inst = inst.set_index("fitted_capacitor_id", drop=False)
    return _Batch(
        inst=inst,
        readings=readings[readings["fitted_capacitor_id"].isin(inst.index)].reset_index(drop=True),
        max_reading_id=max_reading_id,
        priors=_stored_priors(np.sort(inst["part_id"].unique()).tolist()),
        companions=companion_capacitance_frame(inst.loc[_with_circuit(inst), "motor_id"].unique()),
    )


def _judged_rows(batch: _Batch, stored: _Stored, now: dt.datetime) -> pd.DataFrame:
    """The batch's assessment rows: the core's calls on what was read, nothing read or written."""
    result = assess(
        batch.inst,
        batch.readings,
        priors=batch.priors,
        calibration=stored.calibration,
        forms=stored.forms,
        now=now,
        alert_levels=stored.alert_levels,
        shapes=stored.shapes,
        companions=batch.companions,
    )
    return _assessment_frame(result, batch.readings, batch.max_reading_id, now)


def _store_rows(rows: pd.DataFrame, now: dt.datetime, *, as_of: bool) -> int:
    """Write the new assessments in one transaction, each capacitor's current one retired; returns
    how many were written (none over an assessment that saw a newer reading)."""
    with transaction.atomic():
        if on_postgresql():
            # Derived rows, recomputed by the next refit if a crash lost them: the commit need not
            # wait for the disk. The chunk's progress record commits after, durably, and that
            # flushes this one with it.
            with connection.cursor() as cursor:
                cursor.execute("SET LOCAL synchronous_commit TO OFF")
        # Two refits of one capacitor at once (two readings saved together, two workers) take
        # turns from here: the second then sees the first's assessment, marks it superseded
        # instead of inserting a second current one, and writes nothing older over it.
        ids = rows["fitted_capacitor_id"].to_numpy(np.int64)
        facts = _capacitor_facts_locked(ids)
        current = _current_assessments(ids)
        if not as_of:
            rows = _not_older_than(rows, current)
        _carry_risk_history(rows, current, now)
        Assessment.objects.filter(
            fitted_capacitor_id__any_of=rows["fitted_capacitor_id"].to_numpy(np.int64), is_current=True
        ).update(is_current=False)
        insert_frame(Assessment, _with_capacitor_facts(rows, facts))
        if not as_of:
            from .workorders import replace_after_reading_again  # workorders reads assessments: imported here

            replace_after_reading_again(rows, now)
    return len(rows)


FACT_COLUMNS = ["capacitor_in_service", "site_id", "part_id", "fitted_on", "route_order"]


def _capacitor_facts_locked(fitted_capacitor_ids: np.ndarray) -> pd.DataFrame:
    """Lock the capacitors' rows (in id order) and read what each new assessment stores of its
    capacitor: in service, its motor's site, its part, its fitting date, its motor's route order;
    indexed by capacitor.

    Read under the lock, so a capacitor removed or moved meanwhile is seen as it is now: the same
    facts the database's trigger would look up for a row sent without them (migration 0029).

    On PostgreSQL the motors' rows are share-locked first, in id order: a walking order edited
    meanwhile is either read here or waits until this chunk commits, and its trigger then copies it
    onto the new assessments (it could not see them before). Refits share the lock; the route
    form locks its motors in the same order, so neither waits on the other in a cycle.
    """
    if on_postgresql():
        ids = np.asarray(fitted_capacitor_ids, np.int64).tolist()
        with connection.cursor() as cursor:
            cursor.execute(
                "SELECT m.id FROM fleet_motor m WHERE m.id IN (SELECT motor_id FROM fleet_fittedcapacitor"
                f" WHERE id BETWEEN %s AND %s AND id = ANY({ID_ARRAY_SQL})) ORDER BY m.id FOR SHARE",
                [min(ids, default=0), max(ids, default=0), id_array_text(ids)],
            )
    rows = (
        FittedCapacitor.objects.select_for_update(of=("self",))
        .filter(pk__any_of=fitted_capacitor_ids)
        .order_by("pk")
        .values_list("pk", "removed_on", "motor__site_id", "part_id", "fitted_on", "motor__route_order")
    )
    frame = pd.DataFrame.from_records(list(rows), columns=["fitted_capacitor_id", "removed_on", *FACT_COLUMNS[1:]])
    frame["capacitor_in_service"] = frame.pop("removed_on").isna()
    return frame.set_index("fitted_capacitor_id")[FACT_COLUMNS]


def _with_capacitor_facts(rows: pd.DataFrame, facts: pd.DataFrame) -> pd.DataFrame:
    """The assessment rows with their capacitors' facts as columns (the row trigger then skips them)."""
    found = facts.reindex(rows["fitted_capacitor_id"].to_numpy())
    return rows.assign(**{name: found[name].to_numpy() for name in FACT_COLUMNS})


CURRENT_COLUMNS = [
    "fitted_capacitor_id",
    "max_reading_id",
    "risk",
    "risk_was",
    "limit_source",
    "limit_was",
    "risk_changed_at",
]
CURRENT_SQL = (
    "SELECT fitted_capacitor_id, max_reading_id, risk, risk_was, limit_source, limit_was,"
    " (EXTRACT(EPOCH FROM risk_changed_at) * 1000000)::bigint"
    " FROM fleet_assessment WHERE is_current"
    f" AND fitted_capacitor_id BETWEEN %s AND %s AND fitted_capacitor_id = ANY({ID_ARRAY_SQL})"
)


def _current_assessments(fitted_capacitor_ids: np.ndarray) -> pd.DataFrame:
    """The current assessments of these capacitors (one query; on PostgreSQL one text value with
    times as microseconds, so no datetime is parsed row by row), indexed by capacitor."""
    if not len(fitted_capacitor_ids):
        return pd.DataFrame(columns=CURRENT_COLUMNS).set_index("fitted_capacitor_id")
    if on_postgresql():
        ids = fitted_capacitor_ids.tolist()
        frame = select_frame(CURRENT_SQL, [min(ids), max(ids), id_array_text(ids)], CURRENT_COLUMNS)
        frame["risk_changed_at"] = pd.to_datetime(frame["risk_changed_at"], unit="us", utc=True)
    else:
        frame = pd.DataFrame(
            Assessment.objects.filter(fitted_capacitor_id__any_of=fitted_capacitor_ids, is_current=True)
            .order_by()
            .values_list(*CURRENT_COLUMNS),
            columns=CURRENT_COLUMNS,
        )
    text = dict.fromkeys(["risk", "risk_was", "limit_source", "limit_was"], object)
    frame = frame.astype({"fitted_capacitor_id": np.int64, "max_reading_id": float, **text})
    return frame.set_index("fitted_capacitor_id")


def _not_older_than(rows: pd.DataFrame, current: pd.DataFrame) -> pd.DataFrame:
    """The new assessments less those whose capacitor's current one already covers a newer
    reading (written meanwhile by a refit that started later)."""
    stored = current["max_reading_id"].reindex(rows["fitted_capacitor_id"].to_numpy()).to_numpy(float)
    return rows[~(stored > rows["max_reading_id"].to_numpy(float))].reset_index(drop=True)


def _carry_risk_history(rows: pd.DataFrame, current: pd.DataFrame, now: dt.datetime) -> None:
    """Each new assessment keeps when its risk level took its present value, what it was before and
    which limit governed before, so the plan and the dashboard list recent changes without comparing
    assessment histories."""
    before = current.reindex(rows["fitted_capacitor_id"].to_numpy())
    same = before["risk"].to_numpy(object) == rows["risk"].to_numpy(object)
    changed_at = before["risk_changed_at"].astype(object).where(before["risk_changed_at"].notna(), now).to_numpy(object)
    for was, now_column in (("risk_was", "risk"), ("limit_was", "limit_source")):
        rows[was] = np.where(
            same, before[was].fillna("").to_numpy(object), before[now_column].fillna("").to_numpy(object)
        )
    rows["risk_changed_at"] = np.where(same, changed_at, now)


def _finite_or_none(value):
    value = float(value)
    return value if np.isfinite(value) else None


def _iso_dates(offset_days, today: dt.date, past: bool = False, day_fraction: float = 0.0) -> np.ndarray:
    """ISO dates `today` + offset; None past the planning horizon or not finite (shown as "beyond").

    Offsets count from the refit's moment, `day_fraction` of the way through today, and are dated by the
    instant's own day (`planning.instant_days`): a crossing, or a replace-by date set by one (its lead time
    before it), is the same at whatever hour the refit ran; whole days of the plan (now, a week's notice) stay
    whole days from today. A crossing the trend has already made keeps its day (`past`); a replace-by date is
    never before today."""
    offset = np.asarray(offset_days, float)
    with np.errstate(invalid="ignore"):
        known = np.isfinite(offset) & (offset <= PlanningSettings().horizon_days)
        if past:
            known &= offset >= -PlanningSettings().horizon_days
    if not past:
        offset = np.maximum(offset, 0.0)
    days = instant_days(today, np.where(known, offset, 0.0), day_fraction)
    distinct, position = np.unique(days, return_inverse=True)  # a few hundred dates: each written once
    text = np.datetime_as_string(distinct, unit="D")
    return np.where(known, text.astype(object)[position.reshape(days.shape)], None)


def fraction_of_day(now: dt.datetime) -> float:
    """How far through its (UTC) day `now` is, 0 to 1: the refit's moment, from which crossings are counted."""
    return (now - now.replace(hour=0, minute=0, second=0, microsecond=0)).total_seconds() / 86400.0


def _json_lines(frame: pd.DataFrame, exact: bool = False) -> np.ndarray:
    """Each row of the frame as a JSON object (text), nan as null.

    A chunk's rows repeat (a limit beyond the horizon on every motor of a design, a family's
    calibration terms), so each distinct row is written once and spread back. Numbers keep ten decimal
    places; `exact` (finite numbers only) keeps every digit of each, for numbers read back into a
    computation: the calibration terms per calendar hour squared are about 1e-11, which ten decimal
    places turned into 0 or 1e-10 and bent the page's drawn band away from its stated dates."""
    if frame.empty:
        return np.array([], dtype=object)
    row = np.zeros(len(frame), np.int64)
    for name in frame.columns:
        codes, distinct = pd.factorize(frame[name], use_na_sentinel=False)
        row = pd.factorize(row * len(distinct) + codes)[0]  # numbered again: stays below the row count
    first = np.unique(row, return_index=True)[1]  # factorize numbers rows in order of first sight
    if exact:
        rows = frame.iloc[first].values.tolist()
        lines = [json.dumps(dict(zip(frame.columns, values, strict=True)), allow_nan=False) for values in rows]
        return np.array(lines, dtype=object)[row]
    text = frame.iloc[first].to_json(orient="records", lines=True, double_precision=10)
    return np.array(text.rstrip("\n").split("\n"), dtype=object)[row]


def _limits_json(result: Assessed, today: dt.date, through_day: float) -> np.ndarray:
    """Per capacitor, the JSON list of every limit evaluated (tolerance always; a drift limit
    where it applies; the dissipation factor where the part has a maximum). `through_day`: how far through
    today the refit ran (`fraction_of_day`)."""
    n = len(result.inst)
    count = len(ALL_LIMITS)
    applies = np.isfinite(result.limit_fraction)
    applies[0] = True  # the tolerance limit always
    shown = applies.ravel()  # limit by limit: every capacitor's entry for one, then the next
    fraction = result.limit_fraction.ravel()[shown]
    entries = pd.DataFrame(
        {
            "name": np.repeat(np.asarray(ALL_LIMITS, dtype=object), n)[shown],
            "fraction_of_rated": np.where(np.isfinite(fraction), fraction, np.nan),
            "used": result.limit_used.ravel()[shown].astype(bool),
            "note": result.limit_notes.ravel()[shown].astype(str),
            "finding": result.limit_findings.ravel()[shown].astype(str),
            **{
                f"p{q}_on": _iso_dates(result.limit_days[j].ravel()[shown], today, past=True, day_fraction=through_day)
                for j, q in enumerate((10, 50, 90))
            },
        }
    )
    limit_text = np.full(count * n, "", dtype=object)
    limit_text[shown] = _json_lines(entries)
    limit_text = limit_text.reshape(count, n)
    items = [(applies[k], limit_text[k]) for k in range(count)]
    maximum = result.inst["max_dissipation_factor"].to_numpy(float)
    has_maximum = np.isfinite(maximum)
    # Judged only on a trend of ESR readings: without one the limit is listed, not used.
    measured = (result.esr_readings if result.esr_readings is not None else np.zeros(n, int))[has_maximum] > 0
    wear = pd.DataFrame(
        {
            "name": DISSIPATION_LIMIT,
            "fraction_of_rated": np.nan,
            "maximum": maximum[has_maximum],
            "used": measured,
            "note": np.where(measured, "", "no reading with ESR yet"),
            "finding": "",
            **{
                f"p{q}_on": _iso_dates(result.wear_days[j][has_maximum], today, past=True, day_fraction=through_day)
                for j, q in enumerate((10, 50, 90))
            },
        }
    )
    wear_text = np.full(n, "", dtype=object)
    wear_text[has_maximum] = _json_lines(wear)
    items.append((has_maximum, wear_text))
    text = np.full(n, "[", dtype=object) + items[0][1]
    for shown_here, entries_here in items[1:]:
        text = text + np.where(shown_here, "," + entries_here, "")
    return text + "]"


def _flagged_json(result: Assessed, readings: pd.DataFrame) -> np.ndarray:
    """Per capacitor, the JSON list of the reading ids its fit flagged (few capacitors have any)."""
    lists = np.full(len(result.inst), "[]", dtype=object)
    flagged = np.asarray(result.fit.flagged, bool)
    if flagged.any():
        where = result.inst.index.get_indexer(readings["fitted_capacitor_id"].to_numpy()[flagged])
        order = np.argsort(where, kind="stable")  # each capacitor's ids in the order of its readings
        where, ids = where[order], readings["id"].to_numpy()[flagged][order].astype(str)
        starts = np.flatnonzero(np.r_[True, where[1:] != where[:-1]])
        lists[where[starts]] = ["[" + ",".join(each) + "]" for each in np.split(ids, starts[1:])]
    return lists


def _assessment_frame(result: Assessed, readings: pd.DataFrame, max_reading_id: pd.Series, now: dt.datetime):
    """Assessment rows from a judged batch, as columns (no per-capacitor Python);
    non-finite numbers never reach the database."""
    fit, judgement, inst = result.fit, result.judgement, result.inst
    today, fraction = now.date(), fraction_of_day(now)
    n = len(inst)
    rated_uf = inst["rated_uf"].to_numpy(float)
    aside = result.set_aside.astype(bool)
    slope_scale = np.where(fit.model == MODEL_LOG, fit.fraction_now, 1.0) * 1e5  # % of rated per 1000 h
    governing = np.asarray(judgement.governing)
    limit_rows = np.where((governing >= 0) & (governing < len(ALL_LIMITS)), governing, 0)
    sources = np.array([*ALL_LIMITS, DISSIPATION_LIMIT], dtype=object)
    latest_fraction = result.latest_fraction_25c
    capacitance_now = np.where(aside, latest_fraction, fit.fraction_now) * rated_uf
    capacitance_now = np.where(aside & ~np.isfinite(latest_fraction), 0.0, capacitance_now)
    risk = np.asarray(judgement.risk).astype(str)
    reason = np.where(aside & (risk != RISK_REPLACE_NOW), result.set_aside, np.asarray(judgement.reason).astype(str))

    def unless_aside(values):
        """The number where a trend was fitted and it is finite; NULL otherwise."""
        values = np.asarray(values, float)
        return np.where(aside | ~np.isfinite(values), np.nan, values)

    return pd.DataFrame(
        {
            "fitted_capacitor_id": inst.index.to_numpy(np.int64),
            "is_current": True,
            "model_version": MODEL_VERSION,
            "fitted_through": result.newest_at.reset_index(drop=True),
            "newest_reading_id": result.latest["id"].to_numpy(np.int64),
            "max_reading_id": max_reading_id.reindex(inst.index).to_numpy(np.int64),
            "readings_used": np.asarray(fit.readings_used, np.int64),
            "visits_used": np.asarray(fit.visits_used, np.int64),
            "readings_flagged": np.asarray(fit.readings_flagged, np.int64),
            "flagged_reading_ids": _flagged_json(result, readings),
            "trend_model": fit.model.astype(str),
            "slope_pct_per_1000h": np.where(aside, 0.0, fit.slope_now() * slope_scale),
            "slope_sd_pct_per_1000h": np.where(aside, 0.0, fit.slope_sd * slope_scale),
            "low_confidence": np.asarray(fit.low_confidence, bool) | aside,
            "capacitance_now_uf": capacitance_now,
            "latest_verdict": pd.Series(result.verdict_code).map(VERDICT_NAMES).to_numpy(object),
            "limit_fraction": result.limit_fraction[limit_rows, np.arange(n)],
            "limit_source": np.where(governing >= 0, sources[governing], TOLERANCE_LIMIT),
            "p10_on": _iso_dates(judgement.days[0], today, past=True, day_fraction=fraction),
            "p50_on": _iso_dates(judgement.days[1], today, past=True, day_fraction=fraction),
            "p90_on": _iso_dates(judgement.days[2], today, past=True, day_fraction=fraction),
            "risk": risk,
            "replace_by": _iso_dates(judgement.due_days, today, day_fraction=fraction),
            "reason": pd.Series(reason).str.slice(0, 300).to_numpy(object),
            "read_again": np.asarray(judgement.read_again, bool),
            "limits": _limits_json(result, today, fraction),
            "set_aside": result.set_aside.astype(str),
            "trend_intercept": unless_aside(fit.intercept),
            "trend_slope_per_hour": unless_aside(fit.slope_per_hour),
            "trend_var_intercept": unless_aside(fit.covariance[:, 0, 0]),
            "trend_cov_intercept_slope": unless_aside(fit.covariance[:, 0, 1]),
            "trend_var_slope": unless_aside(fit.covariance[:, 1, 1]),
            "trend_curvature": unless_aside(fit.bend()),
            "trend_noise_sd": unless_aside(fit.noise_sd),
            "stress_hours_now": unless_aside(fit.stress_hours_now),
            "stress_rate": unless_aside(fit.stress_rate),
            "tempco_ppm_per_k": unless_aside(fit.tempco_ppm_per_k),
            "calibration_terms": _json_lines(
                pd.DataFrame(result.terms.T, columns=list(CALIBRATION_FIELDS)), exact=True
            ),
        }
    )
