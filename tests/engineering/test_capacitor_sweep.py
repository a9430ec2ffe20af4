"""The operating-point pictures' numbers: phasors where a capacitor works, and the motor's figures
across a capacitance grid (one vectorised solve), checked against circuit laws and textbook values.

Sources: [pub] a named publication, [mem] from memory (unverified), [derived] follows from the model.
"""

import numpy as np
import pytest

from fleet.engineering import max_starting_torque_capacitance_uf, quadrature_capacitance_uf, standstill
from fleet.engineering.drift import (
    CAPACITOR_START,
    LIMIT_NAMES,
    PERMANENT_SPLIT,
    ROLE_RUN,
    ROLE_START,
    TWO_VALUE,
    LimitLevels,
    OperatingFigures,
    capacitance_limits,
    capacitor_sweep,
    limit_breaches,
    limit_levels,
    operating_figures,
    overloaded_by_the_part,
)
from fleet.engineering.motor import (
    LOAD_CONSTANT,
    LOAD_FAN,
    Load,
    MotorCircuit,
    load_matching_rated_slip,
    rotor_impedance,
)

from .test_operating_point import RATED_SLIP, fan

GRID = np.linspace(0.5, 1.1, 25)

# Fitzgerald, Kingsley, Umans 6th ed. Example 9.1 [mem]: locked-rotor winding impedances of a
# 120 V 60 Hz capacitor-start motor; the standstill formula gives the figures at quadrature
# (tests/engineering/test_motor_references.py checks them there).
Z_MAIN, Z_AUX = 4.5 + 3.7j, 9.5 + 3.5j
ROTOR = dict(r2=1.0, x2=1.0, xm=40.0)


def fitzgerald_motor() -> MotorCircuit:
    """A full circuit whose locked-rotor impedances are the example's (turns ratio 1)."""
    z_rotor = complex(rotor_impedance(ROTOR["r2"], ROTOR["x2"], ROTOR["xm"], 1.0))
    return MotorCircuit.from_arrays(
        r1m=Z_MAIN.real - z_rotor.real,
        x1m=Z_MAIN.imag - z_rotor.imag,
        r1a=Z_AUX.real - z_rotor.real,
        x1a=Z_AUX.imag - z_rotor.imag,
        **ROTOR,
        turns_ratio=1.0,
        voltage_v=120.0,
        frequency_hz=60.0,
        poles=4,
        rotational_loss_w=0.0,
    )


def fitzgerald_sweep(fractions):
    c = fitzgerald_motor()
    c_quad = quadrature_capacitance_uf(Z_MAIN, Z_AUX, 60.0)
    load = load_matching_rated_slip(c, 0.0, 0.04, LOAD_CONSTANT, aux_in_circuit=False)
    return c_quad, capacitor_sweep(c, load, CAPACITOR_START, ROLE_START, 0.0, c_quad, fractions)


def test_the_built_circuit_has_the_example_impedances():
    c = fitzgerald_motor()
    assert complex(c.z_main_locked) == pytest.approx(Z_MAIN)
    assert complex(c.z_aux_locked) == pytest.approx(Z_AUX)


def test_start_capacitor_phasors_at_quadrature_match_the_worked_example():
    """[mem] Fitzgerald Example 9.1: about 176 uF puts the auxiliary current 90 deg ahead of the main;
    [derived] |Im| 20.60 A, |Ia| 8.02 A, |IL| 22.10 A, |Vc| 120.8 V (the standstill formula)."""
    c_quad, sweep = fitzgerald_sweep([1.0])
    p = sweep.phasors
    assert c_quad == pytest.approx(176.2, abs=0.05)
    assert sweep.capacitance_uf[0] == pytest.approx(c_quad)
    assert abs(p.i_main[0]) == pytest.approx(20.60, abs=0.01)
    assert abs(p.i_aux[0]) == pytest.approx(8.02, abs=0.01)
    assert abs(p.i_line[0]) == pytest.approx(22.10, abs=0.01)
    assert abs(p.v_capacitor[0]) == pytest.approx(120.8, abs=0.1)
    assert np.degrees(np.angle(p.i_aux[0] / p.i_main[0])) == pytest.approx(90.0, abs=1e-6)
    assert p.supply_v[0] == 120.0


def test_only_the_design_capacitance_gives_quadrature():
    """[derived] off the quadrature value the auxiliary current leads by more (less C: more
    capacitive) or less (more C) than 90 deg."""
    _, sweep = fitzgerald_sweep(GRID)
    shift = np.degrees(np.angle(sweep.phasors.i_aux / sweep.phasors.i_main))
    assert np.all(np.diff(shift) < 0)
    assert np.interp(90.0, shift[::-1], GRID[::-1]) == pytest.approx(1.0, abs=1e-3)


def test_kirchhoff_line_current_is_the_phasor_sum_and_capacitor_voltage_lags_its_current():
    """[derived] Kirchhoff's current law at the supply terminal (IL = Im + Ia as phasors), and the
    capacitor's own law Vc = Ia / (j omega C): |Vc| = |Ia| / (omega C), 90 deg behind Ia.
    Checked at every grid point, for run capacitors running and start capacitors at standstill."""
    c = fan(3)
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    kind = np.array([PERMANENT_SPLIT, TWO_VALUE, TWO_VALUE])
    role = np.array([ROLE_RUN, ROLE_RUN, ROLE_START])
    sweep = capacitor_sweep(c, load, kind, role, 4.0, np.array([0.0, 20.0, 20.0]), GRID)
    p = sweep.phasors
    assert p.i_line == pytest.approx(p.i_main + p.i_aux, rel=1e-12)
    # The capacitor in circuit where each one works: run alone running; run + start at standstill.
    working_uf = np.where(role[:, None] == ROLE_RUN, sweep.capacitance_uf, sweep.capacitance_uf + 4.0)
    omega_c = 2 * np.pi * 50.0 * working_uf * 1e-6
    assert p.v_capacitor == pytest.approx(p.i_aux / (1j * omega_c), rel=1e-9)
    assert np.abs(p.v_capacitor) == pytest.approx(sweep.capacitor_voltage_v, rel=1e-9)


def test_each_grid_point_equals_a_single_operating_point_call():
    """[derived] one vectorised solve over the grid gives what a call per capacitance gives."""
    c = fan()
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    sweep = capacitor_sweep(c, load, PERMANENT_SPLIT, ROLE_RUN, 4.0, 0.0, GRID)
    for k, fraction in enumerate(GRID):
        one = operating_figures(c, load, 4.0 * fraction, 0.0, PERMANENT_SPLIT)
        assert sweep.figures.i_main_a[k] == pytest.approx(float(one.i_main_a), rel=1e-9)
        assert sweep.figures.starting_torque_nm[k] == pytest.approx(float(one.starting_torque_nm), rel=1e-9)
        assert sweep.capacitor_voltage_v[k] == pytest.approx(float(one.v_capacitor_v), rel=1e-9)


def test_per_motor_fractions_and_a_shared_row_agree():
    c = fan(2)
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    shared = capacitor_sweep(c, load, PERMANENT_SPLIT, ROLE_RUN, 4.0, 0.0, [1.0, 0.8])
    own = capacitor_sweep(c, load, PERMANENT_SPLIT, ROLE_RUN, 4.0, 0.0, np.array([[1.0, 0.8], [0.8, 1.0]]))
    assert own.figures.i_main_a[0] == pytest.approx(shared.figures.i_main_a[0])
    assert own.figures.i_main_a[1] == pytest.approx(shared.figures.i_main_a[1][::-1])


def test_starting_torque_peaks_at_the_closed_form_capacitance():
    """[derived] the largest starting torque falls at Xc = Xa + Ra (|Zm| - Xm) / Rm."""
    c_quad, sweep = fitzgerald_sweep(np.linspace(0.5, 3.0, 2001))
    best = sweep.capacitance_uf[np.argmax(sweep.figures.starting_torque_nm)]
    assert best == pytest.approx(max_starting_torque_capacitance_uf(Z_MAIN, Z_AUX, 60.0), rel=2e-3)
    assert best > c_quad  # [pub] more capacitance than quadrature for the most torque (the usual result)


def test_torque_from_the_sweep_is_the_standstill_formula():
    """[derived] the sweep's starting torque index equals a |Im||Ia| sin(theta) of standstill()."""
    c_quad, sweep = fitzgerald_sweep(GRID)
    locked = standstill(Z_MAIN, Z_AUX, c_quad * GRID, 120.0, 60.0)
    ratio = sweep.figures.starting_torque_nm / locked.torque_index
    assert ratio == pytest.approx(np.full(len(GRID), ratio[0]), rel=1e-9)


def _fan_and_two_value_fleet():
    """The fan (permanent split) and the same windings as a two-value motor with a start
    capacitor beside its run capacitor, driving a constant-torque load: one scan for both."""
    c = fan(2)
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, np.array([LOAD_FAN, LOAD_CONSTANT]))
    return c, load, np.array([PERMANENT_SPLIT, TWO_VALUE]), np.array([0.0, 8.0])


@pytest.mark.parametrize(
    ("limit", "quantity", "level_name", "second_role"),
    [
        ("main-winding current", "i_main_a", "main_current_a", ROLE_RUN),
        ("starting torque", "starting_torque_nm", "starting_torque_nm", ROLE_START),
    ],
)
def test_the_scanned_crossing_is_where_the_drawn_curve_meets_the_level(limit, quantity, level_name, second_role):
    """[derived] the fraction that schedules a replacement is the one the picture shows: the motor
    solved at the reported crossing has the limit's figure at the limit's level (1.15 x full-load
    current; break-away 0.3 (fan) and 1.25 (constant torque) x rated torque [trade]), and a step
    of 1e-4 of rated either side lands on the passing and breaching sides. A grid-midpoint
    placement misses by up to half a grid step (2.5 % of rated), several per cent in the figure.
    The two-value motor's start capacitor carries its starting torque, so that limit is scanned
    on its start capacitor."""
    c, load, kind, start_uf = _fan_and_two_value_fleet()
    role = np.array([ROLE_RUN, second_role])
    limits = capacitance_limits(c, load, kind, role, 4.0, start_uf, 0.95, 450.0)
    crossing = dict(zip(LIMIT_NAMES, limits.fractions, strict=True))[limit]
    assert np.all((crossing > 0.2) & (crossing < 1.0))
    levels = limit_levels(load, role, np.full(2, 0.95), np.full(2, 450.0))
    step = np.array([[1e-4, 0.0, -1e-4]])
    sweep = capacitor_sweep(c, load, kind, role, 4.0, start_uf, crossing[:, None] + step)
    assert getattr(sweep.figures, quantity)[:, 1] == pytest.approx(getattr(levels, level_name), rel=1e-4)
    column_levels = LimitLevels(*(getattr(levels, name)[:, None] for name in levels.__dataclass_fields__))
    breached = limit_breaches(sweep.figures, sweep.capacitor_voltage_v, column_levels, role[:, None])
    assert breached[LIMIT_NAMES.index(limit)][:, [0, 2]].tolist() == [[False, True]] * 2


def _figures(**given) -> OperatingFigures:
    """Figures of motors running (slip 0.05), the named ones given, the rest unknown (nan)."""
    count = len(next(iter(given.values())))
    values = {name: np.full(count, np.nan) for name in OperatingFigures.__dataclass_fields__}
    return OperatingFigures(**{**values, "slip": np.full(count, 0.05), **given})


def test_the_main_current_limit_is_crossed_at_1_15_times_full_load_current():
    """[trade] a running current over the nameplate's full-load current times a common service factor, 1.15,
    overloads the winding (`DriftLimits.main_current_ratio`): on a 0.95 A motor the level is 1.0925 A, a run
    capacitor's main current 0.1 % under it passes and 0.1 % over it breaches; a stop-gap part drawing that
    line current is judged overloading the motor on the same factor, a design part never."""
    load = Load(np.full(2, 0.8), np.full(2, 95.0), np.full(2, LOAD_FAN))
    levels = limit_levels(load, np.full(2, ROLE_RUN), 0.95, 450.0)
    current_a = 1.15 * 0.95 * np.array([0.999, 1.001])
    figures = _figures(i_main_a=current_a, starting_torque_nm=np.full(2, 10.0))
    breached = limit_breaches(figures, np.full(2, 300.0), levels, np.full(2, ROLE_RUN))
    assert breached[LIMIT_NAMES.index("main-winding current")].tolist() == [False, True]
    assert overloaded_by_the_part(current_a, 0.95, True).tolist() == [False, True]
    assert not overloaded_by_the_part(current_a, 0.95, False).any()


@pytest.mark.parametrize(("kind", "ratio"), [(LOAD_FAN, 0.3), (LOAD_CONSTANT, 1.25)])
def test_the_starting_torque_limit_is_the_loads_break_away_torque(kind, ratio):
    """[trade] a load's break-away torque: a fan about 0.3 x its rated torque, a constant-torque load
    (compressor, conveyor) 1.25 x (`DriftLimits.breakaway_torque_ratio_*`): on a load of 0.8 N m at rated
    speed, a starting torque 0.1 % over the level starts it and 0.1 % under it breaches."""
    load = Load(np.full(2, 0.8), np.full(2, 95.0), np.full(2, kind))
    levels = limit_levels(load, np.full(2, ROLE_START), 0.95, 450.0)
    torque_nm = ratio * 0.8 * np.array([1.001, 0.999])
    figures = _figures(starting_torque_nm=torque_nm, i_main_a=np.full(2, 0.9))
    breached = limit_breaches(figures, np.full(2, 300.0), levels, np.full(2, ROLE_START))
    assert breached[LIMIT_NAMES.index("starting torque")].tolist() == [False, True]


def test_a_start_capacitor_sets_no_main_current_level():
    c = fan()
    load = load_matching_rated_slip(c, 4.0, RATED_SLIP, LOAD_FAN)
    levels = limit_levels(load, np.array([ROLE_RUN, ROLE_START]), 0.95, 450.0)
    assert np.isfinite(levels.main_current_a[0]) and np.isnan(levels.main_current_a[1])
    assert levels.starting_torque_nm == pytest.approx(0.3 * load.torque_at_rated_nm)  # fan break-away [trade]


def test_the_scan_gives_the_same_crossings_whatever_it_solves_at_once(monkeypatch):
    """[derived] the solver is elementwise, so solving every grid point and every limit's bisection
    step together gives bit for bit the crossings of solving one fraction at a time
    (a speed-only change must change no figure)."""
    from fleet.engineering import drift

    c, load, kind, start_uf = _fan_and_two_value_fleet()
    role = np.array([ROLE_RUN, ROLE_START])
    together = capacitance_limits(c, load, kind, role, 4.0, start_uf, 0.95, 450.0)
    monkeypatch.setattr(drift, "SCAN_POINTS_PER_SOLVE", 1)
    one_at_a_time = capacitance_limits(c, load, kind, role, 4.0, start_uf, 0.95, 450.0)
    assert np.isfinite(together.fractions).sum() >= 2
    for name in ("fractions", "governing_fraction", "governing_limit"):
        assert np.array_equal(getattr(together, name), getattr(one_at_a_time, name), equal_nan=True)
