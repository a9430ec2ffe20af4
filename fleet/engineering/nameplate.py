"""Equivalent-circuit estimate from a nameplate, refined by commissioning readings.

Unknowns (log scale, so every one stays positive): R1m, X1 (= X1m = X2, half the
locked-rotor leakage), R2, XM, the turns ratio a, and k = R1a / (a^2 R1m).
Residuals: the data (full-load current and output at rated speed; optionally
locked-rotor and no-load current, winding DC resistances, running winding
currents) and weak priors from typical ratios (primer section 4, from memory).
With nameplate data alone the priors decide part of the answer; `unique` says
whether the data by themselves pin every parameter down (full-rank Jacobian).

Solved once per distinct design (fleets share a few dozen nameplates), not per
motor: the caller de-duplicates nameplates before calling.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .drift import CAPACITOR_START
from .motor import MotorCircuit, synchronous_speed_rad_s, two_winding_running


@dataclass(frozen=True)
class Nameplate:
    voltage_v: float
    frequency_hz: float
    poles: int
    output_w: float
    full_load_current_a: float
    rated_speed_rpm: float
    motor_kind: str
    run_capacitance_uf: float = 0.0
    start_capacitance_uf: float = 0.0


@dataclass(frozen=True)
class CommissioningReadings:
    """Optional measurements that sharpen the estimate; None where not taken."""

    locked_rotor_current_a: float | None = None
    no_load_current_a: float | None = None
    main_dc_resistance_ohm: float | None = None
    aux_dc_resistance_ohm: float | None = None
    main_current_a: float | None = None  # running at rated load
    aux_current_a: float | None = None


@dataclass(frozen=True)
class ParameterEstimate:
    r1m: float
    x1m: float
    r1a: float
    x1a: float
    r2: float
    x2: float
    xm: float
    turns_ratio: float
    rotational_loss_w: float
    unique: bool  # the data alone determine every parameter
    data_rank: int
    fit_error_pct: float  # worst relative miss on the data residuals
    balance_capacitance_uf: float  # run capacitance that balances the rated point

    def circuit(self, nameplate: Nameplate) -> MotorCircuit:
        return MotorCircuit.from_arrays(
            r1m=self.r1m,
            x1m=self.x1m,
            r1a=self.r1a,
            x1a=self.x1a,
            r2=self.r2,
            x2=self.x2,
            xm=self.xm,
            turns_ratio=self.turns_ratio,
            voltage_v=nameplate.voltage_v,
            frequency_hz=nameplate.frequency_hz,
            poles=nameplate.poles,
            rotational_loss_w=self.rotational_loss_w,
        )


# Priors: (typical value, spread in natural-log units). From memory; settings.
PRIOR_R2_OVER_R1 = (1.6, 0.3)
PRIOR_XM_OVER_X1 = (35.0, 0.4)
PRIOR_AUX_RESISTANCE_RATIO = (1.2, 0.3)
PRIOR_TURNS_RATIO = (1.3, 0.4)
ROTATIONAL_LOSS_FRACTION = 0.05  # of rated output


def _circuit(theta, plate: Nameplate) -> MotorCircuit:
    r1m, x1, r2, xm, a, k = np.exp(theta)
    return MotorCircuit.from_arrays(
        r1m=r1m,
        x1m=x1,
        r1a=k * a**2 * r1m,
        x1a=a**2 * x1,
        r2=r2,
        x2=x1,
        xm=xm,
        turns_ratio=a,
        voltage_v=plate.voltage_v,
        frequency_hz=plate.frequency_hz,
        poles=plate.poles,
        rotational_loss_w=ROTATIONAL_LOSS_FRACTION * plate.output_w,
    )


def _rated_slip(plate: Nameplate) -> float:
    sync_rpm = synchronous_speed_rad_s(plate.frequency_hz, plate.poles) * 60 / (2 * np.pi)
    return float(1.0 - plate.rated_speed_rpm / sync_rpm)


def _data_residuals(theta, plate: Nameplate, readings: CommissioningReadings):
    circuit = _circuit(theta, plate)
    runs = plate.motor_kind != CAPACITOR_START
    run_uf = plate.run_capacitance_uf if runs else 0.0
    rated = two_winding_running(circuit, run_uf, _rated_slip(plate), aux_in_circuit=runs)
    residuals = [
        (abs(rated.i_line.item()) - plate.full_load_current_a) / plate.full_load_current_a,
        (rated.output_power_w.item() - plate.output_w) / plate.output_w,
    ]

    def add(measured, modelled):
        if measured is not None:
            residuals.append((modelled - measured) / measured)

    if readings.locked_rotor_current_a is not None:
        locked = two_winding_running(circuit, run_uf + plate.start_capacitance_uf, 1.0)
        add(readings.locked_rotor_current_a, abs(locked.i_line.item()))
    if readings.no_load_current_a is not None:
        idle = two_winding_running(circuit, run_uf, 0.005, aux_in_circuit=runs)
        add(readings.no_load_current_a, abs(idle.i_line.item()))
    add(readings.main_dc_resistance_ohm, circuit.r1m.item())
    add(readings.aux_dc_resistance_ohm, circuit.r1a.item())
    add(readings.main_current_a, abs(rated.i_main.item()))
    if runs:
        add(readings.aux_current_a, abs(rated.i_aux.item()))
    return np.array(residuals)


def _balance_residual(theta, plate: Nameplate, readings: CommissioningReadings):
    """Designers balance a run capacitor near rated load: a soft pull toward it.

    A prior, not a datum: measured running winding currents say how balanced the
    motor really is, and then the pull steps aside.
    """
    measured = readings.main_current_a is not None or readings.aux_current_a is not None
    if plate.motor_kind == CAPACITOR_START or measured:
        return np.zeros(0)
    rated = two_winding_running(_circuit(theta, plate), plate.run_capacitance_uf, _rated_slip(plate))
    # Weight 3: strong enough to rule out designs whose backward field rivals the
    # forward one at rated load (a spurious minimum), weak beside the data (10).
    return np.array([3.0 * rated.backward_ratio.item()])


def _prior_residuals(theta):
    log_r1m, log_x1, log_r2, log_xm, log_a, log_k = theta
    pairs = [
        (log_r2 - log_r1m, PRIOR_R2_OVER_R1),
        (log_xm - log_x1, PRIOR_XM_OVER_X1),
        (log_k, PRIOR_AUX_RESISTANCE_RATIO),
        (log_a, PRIOR_TURNS_RATIO),
    ]
    return np.array([(value - np.log(typical)) / spread for value, (typical, spread) in pairs])


def estimate_parameters(plate: Nameplate, readings: CommissioningReadings | None = None) -> ParameterEstimate:
    """Constrained least squares: the data weigh 10 times the priors per residual."""
    readings = readings or CommissioningReadings()
    z_base = plate.voltage_v / plate.full_load_current_a

    def residuals(theta):
        return np.concatenate(
            [
                10.0 * _data_residuals(theta, plate, readings),
                _balance_residual(theta, plate, readings),
                _prior_residuals(theta),
            ]
        )

    # Several starts: the problem has local minima (one with the backward field
    # larger than the forward one); the lowest cost wins.
    best = None
    starts = itertools.product((1.1, 1.4, 1.8), (0.05, 0.12), (1.5, 4.0))
    for turns_ratio, leakage, magnetising in starts:
        theta0 = np.log([0.12 * z_base, leakage * z_base, 0.18 * z_base, magnetising * z_base, turns_ratio, 1.2])
        bounds = (np.log(z_base) + np.log(1e-3), np.log(z_base) + np.log(100.0))
        candidate = least_squares(
            residuals,
            theta0,
            bounds=(
                np.r_[np.full(4, bounds[0]), np.log(0.3), np.log(0.2)],
                np.r_[np.full(4, bounds[1]), np.log(4.0), np.log(5.0)],
            ),
        )
        if best is None or candidate.cost < best.cost:
            best = candidate
    solution = best
    theta = solution.x
    data_count = len(_data_residuals(theta, plate, readings))
    data_jacobian = solution.jac[:data_count]
    singular = np.linalg.svd(data_jacobian, compute_uv=False)
    rank = int(np.sum(singular > 1e-3 * singular.max())) if singular.size else 0
    circuit = _circuit(theta, plate)
    fit_error = 100.0 * float(np.max(np.abs(_data_residuals(theta, plate, readings))))
    return ParameterEstimate(
        r1m=circuit.r1m.item(),
        x1m=circuit.x1m.item(),
        r1a=circuit.r1a.item(),
        x1a=circuit.x1a.item(),
        r2=circuit.r2.item(),
        x2=circuit.x2.item(),
        xm=circuit.xm.item(),
        turns_ratio=circuit.turns_ratio.item(),
        rotational_loss_w=circuit.rotational_loss_w.item(),
        unique=rank == len(theta),
        data_rank=rank,
        fit_error_pct=fit_error,
        balance_capacitance_uf=balance_capacitance_uf(circuit, _rated_slip(plate)),
    )


def balance_capacitance_uf(circuit: MotorCircuit, slip) -> float:
    """Run capacitance that minimises the backward field at a given slip.

    Cross-check against the nameplate microfarads: a design is normally balanced
    near its rated load, so a large mismatch says the estimate is off.
    """
    grid = np.geomspace(0.5, 200.0, 400)
    run = two_winding_running(circuit, grid, slip)
    coarse = grid[int(np.argmin(run.backward_ratio))]
    fine = np.linspace(coarse * 0.97, coarse * 1.03, 121)
    run = two_winding_running(circuit, fine, slip)
    return float(fine[int(np.argmin(run.backward_ratio))])
