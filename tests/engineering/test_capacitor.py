"""Capacitor functions: verdicts, losses, energy, temperature and life factors."""

import numpy as np
import pytest

from fleet.engineering.capacitor import (
    CLASS_LIFE_HOURS,
    VERDICT_HIGH,
    VERDICT_LOW,
    VERDICT_OPEN,
    VERDICT_SHORT,
    VERDICT_WITHIN,
    acceleration_factor,
    dissipation_factor_from_esr,
    normalise_to_25c,
    short_circuit_suspected,
    stored_energy_j,
    tolerance_verdict,
)


def test_verdicts_for_a_film_run_capacitor_marked_plus_minus_5_percent():
    """[trade] replace a run capacitor below its lower tolerance; under 10 % of rated
    reads as an open circuit (a tripped disconnector)."""
    verdict = tolerance_verdict([10.0, 9.4, 10.6, 0.3, 9.5], 10.0, 5, 5)
    assert verdict.code.tolist() == [VERDICT_WITHIN, VERDICT_LOW, VERDICT_HIGH, VERDICT_OPEN, VERDICT_WITHIN]
    assert verdict.margin_uf[1] == pytest.approx(-0.1)
    assert verdict.margin_pct[0] == pytest.approx(5.0)


def test_an_open_circuit_is_read_under_a_tenth_of_rated():
    """[trade] under 10 % of rated reads as an open circuit, not merely low (`open_fraction`): on a 10 uF
    part, 0.999 uF is open, 1.0 and 1.001 uF are low."""
    verdict = tolerance_verdict([0.999, 1.0, 1.001], 10.0, 5, 5)
    assert verdict.code.tolist() == [VERDICT_OPEN, VERDICT_LOW, VERDICT_LOW]


def test_verdict_for_an_electrolytic_marked_as_a_range():
    """[trade] start capacitors are marked with a range, e.g. 88-108 uF: rated 98 uF
    with 10.2 % each way reproduces the marked limits."""
    verdict = tolerance_verdict([87.0, 90.0, 109.0], 98.0, 10.204, 10.204)
    assert verdict.lower_uf[0] == pytest.approx(88.0, abs=0.01)
    assert verdict.upper_uf[0] == pytest.approx(108.0, abs=0.01)
    assert verdict.code.tolist() == [VERDICT_LOW, VERDICT_WITHIN, VERDICT_HIGH]


def test_dissipation_factor_is_esr_over_reactance():
    """[trade] DF = ESR / Xc; 100 uF at 50 Hz has Xc = 31.83 ohm, so 1.91 ohm of ESR is DF 6 %."""
    assert dissipation_factor_from_esr(1.9099, 100.0, 50.0) == pytest.approx(0.06, abs=1e-5)


def test_an_open_capacitor_has_no_dissipation_factor():
    """0 µF (a meter on an open capacitor) has no reactance: its DF is unknown (nan), not the 0 that
    ESR / infinity gives, which would pull the capacitor's dissipation trend down. [derived]"""
    with np.errstate(all="raise"):
        factors = dissipation_factor_from_esr([0.5, 1.9099], [0.0, 100.0], 50.0)
    assert np.isnan(factors[0]) and factors[1] == pytest.approx(0.06, abs=1e-5)


def test_stored_energy_of_a_start_capacitor_is_tens_of_joules():
    """[trade] C V_peak^2 / 2: 200 uF charged to the peak of 330 V RMS holds 21.8 J."""
    assert stored_energy_j(200.0, 330.0) == pytest.approx(21.78, abs=0.01)


def test_polypropylene_normalisation_to_25_c():
    """[mem] about -200 ppm/K: 10 uF read at 75 C is 10.1 uF at 25 C; nan temperature leaves it."""
    assert normalise_to_25c(10.0, 75.0) == pytest.approx(10.0 / 0.99)
    assert normalise_to_25c(10.0, np.nan) == pytest.approx(10.0)


def test_ten_kelvin_rule_and_voltage_exponent():
    """[mem] 10-K rule: life halves for each 10 K; (U_N/V)^n for voltage."""
    assert acceleration_factor(50.0, 450.0, 40.0, 450.0) == pytest.approx(2.0)
    assert acceleration_factor(40.0, 405.0, 40.0, 450.0, voltage_exponent=10.0) == pytest.approx(0.9**10)


def test_class_of_operation_lives_are_the_standards():
    """[pub] IEC 60252-1 classes A 30,000 h, B 10,000 h, C 3,000 h at rated conditions ([mem] D 1,000 h)."""
    assert CLASS_LIFE_HOURS == {"A": 30000.0, "B": 10000.0, "C": 3000.0, "D": 1000.0}


def test_short_circuit_is_suspected_when_current_flows_with_no_voltage():
    """[trade] a healthy run capacitor sits near or above the supply voltage in circuit;
    a few volts with current flowing means the dielectric broke down."""
    suspected = short_circuit_suspected([0.8, 0.5, 0.0, np.nan], [3.0, 390.0, 2.0, 2.0], 230.0)
    assert suspected.tolist() == [True, False, False, False]
    verdict = tolerance_verdict([850.0, 4.0], 4.0, 5, 5, short=suspected[:2])
    assert verdict.code.tolist() == [VERDICT_SHORT, VERDICT_WITHIN]


def test_a_voltage_is_over_the_rating_only_beyond_a_readings_uncertainty():
    """[trade] a motor capacitor is rated for continuous operation at its rated voltage (IEC 60252-1, from memory,
    unverified); a handheld meter reads AC volts within about 1 % and the supply moves as much (common practice of
    the trade, no single source): 2 % over a 450 V rating is 459 V. Points either side; a missing voltage is never
    over."""
    from fleet.engineering.capacitor import over_rated_voltage

    assert over_rated_voltage([450.0, 458.9, 459.0, 459.1, 466.4, np.nan], 450.0).tolist() == [
        False,
        False,
        False,
        True,
        True,
        False,
    ]
