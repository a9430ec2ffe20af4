"""Back-test the forecast at past cut-offs, store the band calibration, print the track record."""

import time

from django.core.management.base import BaseCommand

from fleet.engineering.planning import PlanningSettings
from fleet.services.backtest import run_backtest, start_backtest
from fleet.services.track_record import calibration_words


def _pct(value, decimals=1):
    return "  -  " if value is None else f"{100 * value:5.{decimals}f}"


def _z(value):
    return "-" if value is None else f"{value:+.1f}"


class Command(BaseCommand):
    help = "Refit at past quarter starts with only what was known then, score against what came later, calibrate."

    def add_arguments(self, parser):
        parser.add_argument("--quarters", type=int, default=8, help="How many past quarters to use as cut-offs.")

    def handle(self, *args, **options):
        started = time.perf_counter()
        backtest = run_backtest(start_backtest(quarters=options["quarters"], queue=False).id)
        results = backtest.results
        state = backtest.get_state_display().lower()
        self.stdout.write(f"Back-test {backtest.id}: {state} in {time.perf_counter() - started:.1f} s")
        columns = (
            "capacitors",
            "crossed",
            "inside_p10_p90",
            "before_p10",
            "after_p90",
            "recall_365d",
            "precision_365d",
        )
        self.stdout.write(
            "in service: capacitors in service with readings at the cut-off; forecasts: those of them not yet past "
            "their limit, each given a forecast of its crossing; crossed: of the forecasts, how many crossed later; "
            "recall and precision within 365 days only at cut-offs a year or more before the newest reading (- "
            "otherwise: within a year not yet over, the flags that came true are known before those that did not)"
        )
        header = (
            "cut-off   in service  forecasts  crossed  in P10-P90  before P10  after P90  recall 365 d  precision 365 d"
        )
        for variant in ("default", "calibrated"):
            self.stdout.write(f"\n{variant} bands (scores in %)\n{header}")
            rows = [(row["cutoff"], row["capacitors"], row.get(variant, {})) for row in results.get("cutoffs", [])]
            pooled = results.get("pooled", {}).get(variant, {}).get("all")
            rows += [("pooled", None, pooled)] if pooled else []
            for label, in_service, scores in rows:
                cells = [
                    f"{scores.get(c, 0):>10d}" if c in columns[:2] else f"{_pct(scores.get(c)):>11}" for c in columns
                ]
                self.stdout.write(f"{label:<10}{'-' if in_service is None else in_service:>10}" + "".join(cells))
            if pooled and pooled.get("expected_crossed") is not None:
                self.stdout.write(
                    f"had every forecast been right: {pooled['expected_crossed']:.0f} crossings seen within their "
                    f"follow-up ({pooled['crossed']} were), in P10-P90 {_pct(pooled['expected_inside_p10_p90'])}, "
                    f"before P10 {_pct(pooled['expected_before_p10'])}, after P90 {_pct(pooled['expected_after_p90'])}"
                )
        for family, values in results.get("calibration", {}).items():
            self.stdout.write(
                f"calibration {family}: {calibration_words(values)} "
                f"({values['capacitors']} capacitors, {values['residuals']} later readings)"
            )
        for family, candidates in results.get("path_models", {}).items():
            chosen = results.get("calibration", {}).get(family, {})
            tried = ", ".join(f"{row['form']} {row['shape']} {_pct(row['rms_error'], 2)}" for row in candidates)
            self.stdout.write(
                f"paths {family}: {chosen.get('trend_model') or 'form by noise'}, {chosen.get('path_shape') or 'bent'} "
                f"(root-mean-square error of projected later readings, % of rated: {tried}; "
                f"straight less bent: {_z(results.get('straight_z', {}).get(family))} standard errors, "
                "straight if below -2)"
            )
        for family, table in results.get("alert_levels", {}).items():
            stored = results.get("calibration", {}).get(family, {})
            chosen = stored.get("alert_quantile")
            tried = ", ".join(
                f"P{100 * row['level']:.0f} {_pct(row['precision_365d'])}/{_pct(row['recall_365d'])}" for row in table
            )
            caught_words = f"caught {100 * PlanningSettings().alert_min_recall:.0f} % of the year's crossings"
            met = stored.get("alert_met_recall")  # None: not scored, or a back-test from before it was stored
            why = {
                True: f", the most precise that {caught_words}",
                False: f", the most cautious: no level {caught_words}",
            }
            self.stdout.write(
                f"risk rule {family}: flags on P{100 * (chosen or 0.1):.0f}{why.get(met, '')} "
                f"(365-day precision/recall % by level, scored on crossings clear of the meter noise, one noise "
                f"deviation below the limit, so not the scores above, which count every reading below: {tried})"
            )
