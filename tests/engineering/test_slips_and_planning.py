"""Unit slips in field readings, and risk levels from remaining-life quantiles."""

import numpy as np

from fleet.engineering.planning import RISK_DUE_SOON, RISK_REPLACE_NOW, RISK_SOUND, RISK_WATCH, risk_levels
from fleet.engineering.rules import capacitance_unit_slip, current_unit_slip, off_trend


def test_nanofarads_typed_for_microfarads_are_named():
    """A 4 uF capacitor typed as 3950 (nF) is caught and the uF value suggested."""
    messages = capacitance_unit_slip([3950.0, 3.95, 15.0, 0.0039], 4.0)
    assert "nanofarads" in messages[0] and "3.95 uF" in messages[0]
    assert messages[1] == ""
    assert "three times" in messages[2]
    assert "millifarads" in messages[3]


def test_milliamperes_typed_for_amperes_are_named():
    """4 uF at 400 V, 50 Hz draws 0.50 A; 503 typed means 503 mA."""
    messages = current_unit_slip([503.0, 0.503], 400.0, 4.0, 50.0)
    assert "milliamperes" in messages[0] and "0.503 A" in messages[0]
    assert messages[1] == ""


def test_off_trend_uses_a_fraction_of_the_rating():
    assert off_trend([3.5, 3.9, 3.8], [3.9, 3.9, np.nan], 4.0).tolist() == [True, False, False]


def test_risk_levels_follow_the_early_crossing():
    level, due = risk_levels([10, 60, 200, 900, np.inf], [40, 120, 400, 1500, np.inf], [False] * 5)
    assert level.tolist() == [RISK_DUE_SOON, RISK_DUE_SOON, RISK_WATCH, RISK_SOUND, RISK_SOUND]
    assert due.tolist()[:4] == [0.0, 30.0, 170.0, 870.0]
    assert np.isinf(due[4])


def test_an_early_crossing_alone_is_not_evidence_enough_to_replace_now():
    """A capacitor unread for a long time may have crossed (P10 past) while its
    fitted path (P50) has not: read it soon, do not condemn it."""
    level, due = risk_levels([0.0, 0.0], [300.0, 0.0], [False, False])
    assert level.tolist() == [RISK_DUE_SOON, RISK_REPLACE_NOW]
    assert due.tolist() == [0.0, 0.0]


def test_a_limit_already_crossed_is_replace_now_with_no_delay():
    level, due = risk_levels([500.0], [900.0], [True])
    assert level[0] == RISK_REPLACE_NOW and due[0] == 0.0


def test_replacements_are_bundled_into_one_visit_per_site_and_window():
    from fleet.engineering.planning import bundle_visits

    site = np.array(["A", "A", "A", "B", "A", "B"])
    due = np.array([3.0, 10.0, 30.0, 5.0, 16.0, 40.0])
    visit, day = bundle_visits(site, due, window_days=14)
    # A: day 3 opens a visit holding 3, 10, 16 (within 14 days); 30 opens the next. B: 5, then 40.
    assert visit[0] == visit[1] == visit[4] and visit[2] != visit[0]
    assert day.tolist() == [3.0, 3.0, 30.0, 5.0, 3.0, 40.0]
    assert len(set(visit.tolist())) == 4
    assert visit[3] != visit[5]
