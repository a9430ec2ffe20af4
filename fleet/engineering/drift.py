"""How a drifting capacitance moves a motor's operating point, and where it fails.

For each motor: the figures as new and with the capacitance measured now, and the
fraction of rated capacitance at which each limit is crossed (starting torque
below what the load needs at break-away, capacitor voltage above its rating,
main-winding current above full-load current, or a stall). The replacement plan
takes the highest such fraction as the capacitor's end of life.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .motor import (
    LOAD_FAN,
    Load,
    MotorCircuit,
    operating_point,
    two_winding_running,
)

CAPACITOR_START = "capacitor_start"
PERMANENT_SPLIT = "permanent_split"
TWO_VALUE = "two_value"

ROLE_RUN = "run"
ROLE_START = "start"

LIMIT_NAMES = ("starting torque", "capacitor voltage", "main-winding current", "stall")


@dataclass(frozen=True)
class DriftLimits:
    """Settings for the operating-point limits (common practice, adjustable)."""

    breakaway_torque_ratio_fan: float = 0.3  # load break-away / rated load torque
    breakaway_torque_ratio_constant: float = 1.25
    capacitor_voltage_ratio: float = 1.0  # of the capacitor's rated voltage
    main_current_ratio: float = 1.15  # of nameplate full-load current (a common service factor)


@dataclass(frozen=True)
class OperatingFigures:
    """Figures of one operating state, an array entry a motor."""

    slip: np.ndarray
    speed_rpm: np.ndarray
    i_main_a: np.ndarray
    i_aux_a: np.ndarray
    i_line_a: np.ndarray
    v_capacitor_v: np.ndarray  # run capacitor while running; start capacitor at standstill
    phase_shift_deg: np.ndarray
    efficiency: np.ndarray
    winding_copper_loss_w: np.ndarray
    backward_ratio: np.ndarray
    starting_torque_nm: np.ndarray
    start_capacitor_voltage_v: np.ndarray

    def as_rows(self) -> list[dict]:
        """One plain dict per motor (for storage as JSON)."""
        names = list(self.__dataclass_fields__)
        columns = [np.atleast_1d(getattr(self, name)).astype(float) for name in names]
        return [
            {name: (None if np.isnan(v) else round(float(v), 6)) for name, v in zip(names, values, strict=True)}
            for values in zip(*columns, strict=True)
        ]


def has_run_capacitor(motor_kind) -> np.ndarray:
    return np.asarray(motor_kind) != CAPACITOR_START


def operating_figures(circuit: MotorCircuit, load: Load, run_uf, start_uf, motor_kind) -> OperatingFigures:
    """Running point (run capacitor in circuit where the motor type has one) and
    standstill torque with every capacitor of the starting circuit in parallel."""
    runs = has_run_capacitor(motor_kind)
    run_uf = np.where(runs, np.asarray(run_uf, float), 0.0)
    start_total_uf = run_uf + np.nan_to_num(np.asarray(start_uf, float))
    point = operating_point(circuit, run_uf, load, aux_in_circuit=runs)
    locked = two_winding_running(circuit, start_total_uf, 1.0)
    stalled = np.isnan(point.slip)
    copper = point.copper_loss_main_w + point.copper_loss_aux_w
    rpm = point.speed_rad_s * 60.0 / (2.0 * np.pi)
    return OperatingFigures(
        slip=point.slip,
        speed_rpm=rpm,
        i_main_a=np.where(stalled, np.nan, np.abs(point.i_main)),
        i_aux_a=np.where(stalled, np.nan, np.abs(point.i_aux)),
        i_line_a=np.where(stalled, np.nan, np.abs(point.i_line)),
        v_capacitor_v=np.where(runs & ~stalled, np.abs(point.v_capacitor), np.nan),
        phase_shift_deg=point.phase_shift_deg,
        efficiency=point.efficiency,
        winding_copper_loss_w=np.where(stalled, np.nan, copper),
        backward_ratio=np.where(stalled, np.nan, point.backward_ratio),
        starting_torque_nm=locked.torque_nm,
        start_capacitor_voltage_v=np.abs(locked.v_capacitor),
    )


def _breakaway_torque_nm(load: Load, limits: DriftLimits):
    ratio = np.where(
        np.asarray(load.kind) == LOAD_FAN,
        limits.breakaway_torque_ratio_fan,
        limits.breakaway_torque_ratio_constant,
    )
    return ratio * load.torque_at_rated_nm


def _limit_breaches(
    figures: OperatingFigures,
    load: Load,
    limits: DriftLimits,
    role: np.ndarray,
    full_load_current_a,
    capacitor_rated_voltage_v,
):
    """Boolean breach per limit (stacked in LIMIT_NAMES order)."""
    is_run = role == ROLE_RUN
    v_limit = limits.capacitor_voltage_ratio * np.asarray(capacitor_rated_voltage_v, float)
    capacitor_voltage = np.where(is_run, figures.v_capacitor_v, figures.start_capacitor_voltage_v)
    stalled = np.isnan(figures.slip)
    return np.stack(
        [
            figures.starting_torque_nm < _breakaway_torque_nm(load, limits),
            np.nan_to_num(capacitor_voltage) > v_limit,
            is_run
            & (np.nan_to_num(figures.i_main_a) > limits.main_current_ratio * np.asarray(full_load_current_a, float)),
            is_run & stalled,
        ]
    )


@dataclass(frozen=True)
class CapacitanceLimits:
    """Fraction of rated capacitance at which each limit is first crossed.

    `fractions` has shape (len(LIMIT_NAMES), n_motors); nan where the limit is not
    crossed down to the lowest fraction searched. `governing_fraction` is the
    highest of them (the one a falling capacitance meets first) and
    `governing_limit` its index into LIMIT_NAMES (-1 if none).
    """

    fractions: np.ndarray
    governing_fraction: np.ndarray
    governing_limit: np.ndarray


def capacitance_limits(
    circuit: MotorCircuit,
    load: Load,
    motor_kind,
    role,
    rated_run_uf,
    rated_start_uf,
    full_load_current_a,
    capacitor_rated_voltage_v,
    limits: DriftLimits | None = None,
    lowest_fraction=0.2,
    steps=17,
) -> CapacitanceLimits:
    """Scan the capacitor of `role` down from its rated value, whole fleet at once.

    A crossing is placed midway between the last grid fraction that passes and the
    first that breaches: resolution (1 - lowest_fraction) / (steps - 1), 5 % of
    rated with the defaults, finer than a field meter resolves.
    """
    limits = limits or DriftLimits()
    role = np.asarray(role)
    fractions_grid = np.linspace(1.0, lowest_fraction, steps)
    shape = np.broadcast_shapes(np.shape(circuit.r1m), role.shape, np.shape(rated_run_uf))
    crossing = np.full((len(LIMIT_NAMES), *shape), np.nan)
    previous_fraction = None
    for fraction in fractions_grid:
        run_uf = np.where(role == ROLE_RUN, fraction, 1.0) * np.asarray(rated_run_uf, float)
        start_uf = np.where(role == ROLE_START, fraction, 1.0) * np.nan_to_num(np.asarray(rated_start_uf, float))
        figures = operating_figures(circuit, load, run_uf, start_uf, motor_kind)
        breached = _limit_breaches(figures, load, limits, role, full_load_current_a, capacitor_rated_voltage_v)
        new = breached & np.isnan(crossing)
        midpoint = fraction if previous_fraction is None else 0.5 * (fraction + previous_fraction)
        crossing = np.where(new, midpoint, crossing)
        previous_fraction = fraction
    with np.errstate(invalid="ignore"):
        governing = np.nanmax(np.where(np.isnan(crossing), -np.inf, crossing), axis=0)
    none = ~np.isfinite(governing)
    governing_index = np.where(none, -1, np.argmax(np.nan_to_num(crossing, nan=-1.0), axis=0))
    return CapacitanceLimits(
        fractions=crossing,
        governing_fraction=np.where(none, np.nan, governing),
        governing_limit=governing_index,
    )
