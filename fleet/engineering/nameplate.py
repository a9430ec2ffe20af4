"""Equivalent-circuit estimate from a nameplate, refined by commissioning readings.

Unknowns (log scale, so every one stays positive): R1m, X1 (= X1m = X2, half the
locked-rotor leakage), R2, XM, the turns ratio a, and k = R1a / (a^2 R1m).
Residuals: the data (full-load current and output at rated speed; optionally
locked-rotor and no-load current, winding DC resistances, running winding
currents) and weak priors from typical ratios (primer section 4, from memory).
With nameplate data alone the priors decide part of the answer; `unique` says
whether the data by themselves pin every parameter down (full-rank Jacobian).

Solved once per distinct design (fleets share a few dozen nameplates), not per
motor: the caller de-duplicates nameplates before calling. All designs, each from
twelve starts, are one vectorised Levenberg-Marquardt solve (`estimate_designs`):
milliseconds a design instead of a solver call per design and start.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, fields

import numpy as np

from .drift import CAPACITOR_START
from .motor import MotorCircuit, RunningResult, synchronous_speed_rad_s, two_winding_running


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


DATA_WEIGHT = 10.0
# Weight 3: strong enough to rule out designs whose backward field rivals the forward one at
# rated load (a spurious minimum), weak beside the data (10).
BALANCE_WEIGHT = 3.0
# Starts: the problem has local minima (one with the backward field larger than the forward
# one); every start is solved and the lowest cost wins. (turns ratio, leakage and magnetising
# reactance as fractions of V / I_full_load.)
STARTS = np.array(list(itertools.product((1.1, 1.4, 1.8), (0.05, 0.12), (1.5, 4.0))))
MAX_ITERATIONS = 200
DESIGNS_PER_BATCH = 400  # bounds the arrays of one solve (designs x starts x residuals x unknowns)


@dataclass(frozen=True)
class _Problems:
    """Designs (and their readings) as arrays, one entry per least-squares problem; NaN: not measured."""

    voltage_v: np.ndarray
    frequency_hz: np.ndarray
    poles: np.ndarray
    output_w: np.ndarray
    full_load_current_a: np.ndarray
    slip: np.ndarray
    runs: np.ndarray  # the auxiliary winding stays in circuit while running (not capacitor-start)
    run_uf: np.ndarray  # the run capacitance in circuit (0 for capacitor-start)
    start_uf: np.ndarray
    locked_rotor_current_a: np.ndarray
    no_load_current_a: np.ndarray
    main_dc_resistance_ohm: np.ndarray
    aux_dc_resistance_ohm: np.ndarray
    main_current_a: np.ndarray
    aux_current_a: np.ndarray
    balanced: np.ndarray  # the balance prior applies (a run capacitor, no winding currents measured)

    @classmethod
    def of(cls, plates: list[Nameplate], readings: list[CommissioningReadings]) -> _Problems:
        def column(values):
            return np.array([np.nan if v is None else float(v) for v in values])

        runs = np.array([p.motor_kind != CAPACITOR_START for p in plates])
        measured = np.array([r.main_current_a is not None or r.aux_current_a is not None for r in readings])
        plate_run_uf = column(p.run_capacitance_uf for p in plates)
        return cls(
            voltage_v=column(p.voltage_v for p in plates),
            frequency_hz=column(p.frequency_hz for p in plates),
            poles=column(p.poles for p in plates),
            output_w=column(p.output_w for p in plates),
            full_load_current_a=column(p.full_load_current_a for p in plates),
            slip=np.array([_rated_slip(p) for p in plates]),
            runs=runs,
            run_uf=np.where(runs, plate_run_uf, 0.0),
            start_uf=column(p.start_capacitance_uf for p in plates),
            locked_rotor_current_a=column(r.locked_rotor_current_a for r in readings),
            no_load_current_a=column(r.no_load_current_a for r in readings),
            main_dc_resistance_ohm=column(r.main_dc_resistance_ohm for r in readings),
            aux_dc_resistance_ohm=column(r.aux_dc_resistance_ohm for r in readings),
            main_current_a=column(r.main_current_a for r in readings),
            aux_current_a=np.where(runs, column(r.aux_current_a for r in readings), np.nan),
            balanced=runs & ~measured,
        )

    def repeat(self, times: int) -> _Problems:
        """Each problem `times` times in a row (one per start)."""
        return _Problems(**{f.name: np.repeat(getattr(self, f.name), times) for f in fields(self)})

    def take(self, index) -> _Problems:
        return _Problems(**{f.name: getattr(self, f.name)[index] for f in fields(self)})


def _circuit(theta, problems: _Problems) -> MotorCircuit:
    r1m, x1, r2, xm, a, k = np.exp(np.moveaxis(np.asarray(theta, float), -1, 0))
    return MotorCircuit.from_arrays(
        r1m=r1m,
        x1m=x1,
        r1a=k * a**2 * r1m,
        x1a=a**2 * x1,
        r2=r2,
        x2=x1,
        xm=xm,
        turns_ratio=a,
        voltage_v=problems.voltage_v,
        frequency_hz=problems.frequency_hz,
        poles=problems.poles,
        rotational_loss_w=ROTATIONAL_LOSS_FRACTION * problems.output_w,
    )


def _rated_slip(plate: Nameplate) -> float:
    sync_rpm = synchronous_speed_rad_s(plate.frequency_hz, plate.poles) * 60 / (2 * np.pi)
    return float(1.0 - plate.rated_speed_rpm / sync_rpm)


def _relative_miss(measured, modelled):
    """(modelled - measured) / measured; 0 where nothing was measured (a row that weighs nothing)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(np.isnan(measured), 0.0, (modelled - measured) / measured)


def _data_residuals(theta, p: _Problems) -> tuple[np.ndarray, RunningResult]:
    """Relative misses on the data, (problems, 6 to 8): nameplate current and output, then the readings
    (locked-rotor and no-load columns only when some problem has them); and the rated running point."""
    circuit = _circuit(theta, p)
    rated = two_winding_running(circuit, p.run_uf, p.slip, aux_in_circuit=p.runs)
    misses = [
        _relative_miss(p.full_load_current_a, np.abs(rated.i_line)),
        _relative_miss(p.output_w, rated.output_power_w),
        _relative_miss(p.main_dc_resistance_ohm, circuit.r1m),
        _relative_miss(p.aux_dc_resistance_ohm, circuit.r1a),
        _relative_miss(p.main_current_a, np.abs(rated.i_main)),
        _relative_miss(p.aux_current_a, np.abs(rated.i_aux)),
    ]
    if not np.isnan(p.locked_rotor_current_a).all():
        locked = two_winding_running(circuit, p.run_uf + p.start_uf, 1.0)
        misses.append(_relative_miss(p.locked_rotor_current_a, np.abs(locked.i_line)))
    if not np.isnan(p.no_load_current_a).all():
        idle = two_winding_running(circuit, p.run_uf, 0.005, aux_in_circuit=p.runs)
        misses.append(_relative_miss(p.no_load_current_a, np.abs(idle.i_line)))
    return np.stack(misses, axis=-1), rated


def _residuals(theta, p: _Problems) -> np.ndarray:
    """All residuals, (problems, count): weighted data, the balance pull, the priors.

    Designers balance a run capacitor near rated load: a soft pull toward it. A prior, not a
    datum: measured running winding currents say how balanced the motor really is, and then
    the pull steps aside (its residual is 0).
    """
    data, rated = _data_residuals(theta, p)
    balance = np.where(p.balanced, BALANCE_WEIGHT * rated.backward_ratio, 0.0)
    return np.concatenate([DATA_WEIGHT * data, balance[:, None], _prior_residuals(theta)], axis=-1)


def _prior_residuals(theta) -> np.ndarray:
    log_r1m, log_x1, log_r2, log_xm, log_a, log_k = np.moveaxis(np.asarray(theta, float), -1, 0)
    pairs = [
        (log_r2 - log_r1m, PRIOR_R2_OVER_R1),
        (log_xm - log_x1, PRIOR_XM_OVER_X1),
        (log_k, PRIOR_AUX_RESISTANCE_RATIO),
        (log_a, PRIOR_TURNS_RATIO),
    ]
    return np.stack([(value - np.log(typical)) / spread for value, (typical, spread) in pairs], axis=-1)


def _jacobian(function, theta, residuals, upper) -> np.ndarray:
    """Forward differences, (problems, residuals, unknowns); a step that would cross a bound goes backward.

    Every unknown's step is taken in one call `function(thetas, rows)`, `rows` naming the
    problem (row of `theta`) each of the stacked thetas belongs to.
    """
    count, unknowns = theta.shape
    step = 1e-7 * np.maximum(1.0, np.abs(theta))
    step = np.where(theta + step > upper, -step, step)
    moved = np.repeat(theta[None], unknowns, axis=0)  # (unknowns, problems, unknowns)
    moved[np.arange(unknowns), :, np.arange(unknowns)] += step.T
    shifted = function(moved.reshape(-1, unknowns), np.tile(np.arange(count), unknowns))
    shifted = shifted.reshape(unknowns, count, -1)
    return ((shifted - residuals[None]) / step.T[:, :, None]).transpose(1, 2, 0)


def _least_squares(function, theta, lower, upper, max_iterations=MAX_ITERATIONS, tolerance=1e-10):
    """Levenberg-Marquardt for many independent problems at once, each kept within its bounds.

    `function(theta, index)` gives the residuals of the problems `index`. Every problem moves
    on its own damping; a step is kept only where it lowers that problem's cost; a problem
    whose cost no longer falls by more than `tolerance` (relative) drops out of the work.
    """
    theta = np.clip(theta, lower, upper)
    everyone = np.arange(len(theta))
    # Heavy damping at first (short, gradient-like steps): each start stays in its own basin, as the
    # trust-region solver this replaced did. Bolder first steps reach spurious minima (a leakage
    # reactance near the base impedance) that fit the numbers and not the machine.
    residuals = function(theta, everyone)
    cost = 0.5 * np.sum(residuals**2, axis=1)
    damping = np.full(len(theta), 1.0)
    active = everyone
    eye = np.eye(theta.shape[1])
    for _ in range(max_iterations):
        if not len(active):
            break
        here, here_residuals = theta[active], residuals[active]
        jacobian = _jacobian(
            lambda t, rows, index=active: function(t, index[rows]), here, here_residuals, upper[active]
        )
        transposed = jacobian.transpose(0, 2, 1)
        normal = transposed @ jacobian
        gradient = (transposed @ here_residuals[..., None])[..., 0]
        scale = np.maximum(np.diagonal(normal, axis1=1, axis2=2), 1e-12)
        lifted = normal + damping[active, None, None] * scale[:, :, None] * eye
        step = np.linalg.solve(lifted, -gradient[..., None])[..., 0]
        trial = np.clip(here + step, lower[active], upper[active])
        trial_residuals = function(trial, active)
        trial_cost = 0.5 * np.sum(trial_residuals**2, axis=1)
        better = np.isfinite(trial_cost) & (trial_cost < cost[active])
        gain = np.where(better, (cost[active] - trial_cost) / np.maximum(cost[active], 1e-300), 0.0)
        kept = active[better]
        theta[kept], residuals[kept], cost[kept] = trial[better], trial_residuals[better], trial_cost[better]
        damping[active] = np.where(better, np.maximum(damping[active] / 3.0, 1e-12), damping[active] * 4.0)
        settled = (better & (gain < tolerance)) | (damping[active] >= 1e12)
        active = active[~settled]
    return theta, cost


def _bounds(p: _Problems):
    z_base = np.log(p.voltage_v / p.full_load_current_a)
    lower = np.stack(
        [z_base + np.log(1e-3)] * 4 + [np.full_like(z_base, np.log(0.3)), np.full_like(z_base, np.log(0.2))], -1
    )
    upper = np.stack(
        [z_base + np.log(100.0)] * 4 + [np.full_like(z_base, np.log(4.0)), np.full_like(z_base, np.log(5.0))], -1
    )
    return lower, upper


def _starts(p: _Problems) -> np.ndarray:
    """Every start for every problem, (problems x starts, unknowns), problem-major."""
    z_base = p.voltage_v / p.full_load_current_a
    turns_ratio, leakage, magnetising = (STARTS[None, :, k] for k in range(3))
    z = z_base[:, None]
    one = np.ones_like(z * turns_ratio)
    start = np.stack(
        [0.12 * z * one, leakage * z * one, 0.18 * z * one, magnetising * z * one, turns_ratio * one, 1.2 * one], -1
    )
    return np.log(start).reshape(-1, 6)


def estimate_designs(
    plates: list[Nameplate], readings: list[CommissioningReadings | None] | None = None
) -> list[ParameterEstimate]:
    """Constrained least squares for many designs at once: the data weigh 10 times the priors per residual.

    Every design and every start is one problem of a single vectorised solve (in batches of
    DESIGNS_PER_BATCH designs); per design the start with the lowest cost wins.
    """
    readings = [r or CommissioningReadings() for r in (readings or [None] * len(plates))]
    estimates: list[ParameterEstimate] = []
    for first in range(0, len(plates), DESIGNS_PER_BATCH):
        problems = _Problems.of(plates[first : first + DESIGNS_PER_BATCH], readings[first : first + DESIGNS_PER_BATCH])
        estimates += _solve(problems)
    return estimates


def _solve(problems: _Problems) -> list[ParameterEstimate]:
    count, starts = len(problems.slip), len(STARTS)
    every = problems.repeat(starts)
    lower, upper = _bounds(every)
    theta, cost = _least_squares(lambda t, index: _residuals(t, every.take(index)), _starts(problems), lower, upper)
    best = np.argmin(np.where(np.isfinite(cost), cost, np.inf).reshape(count, starts), axis=1)
    theta = theta.reshape(count, starts, -1)[np.arange(count), best]
    lower, upper = _bounds(problems)
    data, _ = _data_residuals(theta, problems)
    data_jacobian = _jacobian(
        lambda t, rows: DATA_WEIGHT * _data_residuals(t, problems.take(rows))[0],
        theta,
        DATA_WEIGHT * data,
        upper,
    )
    singular = np.linalg.svd(data_jacobian, compute_uv=False)
    rank = np.sum(singular > 1e-3 * singular.max(axis=1, keepdims=True), axis=1)
    circuit = _circuit(theta, problems)
    fit_error = 100.0 * np.max(np.abs(data), axis=1)
    balance = balance_capacitance_uf(circuit, problems.slip)
    return [
        ParameterEstimate(
            r1m=float(circuit.r1m[i]),
            x1m=float(circuit.x1m[i]),
            r1a=float(circuit.r1a[i]),
            x1a=float(circuit.x1a[i]),
            r2=float(circuit.r2[i]),
            x2=float(circuit.x2[i]),
            xm=float(circuit.xm[i]),
            turns_ratio=float(circuit.turns_ratio[i]),
            rotational_loss_w=float(circuit.rotational_loss_w[i]),
            unique=bool(rank[i] == theta.shape[1]),
            data_rank=int(rank[i]),
            fit_error_pct=float(fit_error[i]),
            balance_capacitance_uf=float(balance[i]),
        )
        for i in range(count)
    ]


def estimate_parameters(plate: Nameplate, readings: CommissioningReadings | None = None) -> ParameterEstimate:
    """One design's estimate (see `estimate_designs`)."""
    return estimate_designs([plate], [readings])[0]


def balance_capacitance_uf(circuit: MotorCircuit, slip) -> np.ndarray | float:
    """Run capacitance that minimises the backward field at a given slip, for every motor at once.

    Cross-check against the nameplate microfarads: a design is normally balanced
    near its rated load, so a large mismatch says the estimate is off.
    """
    scalar = np.ndim(circuit.r1m) == 0
    column = MotorCircuit.from_arrays(
        **{f.name: np.reshape(getattr(circuit, f.name), (-1, 1)) for f in fields(circuit)}
    )
    slip = np.atleast_1d(np.asarray(slip, float))[:, None]
    grid = np.geomspace(0.5, 200.0, 400)[None, :]
    run = two_winding_running(column, grid, slip)
    coarse = grid[0, np.argmin(run.backward_ratio, axis=1)][:, None]
    fine = coarse * np.linspace(0.97, 1.03, 121)[None, :]
    run = two_winding_running(column, fine, slip)
    best = fine[np.arange(len(fine)), np.argmin(run.backward_ratio, axis=1)]
    return float(best[0]) if scalar else best
