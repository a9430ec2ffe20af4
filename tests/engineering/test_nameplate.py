"""Equivalent circuit from a nameplate, and from nameplate plus readings."""

import numpy as np
import pytest

from fleet.engineering.drift import CAPACITOR_START, PERMANENT_SPLIT, TWO_VALUE
from fleet.engineering.motor import MotorCircuit, two_winding_running
from fleet.engineering.nameplate import CommissioningReadings, Nameplate, estimate_parameters

FAN_PLATE = Nameplate(230, 50, 6, 120, 0.95, 910, PERMANENT_SPLIT, run_capacitance_uf=4.0)


def test_estimate_reproduces_the_nameplate_current_and_output():
    estimate = estimate_parameters(FAN_PLATE)
    rated = two_winding_running(estimate.circuit(FAN_PLATE), 4.0, 1 - 910 / 1000)
    assert abs(rated.i_line) == pytest.approx(0.95, rel=0.01)
    assert rated.output_power_w == pytest.approx(120.0, rel=0.01)
    assert estimate.fit_error_pct < 1.0


def test_nameplate_alone_is_flagged_as_not_unique():
    """Two data (current, output) cannot pin six unknowns: the priors decide the rest."""
    estimate = estimate_parameters(FAN_PLATE)
    assert not estimate.unique
    assert estimate.data_rank <= 2


def test_balance_capacitance_cross_checks_the_nameplate_microfarads():
    """Designers balance near rated load: the estimate's balance capacitance lands
    within a factor of two of the nameplate's 4 uF (common practice, no single source)."""
    estimate = estimate_parameters(FAN_PLATE)
    assert 2.0 < estimate.balance_capacitance_uf < 8.0


def test_readings_from_a_known_motor_recover_its_circuit():
    """[derived] Readings synthesised from a known circuit (DC resistances, locked-rotor,
    no-load and running winding currents) make the problem full-rank, and the
    estimate reproduces every reading."""
    truth = MotorCircuit.from_arrays(
        r1m=30.0,
        x1m=12.0,
        r1a=70.0,
        x1a=24.0,
        r2=45.0,
        x2=12.0,
        xm=380.0,
        turns_ratio=1.4,
        voltage_v=230.0,
        frequency_hz=50.0,
        poles=6,
        rotational_loss_w=6.0,
    )
    slip = 0.09
    rated = two_winding_running(truth, 4.0, slip)
    plate = Nameplate(
        230, 50, 6, float(rated.output_power_w), float(abs(rated.i_line)), 1000 * (1 - slip), PERMANENT_SPLIT, 4.0
    )
    readings = CommissioningReadings(
        locked_rotor_current_a=float(abs(two_winding_running(truth, 4.0, 1.0).i_line)),
        no_load_current_a=float(abs(two_winding_running(truth, 4.0, 0.005).i_line)),
        main_dc_resistance_ohm=30.0,
        aux_dc_resistance_ohm=70.0,
        main_current_a=float(abs(rated.i_main)),
        aux_current_a=float(abs(rated.i_aux)),
    )
    estimate = estimate_parameters(plate, readings)
    assert estimate.unique
    assert estimate.fit_error_pct < 2.0
    assert estimate.r1m == pytest.approx(30.0, rel=0.03)
    assert estimate.r1a == pytest.approx(70.0, rel=0.03)


@pytest.mark.parametrize("kind,run_uf,start_uf", [(CAPACITOR_START, 0.0, 208.0), (TWO_VALUE, 30.0, 143.0)])
def test_other_motor_types_estimate_without_error(kind, run_uf, start_uf):
    plate = Nameplate(
        230,
        50,
        4 if kind == CAPACITOR_START else 2,
        370 if kind == CAPACITOR_START else 1100,
        3.3 if kind == CAPACITOR_START else 7.6,
        1420 if kind == CAPACITOR_START else 2850,
        kind,
        run_uf,
        start_uf,
    )
    estimate = estimate_parameters(plate)
    assert estimate.fit_error_pct < 2.0
    assert np.isfinite([estimate.r1m, estimate.xm, estimate.turns_ratio]).all()
