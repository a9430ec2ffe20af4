"""The forecast scorer of the simulation suite, on hand-made truths (no Django).

Each expected figure follows from the definitions in tests/simulation/scoring.py
[derived]; the dates are invented for the check.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from tests.simulation import scoring

CUT = dt.date(2024, 1, 1)
T = pd.Timestamp


def _truth(crossings, span_end="2026-09-30"):
    n = len(crossings)
    return pd.DataFrame(
        {
            "asset_tag": [f"M-{i}" for i in range(n)],
            "role": "run",
            "dielectric": "film",
            "fitted_on": T("2020-01-01"),
            "removed_on": pd.NaT,
            "crossed_on": pd.to_datetime(list(crossings)),
            "span_end": T(span_end),
        }
    )


def _forecasts(truth, p10, p50, p90, risk):
    return pd.DataFrame(
        {"asset_tag": truth["asset_tag"], "role": "run", "p10_on": p10, "p50_on": p50, "p90_on": p90, "risk": risk}
    )


def test_dates_inside_below_and_above_the_band():
    truth = _truth(["2024-06-01", "2024-06-01", "2024-06-01", "2024-06-01"])
    forecasts = _forecasts(
        truth,
        p10=["2024-05-01", "2024-07-01", "2024-01-15", None],
        p50=["2024-06-01", "2024-08-01", "2024-02-01", None],
        p90=["2024-07-01", "2024-09-01", "2024-03-01", None],  # the last: no crossing within the horizon
        risk=["watch"] * 4,
    )
    result = scoring.score(truth, CUT, forecasts)
    assert (result["inside"], result["below_p10"], result["above_p90"]) == (0.25, 0.5, 0.25)
    open_ended = _forecasts(truth.iloc[:1], p10=["2024-05-01"], p50=[None], p90=[None], risk=["watch"])
    assert scoring.score(truth.iloc[:1], CUT, open_ended)["inside"] == 1.0  # P90 beyond the horizon holds it
    # P50 errors over a remaining life of 152 days: 0, +61, -121 days.
    assert result["p50_error_median"] == pytest.approx(0.0)
    # Widths 61, 62, 46 days and 0 (both ends past the horizon): the median is (46 + 61) / 2 days.
    assert result["band_width_median_y"] == pytest.approx(53.5 / 365.25)


def test_recall_and_precision_of_the_365_day_flag():
    truth = _truth(["2024-03-01", "2024-09-01", "2025-06-01", None, "2023-12-01"])
    forecasts = _forecasts(
        truth, p10=None, p50=None, p90=None, risk=["due soon", "sound", "watch", "sound", "replace now"]
    )
    result = scoring.score(truth, CUT, forecasts)
    # The last is already below its limit at the cut-off: not scored.
    assert result["below_at_cutoff"] == 1
    assert (result["risk_positives"], result["risk_flagged"], result["risk_true_flags"]) == (2, 2, 1)
    assert result["recall"] == 0.5 and result["precision"] == 0.5


def test_a_capacitor_never_crossed_is_a_negative_only_if_the_span_covers_the_year():
    short = _truth([None], span_end="2024-06-30")
    long = _truth([None], span_end="2025-06-30")
    flag = dict(p10=None, p50=None, p90=None, risk=["watch"])
    assert scoring.score(short, CUT, _forecasts(short, **flag))["risk_eligible"] == 0
    assert scoring.score(long, CUT, _forecasts(long, **flag))["risk_flagged"] == 1
    assert scoring.score(long, CUT, _forecasts(long, **flag))["precision"] == 0.0
    assert np.isnan(scoring.score(short, CUT, _forecasts(short, **flag))["precision"])


def test_a_capacitor_without_a_forecast_counts_against_coverage():
    truth = _truth(["2024-06-01", "2024-06-01"])
    forecasts = _forecasts(truth.iloc[:1], p10=["2024-05-01"], p50=["2024-06-01"], p90=["2024-07-01"], risk=["watch"])
    result = scoring.score(truth, CUT, forecasts)
    assert (result["inside"], result["no_forecast"]) == (0.5, 0.5)


def test_removed_capacitors_are_not_in_service():
    truth = _truth(["2024-06-01", "2024-06-01"])
    truth.loc[1, "removed_on"] = T("2023-11-01")
    result = scoring.score(truth, CUT, _forecasts(truth, p10=None, p50=None, p90=None, risk=["sound", "sound"]))
    assert result["in_service"] == 1


def test_the_tolerance_entry_of_the_api_limits_is_used():
    items = [
        {
            "asset_tag": "M-0",
            "role": "run",
            "risk": "watch",
            "limit_source": "capacitor voltage",
            "p10_on": "2024-02-01",
            "p50_on": "2024-03-01",
            "p90_on": "2024-04-01",
            "limits": [
                {"name": "capacitor voltage", "p10_on": "2024-02-01", "p50_on": "2024-03-01", "p90_on": "2024-04-01"},
                {"name": "tolerance", "p10_on": "2025-02-01", "p50_on": "2025-03-01", "p90_on": None},
            ],
        },
        {"asset_tag": "M-1", "role": "run", "risk": "sound", "limit_source": "tolerance", "p10_on": "2026-01-01",
         "p50_on": "2026-02-01", "p90_on": "2026-03-01"},
        {"asset_tag": "M-2", "role": "run", "risk": "sound", "limit_source": "main winding current",
         "p10_on": "2026-01-01", "p50_on": "2026-02-01", "p90_on": "2026-03-01"},
    ]  # fmt: skip
    frame = scoring.forecasts_from_api(items)
    assert frame["p10_on"].fillna("none").tolist() == ["2025-02-01", "2026-01-01", "none"]
    assert frame["p90_on"].fillna("none").tolist() == ["none", "2026-03-01", "none"]
    assert frame["tolerance_known"].tolist() == [True, True, False]


def test_a_capacitor_whose_tolerance_forecast_is_unknown_is_not_scored_as_late():
    truth = _truth(["2024-06-01"])
    forecasts = _forecasts(truth, p10=[None], p50=[None], p90=[None], risk=["replace now"]).assign(
        tolerance_known=[False]
    )
    result = scoring.score(truth, CUT, forecasts)
    assert (result["above_p90"], result["no_forecast"], result["recall"]) == (0.0, 1.0, 1.0)
