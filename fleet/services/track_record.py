"""The forecast's track record page: reads of stored back-tests (never a fit), and the request for a new one."""

from __future__ import annotations

import datetime as dt
import logging

from django.db import transaction
from django.utils import timezone

from fleet.charts import calibration_figure, coverage_figure
from fleet.engineering.backtest import FLAGGED_WITHIN, QUANTILES
from fleet.engineering.calibration import CalibrationSettings
from fleet.models import Backtest, BandCalibration, CapacitorPart
from fleet.templatetags.fleet_format import MINUS, NBSP, percent, times

from .assessments import CALIBRATION_FIELDS
from .backtest import start_backtest

log = logging.getLogger(__name__)

VARIANT_LABELS = {"default": "default bands", "calibrated": "calibrated bands"}
NOMINAL_COVERAGE = QUANTILES[-1] - QUANTILES[0]


def request_backtest(*, quarters: int = 8) -> Backtest:
    """Record a back-test and queue it once the record commits.

    A queue that cannot be reached ends the record as failed with the reason, so
    it never shows as running for ever; a run that fails in-process (no broker)
    has already recorded its own failure.
    """
    from fleet.tasks import run_backtest

    backtest = start_backtest(quarters=quarters, queue=False)

    def enqueue():
        try:
            run_backtest.delay(backtest.id)
        except Exception as error:  # noqa: BLE001 - the record says what went wrong; the page shows it
            log.warning("back-test %d did not run", backtest.id, exc_info=True)
            Backtest.objects.filter(id=backtest.id, state=Backtest.State.RUNNING).update(
                state=Backtest.State.FAILED,
                message=f"Could not be queued: {type(error).__name__}: {error}"[:2000],
                finished_at=timezone.now(),
            )

    transaction.on_commit(enqueue)
    return backtest


def track_record() -> dict:
    """The latest back-test's state, and the figures of the newest finished one, shaped for the page.

    At most four queries whatever the size of the fleet: the latest run, the
    newest finished one (when it is not the latest), the parts named in its
    results, the stored calibration.
    """
    latest = Backtest.objects.first()
    shown = latest
    if latest is not None and latest.state != Backtest.State.DONE:
        shown = Backtest.objects.filter(state=Backtest.State.DONE).first()
    settings = CalibrationSettings()
    page = {
        "latest": latest,
        "shown": shown,
        "calibration": _calibration_in_force(settings),
        "default_spread": settings.default_spread,
        "default_slope_factor": 1.0 + settings.default_bias,
        "min_capacitors": settings.min_capacitors,
        "nominal_coverage": NOMINAL_COVERAGE,
        "flagged_within": {days: _either(levels) for days, levels in FLAGGED_WITHIN.items()},
    }
    if shown is not None:
        page.update(_figures(shown.results))
    return page


def year_flags_record() -> dict | None:
    """How far the year's risk levels held in the newest finished back-test, for the plan page beside its
    counts: of the capacitors flagged to reach their limit within a year (`FLAGGED_WITHIN[365]`), the share
    that did (precision), and of those that did, the share flagged (recall); None before any back-test.
    One query, reading two numbers of the stored results rather than all of them."""
    path = "results__pooled__calibrated__all__"
    row = (
        Backtest.objects.filter(state=Backtest.State.DONE)
        .values_list("finished_at", f"{path}precision_365d", f"{path}recall_365d")
        .first()
    )
    if row is None or row[1] is None or row[2] is None:
        return None
    return {"finished_at": row[0], "precision": row[1], "recall": row[2], "levels": _either(FLAGGED_WITHIN[365])}


def _figures(results: dict) -> dict:
    cutoffs = [
        {**row, "day": dt.date.fromisoformat(row["cutoff"])} for row in results.get("cutoffs", []) if "default" in row
    ]
    pooled = results.get("pooled", {})
    calibrated = pooled.get("calibrated", {})
    default = pooled.get("default", {})
    parts = {part.code: part for part in CapacitorPart.objects.filter(code__in=list(calibrated.get("part", {})))}
    codes = sorted(
        calibrated.get("part", {}),
        key=lambda code: (parts[code].dielectric, parts[code].rated_uf, code) if code in parts else ("~", 0, code),
    )
    dielectric_names = dict(CapacitorPart.Dielectric.choices)
    figures = {
        "cutoffs": cutoffs,
        "pooled": {"default": default.get("all"), "calibrated": calibrated.get("all")},
        "by_dielectric": [
            {
                "name": dielectric_names.get(name, name),
                "scores": scores,
                "default_inside": default.get("dielectric", {}).get(name, {}).get("inside_p10_p90"),
            }
            for name, scores in sorted(calibrated.get("dielectric", {}).items())
        ],
        "by_part": [
            {
                "code": code,
                "part": parts.get(code),
                "scores": calibrated["part"][code],
                "default_inside": default.get("part", {}).get(code, {}).get("inside_p10_p90"),
            }
            for code in codes
        ],
    }
    if default.get("all") and calibrated.get("all"):
        figures["calibration_chart"] = calibration_figure(
            {VARIANT_LABELS[v]: pooled[v]["all"]["calibration"] for v in VARIANT_LABELS}
        )
    if cutoffs:
        figures["coverage_chart"] = coverage_figure(
            [row["cutoff"] for row in cutoffs],
            {VARIANT_LABELS[v]: [row[v]["inside_p10_p90"] for row in cutoffs] for v in VARIANT_LABELS},
            NOMINAL_COVERAGE,
            [row["calibrated"].get("expected_inside_p10_p90") for row in cutoffs],
        )
    return figures


HOURS_A_YEAR = 8766.0


def calibration_words(values) -> str:
    """Every term of a band calibration in words, as the forecast applies it (`calibration.path_polynomials`):
    the future slope's factor, the common slope, bend and their spread in % of rated, the acceleration,
    the relative spread. `values` maps the six `CALIBRATION_FIELDS` to numbers (a stored row's or a back-test's)."""
    per_year = 100 * HOURS_A_YEAR
    extra = per_year * values["extra_slope_per_h"]
    bend = per_year * HOURS_A_YEAR * values["curvature_per_h2"]
    return (
        f"future slope {times(1 + values['slope_bias'])} {'+' if extra >= 0 else MINUS}{abs(extra):.2f}{NBSP}% "
        f"of rated a year, bending {'+' if bend >= 0 else MINUS}{abs(bend):.2f}{NBSP}% of rated a year squared; "
        f"common spread {per_year * values['extra_sd_per_h']:.2f}{NBSP}% of rated a year; "
        f"acceleration {HOURS_A_YEAR * values['acceleration_per_h']:.2f} of the slope a year ahead; "
        f"relative spread {percent(values['slope_spread'])}"
    )


def _calibration_in_force(settings: CalibrationSettings) -> list[dict]:
    """The band calibration the refits use now, per dielectric, with whether it is the thin-history default."""
    dielectric_names = dict(CapacitorPart.Dielectric.choices)
    return [
        {
            "name": dielectric_names.get(row.family, row.family),
            "terms": calibration_words({name: getattr(row, name) for name in CALIBRATION_FIELDS}),
            "alert_percent": round(100 * row.alert_quantile),
            "trend_model": row.get_trend_model_display().lower() if row.trend_model else "",
            "path_shape": row.get_path_shape_display().lower() if row.path_shape else "",
            "capacitors": row.capacitors,
            "residuals": row.residuals,
            "thin": row.capacitors < settings.min_capacitors,
            "updated_at": row.updated_at,
        }
        for row in BandCalibration.objects.order_by("family")
    ]


def _either(words) -> str:
    """('a', 'b', 'c') -> 'a, b or c'."""
    words = list(words)
    return " or ".join([", ".join(words[:-1]), words[-1]]) if len(words) > 1 else "".join(words)
