"""Which operating-point limits may govern the risk (`drift.judge_limits`).

A limit breached at rated capacitance, or one that a circuit estimated from the nameplate alone
places within the estimate's resolution of its level, is a design or data finding for the
engineer, never wear. Figures are hand-made so each case sits on a known side of its boundary.
"""

import numpy as np

from fleet.engineering.drift import (
    FINDING_AT_RATED,
    FINDING_NEAR_RATED,
    FINDING_VOLTAGE_DISAGREES,
    LIMIT_NAMES,
    EstimateResolution,
    LimitLevels,
    OperatingFigures,
    judge_limits,
)

TORQUE, VOLTAGE, CURRENT, STALL = range(len(LIMIT_NAMES))


def _figures(torque_nm, capacitor_v, main_a):
    n = len(torque_nm)
    nan = np.full(n, np.nan)
    values = dict.fromkeys(OperatingFigures.__dataclass_fields__, nan)
    values.update(
        starting_torque_nm=np.asarray(torque_nm, float),
        v_capacitor_v=np.asarray(capacitor_v, float),
        start_capacitor_voltage_v=np.asarray(capacitor_v, float),
        i_main_a=np.asarray(main_a, float),
        slip=np.full(n, 0.05),
    )
    return OperatingFigures(**values)


def _judge(torque_ratio, voltage_ratio, fractions, nameplate_only, measured_v=np.nan, estimated_v=300.0):
    """Levels: break-away torque 1 N m, capacitor rating 400 V, main current 1 A; run capacitors."""
    n = len(torque_ratio)
    figures = _figures(torque_ratio, 400.0 * np.asarray(voltage_ratio, float), np.full(n, 0.8))
    levels = LimitLevels(np.ones(n), np.full(n, 400.0), np.ones(n))
    return judge_limits(
        np.asarray(fractions, float),
        figures,
        levels,
        np.full(n, "run"),
        nameplate_only=np.full(n, nameplate_only),
        estimated_voltage_v=np.full(n, estimated_v),
        measured_voltage_v=np.full(n, measured_v),
    )


def _fractions(torque, voltage=np.nan, current=np.nan):
    n = len(torque)
    return np.stack([torque, np.broadcast_to(voltage, n), np.broadcast_to(current, n), np.full(n, np.nan)])


def test_a_nameplate_only_starting_torque_limit_within_the_torque_tolerance_is_a_finding():
    """IEC 60034-1 lets a motor start with 15 % less than its guaranteed locked-rotor torque
    (tolerances on declared values, -15 % to +25 %; Industrial Power Engineering and Applications
    Handbook, Table 11.9, quoting IEC 60034-1): a nameplate estimate that gives a new
    capacitor 1.10 times the break-away torque cannot tell the limit from breached (1.10 x 0.85 < 1);
    at 1.25 times it can (1.25 x 0.85 > 1); the boundary is 1 / 0.85 = 1.176 [derived]."""
    findings = _judge([1.10, 1.17, 1.18, 1.25], [0.8] * 4, _fractions([0.982, 0.97, 0.96, 0.93]), True)
    assert findings.finding[TORQUE].tolist() == [FINDING_NEAR_RATED, FINDING_NEAR_RATED, "", ""]
    assert findings.used[TORQUE].tolist() == [False, False, True, True]
    note = findings.note[TORQUE][0]
    assert "at 98 % of rated" in note and "1.10 times the load's break-away torque" in note
    assert "nameplate alone" in note and "winding currents" in note and "tolerance limit governs" in note


def test_the_same_limit_keeps_governing_when_the_circuit_was_entered_or_refined_from_readings():
    findings = _judge([1.10, 1.02], [0.8, 0.8], _fractions([0.982, 0.995]), nameplate_only=False)
    assert findings.used[TORQUE].all()
    assert (findings.finding[TORQUE] == "").all()


def test_a_capacitor_voltage_within_its_resolution_of_the_rating_is_a_finding_only_on_a_nameplate_estimate():
    """The estimated capacitor voltage agrees with a measured one within 15 % (ours), so a new
    capacitor at 90 % of its rating (90 x 1.15 = 103.5 % > 100 %) is not resolved; at 85 % it is."""
    fractions = _fractions([np.nan, np.nan], voltage=0.97)
    estimated = _judge([2.0, 2.0], [0.90, 0.85], fractions, True)
    assert estimated.finding[VOLTAGE].tolist() == [FINDING_NEAR_RATED, ""]
    entered = _judge([2.0, 2.0], [0.90, 0.85], fractions, False)
    assert entered.used[VOLTAGE].all()


def test_a_limit_breached_at_rated_is_a_finding_whatever_the_circuit():
    for nameplate_only in (True, False):
        findings = _judge([0.9], [0.8], _fractions([1.0]), nameplate_only)
        assert findings.finding[TORQUE][0] == FINDING_AT_RATED and not findings.used[TORQUE][0]
        assert "rated capacitance" in findings.note[TORQUE][0]


def test_a_measured_capacitor_voltage_far_from_the_estimate_sets_every_crossed_limit_aside():
    """330 V measured against 416 V estimated is 26 % off, beyond the 15 % agreement (ours)."""
    findings = _judge([2.0], [0.8], _fractions([0.9], current=0.7), False, measured_v=330.0, estimated_v=416.0)
    assert findings.finding[TORQUE][0] == FINDING_VOLTAGE_DISAGREES
    assert findings.finding[CURRENT][0] == FINDING_VOLTAGE_DISAGREES
    assert not findings.used[[TORQUE, CURRENT], 0].any()
    assert "estimated capacitor voltage 416 V, measured 330 V" in findings.note[TORQUE][0]
    assert findings.finding[VOLTAGE][0] == "" and not findings.used[VOLTAGE][0]  # not crossed: nothing to say


def test_the_main_current_limit_carries_no_extra_margin():
    """Its level is already 1.15 x the nameplate current the estimate reproduces (ours): a main
    current at 95 % of it with a new capacitor keeps its limit on a nameplate-only circuit."""
    assert EstimateResolution().main_current == 0.0
    findings = _judge([2.0], [0.8], _fractions([np.nan], current=0.84), True)
    assert findings.used[CURRENT][0] and findings.finding[CURRENT][0] == ""


def test_a_limit_a_stop_gap_breaches_at_its_own_rating_keeps_governing_with_a_note_that_says_why():
    """A fresh-eyes walk fitted a 4 uF part against the advice in a 30 uF position: the main-winding limit,
    breached at the part's rating, was set aside as "a design or data finding" and the motor left "sound". Such a
    breach is the part's, not the design's: for a part fitted against the advice it governs (already crossed);
    for one fitted as designed it stays a finding. [trade] a run capacitor is replaced with the rating the motor
    was designed for (common practice of the trade, no single source)."""
    n = 2
    figures = _figures([0.9, 0.9], [320.0, 320.0], np.full(n, 0.8))
    levels = LimitLevels(np.ones(n), np.full(n, 400.0), np.ones(n))
    findings = judge_limits(
        _fractions([1.0, 1.0], current=np.array([1.0, 1.0])),
        figures,
        levels,
        np.full(n, "run"),
        nameplate_only=np.full(n, True),
        estimated_voltage_v=np.full(n, 300.0),
        measured_voltage_v=np.full(n, np.nan),
        stop_gap=np.array([True, False]),
    )
    for limit in (TORQUE, CURRENT):
        assert findings.used[limit].tolist() == [True, False]
        assert findings.finding[limit].tolist() == ["", FINDING_AT_RATED]
        assert "fitted against the advice" in findings.note[limit][0]
        assert "design part" in findings.note[limit][0]
