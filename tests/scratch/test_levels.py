"""Scratch: truth-scored precision/recall of every alert level, and the back-test's table."""
import datetime as dt
import os

import numpy as np
import pytest
from django.core.management import call_command

from fleet.models import BandCalibration, FittedCapacitor
from fleet.services.assessments import refit_fitted_capacitors, refresh_part_priors
from fleet.services.backtest import run_backtest, start_backtest
from tests.simulation import fleet as simulated
from tests.simulation import scoring
from tests.test_forecast_simulation import _assessments, _import

SEED = int(os.environ.get("FLEET_SIMULATION_SEED", "20261202"))
CUT = dt.date.fromisoformat(os.environ.get("CUT", "2024-01-01"))
LEVELS = (0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7)
pytestmark = [pytest.mark.django_db]


def test_levels(tmp_path):
    fleet = simulated.simulate(np.random.default_rng(SEED))
    files = simulated.cut(fleet, CUT)
    _import(files, tmp_path)
    truth = simulated.truth(fleet)
    call_command("estimate_circuits")
    bt = run_backtest(start_backtest(queue=False).id)
    for fam, rows in bt.results["alert_levels"].items():
        print("\nbacktest", fam, [(r["level"], round(r["precision_365d"] or 0, 2), round(r["recall_365d"] or 0, 2)) for r in rows])
    print("chosen", dict(BandCalibration.objects.values_list("family", "alert_quantile")))
    refresh_part_priors()
    ids = list(FittedCapacitor.objects.filter(removed_on__isnull=True, readings__isnull=False).distinct().values_list("id", flat=True))
    now = dt.datetime.combine(CUT, dt.time(0), tzinfo=dt.UTC)
    for level in LEVELS:
        BandCalibration.objects.update(alert_quantile=level)
        refit_fitted_capacitors(ids, now=now, force=True)
        res = scoring.score_by(truth, CUT, scoring.forecasts_from_api(_assessments_once()))
        print(f"level {level}: " + "; ".join(f"{g} R{r['recall']:.0%} P{r['precision']:.0%} flag{r['risk_flagged']}" for g, r in res.items()))


_n = [0]
def _assessments_once():
    from django.contrib.auth.models import User
    User.objects.filter(username="simulation-engineer").delete()
    return _assessments()
