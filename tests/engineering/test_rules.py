"""The rulebook of a reading, without Django: parse, ranges, slips, confirmations, dates, text.

Thresholds are the rulebook's settings; where a check encodes a trade limit the source is
beside it: [trade] common practice of the trade, [mem] from memory (unverified).
"""

import numpy as np
import pytest

from fleet.engineering.rules import MSG_WITH_UNIT, RULES, ReadingRules, check_readings, parse_numbers, plain_number

NOW = np.datetime64("2026-06-01T12:00", "s")
FAN = dict(
    rated_uf=4.0,
    frequency_hz=50,
    motor_voltage_v=230.0,
    full_load_current_a=0.95,
    fitted_on=np.datetime64("2022-01-01", "D"),
    removed_on=np.datetime64("NaT", "D"),
    now=NOW,
)


def check(raw, method="meter", taken_at="2026-05-01T09:00", **kwargs):
    n = max(len(v) for v in raw.values())
    return check_readings(
        raw,
        method=[method] * n,
        taken_at=np.array([taken_at] * n, "datetime64[s]") if isinstance(taken_at, str) else taken_at,
        **{**FAN, **kwargs},
    )


def test_a_decimal_comma_means_a_decimal_point_and_mixed_separators_are_refused():
    """Ours: a decimal point or one decimal comma; a thousands separator (1,234.5) or two separators are refused,
    naming the separator."""
    values, messages = parse_numbers(["3,8", "3.8", " 4 ", "1,234.5", "1.234,5", "3,8,1", "", None])
    np.testing.assert_array_equal(values[:3], [3.8, 3.8, 4.0])
    assert list(messages[:3]) == ["", "", ""]
    assert all("decimal separator" in m for m in messages[3:6])
    assert np.isnan(values[6:]).all() and list(messages[6:]) == ["", ""]


def test_nan_and_infinity_are_refused_in_every_spelling_and_type():
    """Ours: NaN and infinity, in any spelling or type, are not readings."""
    hostile = ["nan", "NaN", "inf", "-Infinity", "1e999", float("nan"), float("inf"), 10**400]
    values, messages = parse_numbers(hostile)
    assert np.isnan(values).all()
    assert set(messages) == {"not a finite number"}


def test_wrong_types_and_foreign_digits_are_not_numbers():
    """Ours: only plain ASCII decimal numbers are read (no booleans, containers, full-width digits, underscores or
    hex)."""
    values, messages = parse_numbers([True, [1], {"a": 1}, "abc", "\uff13", "1_000", "0x10"])
    assert np.isnan(values).all() and set(messages) == {"not a number"}


def test_a_million_volts_is_refused_and_2300_v_asks_for_confirmation():
    """[mem] no capacitor of a motor of 1000 V or less sees 5000 V; over twice the motor's
    rated voltage on a run capacitor is most likely a missed decimal point."""
    result = check({"capacitance_uf": ["4.0", "4.0", "4.0"], "capacitor_voltage_v": ["1000000", "2300", "400"]})
    assert "above 5000 V" in result.errors["capacitor_voltage_v"][0]
    assert (
        result.errors["capacitor_voltage_v"][1] == ""
        and "missed decimal point" in result.confirm["capacitor_voltage_v"][1]
    )
    assert result.bad.tolist() == [True, False, False]
    # A value refused for its range is not asked to confirm as well (the live hint said it would be asked).
    assert result.needs_confirmation.tolist() == [False, True, False]
    confirmed = check(
        {"capacitance_uf": ["4.0"], "capacitor_voltage_v": ["2300"]}, confirmed=True
    )  # the technician re-checked
    assert not confirmed.needs_confirmation.any() and not confirmed.bad.any()


def test_secondary_values_out_of_range_are_named_on_meter_readings_too():
    """[trade] contact thermometers read -40 to 150 C; currents and ESR cannot be negative."""
    result = check(
        {
            "capacitance_uf": ["4.0"] * 4,
            "case_temperature_c": ["200", "-100", "25", "25"],
            "capacitor_voltage_v": ["", "", "-5", ""],
            "capacitor_current_a": ["", "", "-0.1", ""],
            "esr_ohm": ["", "", "", "inf"],
        }
    )
    assert "above 150 °C" in result.errors["case_temperature_c"][0]
    assert "-40 °C or more" in result.errors["case_temperature_c"][1]
    assert "above 0 V" in result.errors["capacitor_voltage_v"][2]
    assert "0 A or more" in result.errors["capacitor_current_a"][2]
    assert result.errors["esr_ohm"][3] == "not a finite number"
    assert result.bad.all()


def test_short_circuit_is_named_before_a_unit_slip():
    """[trade] 1 A through the capacitor with 2 V across it is a short, though the current
    is also 300-3000 times what 2 V would drive through 4 uF (which reads as milliamperes)."""
    result = check({"capacitor_current_a": ["1.0"], "capacitor_voltage_v": ["2"]}, method="in_circuit")
    assert "short circuit" in result.errors["capacitor_voltage_v"][0]
    assert result.errors["capacitor_current_a"][0] == ""


def test_unit_slips_are_named_before_the_range():
    """[trade] 503 typed for a 0.503 A current, 3950 typed for 3.95 uF."""
    result = check({"capacitor_current_a": ["503"], "capacitor_voltage_v": ["400"]}, method="in_circuit")
    assert "milliamperes" in result.errors["capacitor_current_a"][0]
    result = check({"capacitance_uf": ["3950"], "main_current_a": ["950"]})
    assert "nanofarads" in result.errors["capacitance_uf"][0]
    assert "milliamperes" in result.errors["main_current_a"][0]


def test_in_circuit_capacitance_is_computed():
    """[trade] C = 10^6 I / (2 pi f V): 0.5 A at 400 V, 50 Hz is 3.979 uF."""
    result = check({"capacitor_current_a": ["0,5"], "capacitor_voltage_v": ["400"]}, method="in_circuit")
    assert not result.bad.any()
    assert abs(result.values["capacitance_uf"][0] - 3.979) < 1e-3


ASKED_OFF_TREND = "3.3 µF is far from this capacitor's trend (4.05 µF at this reading's time)"


def test_an_in_circuit_reading_far_from_its_trend_is_asked_on_the_voltage_it_was_computed_from():
    """[trade] C = 10^6 I / (2 pi f V): 0.4147 A at 400 V, 50 Hz is 3.30 uF, far from a 4.05 uF trend. In circuit
    there is no capacitance typed: the question went to the meter's field, which the form hides in circuit,
    so the technician saw it nowhere but the page's summary. It goes on the voltage, as the tolerance's does."""
    circuit = check(
        {"capacitor_current_a": ["0.4147"], "capacitor_voltage_v": ["400"]}, method="in_circuit", predicted_uf=4.05
    )
    assert circuit.confirm["capacitor_voltage_v"][0].startswith(ASKED_OFF_TREND)
    assert not circuit.confirm.get("capacitance_uf", [""])[0]
    meter = check({"capacitance_uf": ["3.3"]}, predicted_uf=4.05)
    assert meter.confirm["capacitance_uf"][0].startswith(ASKED_OFF_TREND)
    assert not meter.confirm.get("capacitor_voltage_v", [""])[0]


def test_a_reading_is_asked_about_its_trend_past_8_percent_of_the_rating():
    """[trade] more than 8 % of the rating off the trend asks to confirm or re-measure
    (`ReadingRules.off_trend_fraction`): on a 4 uF part with its trend at 4.00 uF, 3.679 uF asks and 3.681 uF
    does not; a setting of 10 % lets 3.679 uF through."""
    result = check({"capacitance_uf": ["3.679", "3.681"]}, predicted_uf=4.0)
    assert result.needs_confirmation.tolist() == [True, False]
    assert "3.679 µF is far from this capacitor's trend (4.00 µF" in result.confirm["capacitance_uf"][0]
    wider = check({"capacitance_uf": ["3.679"]}, predicted_uf=4.0, rules=ReadingRules(off_trend_fraction=0.1))
    assert not wider.needs_confirmation[0]


def test_dates_stay_inside_the_fitting_window_and_out_of_the_future():
    """Ours: a reading belongs to its capacitor's fitting window and is not in the future (600 s of phone clock
    drift allowed), said on the site's clock."""
    taken = np.array(["0001-01-01", "2021-12-31T23:00", "2026-05-01", "2026-06-02", "NaT"], "datetime64[s]")
    result = check({"capacitance_uf": ["4"] * 5}, taken_at=taken)
    messages = result.errors["taken_at"]
    assert "fitted on 2022-01-01" in messages[0] and "fitted on 2022-01-01" in messages[1]
    assert messages[2] == "" and messages[4] == "not a date and time"
    assert messages[3] == (
        "taken at 2026-06-02 00:00 is after now at the site (2026-06-01 12:00, UTC): check the date and the time"
    )
    removed = check({"capacitance_uf": ["4"]}, taken_at="2024-03-01", removed_on=np.datetime64("2024-02-01", "D"))
    assert "removed on 2024-02-01" in removed.errors["taken_at"][0]


def test_a_time_in_the_future_is_told_as_the_sites_clock_shows_it():
    """[ours] "In the future" alone left the technician to guess which of date and hour was wrong: both
    times are told in the site's zone. [pub] Europe/Dublin is UTC+0 in winter, Asia/Kolkata UTC+5:30."""
    taken = np.array(["2026-12-05T09:00", "2026-12-05T09:00"], "datetime64[s]")
    result = check(
        {"capacitance_uf": ["4", "4"]},
        taken_at=taken,
        now=np.datetime64("2026-12-03T16:20", "s"),
        time_zone=np.array(["Europe/Dublin", "Asia/Kolkata"], object),
    )
    assert list(result.errors["taken_at"]) == [
        "taken at 2026-12-05 09:00 is after now at the site (2026-12-03 16:20, Europe/Dublin): check the date and "
        "the time",
        "taken at 2026-12-05 14:30 is after now at the site (2026-12-03 21:50, Asia/Kolkata): check the date and "
        "the time",
    ]
    within_clock_drift = check({"capacitance_uf": ["4"]}, taken_at="2026-06-01T12:09")
    assert within_clock_drift.errors["taken_at"][0] == ""


def test_a_removal_date_is_a_whole_day_at_the_site():
    """[derived] a capacitor's window runs to the end of its removal day as the site counts days
    (`taken_on`): 20:00 on 2024-02-01 in a zone six hours west of UTC is 02:00 UTC on the 2nd, still
    the removal day there; 08:00 on the 2nd at the site is after it. The fitting day is counted alike:
    00:30 on the 1st at a site thirteen hours east of UTC is 11:30 UTC the day before."""
    taken = np.array(["2024-02-02T02:00", "2024-02-02T14:00", "2024-01-31T11:30"], "datetime64[s]")
    taken_on = np.array(["2024-02-01", "2024-02-02", "2024-02-01"], "datetime64[D]")
    window = dict(fitted_on=np.datetime64("2024-02-01", "D"), removed_on=np.datetime64("2024-02-01", "D"))
    result = check({"capacitance_uf": ["4"] * 3}, taken_at=taken, taken_on=taken_on, **window)
    messages = result.errors["taken_at"]
    assert messages[0] == "" and messages[2] == ""
    assert "removed on 2024-02-01" in messages[1] and "readings of that day are still its own" in messages[1]
    by_utc_day = check({"capacitance_uf": ["4"] * 3}, taken_at=taken, **window).errors["taken_at"]
    assert "removed on" in by_utc_day[0] and "fitted on" in by_utc_day[2]  # without the site's day


def test_notes_are_bounded_and_free_of_nul():
    """Ours: notes at most 2000 characters, no NUL character (a database refuses it)."""
    result = check({"capacitance_uf": ["4"] * 3}, notes=["ok", "x" * 2_000_000, "a\x00b"])
    assert result.errors["notes"][0] == ""
    assert "at most 2000" in result.errors["notes"][1]
    assert "NUL" in result.errors["notes"][2]


def test_thresholds_are_settings():
    """Ours: every threshold is a field of ReadingRules, so a plant may tighten one."""
    strict = ReadingRules(voltage_confirm_factor=1.5)
    result = check({"capacitance_uf": ["4"], "capacitor_voltage_v": ["400"]}, rules=strict)
    assert result.needs_confirmation[0]
    assert not check({"capacitance_uf": ["4"], "capacitor_voltage_v": ["400"]}).needs_confirmation[0]
    assert RULES.as_dict()["ranges"]["case_temperature_c"]["highest"] == 150.0


def test_many_readings_are_checked_in_one_call():
    """Ours: the rulebook is vectorised; one call checks a whole import, each bad row named."""
    n = 50_000
    rng = np.random.default_rng(1)
    values = np.round(rng.normal(4.0, 0.05, n), 3).astype(str)
    values[::1000] = "nan"
    result = check({"capacitance_uf": values})
    assert result.bad.sum() == n // 1000


def test_nameplate_problems_bound_a_capacitor_motors_output_and_current():
    """Bounds: common practice of the trade, no single source (single-phase capacitor motors are made up to
    about 10 kW); output below V x I: efficiency times power factor is under one [derived]."""
    from fleet.engineering.rules import nameplate_problems

    volts = np.array([230.0, 230.0, 230.0, 115.0, 230.0, 230.0])
    amps = np.array([1.9, 1e30, 1.9, 6.0, 0.0, 40.0])
    watts = np.array([250.0, 250.0, 1e30, 700.0, 250.0, 7500.0])
    flagged = {}
    for rows, field, message in nameplate_problems(volts, amps, watts):
        for row in np.flatnonzero(rows):
            flagged.setdefault(int(row), []).append((field, message))
    assert 0 not in flagged and 5 not in flagged  # a 250 W fan at 1.9 A; a 7.5 kW compressor motor at 40 A
    assert ("full_load_current_a", "over 150 A: check the unit") in flagged[1]
    assert flagged[2][0][0] == "output_w" and "over 15,000 W" in flagged[2][0][1]
    assert flagged[3] == [
        ("output_w", "at or above rated voltage times full-load current: a motor puts out less than it draws")
    ]
    assert flagged[4][0] == ("full_load_current_a", "must be above zero")


def test_the_live_checks_words_for_a_range_are_the_servers():
    """Ours (one way to say each thing): The page's hint said a 0 V reading was "outside 0 to 5000"; it now carries
    the server's own words."""
    hint = RULES.as_dict()["ranges"]
    assert hint["capacitor_voltage_v"]["too_low"] == "must be above 0 V"
    assert hint["capacitor_voltage_v"]["too_high"] == "is above 5000 V, the most a reading of a small motor shows"
    assert hint["case_temperature_c"]["too_low"] == "must be -40 °C or more"
    result = check_readings(
        {"capacitance_uf": ["4.0"], "line_voltage_v": ["0"]},
        method=["meter"],
        rated_uf=4.0,
        frequency_hz=50.0,
        motor_voltage_v=230.0,
        full_load_current_a=1.9,
        fitted_on=np.datetime64("2020-01-01"),
        removed_on=np.datetime64("NaT"),
        taken_at=np.array(["2024-01-01T09:00"], "datetime64[s]"),
        now=np.datetime64("2024-06-01T00:00"),
    )
    assert result.errors["line_voltage_v"][0] == "0 " + hint["line_voltage_v"]["too_low"] == "0 must be above 0 V"


def test_a_letter_o_or_l_typed_for_a_digit_is_named():
    """A walk: a case temperature typed "3O" (a letter O) was told to drop its unit, which it has none of. [ours] a
    number with an O for a 0 or an l for a 1 beside its digits is named as such; a meter's "OL" typed as "ol" and
    letters alone stay "not a number", a number with its unit stays one."""
    from fleet.engineering.rules import MSG_LETTER_FOR_DIGIT

    values, messages = parse_numbers(["3O", "1O5", "l2.5", "-O.5", "ol", "OL", "O", "30 C", "3.9uF"])
    assert np.isnan(values).all()
    assert messages.tolist() == [MSG_LETTER_FOR_DIGIT] * 4 + ["not a number"] * 3 + [MSG_WITH_UNIT] * 2


def test_a_number_typed_with_its_unit_is_asked_for_alone():
    """ "28500 nF" in a microfarad box was "not a number": the field names its unit, so say to drop it
    (ours). A number the unit check can then read as nanofarads is asked about as such."""
    values, messages = parse_numbers(["28500 nF", "3.9uF", "230 V", "45 °C", "-4 A", "3.9 3.8", "x9"])
    assert np.isnan(values).all()
    assert messages.tolist() == [MSG_WITH_UNIT] * 5 + ["not a number"] * 2


def test_an_output_typed_in_kilowatts_is_refused_as_far_below_what_the_motor_draws():
    """0.18 typed for a 180 W fan drawing 1.2 A at 230 V is 0.07 % of its volt-amperes; the least efficient
    small capacitor motors put out about a tenth of what they draw (a 6 W fan at 0.25 A and 230 V), so
    under 2 % is a slip of unit (common practice of the trade, no single source)."""
    from fleet.engineering.rules import nameplate_problems

    volts = np.array([230.0, 230.0, 230.0])
    amps = np.array([1.2, 1.2, 0.25])
    watts = np.array([0.18, 180.0, 6.0])
    flagged = {}
    for rows, field, message in nameplate_problems(volts, amps, watts):
        for row in np.flatnonzero(rows):
            flagged.setdefault(int(row), []).append((field, message))
    assert flagged == {
        0: [("output_w", "under 2 % of rated voltage times full-load current: give the output in W, not kW")]
    }


def test_a_capacitance_in_farads_asks_to_confirm_first_readings_and_back_dated_ones_alike():
    """[trade] 0.0000039 typed on a 4 uF part is 3.9 uF read in farads: with no trend (a first reading, a reading
    before the trend's newest) it was saved as an open capacitor. It asks to confirm, ahead of the off-trend words,
    and is kept once confirmed; an open capacitor's 0.02 is never named as a slip."""
    first = check({"capacitance_uf": ["0.0000039", "0,0039", "0.02", "0"]})
    assert not first.bad[:3].any()
    words = first.confirm["capacitance_uf"]
    assert words[0].startswith("0.0000039 looks like farads: 3.9 µF? (rated 4 µF)")
    assert words[1].startswith("0.0039 looks like millifarads: 3.9 µF?")
    assert words[2] == ""
    trend = check({"capacitance_uf": ["0.0000039"]}, predicted_uf=3.9)
    assert trend.confirm["capacitance_uf"][0].startswith("0.0000039 looks like farads")
    kept = check({"capacitance_uf": ["0.0000039"]}, confirmed=True)
    assert not kept.needs_confirmation.any() and kept.values["capacitance_uf"][0] == 3.9e-6


def test_a_tenth_of_the_rating_asks_whether_the_decimal_point_slipped():
    """14.3 typed for a 143 uF start capacitor's first reading was saved without a question: the capacitor went
    to "replace now, open circuit suspected". Ours (common practice of the trade, no single source, that a
    capacitor read at a tenth of its rating is failed or was misread): a value that is the rating with its
    decimal point one place to the left, within the farads rule's band, asks to confirm, trend or none; 5 % of
    the rating (past the band) and an open capacitor's 0.02 are judged as read; confirmed, it is kept."""
    first = check({"capacitance_uf": ["0,4", "0.39", "0.2", "0.02", "3.9"]})
    assert not first.bad.any()
    words = first.confirm["capacitance_uf"]
    assert words[0].startswith("0.4 µF is about a tenth of the rated 4 µF: the decimal point one place off (4 µF)?")
    assert words[1].startswith("0.39 µF is about a tenth of the rated 4 µF") and "(3.9 µF)?" in words[1]
    assert list(words[2:]) == ["", "", ""]
    assert check({"capacitance_uf": ["0.4"]}, predicted_uf=3.9).confirm["capacitance_uf"][0].startswith("0.4 µF is")
    kept = check({"capacitance_uf": ["0.4"]}, confirmed=True)
    assert not kept.needs_confirmation.any() and kept.values["capacitance_uf"][0] == 0.4


def test_a_current_or_voltage_slip_in_circuit_is_named_on_its_own_field():
    """[trade] 4 uF at 230 V, 50 Hz draws 0.29 A: 290 typed is mA; 0.23 typed for the voltage is kV."""
    amps = check({"capacitor_current_a": ["290"], "capacitor_voltage_v": ["230"]}, method="in_circuit")
    assert amps.errors["capacitor_current_a"][0].startswith("290 looks like milliamperes: 0.29 A?")
    volts = check({"capacitor_current_a": ["0.29"], "capacitor_voltage_v": ["0.23"]}, method="in_circuit")
    assert volts.errors["capacitor_voltage_v"][0].startswith("0.23 looks like kilovolts: 230 V?")
    line = check({"capacitance_uf": ["4"], "line_voltage_v": ["0.23"]})
    assert line.errors["line_voltage_v"][0] == "0.23 looks like kilovolts: 230 V? (motor 230 V)"


def test_a_capacitance_too_small_for_two_decimals_is_written_as_typed():
    """Ours: a farads slip confirmed as read (0.00003 uF) showed as "0.00" on every page, hiding what was
    typed; two decimals stay for every value they can show."""
    from fleet.engineering.rules import microfarad_text

    assert [microfarad_text(v) for v in (3.949, 0.0, 0.02, 0.00003, 0.0000301, 129.99)] == [
        "3.95", "0.00", "0.02", "0.00003", "0.0000301", "129.99",
    ]  # fmt: skip


def test_a_capacitor_voltage_under_half_the_motors_asks_whether_a_decimal_point_slipped():
    """An audit of inputs: a meter reading's running capacitor voltage of 41.2 V (for 412) on a 230 V motor was kept
    without a question, and the stress clock that runs on it moved the capacitor's crossing 44 days later. A
    capacitor sees at least about the supply with the motor running (common practice of the trade, no single
    source): under half of it asks to confirm; 230 V and above is taken; confirmed, 41.2 is kept as read."""
    result = check({"capacitance_uf": ["3.9"] * 3, "capacitor_voltage_v": ["41.2", "230", "414"]})
    words = result.confirm["capacitor_voltage_v"]
    assert words[0].startswith("41.2 V across the capacitor is under half the motor's 230 V")
    assert list(words[1:]) == ["", ""] and not result.bad.any()
    kept = check({"capacitance_uf": ["3.9"], "capacitor_voltage_v": ["41.2"]}, confirmed=True)
    assert not kept.needs_confirmation.any() and kept.values["capacitor_voltage_v"][0] == 41.2


def test_an_esr_above_the_capacitors_reactance_asks_whether_milliohms_were_typed_as_ohms():
    """An audit of inputs: an ESR of 850 typed for 0.85 ohm was stored without a question, its dissipation factor
    2,502 % put the capacitor at "replace now". The dissipation factor is ESR / Xc, Xc = 1 / (2 pi f C) (the
    textbook definition of the loss tangent of a capacitor's series model, from memory, unverified): for 4 uF at
    50 Hz, Xc = 795.8 ohm, worked out here apart from the code. At or above it asks to confirm, naming the
    reactance and the value in milliohms; 0.85 ohm (a DF of 0.1 %) and 700 ohm (88 %) are taken; confirmed, kept."""
    reactance = 1.0 / (2.0 * np.pi * 50.0 * 4e-6)
    assert round(reactance, 1) == 795.8
    result = check({"capacitance_uf": ["4"] * 3, "esr_ohm": ["850", "0.85", "700"]})
    words = result.confirm["esr_ohm"]
    assert words[0].startswith(f"850 Ω gives a dissipation factor of {850 / reactance * 100:.0f} %")
    assert f"({reactance:.3g} Ω)" in words[0] and "In milliohms it would be 0.85 Ω" in words[0]
    assert list(words[1:]) == ["", ""]
    kept = check({"capacitance_uf": ["4"], "esr_ohm": ["850"]}, confirmed=True)
    assert not kept.needs_confirmation.any() and kept.values["esr_ohm"][0] == 850.0


def test_a_line_voltage_under_half_the_motors_asks_whether_a_thousands_separator_slipped():
    """The audit of inputs: "1,200" in the line voltage was read as 1.2 V (a decimal comma) and kept. Ours (a
    supply sags by a few percent, not by half: common practice of the trade, no single source): a line voltage
    under half the motor's asks to confirm, naming the separator; 0,23 stays the kilovolt slip it was (refused),
    215 V on a 230 V motor is taken, and confirmed, 1.2 is kept as read."""
    result = check({"capacitance_uf": ["3.9"] * 4, "line_voltage_v": ["1,200", "0,23", "215", "100"]})
    words = result.confirm["line_voltage_v"]
    assert words[0].startswith("1.2 V is under half the motor's 230 V: a thousands separator")
    assert result.bad[1] and words[1] == ""  # the kilovolt slip, refused as before
    assert words[2] == "" and not result.bad[2]
    assert words[3].startswith("100 V is under half")
    kept = check({"capacitance_uf": ["3.9"], "line_voltage_v": ["1,200"]}, confirmed=True)
    assert not kept.needs_confirmation.any() and kept.values["line_voltage_v"][0] == 1.2


def test_a_new_capacitor_read_far_below_its_rating_asks_whether_the_right_part_is_fitted():
    """A walk fitted a 30 uF run capacitor and logged 15 uF as its first reading: saved without a question.
    [IEC 60252-1 tolerance classes: no new capacitor is marked below -10 % (a start part's range, -0 %); from
    memory, unverified] ours: within 90 days of fitting and without a trend, under 75 % of the rating asks to
    confirm; 3.5 of 4 uF is judged as read; a capacitor fitted years ago, or one with a trend, is not asked
    this (its trend rule asks instead); confirmed, the value is kept."""
    fitted = np.datetime64("2026-04-20", "D")
    taken = np.array(["2026-05-01T09:00"] * 3, "datetime64[s]")
    result = check({"capacitance_uf": ["2", "3.5", "2"]}, taken_at=taken, fitted_on=fitted)
    words = result.confirm["capacitance_uf"]
    assert words[0].startswith("2 µF on a capacitor fitted 2026-04-20 and rated 4 µF: far below")
    assert words[1] == "" and words[2].startswith("2 µF on a capacitor fitted")
    assert check({"capacitance_uf": ["2"]}).confirm["capacitance_uf"][0] == ""  # fitted 2022-01-01
    trend = check({"capacitance_uf": ["2"]}, taken_at=taken[:1], fitted_on=fitted, predicted_uf=2.05)
    assert "fitted 2026-04-20" not in trend.confirm.get("capacitance_uf", [""])[0]
    kept = check({"capacitance_uf": ["2"]}, taken_at=taken[:1], fitted_on=fitted, confirmed=True)
    assert not kept.needs_confirmation.any() and kept.values["capacitance_uf"][0] == 2.0


def test_every_confirmation_the_rulebook_asks_is_a_named_case_listed_in_the_imports_confirmed_help():
    """The import's `confirmed` help named three of the cases the rulebook asks about (ours): each `confirm.add` of
    the rulebook names its case, every case is used, and the column's help lists each in its words."""
    import ast
    import inspect

    from fleet.engineering import rules
    from fleet.imports.columns import READING_COLUMNS

    tree = ast.parse(inspect.getsource(rules))
    asked = [
        node
        for node in ast.walk(tree)
        if isinstance(node, ast.Call)
        and isinstance(node.func, ast.Attribute)
        and node.func.attr == "add"
        and getattr(node.func.value, "id", "") == "confirm"
    ]
    named = [next((k.value.value for k in node.keywords if k.arg == "case"), None) for node in asked]
    assert None not in named and set(named) == set(rules.CONFIRMATION_CASES)
    assert all(words in READING_COLUMNS["confirmed"] for words in rules.CONFIRMATION_CASES.values())


def test_a_capacitance_in_nanofarads_says_the_next_step():
    """ "143000 looks like nanofarads: 143 µF?" stopped at the question, where the millifarad slip says what to do:
    it says to type it in µF, with the value. [trade] a meter's nF range shows a thousand times the µF."""
    from fleet.engineering.rules import capacitance_unit_slip

    assert capacitance_unit_slip([143000.0], 143.0)[0] == (
        "143000 looks like nanofarads: 143 µF? (rated 143 µF). Type it in µF: 143 (the meter's nF range shows a "
        "thousand times the µF)"
    )


def test_the_line_between_a_readings_neighbours_in_a_file():
    """[derived] Per capacitor, in time order whatever the file's order: the value on the line between the
    readings just before and after, at the reading's time (a quarter of the way: a quarter of the change);
    nothing for a first or last reading, neighbours that disagree by more than 8 % of the rating, another
    capacitor's readings, or an unmatched row."""
    from fleet.engineering.rules import neighbours_line

    day = np.datetime64("2024-01-01T00:00", "s")
    hours = np.array([0, 24, 96, 300, 100, 0, 48, 10], dtype="timedelta64[h]")
    capacitor = np.array([1, 1, 1, 2, 1, 2, 2, -1])
    values = np.array([8.0, 6.0, 7.8, 7.0, 7.9, 7.5, 7.4, 7.0])
    line, before, after = neighbours_line(capacitor, day + hours, values, np.full(8, 8.0))
    assert (before[1], after[1]) == (8.0, 7.8)  # the two readings the line runs between
    # Capacitor 1 in time order: 8.0 (0 h), 6.0 (24 h), 7.8 (96 h), 7.9 (100 h); capacitor 2: 7.5 (0 h),
    # 7.4 (48 h), 7.0 (300 h).
    assert np.isclose(line[1], 8.0 + (24 / 96) * (7.8 - 8.0))
    assert np.isnan(line[2])  # its neighbours, 6.0 and 7.9, disagree by 1.9 uF, over 8 % of 8 uF
    assert np.isclose(line[6], 7.5 + (48 / 300) * (7.0 - 7.5))
    assert np.isnan(line[[0, 4, 3, 5, 7]]).all()  # first and last of each capacitor; the unmatched row


def test_a_reading_on_the_removal_day_is_never_the_one_after():
    """[derived] 7.8 uF, then 6.1 uF read low on the morning of a replacement, then 8.02 uF on the same day: in a
    file without the capacitor's id the new capacitor's first reading falls to the removed one, and 6.1 would
    look like a stray between 7.8 and 8.02; the removal day's reading is not taken as the one after."""
    from fleet.engineering.rules import neighbours_line

    taken = np.array(["2024-05-04T10:00", "2025-06-02T08:30", "2025-06-02T15:00"], "datetime64[s]")
    removed = np.full(3, np.datetime64("2025-06-02"), "datetime64[D]")
    values, rated, same = np.array([7.8, 6.1, 8.02]), np.full(3, 8.0), np.zeros(3, int)
    assert np.isclose(
        neighbours_line(same, taken, values, rated)[0][1], 7.8 + (8.02 - 7.8) * (10245.0 / 10250.0), rtol=1e-3
    )
    held, _, _ = neighbours_line(same, taken, values, rated, taken_on=taken.astype("datetime64[D]"), removed_on=removed)
    assert np.isnan(held).all()


def test_a_huge_number_typed_is_written_back_as_the_browser_writes_it():
    """A fresh-eyes walk typed 99999999999999999999 °C and was told "1e+20 is above 150 °C": below 1e21 the
    browser (ECMAScript Number::toString [pub]) writes the digits, and the message now does too; from 1e21 on
    both take an exponent."""
    result = check({"capacitance_uf": ["4.0", "4.0"], "case_temperature_c": ["99999999999999999999", "1e25"]})
    said = result.errors["case_temperature_c"]
    assert said[0].startswith("100000000000000000000 is above 150 °C")
    assert said[1].startswith("1e+25 is above 150 °C")


def test_a_reading_whose_time_is_refused_is_not_asked_about_its_trend_at_that_time():
    """Ours: A walk imported a row dated 2099-01-01: refused as a future time, and also asked "29.9 uF is far from this
    capacitor's trend (-43.72 uF at this reading's time)", a trend value at a time that was refused. A check that
    rests on another field waits until that field is right; the same value at a good time is still asked."""
    taken = np.array(["2099-01-01T09:00", "2026-05-01T09:00"], "datetime64[s]")
    result = check({"capacitance_uf": ["29.9", "29.9"]}, taken_at=taken, predicted_uf=np.array([-43.72, 20.0]))
    assert result.errors["taken_at"][0] and not result.errors.get("taken_at", ["", ""])[1]
    asked = result.confirm.get("capacitance_uf", ["", ""])
    assert "far from this capacitor's trend" not in asked[0]
    assert asked[1].startswith("29.9 µF is far from this capacitor's trend (20.00 µF at this reading's time)")


@pytest.mark.parametrize(
    ("typed", "said"),
    [("99999999", "99999999"), ("123456.789", "123456.789"), ("123456.7891", "123457"), ("4.0", "4")],
)
def test_a_value_is_quoted_as_typed_up_to_nine_significant_digits(typed, said):
    """A walk typed 99999999 µF and was told "100000000 µF is over three times the rated 8 µF": a number it had not
    typed. Up to nine significant digits a value is written back as typed (its shortest form); a computed one of
    more is cut to six (29958.6), as before. Ours."""
    result = check({"capacitance_uf": [typed]})
    quoted = next(iter(result.errors.get("capacitance_uf", []) + result.confirm.get("capacitance_uf", [])), "")
    if typed == "4.0":  # within tolerance of the example: nothing said, so the writer itself is checked
        assert plain_number(float(typed)) == said
    else:
        assert quoted.startswith(f"{said} µF"), quoted
    assert plain_number(29958.577523180298) == "29958.6"


def test_a_note_holding_a_character_that_reverses_or_hides_text_is_refused():
    """An audit of inputs stored a right-to-left override (U+202E) in a note, which reversed what the page showed
    after it; Unicode's bidirectional controls (UAX #9: U+202A-U+202E, U+2066-U+2069) and tag characters
    (U+E0000-U+E007F) show text otherwise than it is stored (the "Trojan Source" pattern, CVE-2021-42574, from
    memory, unverified). They are refused; other scripts, right-to-left ones included, are kept."""
    notes = ["fan ok \u202egnirts", "tag \U000e0041", "isolate \u2066x\u2069", "ok", "שלום, مرحبا", "naïve 25 °C"]
    result = check({"capacitance_uf": ["3.9"] * len(notes)}, notes=notes)
    said = result.errors["notes"]
    assert all("invisible character that reverses or hides text" in words for words in said[:3])
    assert list(said[3:]) == ["", "", ""]


def test_a_new_capacitor_far_below_its_own_tolerance_class_is_asked_about():
    """An audit of inputs: a new capacitor's first reading at 77.5 % of its rating went to "replace now" unasked;
    only under 75 % (below every tolerance class) was asked. IEC 60252-1 marks a motor capacitor's tolerance
    (run parts commonly +/-5 % or +/-10 %, start parts a range such as -0/+20 %; from memory, unverified). [ours]
    a capacitor fitted within 90 days, with no trend yet, read more than 8 % of its rating below its own part's
    lower tolerance is asked about: 4 uF +/-5 % under 3.48 uF (4 x (1 - 0.05 - 0.08)); 100 uF -0/+20 % under
    92 uF; without the part's tolerance, under 75 % as before."""
    fitted = np.datetime64("2026-04-20", "D")
    taken = np.array(["2026-05-01T09:00"] * 4, "datetime64[s]")
    run = check(
        {"capacitance_uf": ["3.1", "3.47", "3.49", "3.9"]}, taken_at=taken, fitted_on=fitted, tolerance_minus_pct=5
    )
    words = run.confirm["capacitance_uf"]
    assert [bool(w) for w in words] == [True, True, False, False]
    assert "far below a new capacitor's tolerance (under 3.48 µF)" in words[0]
    start = check(
        {"capacitance_uf": ["91", "93"]},
        taken_at=taken[:2],
        fitted_on=fitted,
        rated_uf=100.0,
        tolerance_minus_pct=0,
    )
    assert [bool(w) for w in start.confirm["capacitance_uf"]] == [True, False]
    unknown = check({"capacitance_uf": ["3.1", "2.9"]}, taken_at=taken[:2], fitted_on=fitted)
    assert [bool(w) for w in unknown.confirm["capacitance_uf"]] == [False, True]
