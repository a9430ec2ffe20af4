"""Unit slips in field readings, and risk levels from remaining-life quantiles."""

import datetime as dt

import numpy as np
import pytest

from fleet.engineering.backtest import isolated_off_trend
from fleet.engineering.planning import (
    EVIDENCE_DEFECT,
    EVIDENCE_NONE,
    RISK_DUE_SOON,
    RISK_REPLACE_NOW,
    RISK_SOUND,
    RISK_WATCH,
    judge,
    risk_levels,
)
from fleet.engineering.rules import (
    ReadingRules,
    capacitance_low_unit_slip,
    capacitance_unit_slip,
    current_unit_slip,
    off_trend,
    trend_value_held_to,
    voltage_unit_slip,
)


def test_nanofarads_typed_for_microfarads_are_named():
    """[trade] a value 300-3000 times the rating is nanofarads typed for microfarads. A 4 uF capacitor typed as 3950
    (nF) is caught and the uF value suggested."""
    messages = capacitance_unit_slip([3950.0, 3.95, 15.0, 0.0039], 4.0)
    assert "nanofarads" in messages[0] and "3.95 µF" in messages[0]
    assert messages[1] == ""
    assert "three times" in messages[2]
    assert messages[3] == ""  # far below: maybe an open capacitor, asked by capacitance_low_unit_slip


def test_farads_and_millifarads_typed_for_microfarads_are_named_and_an_open_capacitor_is_not():
    """[trade] a meter on its F or mF range shows a 30 uF capacitor as 0.00003 or 0.03; an open capacitor
    reads near 0 uF (0.00, 0.02), which times 1e6 or 1e3 lands nowhere near the rating."""
    typed = [0.00003, 0.0000301, 0.03, 0.00014, 0.000139, 0.02, 0.0, 0.0000001, 28.5]
    rated = [30, 30, 30, 143, 143, 30, 30, 30, 30]
    messages = capacitance_low_unit_slip(typed, rated)
    assert messages[0].startswith("0.00003 looks like farads: 30 µF? (rated 30 µF)")
    assert messages[1].startswith("0.0000301 looks like farads: 30.1 µF?")
    assert messages[2].startswith("0.03 looks like millifarads: 30 µF?")
    assert messages[3].startswith("0.00014 looks like farads: 140 µF? (rated 143 µF)")
    assert messages[4].startswith("0.000139 looks like farads: 139 µF?")
    assert list(messages[5:]) == ["", "", "", ""]


def test_a_voltage_typed_in_kilovolts_is_named_with_the_short_circuit_it_would_be():
    """[trade] 15 uF at 50 Hz and 425 V draws 2.0 A (I = 2 pi f C V); 0.425 typed is 425 V in kV."""
    messages = voltage_unit_slip([2.0, 2.0, 2.0], [0.425, 425.0, 0.002], 15.0, 50.0)
    assert messages[0].startswith("0.425 looks like kilovolts: 425 V? (with 2 A that gives 14.98 µF, rated 15 µF)")
    assert "short circuit suspected" in messages[0]
    assert list(messages[1:]) == ["", ""]  # 0.002 as kV is 2 V: 2 A over it is 3183 µF, not this capacitor


def test_milliamperes_typed_for_amperes_are_named():
    """[trade] a current 300-3000 times what the rating draws is milliamperes; [derived] 4 uF at 400 V, 50 Hz draws
    0.50 A; 503 typed means 503 mA."""
    messages = current_unit_slip([503.0, 0.503], 400.0, 4.0, 50.0)
    assert "milliamperes" in messages[0] and "0.503 A" in messages[0]
    assert messages[1] == ""


def test_off_trend_uses_a_fraction_of_the_rating():
    """[trade] a reading more than 8 % of the rating off its trend is confirmed or re-measured; the threshold is
    the rulebook's (`ReadingRules.off_trend_fraction`), one setting for the form, the import and the back-test's
    strays: on a 4 uF part (0.32 uF) 0.321 uF off either way asks, 0.319 uF does not; no trend, nothing asked."""
    values = [3.679, 3.681, 4.321, 4.319, 3.5]
    assert off_trend(values, [4.0, 4.0, 4.0, 4.0, np.nan], 4.0).tolist() == [True, False, True, False, False]
    assert ReadingRules().off_trend_fraction == 0.08
    assert not off_trend([3.679], [4.0], 4.0, threshold_fraction=0.1)[0]
    fraction, projected = np.array([0.919, 0.921, 1.0]), np.ones(3)
    assert isolated_off_trend(np.arange(3), np.zeros(3), fraction, projected).tolist() == [True, False, False]


def test_a_reading_is_held_to_the_trend_now_only_when_taken_at_or_after_its_newest_reading():
    """[derived] The stored trend value is the one at the newest reading it used: a later reading is held to
    it, and so is one taken in the same minute (a re-read, meter after in circuit: 26.0 uF on a 30 uF part
    whose trend read 29.26 at that minute was saved unquestioned, a fresh-eyes check); one taken before
    (back-filled), or with no assessment, is not."""
    through = np.array(["2025-06-01T09:00", "2025-06-01T09:00", "2025-06-01T09:00", "NaT"], "datetime64[s]")
    taken = np.array(["2025-09-01T09:00", "2025-06-01T09:00", "2024-01-01T09:00", "2025-09-01T09:00"], "datetime64[s]")
    held = trend_value_held_to([11.9, 11.9, 11.9, np.nan], through, taken)
    assert held[:2].tolist() == [11.9, 11.9] and np.isnan(held[2:]).all()


def test_a_reading_a_year_on_is_held_to_the_trend_carried_to_its_day():
    """A walk read a start capacitor for its "read again" order at 126.5 uF and was told it was far from "the
    trend (138.11 uF)", the trend's value at its newest reading a year before, which the order itself said had
    reached 129.99. [derived] the value carried along the stored slope: -1.0 % of rated per 1000 stress-hours at
    0.5 stress-hours an hour, 143 uF rated, over 8,760 hours: 138.11 - 0.01 x 143 / 1000 x 0.5 x 8760 = 131.85
    uF; with no slope known (no trend) the value stays."""
    from fleet.engineering.rules import off_trend, trend_slope_uf_per_hour

    through = np.array(["2025-12-01T09:00", "2025-12-01T09:00"], "datetime64[s]")
    taken = through + np.timedelta64(8760 * 3600, "s")
    slope = trend_slope_uf_per_hour(np.array([-1.0, np.nan]), np.array([0.5, 0.5]), 143.0)
    held = trend_value_held_to([138.11, 138.11], through, taken, slope)
    assert held[0] == pytest.approx(138.11 - 0.01 * 143 / 1000 * 0.5 * 8760) and held[1] == 138.11
    assert not off_trend([126.5], held[:1], 143.0)[0] and off_trend([126.5], held[1:], 143.0)[0]


def _judge(
    p10,
    p50,
    p90=None,
    *,
    evidence=None,
    latest=None,
    now=None,
    limits=(0.94,),
    today=dt.date(2026, 12, 1),
    read_on=None,
    alert=None,
):
    """One limit (tolerance at 94 % of a 10 uF rating); days to its P10/P50/P90; `alert`: days to the
    crossing at the risk rule's quantile (P10 when not given)."""
    p10, p50 = np.asarray(p10, float), np.asarray(p50, float)
    p90 = p50 * 2 if p90 is None else np.asarray(p90, float)
    n = len(p10)
    fractions = np.tile(np.asarray(limits, float)[:, None], (1, n))
    days = np.broadcast_to(np.stack([p10, p50, p90])[:, None, :], (3, len(limits), n))
    return judge(
        limit_names=("tolerance", "capacitor voltage")[: len(limits)],
        limit_fraction=fractions,
        limit_days=days,
        fraction_now=np.full(n, 0.99) if now is None else np.asarray(now, float),
        rated_uf=np.full(n, 10.0),
        latest_uf=np.full(n, 9.9) if latest is None else np.asarray(latest, float) * 10.0,
        latest_fraction_25c=np.full(n, 0.99) if latest is None else np.asarray(latest, float),
        evidence=np.full(n, EVIDENCE_NONE) if evidence is None else np.asarray(evidence),
        evidence_text=np.full(n, "", dtype=object),
        today=today,
        latest_on=None if read_on is None else np.asarray(read_on, "datetime64[D]"),
        alert_days=None if alert is None else np.tile(np.asarray(alert, float), (len(limits), 1)),
    )


def test_risk_levels_follow_the_early_crossing():
    """Planning rule of our own (lead time 30 days, never sooner than 7 days' notice)."""
    result = _judge([10, 60, 200, 900, np.inf], [40, 120, 400, 1500, np.inf])
    assert result.risk.tolist() == [RISK_DUE_SOON, RISK_DUE_SOON, RISK_WATCH, RISK_SOUND, RISK_SOUND]
    assert result.due_days.tolist()[:4] == [7.0, 30.0, 170.0, 870.0]
    assert np.isinf(result.due_days[4])
    assert (
        result.reason[2]
        == "trend reaches the tolerance limit (9.40 \u00b5F) between 2027-06 and 2029-02 (likely 2028-01)"
    )
    assert result.reason[4].startswith("trend stays above the tolerance limit")


def test_risk_levels_change_at_a_quarter_and_at_a_year():
    """[trade] due soon: the early crossing within a quarter, the next round of readings (90 days); ours:
    watch within a year (365 days). Both edges belong to the nearer level; a day past each is the next."""
    result = _judge([89.0, 90.0, 91.0, 364.0, 365.0, 366.0], [900.0] * 6)
    assert result.risk.tolist() == [RISK_DUE_SOON, RISK_DUE_SOON, RISK_WATCH, RISK_WATCH, RISK_WATCH, RISK_SOUND]
    levels = risk_levels(np.zeros(4, bool), [89.99, 90.01, 364.99, 365.01])
    assert levels.tolist() == [RISK_DUE_SOON, RISK_WATCH, RISK_WATCH, RISK_SOUND]


def test_the_replacement_and_the_reading_again_follow_the_risk_rules_quantile():
    """Planning rule of our own: one decision threshold. Where a back-test chose a later quantile than P10
    for the risk rule, the replace-by date is 30 days before that crossing (never sooner than 7 days), so a
    "sound" capacitor has none within the next eleven months, and only that crossing passed asks for a reading
    again; the P10 crossing stays in the reason's band."""
    result = _judge([200.0, 60.0, -10.0, -10.0], [800.0, 300.0, 90.0, 10.0], alert=[500.0, 150.0, 40.0, -5.0])
    assert result.risk.tolist() == [RISK_SOUND, RISK_WATCH, RISK_DUE_SOON, RISK_DUE_SOON]
    assert result.due_days.tolist() == [470.0, 120.0, 10.0, 7.0]
    assert result.read_again.tolist() == [False, False, False, True]
    assert result.reason[0].startswith("trend reaches the tolerance limit (9.40 \u00b5F) between 2027-06 and ")
    assert result.reason[2].startswith("trend reaches the tolerance limit (9.40 \u00b5F) between 2026-11 and ")
    assert result.reason[3].endswith("): read it again")
    default = _judge([200.0], [800.0])  # no back-tested level: P10, as before
    assert default.risk[0] == RISK_WATCH and default.due_days[0] == 170.0


def test_a_crossing_only_projected_since_the_newest_reading_asks_for_a_reading_not_a_replacement():
    """Ours: A capacitor unread for a long time may have crossed (P10 past) while its
    fitted path (P50) has not: read it soon, do not condemn it. Nor where the forecast's likely crossing
    (P50) has passed while the fitted path today is still above the limit (an audit: a start capacitor
    with two readings, the newer 135.00 uF against a 129.99 uF limit, was "replace now" on its calibrated
    path alone; the README's rule asks for a reading first). Only the fitted path itself below the limit
    is evidence. The same week's notice either way; the read-again order replaces it if it reads below."""
    result = _judge([0.0, 0.0, 0.0], [300.0, 0.0, 0.0], now=[0.99, 0.99, 0.93])
    assert result.risk.tolist() == [RISK_DUE_SOON, RISK_DUE_SOON, RISK_REPLACE_NOW]
    assert result.due_days.tolist() == [7.0, 7.0, 7.0]  # no defect seen: a week's notice for spares and the visit
    assert result.read_again.tolist() == [True, True, False]
    assert result.reason[0].startswith("the trend's early crossing of the tolerance limit")
    assert "has passed (likely crossing " in result.reason[0] and result.reason[0].endswith("read it again")
    assert result.reason[1].startswith("the trend has likely crossed the tolerance limit (9.40 \u00b5F) since ")
    assert result.reason[1].endswith("read it again")
    assert result.reason[2] == "fitted trend is already below the tolerance limit (9.40 \u00b5F)"


def test_a_reading_since_the_early_crossing_settles_read_again():
    """[trade] A suspect capacitor is read once more before it is condemned, not again and again: a reading
    taken after the trend's early (P10) crossing, or within a visit window before it, that is still above the
    limit answers the question
    (the capacitor sits at the edge of its limit by its trend: replace it at the next visit). Read before
    the crossing, or never, the plan still says read it again."""
    result = _judge(
        [-20.0, -20.0, -20.0, -20.0],
        [18.0, 18.0, 18.0, 18.0],
        latest=[0.945, 0.945, 0.945, 0.945],
        read_on=["2026-12-01", "2026-10-28", "2026-10-27", "NaT"],
    )
    assert result.read_again.tolist() == [False, False, True, True]
    assert result.risk.tolist() == [RISK_DUE_SOON] * 4
    assert result.due_days.tolist() == [7.0] * 4  # the next visit: a week's notice for spares
    assert result.reason[0] == (
        "read on 2026-12-01, referred to 25 \u00b0C, at 9.45 \u00b5F, above the tolerance limit (9.40 \u00b5F), "
        "but its trend crosses it now (likely 2026-12): replace at the next visit"
    )
    # Two weeks before the crossing (2026-11-11) still answers it (a capacitor moves little in a visit window).
    assert result.reason[1].startswith("read on 2026-10-28, referred to 25 \u00b0C, at 9.45")
    # A walk: the value said is the one referred to 25 C (the readings table shows it as measured), and a likely
    # crossing already past is not "now" ("crosses it now (likely 2026-09)" read in December).
    past = _judge([-20.0], [-10.0], latest=[0.945], now=[0.945], read_on=["2026-12-01"])
    assert "but its trend has likely crossed it since (likely 2026-11): replace at the next visit" in past.reason[0]
    assert result.reason[2].endswith("): read it again") and result.reason[3].endswith("): read it again")
    below = _judge([-20.0], [18.0], latest=[0.935], read_on=["2026-12-01"])
    assert below.risk[0] == RISK_REPLACE_NOW and not below.read_again[0]


def test_a_reading_below_the_limit_is_replace_now_with_the_reason_in_words():
    """[trade] a reading below its limit is replaced; ours the window: due within 14 days (one visit window)."""
    result = _judge([500.0], [900.0], latest=[0.935])
    assert result.risk[0] == RISK_REPLACE_NOW and result.due_days[0] == 14.0
    assert (
        result.reason[0]
        == "latest reading, referred to 25 \u00b0C, 9.35 \u00b5F: below the tolerance limit (9.40 \u00b5F)"
    )


def test_a_defect_is_replace_now_today():
    """[trade] a defect seen (bulged, leaking, vented) is replaced now, due today."""
    result = _judge([500.0], [900.0], evidence=[EVIDENCE_DEFECT])
    assert result.risk[0] == RISK_REPLACE_NOW and result.due_days[0] == 0.0


def test_the_highest_limit_governs():
    """Ours, [derived]: A falling capacitance meets the highest fraction first."""
    result = _judge([400.0], [800.0], limits=(0.94, 0.97))
    assert result.governing[0] == 1
    assert "capacitor voltage limit (9.70" in result.reason[0]


def test_replacements_are_bundled_into_one_visit_per_site_and_window():
    """Ours: one visit per site and 14-day window, opened by the earliest due replacement."""
    from fleet.engineering.planning import bundle_visits

    site = np.array(["A", "A", "A", "B", "A", "B"])
    due = np.array([3.0, 10.0, 30.0, 5.0, 16.0, 40.0])
    visit, day = bundle_visits(site, due, window_days=14)
    # A: day 3 opens a visit holding 3, 10, 16 (within 14 days); 30 opens the next. B: 5, then 40.
    assert visit[0] == visit[1] == visit[4] and visit[2] != visit[0]
    assert day.tolist() == [3.0, 3.0, 30.0, 5.0, 3.0, 40.0]
    assert len(set(visit.tolist())) == 4
    assert visit[3] != visit[5]


def test_a_motors_second_capacitor_due_soon_after_its_first_goes_on_the_same_visit():
    """Common practice of the trade, no single source: a motor isolated, locked out and discharged for one
    capacitor has its other one changed too when it is due soon after, not a second isolation weeks later (a walk
    found a motor's start capacitor on one visit and its run capacitor on the next, a month apart). Another
    motor's capacitor at the same site, and one due later than `same_motor_days`, keep their own visits."""
    from fleet.engineering.planning import bundle_visits

    site = np.array(["A", "A", "A", "A", "A"])
    motor = np.array([1, 1, 2, 3, 3])
    due = np.array([10.0, 40.0, 41.0, 12.0, 100.0])
    visit, day = bundle_visits(site, due, window_days=14, motor=motor, same_motor_days=35)
    assert day.tolist() == [10.0, 10.0, 41.0, 10.0, 100.0]
    assert visit[0] == visit[1] == visit[3] and len(set(visit.tolist())) == 3
    _, alone = bundle_visits(site, due, window_days=14)  # without motors: by site and window only
    assert alone.tolist() == [10.0, 40.0, 40.0, 10.0, 100.0]


def test_visit_days_fall_on_working_days():
    """[derived] Visits moved off days outside the working week: back to the working day before, or on to
    the next where that is before today. Weekdays checked with Python's calendar (datetime.date.weekday),
    not numpy's; 2026-12-03 is a Thursday, 2026-12-25 a Friday."""
    from fleet.engineering.planning import bundle_visits

    today = dt.date(2026, 12, 3)
    site = np.array(["A", "B", "C", "D", "E"])
    due = np.array([22.0, 23.0, 24.0, 2.0, 4.0])  # Fri 25, Sat 26, Sun 27, Sat 5, Mon 7
    _, day = bundle_visits(site, due, 14, today=today)
    dates = [today + dt.timedelta(days=int(d)) for d in day]
    assert all(d.weekday() < 5 for d in dates)
    assert day.tolist() == [22.0, 22.0, 22.0, 1.0, 4.0]
    saturday = dt.date(2026, 12, 5)  # planned on a Saturday: today's overdue visit goes on Monday
    _, day = bundle_visits(np.array(["A"]), np.array([0.0]), 14, today=saturday)
    assert (saturday + dt.timedelta(days=int(day[0]))).weekday() == 0
    _, day = bundle_visits(np.array(["A"]), np.array([0.0]), 14, today=saturday, weekmask="1111110")
    assert day.tolist() == [0.0]  # a site that works Saturdays


def test_a_visit_moves_only_to_a_working_day_from_today_within_the_plans_reach():
    """[trade] a visit is sent on a working day, never into the past; our reach: the plan's 730 days.
    Where the working week is Sunday to Thursday (numpy's weekmask, Monday first), a Friday is refused."""
    from fleet.engineering.planning import PLAN_HORIZON_DAYS, visit_day_problem

    thursday = dt.date(2026, 12, 24)
    assert visit_day_problem(thursday, thursday) == ""
    assert "is a Saturday" in visit_day_problem(dt.date(2026, 12, 26), thursday)
    assert "is in the past" in visit_day_problem(thursday - dt.timedelta(days=1), thursday)
    far = thursday + dt.timedelta(days=PLAN_HORIZON_DAYS[1] + 7)
    while far.weekday() >= 5:
        far += dt.timedelta(days=1)
    assert "past the plan's reach" in visit_day_problem(far, thursday)
    sunday_to_thursday = "1111001"
    assert "is a Friday" in visit_day_problem(dt.date(2026, 12, 25), thursday, sunday_to_thursday)
    assert visit_day_problem(dt.date(2026, 12, 27), thursday, sunday_to_thursday) == ""


def test_the_working_days_offered_next_to_a_visit_are_the_days_it_may_move_to():
    """[derived] The working days either side of a visit, counted with Python's calendar (datetime.date.weekday),
    not numpy's: 2026-12-25 is a Friday, so Wed 23 and Thu 24 before it, Mon 28 to Wed 30 after (the weekend
    skipped). A day off work is neither its own day before nor after; a day before today is not offered; a
    Sunday-to-Thursday week (numpy's weekmask, Monday first) offers its Sunday."""
    from fleet.engineering.planning import visit_day_problem, working_days_near

    def by_calendar(day, today, before, after, working=range(5)):
        earlier, later, d = [], [], day
        while len(earlier) < before:
            d -= dt.timedelta(days=1)
            if d.weekday() in working:
                earlier.insert(0, d)
        d = day
        while len(later) < after:
            d += dt.timedelta(days=1)
            if d.weekday() in working:
                later.append(d)
        return [d for d in earlier + later if d >= today]

    today = dt.date(2026, 12, 3)
    christmas = dt.date(2026, 12, 25)
    offered = working_days_near(christmas, today)
    assert offered == by_calendar(christmas, today, 2, 3)
    assert [d.isoformat() for d in offered] == ["2026-12-23", "2026-12-24", "2026-12-28", "2026-12-29", "2026-12-30"]
    assert all(visit_day_problem(d, today) == "" for d in offered)
    saturday = dt.date(2026, 12, 26)
    assert working_days_near(saturday, today, before=1, after=1) == [dt.date(2026, 12, 25), dt.date(2026, 12, 28)]
    monday = dt.date(2026, 12, 7)
    assert working_days_near(monday, dt.date(2026, 12, 4)) == by_calendar(monday, dt.date(2026, 12, 4), 2, 3)
    assert dt.date(2026, 12, 3) not in working_days_near(monday, dt.date(2026, 12, 4))
    sunday_to_thursday = "1111001"
    assert working_days_near(christmas, today, before=1, after=1, weekmask=sunday_to_thursday) == [
        dt.date(2026, 12, 24),
        dt.date(2026, 12, 27),
    ]


def test_visits_skip_a_sites_days_off():
    """[derived] A site's days off (local holidays, shutdowns) are days off work for its visits, counted with
    Python's calendar (datetime.date.weekday), not numpy's: 2026-12-25 (Friday) and 2026-12-28 (Monday) off at
    site A. A visit due on Sat 26 goes back past Friday 25 to Thursday 24; one due on Mon 28 back over the
    weekend and Friday to Thursday 24 too; site B, without days off, keeps Friday 25. An overdue visit on a day
    off goes on to the next working day. The days offered to move a visit to, and the day refused, skip them."""
    from fleet.engineering.planning import bundle_visits, visit_day_problem, working_days_near

    today = dt.date(2026, 12, 3)
    off = {dt.date(2026, 12, 25): "public holiday", dt.date(2026, 12, 28): "shutdown"}
    site = np.array(["A", "A", "B", "A"])
    due = np.array([23.0, 25.0, 23.0, 8.0])  # Sat 26 (A), Mon 28 (A, own visit: window 1), Sat 26 (B), Fri 11 (A)
    _, day = bundle_visits(site, due, 1, today=today, days_off_by_site={"A": off})
    dates = [today + dt.timedelta(days=int(d)) for d in day]
    assert dates == [dt.date(2026, 12, 24), dt.date(2026, 12, 24), dt.date(2026, 12, 25), dt.date(2026, 12, 11)]
    assert not set(dates[:2]) & set(off) and all(d.weekday() < 5 for d in dates)
    christmas = dt.date(2026, 12, 25)
    _, overdue = bundle_visits(np.array(["A"]), np.array([0.0]), 14, today=christmas, days_off_by_site={"A": off})
    assert overdue.tolist() == [4.0]  # Fri 25 off, Mon 28 off: Tuesday 29, four days on

    assert "day off at this site (shutdown)" in visit_day_problem(dt.date(2026, 12, 28), today, None, off)
    assert visit_day_problem(dt.date(2026, 12, 28), today) == ""  # no days off given: a Monday
    offered = working_days_near(dt.date(2026, 12, 25), today, before=2, after=2, days_off=off)
    assert offered == [dt.date(2026, 12, 23), dt.date(2026, 12, 24), dt.date(2026, 12, 29), dt.date(2026, 12, 30)]


def test_a_day_off_is_a_working_day_from_today_within_the_plans_reach():
    """[derived] One rule for the days-off page and the import: 2026-12-02 (yesterday) is past, 2026-12-05 a
    Saturday (Python's calendar: date.weekday() == 5), 730 days on is the last one taken, a day more is not;
    NaT is left to the date check that named it."""
    from fleet.engineering.planning import PLAN_HORIZON_DAYS, day_off_problems

    today = dt.date(2026, 12, 3)
    last = today + dt.timedelta(days=PLAN_HORIZON_DAYS[1])
    while last.weekday() >= 5:
        last -= dt.timedelta(days=1)
    assert dt.date(2026, 12, 5).weekday() == 5
    days = np.array(["2026-12-02", "2026-12-05", "2026-12-04", last.isoformat(), "2028-12-05", "NaT"], "datetime64[D]")
    said = day_off_problems(days, today)
    assert said[0].startswith("in the past") and said[1].startswith("not a working day")
    assert said[2] == "" and said[3] == "" and said[5] == ""
    assert said[4].startswith("past the plan's reach (730 days, to 2028-12-02)")


def test_a_reading_and_its_limit_are_written_with_the_decimals_that_tell_them_apart():
    """An audit: "latest reading, referred to 25 C, 189.07 uF: below the tolerance limit (189.07 uF)" (189.069
    against 189.072). [ours] one more decimal at a time, up to four, where two show them equal; otherwise two."""
    from fleet.engineering.rules import decimals_to_tell_apart, fixed_decimals

    places = decimals_to_tell_apart([189.069, 28.497, 9.3, 9.4, 5.00001], [189.072, 28.4975, 9.4, 9.4, 5.0])
    assert places.tolist() == [3, 4, 2, 2, 4]
    assert fixed_decimals([189.069, 28.497], [3, 4]).tolist() == ["189.069", "28.4970"]
    result = _judge([100.0], [300.0], latest=[0.93995], limits=(0.94,))
    assert (
        result.reason[0]
        == "latest reading, referred to 25 \u00b0C, 9.399 \u00b5F: below the tolerance limit (9.400 \u00b5F)"
    )


def test_a_part_marked_minus_nought_read_below_its_rating_is_a_reading_below_the_tolerance():
    """An operator's walk: every start capacitor of a part marked -0 % / +20 % [the usual marking of electrolytic
    start capacitors; common practice of the trade, no single source] read under its rating was "at its rated
    200.00 uF this part already breaches the tolerance limit on the motor model: fitted against the advice", though
    each was its motor's design part. [ours] the tolerance at the rating is the marking's limit, said as a reading
    below it; only an operating-point limit at the rating is a finding about the part."""
    tolerance_at_rating = _judge([100.0], [300.0], latest=[0.98], limits=(1.0,))
    assert tolerance_at_rating.risk[0] == RISK_REPLACE_NOW
    assert tolerance_at_rating.reason[0] == (
        "latest reading, referred to 25 \u00b0C, 9.80 \u00b5F: below the tolerance limit (10.00 \u00b5F)"
    )
    torque_at_rating = _judge([100.0], [300.0], latest=[0.98], limits=(0.90, 1.0))
    assert torque_at_rating.reason[0].startswith("at its rated 10.00 \u00b5F this part already breaches the ")
