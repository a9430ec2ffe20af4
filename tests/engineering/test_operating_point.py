"""Operating point against load, and how capacitance drift moves it."""

import numpy as np
import pytest

from fleet.engineering.drift import (
    LIMIT_NAMES,
    PERMANENT_SPLIT,
    ROLE_RUN,
    capacitance_limits,
    operating_figures,
)
from fleet.engineering.motor import (
    LOAD_CONSTANT,
    LOAD_FAN,
    MotorCircuit,
    load_matching_rated_slip,
    operating_point,
    two_winding_running,
)

FAN = dict(
    r1m=35.12,
    x1m=8.47,
    r1a=75.87,
    x1a=15.23,
    r2=56.09,
    x2=8.47,
    xm=296.66,
    turns_ratio=1.34,
    voltage_v=230.0,
    frequency_hz=50.0,
    poles=6,
    rotational_loss_w=6.0,
)
RATED_SLIP = 1 - 910 / 1000


def fan(n=None):
    values = dict(FAN)
    if n:
        values = {k: np.full(n, v) for k, v in values.items()}
    return MotorCircuit.from_arrays(**values)


def test_solved_point_balances_motor_and_load_torque():
    """[derived] at the solution, shaft torque equals load torque; as new it is the rated slip."""
    c = fan()
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    point = operating_point(c, 4.0, load)
    assert point.slip == pytest.approx(RATED_SLIP, abs=1e-6)
    drifted = operating_point(c, 3.4, load)
    assert drifted.shaft_torque_nm == pytest.approx(float(load.torque_nm(drifted.speed_rad_s)), rel=1e-6)


def test_weak_run_capacitor_signature_main_current_up_auxiliary_down():
    """[derived] the field signature of a weak run capacitor."""
    c = fan()
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    figures = operating_figures(c, load, np.array([4.0, 3.6, 3.2]), 0.0, PERMANENT_SPLIT)
    assert np.all(np.diff(figures.i_main_a) > 0)
    assert np.all(np.diff(figures.i_aux_a) < 0)
    assert np.all(np.diff(figures.starting_torque_nm) < 0)
    assert np.all(np.diff(figures.slip) > 0)
    assert np.all(np.diff(figures.backward_ratio) > 0)


def test_overload_stalls_and_reports_nan():
    c = fan()
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_CONSTANT)
    heavy = type(load)(load.torque_at_rated_nm * 10, load.rated_speed_rad_s, load.kind)
    assert np.isnan(operating_point(c, 4.0, heavy).slip)


def test_limits_are_crossed_in_order_of_falling_capacitance():
    """The main-current limit of this fan (1.15 x 0.95 A) falls between rated and the
    starting-torque limit; every crossing is below rated."""
    c = fan()
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    limits = capacitance_limits(c, load, PERMANENT_SPLIT, ROLE_RUN, 4.0, 0.0, 0.95, 450.0)
    fractions = dict(zip(LIMIT_NAMES, limits.fractions, strict=True))
    assert 0.2 < fractions["main-winding current"] < 1.0
    assert limits.governing_fraction == pytest.approx(np.nanmax(limits.fractions))
    # The figure at the crossing really does breach: check one grid step below it.
    below = operating_figures(c, load, 4.0 * (fractions["main-winding current"] - 0.03), 0.0, PERMANENT_SPLIT)
    assert below.i_main_a > 1.15 * 0.95


def test_one_call_for_many_motors_equals_a_loop_of_single_calls():
    n = 40
    rng = np.random.default_rng(5)
    c = fan(n)
    c = MotorCircuit.from_arrays(**{**{k: getattr(c, k) for k in FAN}, "r2": rng.uniform(45, 65, n)})
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    caps = rng.uniform(3.0, 4.2, n)
    fleet = operating_point(c, caps, load)
    for i in range(n):
        single_load = type(load)(load.torque_at_rated_nm[i], load.rated_speed_rad_s[i], load.kind)
        one = operating_point(c.take(i), caps[i], single_load)
        assert fleet.slip[i] == pytest.approx(float(one.slip), abs=1e-9)


def test_fleet_of_ten_thousand_in_one_call_gives_a_point_for_every_motor():
    """One call, a whole fleet (timings belong to the bench command, not here)."""
    n = 10_000
    c = fan(n)
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    point = operating_point(c, np.linspace(3.0, 4.2, n), load)
    assert point.slip.shape == (n,)
    assert np.isfinite(point.slip).all()
    assert np.all(np.diff(point.slip) < 0)  # more capacitance, less slip, on this fan


def test_fleet_root_matches_a_per_motor_brent_solve_to_1e_9():
    """[pub] SciPy's brentq (Brent 1973), motor by motor, on the same torque balance: the
    fleet solve agrees to 1e-9 in slip, with the auxiliary in and out and a stalled motor."""
    from scipy.optimize import brentq

    n = 12
    rng = np.random.default_rng(11)
    c = MotorCircuit.from_arrays(**{**FAN, "r2": rng.uniform(45, 65, n), "xm": rng.uniform(250, 340, n)})
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, np.where(np.arange(n) % 2, LOAD_FAN, LOAD_CONSTANT))
    heavy = load.torque_at_rated_nm * np.where(np.arange(n) == 0, 10.0, 1.0)
    load = type(load)(heavy, load.rated_speed_rad_s, load.kind)
    caps = rng.uniform(3.0, 4.2, n)
    aux_in = np.arange(n) % 3 != 0
    fleet = operating_point(c, caps, load, aux_in_circuit=aux_in)
    assert np.isnan(fleet.slip[0])
    for i in range(1, n):
        one = c.take(i)
        one_load = type(load)(load.torque_at_rated_nm[i], load.rated_speed_rad_s[i], load.kind[i])

        def excess(slip, one=one, one_load=one_load, i=i):
            run = two_winding_running(one, caps[i], slip, aux_in_circuit=aux_in[i])
            return float(run.shaft_torque_nm - one_load.torque_nm(one.synchronous_speed_rad_s * (1 - slip)))

        scan = np.linspace(1e-4, 0.99, 2000)  # the first sign change from synchronous speed
        first = int(np.argmax([excess(s) > 0 for s in scan]))
        expected = brentq(excess, scan[first - 1], scan[first], xtol=1e-15)
        assert fleet.slip[i] == pytest.approx(expected, abs=1e-9)
