"""The forecast's track record: back-tests at past cut-offs, and the band calibration they give.

At each cut-off (by default the starts of the last eight quarters) the fleet is
refitted with only the capacitors and readings known then, through the same
`assess` the refit uses, and each forecast is scored against the readings and
removals that came later. Scores are kept twice: with the default band
calibration, and with the calibration estimated from the errors seen before
that cut-off only (so the calibrated bands are out of sample). A crossing is
seen as the application judges a reading (`observed_crossings`): a later reading
referred to 25 C below the capacitance limit that governs the capacitor, by any
margin (a stray reading far off the trend, not confirmed by its neighbours, is
not), or the capacitor's removal as failed in service; the forecast scored is
that limit's. At the end the calibration from every error
is stored for the refits to use, with the crossing quantile the risk rule
flags on per dielectric (`choose_alert_level`, on the pooled calibrated
forecasts); the calibrated risk scores are those of that rule, so they are in
sample for that one choice among five levels.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
from django.conf import settings
from django.db import transaction
from django.utils import timezone

from fleet.engineering.backtest import (
    catches_enough,
    choose_alert_level,
    choose_path_model,
    observed_crossings,
    projection_errors,
    score,
)
from fleet.engineering.calibration import CalibrationSettings, estimate_calibration
from fleet.engineering.planning import (
    ALERT_LEVELS,
    RISK_REPLACE_NOW,
    PlanningSettings,
    alert_index,
    reads_below,
    risk_levels,
)
from fleet.engineering.rules import ReadingRules
from fleet.engineering.trends import MODEL_LINEAR, MODEL_LOG, PATH_BENT, PATH_STRAIGHT
from fleet.models import Backtest, BandCalibration, CapacitorPart, FittedCapacitor

from .assessments import CALIBRATION_FIELDS, _hours_since_fitting, assess, fit_frames
from .selectors import fitted_capacitors_frame, readings_frame

VARIANTS = ("default", "calibrated")


def default_cutoffs(newest: dt.date, quarters: int = 8) -> list[dt.date]:
    """Starts of the `quarters` whole quarters before the one holding `newest`, oldest first."""
    start = dt.date(newest.year, 3 * ((newest.month - 1) // 3) + 1, 1)
    months = start.year * 12 + start.month - 1
    return [dt.date((months - 3 * k) // 12, (months - 3 * k) % 12 + 1, 1) for k in range(quarters, 0, -1)]


def start_backtest(*, quarters: int = 8, queue: bool = True) -> Backtest:
    """Record a back-test and, with `queue`, queue it for a worker (in-process on the embedded default)."""
    from fleet.tasks import run_backtest as task

    newest = FittedCapacitor.objects.filter(readings__isnull=False).order_by("-readings__taken_at")
    newest_at = newest.values_list("readings__taken_at", flat=True).first()
    cutoffs = default_cutoffs(timezone.localdate(newest_at) if newest_at else timezone.localdate(), quarters)
    backtest = Backtest.objects.create(cutoffs=[day.isoformat() for day in cutoffs])
    if queue:
        transaction.on_commit(lambda: task.delay(backtest.id))
    return backtest


def _scores(frame: pd.DataFrame, part_codes: dict[int, str]) -> dict:
    """Scores of one variant's pooled forecasts: overall, per dielectric, per part."""

    levels = (*ALERT_LEVELS, 0.9)

    def of(rows):
        days = np.stack([rows["p10"], rows["p50"], rows["p90"]])
        quantiles = (levels, rows[[*ALERT_COLUMNS, "p90"]].to_numpy(float).T)
        return score(
            days,
            rows["risk"].to_numpy(),
            rows["crossed_day"].to_numpy(),
            rows["followed_days"].to_numpy(),
            quantiles=quantiles,
            window_days=rows["window_days"].to_numpy(float),
        )

    return {
        "all": of(frame),
        "dielectric": {name: of(rows) for name, rows in frame.groupby("dielectric")},
        "part": {part_codes.get(int(part), str(part)): of(rows) for part, rows in frame.groupby("part_id")},
    }


def run_backtest(backtest_id: int) -> Backtest | None:
    """Run a recorded back-test to the end; a failure ends it as failed with the reason."""
    backtest = Backtest.objects.filter(id=backtest_id).first()
    if backtest is None or backtest.state != Backtest.State.RUNNING:
        return backtest
    try:
        _run(backtest)
    except Exception as error:  # noqa: BLE001 - any failure must end the run with a message
        Backtest.objects.filter(id=backtest.id).update(
            state=Backtest.State.FAILED, message=f"{type(error).__name__}: {error}"[:2000], finished_at=timezone.now()
        )
        raise
    backtest.refresh_from_db()
    return backtest


SHAPES = (PATH_BENT, PATH_STRAIGHT)


def _estimate(errors: pd.DataFrame, families: list[str], cutoff: pd.Timestamp | None, shapes: dict[str, str]):
    """Projection terms per family from the errors of readings taken before `cutoff` (None: all),
    each family's from the projections of the path shape it uses (`shapes`; bent by default)."""
    if cutoff is not None:
        errors = errors[errors["taken"] < cutoff]
    family = errors["family"].to_numpy(int)
    straight = np.array([shapes.get(name) == PATH_STRAIGHT for name in families], bool)[family]

    def of(name):
        return np.where(straight, errors[f"{name}_{PATH_STRAIGHT}"], errors[f"{name}_{PATH_BENT}"]).astype(float)

    return estimate_calibration(
        family, errors["capacitor"].to_numpy(), of("x"), of("h"), of("e"), of("v"), len(families)
    )


def _project(fit, inst: pd.DataFrame, later: pd.DataFrame, group) -> tuple[np.ndarray, ...]:
    """`projection_errors` of the later readings (of capacitors `group` in `inst`) under one fit."""
    return projection_errors(
        fit,
        group,
        _hours_since_fitting(later, inst["fitted_on"].to_numpy()[group]),
        later["capacitance_uf"].to_numpy(float),
        later["case_temperature_c"].to_numpy(float),
        inst["rated_uf"].to_numpy(float),
    )


def _calibration_errors(inst, before, later, group, families, forms) -> dict[str, np.ndarray]:
    """Per later reading and path shape: the projected change x, the calendar hours ahead h, the
    error e and its known variance v, under the trend forms in use, for the band calibration."""
    part_ids = np.sort(inst["part_id"].unique())
    out = {}
    for shape in SHAPES:
        fit = fit_frames(inst, before, None, part_ids, forms, shapes=dict.fromkeys(families, shape))
        change, span, error, variance, _ = _project(fit, inst, later, group)
        out |= {
            f"x_{shape}": change,
            f"h_{shape}": span / fit.stress_rate[group],
            f"e_{shape}": error,
            f"v_{shape}": variance,
        }
    return out


# The candidate path models, (trend form, path shape): each form on bent paths, then on straight ones.
FORMS = (MODEL_LINEAR, MODEL_LOG)
PATH_MODELS = tuple((form, shape) for shape in SHAPES for form in FORMS)
PATH_MODEL_COLUMNS = [f"sq_{form}_{shape}" for form, shape in PATH_MODELS]


def _path_model_errors(inst, before, later, group, families) -> dict[str, np.ndarray]:
    """Squared projection error of each later reading, in fractions of rated, under each path model."""
    part_ids = np.sort(inst["part_id"].unique())
    out = {}
    for (form, shape), column in zip(PATH_MODELS, PATH_MODEL_COLUMNS, strict=True):
        fit = fit_frames(
            inst, before, None, part_ids, dict.fromkeys(families, form), shapes=dict.fromkeys(families, shape)
        )
        _, _, error, _, fraction = _project(fit, inst, later, group)
        predicted = np.where(fit.model[group] == MODEL_LOG, fraction * np.exp(-error), fraction - error)
        out[column] = (fraction - predicted) ** 2
    return out


def _path_models(errors: pd.DataFrame, families: list[str], cutoff: pd.Timestamp | None):
    """Per family, the trend form and path shape whose projections strayed least from the readings
    that came later (taken before `cutoff`; None: all), and the figures of the choice.
    Returns (forms, shapes, choices): a family with too few later readings is in neither choice."""
    if cutoff is not None:
        errors = errors[errors["taken"] < cutoff]
    forms, shapes, choices = {}, {}, {}
    for k, family in enumerate(families):
        mine = errors[errors["family"] == k]
        # A capacitor's readings at every cut-off share its path's error: one cluster.
        choices[family] = choice = choose_path_model(
            mine[PATH_MODEL_COLUMNS].to_numpy(float), mine["capacitor"].to_numpy(np.int64)
        )
        if choice.form is not None:
            forms[family] = FORMS[choice.form]
            shapes[family] = PATH_STRAIGHT if choice.straight else PATH_BENT
    return forms, shapes, choices


ALERT_COLUMNS = [f"alert_{level:.1f}" for level in ALERT_LEVELS]


def _governing_limit_days(result) -> np.ndarray:
    """(3, G) days to the P10/P50/P90 crossing of the capacitance limit that governs each capacitor
    (inf where none does)."""
    index = result.judgement.limit_index
    days = result.limit_days[:, np.maximum(index, 0), np.arange(len(index))]
    return np.where(index >= 0, days, np.inf)


def _governing_level_days(result) -> np.ndarray:
    """(K, G) days to the governing limit's crossing at each alert level (a wear sign: its P10)."""
    governing = result.judgement.governing
    safe = np.clip(governing, 0, result.level_days.shape[1] - 1)
    days = result.level_days[:, safe, np.arange(len(governing))]
    days = np.where(governing >= result.level_days.shape[1], result.judgement.days[0], days)
    return np.where(governing >= 0, days, np.inf)


def _alert_levels(frame: pd.DataFrame) -> dict[str, tuple[float, list]]:
    """Per dielectric, the alert level its pooled back-tested forecasts justify, and
    the 365-day precision and recall of every level tried.

    The level is chosen on the forecasts made as the refit now makes them: at the
    cut-offs where the family's bands were calibrated on its own earlier errors
    (`own_calibration`), not on the first cut-offs that had only the default bands,
    whose crossings come early and would hold the rule at its loosest level.
    Where no cut-off a year or more before the data's end had its own calibration yet, all are used.
    Crossings count here only clear of the meter noise (`crossed_clear_day`).
    """
    chosen = {}
    for family, rows in frame.groupby("dielectric"):
        own = rows[rows["own_calibration"].to_numpy(bool)]
        year_over = own["window_days"].to_numpy(float) >= 365
        rows = own if np.isfinite(own["crossed_clear_day"].to_numpy(float)[year_over]).any() else rows
        chosen[family] = choose_alert_level(
            rows[ALERT_COLUMNS].to_numpy(float).T,
            rows["replace_now"].to_numpy(bool),
            rows["crossed_clear_day"].to_numpy(float),
            rows["followed_days"].to_numpy(float),
            window_days=rows["window_days"].to_numpy(float),
        )
    return chosen


def _met_recall(tried: tuple[float, list] | None) -> bool | None:
    """Whether the level chosen for a dielectric caught the share of the year's crossings the rule asks
    (`choose_alert_level` falls back to the most cautious level where none did); None where nothing was scored."""
    if tried is None:
        return None
    level, table = tried
    recall = next((r for chosen, _, r in table if chosen == level), None)
    return None if recall is None else catches_enough(recall)


def _with_alert_risk(frame: pd.DataFrame, levels: dict[str, float]) -> pd.DataFrame:
    """The forecasts with the risk the rule gives at each dielectric's alert level."""
    index = alert_index(frame["dielectric"].map(levels).to_numpy(float))
    days = frame[ALERT_COLUMNS].to_numpy(float)[np.arange(len(frame)), index]
    return frame.assign(risk=risk_levels(frame["replace_now"].to_numpy(bool), days))


def _run(backtest: Backtest) -> None:
    ids = np.array(
        FittedCapacitor.objects.filter(readings__isnull=False).distinct().order_by("id").values_list("id", flat=True)
    )
    if len(ids) > settings.FLEET_BACKTEST_MAX_CAPACITORS:
        # A track record is statistics: a fixed random sample keeps a plant's weekly back-test
        # in bounded time and memory, and the same sample week after week.
        ids = np.sort(np.random.default_rng(0).choice(ids, settings.FLEET_BACKTEST_MAX_CAPACITORS, replace=False))
    ids = ids.tolist()
    inst_all = fitted_capacitors_frame(ids).set_index("fitted_capacitor_id", drop=False)
    readings_all = readings_frame(ids)
    readings_all = readings_all[~readings_all["superseded"]].reset_index(drop=True)
    taken = pd.to_datetime(readings_all["taken_at"], utc=True)
    families = sorted(inst_all["dielectric"].unique().tolist())
    part_codes = dict(
        CapacitorPart.objects.filter(id__in=inst_all["part_id"].unique().tolist()).values_list("id", "code")
    )
    errors = pd.DataFrame(
        columns=["family", "capacitor", "taken", *[f"{n}_{s}" for s in SHAPES for n in "xhev"], *PATH_MODEL_COLUMNS]
    )
    forecasts: dict[str, list[pd.DataFrame]] = {variant: [] for variant in VARIANTS}
    per_cutoff = []
    # The data's end: a cut-off's precision and recall within a horizon are scored once it lies that far before.
    data_end = taken.max() if len(taken) else None
    fitted = pd.to_datetime(inst_all["fitted_on"]).dt.tz_localize("UTC")
    removed = pd.to_datetime(inst_all["removed_on"]).dt.tz_localize("UTC")
    for number, cutoff_text in enumerate(backtest.cutoffs):
        cutoff = pd.Timestamp(cutoff_text, tz="UTC")
        alive = (fitted < cutoff) & (removed.isna() | (removed >= cutoff))
        before = readings_all[
            (taken < cutoff).to_numpy() & readings_all["fitted_capacitor_id"].isin(inst_all.index[alive])
        ]
        inst = inst_all.loc[np.sort(before["fitted_capacitor_id"].unique())]
        if inst.empty:
            continue
        before = before.reset_index(drop=True)
        forms, shapes, _ = _path_models(errors, families, cutoff)
        terms = _estimate(errors, families, cutoff, shapes)
        calibrations = {
            "default": {},
            "calibrated": {family: tuple(terms.per_capacitor([k])[:, 0]) for k, family in enumerate(families)},
        }
        later = readings_all[(taken >= cutoff).to_numpy() & readings_all["fitted_capacitor_id"].isin(inst.index)]
        group = inst.index.get_indexer(later["fitted_capacitor_id"])
        later_day = ((pd.to_datetime(later["taken_at"], utc=True) - cutoff) / pd.Timedelta(days=1)).to_numpy(float)
        removal_day = ((removed.reindex(inst.index) - cutoff) / pd.Timedelta(days=1)).to_numpy(float)
        failed = (inst["removal_reason"] == FittedCapacitor.RemovalReason.FAILED).to_numpy() & np.isfinite(removal_day)
        last_seen = np.full(len(inst), 0.0)
        np.maximum.at(last_seen, group, later_day)
        followed = np.fmax(last_seen, np.nan_to_num(removal_day, nan=0.0))
        family = pd.Index(families).get_indexer(inst["dielectric"].to_numpy())
        own_calibration = terms.capacitors >= CalibrationSettings().min_capacitors
        summary = {"cutoff": cutoff_text, "capacitors": int(len(inst)), "later_readings": int(len(later))}
        for variant in VARIANTS:
            result = assess(
                inst,
                before,
                priors=None,
                calibration=calibrations[variant],
                forms=forms,
                now=cutoff.to_pydatetime(),
                shapes=shapes,
            )
            _, _, error, _, fraction = _project(result.fit, inst, later, group)
            # Scored against the limit the capacitor's forecast and its page judge it by, as the
            # application judges a reading (`observed_crossings`).
            limit = result.judgement.limit_fraction
            projected = np.where(result.fit.model[group] == MODEL_LOG, fraction * np.exp(-error), fraction - error)
            seen = (group, later_day, fraction, projected, limit, np.where(failed, removal_day, np.nan), len(inst))
            off_trend = ReadingRules().off_trend_fraction
            crossed = observed_crossings(*seen, off_trend_fraction=off_trend)
            # The risk rule's level is chosen on crossings clear of the meter noise (one noise sd below):
            # no forecast of the path can anticipate a single noisy dip, and on the simulated fleets
            # levels chosen on every dip caught fewer true crossings (docs/engineering.md section 7).
            noise = result.fit.noise_sd * np.where(result.fit.model == MODEL_LOG, limit, 1.0)
            crossed_clear = observed_crossings(*seen, margin=noise, off_trend_fraction=off_trend)
            above = np.isfinite(limit) & ~reads_below(result.latest_fraction_25c, limit)
            days = _governing_limit_days(result)
            frame = pd.DataFrame(
                {
                    "p10": days[0],
                    "p50": days[1],
                    "p90": days[2],
                    "risk": result.judgement.risk,
                    "crossed_day": crossed,
                    "crossed_clear_day": crossed_clear,
                    "followed_days": followed,
                    "window_days": (data_end - cutoff) / pd.Timedelta(days=1),
                    "dielectric": inst["dielectric"].to_numpy(),
                    "part_id": inst["part_id"].to_numpy(),
                    "replace_now": result.judgement.risk == RISK_REPLACE_NOW,
                    "own_calibration": own_calibration[family] if variant == "calibrated" else False,
                    **dict(zip(ALERT_COLUMNS, _governing_level_days(result), strict=True)),
                }
            )[above]
            forecasts[variant].append(frame)
            summary[variant] = _scores(frame, part_codes)["all"]
            if variant == "default":
                fresh_errors = pd.DataFrame(
                    {
                        **_path_model_errors(inst, before, later, group, families),
                        **_calibration_errors(inst, before, later, group, families, forms),
                        "family": family[group],
                        # The capacitor itself, not the capacitor at this cut-off: the thin-history
                        # default holds until enough distinct capacitors stand behind the calibration.
                        "capacitor": inst.index.to_numpy()[group],
                        "taken": pd.to_datetime(later["taken_at"], utc=True).array,
                    }
                )
                errors = pd.concat([errors, fresh_errors], ignore_index=True) if len(errors) else fresh_errors
        per_cutoff.append(summary)
        Backtest.objects.filter(id=backtest.id).update(done_cutoffs=number + 1, results={"cutoffs": per_cutoff})

    forms, shapes, choices = _path_models(errors, families, None)
    terms = _estimate(errors, families, None, shapes)
    tried = _alert_levels(pd.concat(forecasts["calibrated"])) if forecasts["calibrated"] else {}
    levels = {family: level for family, (level, _) in tried.items()}
    forecasts["calibrated"] = [_with_alert_risk(frame, levels) for frame in forecasts["calibrated"]]
    for summary, frame in zip(per_cutoff, forecasts["calibrated"], strict=True):
        summary["calibrated"] = _scores(frame, part_codes)["all"]
    calibration = {
        family: {
            **dict(zip(CALIBRATION_FIELDS, terms.per_capacitor([k])[:, 0], strict=True)),
            "trend_model": forms.get(family, ""),
            "path_shape": shapes.get(family, ""),
            "alert_quantile": float(levels.get(family, PlanningSettings().alert_level)),
            "alert_met_recall": _met_recall(tried.get(family)),
            "capacitors": int(terms.capacitors[k]),
            "residuals": int(terms.residuals[k]),
        }
        for k, family in enumerate(families)
    }
    calibration = {
        family: {name: float(v) if isinstance(v, float | np.floating) else v for name, v in values.items()}
        for family, values in calibration.items()
    }
    results = {
        "cutoffs": per_cutoff,
        "pooled": {v: _scores(pd.concat(forecasts[v]), part_codes) for v in VARIANTS if forecasts[v]},
        "calibration": calibration,
        "alert_levels": {
            family: [{"level": level, "precision_365d": p, "recall_365d": r} for level, p, r in table]
            for family, (_, table) in tried.items()
        },
        "path_models": {
            family: [
                {"form": form, "shape": shape, "rms_error": None if np.isnan(mse) else float(np.sqrt(mse))}
                for (form, shape), mse in zip(PATH_MODELS, choice.mean_squared_error, strict=True)
            ]
            for family, choice in choices.items()
        },
        "straight_z": {
            family: None if np.isnan(choice.straight_z) else choice.straight_z for family, choice in choices.items()
        },
    }
    with transaction.atomic():
        for family, values in calibration.items():
            BandCalibration.objects.update_or_create(family=family, defaults={**values, "backtest": backtest})
        Backtest.objects.filter(id=backtest.id).update(
            state=Backtest.State.DONE, results=results, finished_at=timezone.now()
        )
